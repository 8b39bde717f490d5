"""The loader against PyYAML and ruamel.yaml themselves, and the JSON loader against the json module."""

from __future__ import annotations

import io
import json

import pytest
import yaml
from hypothesis import given, strategies as st
from ruamel.yaml import YAML

from cfgcheck.load import LoadError, decode, load_text


def _doc(text, name="t.yaml"):
    docs = load_text(text, name)
    assert len(docs) == 1
    return docs[0]


# Scalars whose PyYAML 6 reading is recorded in REFERENCES.md sec. 11 (observed with PyYAML 6.0.3);
# here the installed PyYAML is the reference: our values must equal yaml.safe_load's.
PYYAML_CASES = ["1e-4", "1e4", "5e-5", "1.0e4", "1.0e+4", "1.0E-4", "2.0e-5", "1.", ".5", "1_0.5",
                "1_000", "0777", "0o17", "0x1F", "0b11", "1:20", "yes", "on", "ON", "True", "off",
                "NO", "y", "Y", "n", "~", "null", "Null", "NULL", "-.inf", "2024-01-02", "'quoted'"]


@pytest.mark.parametrize("raw", PYYAML_CASES)
def test_values_equal_pyyaml(raw):
    text = f"v: {raw}\n"
    ours = _doc(text).data["v"]
    ref = yaml.safe_load(text)["v"]  # reference: PyYAML itself
    if hasattr(ref, "isoformat"):
        ref = raw  # timestamps: we keep the text, never build objects
    assert ours == ref and type(ours) is type(ref)


# Plain scalars that YAML 1.1 (PyYAML) and YAML 1.2 (ruamel.yaml) read differently: the loader
# must flag each, and its "YAML 1.2" value must be ruamel.yaml's.
AMBIGUOUS = {"1e-4": "exponent-without-dot", "5e-5": "exponent-without-dot", "1e4": "exponent-without-dot",
             "yes": "word-boolean", "off": "word-boolean", "On": "word-boolean",
             "0777": "leading-zero-octal", "1:20": "base-60"}


@pytest.mark.parametrize("raw,kind", sorted(AMBIGUOUS.items()))
def test_version_dependent_scalars_match_both_parsers(raw, kind):
    text = f"v: {raw}\n"
    doc = _doc(text)
    (amb,) = doc.ambiguities
    assert amb.kind == kind and amb.path == ("v",)
    assert amb.yaml11 == yaml.safe_load(text)["v"]  # PyYAML: YAML 1.1
    ruamel_value = YAML(typ="safe", pure=True).load(io.StringIO(text))["v"]  # ruamel.yaml: YAML 1.2
    assert amb.yaml12 == ruamel_value


@pytest.mark.parametrize("raw", ["1.0e-4", "2.0e-5", "true", "false", "0.0002", "'1e-4'", '"yes"', "17", "0o17"])
def test_portable_scalars_are_not_flagged(raw):
    assert _doc(f"v: {raw}\n").ambiguities == []


def test_duplicate_keys_are_seen_where_pyyaml_is_silent():
    text = "lr: 1.0e-4\nepochs: 2\nlr: 2.0e-5\n"
    assert yaml.safe_load(text) == {"lr": 2.0e-5, "epochs": 2}  # PyYAML keeps the last, silently
    from ruamel.yaml.constructor import DuplicateKeyError

    with pytest.raises(DuplicateKeyError):  # ruamel.yaml (YAML 1.2) refuses the same text
        YAML(typ="safe", pure=True).load(io.StringIO(text))
    doc = _doc(text)
    assert doc.data == {"lr": 2.0e-5, "epochs": 2}
    (dup,) = doc.duplicates
    assert (dup.first.line, dup.second.line) == (1, 3)
    assert (dup.first_value, dup.second_value) == (1.0e-4, 2.0e-5)


def test_merge_keys_are_not_duplicates():
    text = "base: &b {lr: 1.0e-4, epochs: 1}\nrun:\n  <<: *b\n  epochs: 3\n"
    doc = _doc(text)
    assert doc.duplicates == []
    assert doc.data["run"] == yaml.safe_load(text)["run"] == {"lr": 1.0e-4, "epochs": 3}


@pytest.mark.parametrize("name, text", [
    ("t.yaml", "a: 1e-4\nb: 'q'\nc: [yes, \"x\"]\nd: {e: 0x1F}\nf: |\n  two\n  lines\n"),
    ("t.json", '{"a": 1e-4, "b": "q", "c": [true, "x"], "d": {"e": 31}, "f": null}'),
])
def test_a_scalars_raw_text_is_its_source_text_whenever_it_is_asked_for(name, text):
    """The raw text is cut from the document when first asked for: before or after the value is
    placed, and after the value is moved elsewhere it stays what was written."""
    doc = load_text(text, name)[0]
    for path, e in doc.entries.items():
        if e.kind != "scalar":
            assert e.raw == ""
            continue
        fresh = load_text(text, name)[0].entries[path]
        fresh.value = type(e.value)(line=1, column=1, start=0, end=0)  # moved before raw was asked
        assert e.raw == text[e.value.start:e.value.end] == fresh.raw != ""
    assert doc.entries[("a",)].raw == "1e-4"


def test_positions_are_one_based_line_and_column():
    text = "# comment\ntraining:\n  learning_rate: 2.0e-5\n  lora: {r: 16}\n"
    doc = _doc(text)
    e = doc.entries[("training", "learning_rate")]
    assert (e.key.line, e.key.column) == (3, 3)
    assert (e.value.line, e.value.column) == (3, 18)
    assert text[e.value.start:e.value.end] == "2.0e-5" == e.raw
    r = doc.entries[("training", "lora", "r")]
    assert (r.value.line, r.value.column) == (4, 13)


def test_positions_count_characters_not_bytes():
    text = 'note: "données — ünïcode"\nlr: 1e-4\n'
    doc = _doc(text)
    e = doc.entries[("lr",)]
    assert (e.value.line, e.value.column) == (2, 5) and text[e.value.start:e.value.end] == "1e-4"


def test_tags_never_construct(tmp_path):
    target = tmp_path / "created-by-tag"
    text = f"x: !!python/object/apply:os.system ['touch {target}']\ny: !custom 3\n"
    doc = _doc(text)
    assert not target.exists()
    assert doc.data == {"x": [f"touch {target}"], "y": "3"}
    assert {t for _, t in doc.tags} == {"tag:yaml.org,2002:python/object/apply:os.system", "!custom"}


def test_malformed_yaml_has_a_position():
    with pytest.raises(LoadError) as err:
        load_text("a: 1\nb: [1, 2\nc: 3\n", "bad.yaml")
    assert err.value.line >= 2 and err.value.column >= 1
    assert err.value.reason.startswith("invalid YAML")


def test_json_values_equal_the_json_module_and_keep_positions():
    text = '{\n  "train_batch_size": 64,\n  "bf16": {"enabled": true},\n  "optimizer": {"params": {"lr": 3e-5}}\n}\n'
    doc = _doc(text, "ds.json")
    assert doc.data == json.loads(text)  # reference: the standard library parser
    e = doc.entries[("bf16", "enabled")]
    assert (e.value.line, e.value.column) == (3, 23) and e.raw == "true"
    assert doc.entries[("optimizer", "params", "lr")].raw == "3e-5"
    assert doc.ambiguities == []  # JSON has one reading of 3e-5


def test_json_errors_and_duplicates():
    with pytest.raises(LoadError) as err:
        load_text('{"a": 1,\n "b": }', "x.json")
    assert (err.value.line, err.value.column) == (2, 7)
    with pytest.raises(LoadError):
        load_text('{"a": NaN}', "x.json")  # RFC 8259 has no NaN; json.loads would accept it
    doc = _doc('{"a": 1, "a": 2}', "x.json")
    assert doc.data == {"a": 2} and len(doc.duplicates) == 1


def test_decode_boms_and_bad_bytes():
    assert decode("lr: 1\n".encode("utf-8-sig"), "f").bom is True
    src = decode("lr: 1\r\n".encode("utf-16"), "f")
    assert src.text == "lr: 1\r\n" and src.encoding.startswith("utf-16") and src.newline == "\r\n"
    with pytest.raises(LoadError) as err:
        decode(b"lr: 1\nname: \xff\xfe\n", "f")
    assert err.value.line == 2
    with pytest.raises(LoadError):
        decode(b"\x00\x01\x02binary", "f")


def test_multi_document_stream():
    docs = load_text("a: 1\n---\nb: 2\n", "m.yaml")
    assert [d.data for d in docs] == [{"a": 1}, {"b": 2}] and [d.index for d in docs] == [0, 1]


def test_alias_expansion_is_bounded():
    lines = ['a0: &a0 ["x","x","x","x","x","x","x","x","x","x"]']
    for i in range(1, 9):
        lines.append(f"a{i}: &a{i} [" + ",".join([f"*a{i-1}"] * 10) + "]")
    with pytest.raises(LoadError) as err:
        load_text("\n".join(lines) + "\n", "bomb.yaml")
    assert "aliases" in err.value.reason


# --------------------------------------------------------------------------- positions placed on demand

_NESTED_JSON = ('{"a": [1, {"b": "x\\"y", "c": [[], {}]}, "z"],\n "d": {"e": null, "f": [true, -2.5e-3]},\n'
                ' "g": [["a"], {"a": "b"}, "a", "b"]}')


def _json_values(value, path=()):
    yield path, value
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _json_values(v, path + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _json_values(v, path + (i,))


def test_json_spans_hold_the_values_the_json_module_reads():
    # reference: the json module reads each recorded stretch of text as the value at its path
    doc = _doc(_NESTED_JSON, "t.json")
    paths = dict(_json_values(json.loads(_NESTED_JSON)))
    assert set(doc.entries) == set(paths)
    for path, entry in doc.entries.items():
        v = entry.value
        assert json.loads(_NESTED_JSON[v.start:v.end]) == paths[path]
        lines = _NESTED_JSON[:v.start].split("\n")
        assert (v.line, v.column) == (len(lines), len(lines[-1]) + 1)
        if path and isinstance(path[-1], str):
            k = entry.key
            assert json.loads(_NESTED_JSON[k.start:k.end]) == path[-1]
        else:
            assert entry.key is None
        assert entry.keyed is (entry.key is not None)


def test_json_items_after_a_nested_object_keep_their_index():
    doc = _doc(_NESTED_JSON, "t.json")
    assert doc.entries[("g", 2)].raw == '"a"' and doc.entries[("g", 3)].raw == '"b"'
    assert doc.entries[("g", 1, "a")].raw == '"b"'


def test_json_repeated_keys_in_nested_objects_are_each_seen():
    text = '[{"k": 1, "k": 2}, {"o": {"k": 1}, "o": {"k": 3, "k": 4}}]'
    dups = _doc(text, "t.json").duplicates
    assert [(d.path, d.first.column, d.second.column, d.second_value) for d in dups] == [
        ((0, "k"), 3, 11, 2),
        ((1, "o"), 21, 36, {"k": 4}),
        ((1, "o", "k"), 42, 50, 4),
    ]
    assert json.loads(text)[1]["o"] == {"k": 4}  # reference: the json module keeps the last value


def test_yaml_spans_are_those_of_pyyaml_nodes():
    text = "a: 1\nb:\n  - x\n  - {c: 'q', d: [1, 2]}\ne: |\n  block\n"
    node = yaml.compose(text)  # reference: PyYAML's own composer and its marks

    def walk(n, path=(), knode=None):
        yield path, n, knode
        if isinstance(n, yaml.MappingNode):
            for k, v in n.value:
                yield from walk(v, path + (k.value,), k)
        elif isinstance(n, yaml.SequenceNode):
            for i, v in enumerate(n.value):
                yield from walk(v, path + (i,))

    doc = _doc(text)
    nodes = list(walk(node))
    assert set(doc.entries) == {p for p, _n, _k in nodes}
    for path, n, knode in nodes:
        e = doc.entries[path]
        assert (e.value.line, e.value.column, e.value.start, e.value.end) == (
            n.start_mark.line + 1, n.start_mark.column + 1, n.start_mark.index, n.end_mark.index)
        if knode is None:
            assert e.key is None and not e.keyed
        else:
            assert e.keyed and (e.key.line, e.key.column) == (knode.start_mark.line + 1, knode.start_mark.column + 1)


def test_entries_pickle_with_their_positions():
    import pickle

    for text, name in (("a:\n  b: 2\n", "t.yaml"), ('{"a": {"b": 2}}', "t.json")):
        doc = _doc(text, name)
        copy = pickle.loads(pickle.dumps(doc.entries))
        assert copy == doc.entries
        assert copy[("a", "b")].value == doc.entries[("a", "b")].value
        assert copy[("a", "b")].key.line == (2 if name == "t.yaml" else 1)


# plain scalars of every implicit form YAML 1.1 resolves, and near misses of each
_PLAIN_FORMS = [
    "", "~", "null", "Null", "NULL", "nul", "true", "True", "TRUE", "tRue", "yes", "Yes", "no", "NO",
    "on", "Off", "y", "n", "0", "-0", "+12", "012", "0o17", "0x1F", "0b101", "1_000", "190:20:30",
    "1.5", "-.5", "+1.", "1e5", "1.0e+5", "6.8523015e+5", ".inf", "-.Inf", ".NaN", ".nan.", "1:20.5",
    "2001-12-14", "2001-12-14t21:59:43.10-05:00", "2001-12-14 21:59:43.10 -5", "2001-13-99x", "<<",
    "<", "=", "==", "!tag", "&a", "*a", "learning_rate", "zq_setting_7_x", "Qwen/Qwen2.5-0.5B",
    "1e-4", "5e-5", "2.0e-4", "0.0.1", "- a", "#x", "é", "1 2",
    "7", "42", "2048", "00", "08", "0777", "09_1", "1_0", "\uff11\uff12", "\u0661\u0662", "\u00b2",
]


def test_the_loader_gives_each_plain_scalar_the_tag_pyyaml_gives_it():
    """The loader's own table of the resolver's patterns (cfgcheck.load._plain_tag) agrees with
    PyYAML's ``BaseResolver.resolve`` (the reference: PyYAML 6, YAML 1.1 implicit types) on every
    implicit form, near misses of them and text."""
    from cfgcheck.load import _plain_tag

    reference = yaml.SafeLoader("")
    implicit = (True, False)
    for value in _PLAIN_FORMS:
        assert _plain_tag(value) == reference.resolve(yaml.ScalarNode, value, implicit), value


@given(st.text(alphabet=st.sampled_from("0123456789+-._:eExXoObB yYnNtTfF~<=!&*abz/ \u0661\uff11"), max_size=12))
def test_the_loader_tags_generated_plain_scalars_as_pyyaml_does(value):
    from cfgcheck.load import _plain_tag

    assert _plain_tag(value) == yaml.SafeLoader("").resolve(yaml.ScalarNode, value, (True, False))


def test_a_key_written_three_times_is_told_against_the_time_before_each_time():
    """Each repetition of a key names the place it was written before (its key's line and
    column) and both values, in a nested mapping as at the top; a collection value as a scalar."""
    text = ("run:\n  lr: 1\n  bs: 4\n  lr: 2\n  lr:\n    - 3\nlr: 0\nlr: {a: 1}\n")
    doc = load_text(text, "t.yaml")[0]
    assert doc.data == {"run": {"lr": [3], "bs": 4}, "lr": {"a": 1}}
    told = [(d.path, (d.first.line, d.first.column), (d.second.line, d.second.column),
             d.first_value, d.second_value) for d in doc.duplicates]
    assert told == [
        (("run", "lr"), (2, 3), (4, 3), 1, 2),
        (("run", "lr"), (4, 3), (5, 3), 2, [3]),
        (("lr",), (7, 1), (8, 1), 0, {"a": 1}),
    ]


# --------------------------------------------------------------------------- JSON placed on demand

def _eager_json(text):
    """The entries of TEXT (valid JSON) as the scan of the text gives them at once."""
    from cfgcheck import load

    doc = load.Document(name="t.json", format="json", data=json.loads(text.lstrip("\ufeff")))
    load._json_entries(text, doc)
    return doc


def _same_entries(text, touch_first=None):
    lazy = load_text(text, "t.json")[0]
    eager = _eager_json(text)
    assert list(lazy.entries) == list(eager.entries)  # the same paths, in the same order
    if touch_first is not None and touch_first in lazy.entries:
        lazy.entries[touch_first].key  # one entry asked first: the others are placed from the same scan
    for path, e in lazy.entries.items():
        assert e._fields() == eager.entries[path]._fields(), path


JSON_FORMS = [
    '{"a": 1, "b": [true, null, "x"], "c": {"d": {"e": -1.5e3}, "f": []}, "g": {}}',
    '  \n\t{"k": "v"}\n\n',
    '\ufeff{"bom": [1, 2, {"z": "\\u00e9\\n"}]}',
    '[1, [2, [3, []]], {"a": [{}]}]',
    '"just text"',
    ' 42 ',
    'null',
    '{"a": {"b": {"c": {"d": [[[["deep"]]]]}}}}',
    '{"sp ace": 1, "esc\\"aped": 2, "slash\\/": [3]}',
    "{" + ", ".join(f'"k{i}": {i}' for i in range(300)) + "}",
]


@pytest.mark.parametrize("text", JSON_FORMS)
def test_json_entries_placed_on_demand_equal_those_placed_at_once(text):
    _same_entries(text)


@given(st.recursive(st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False, allow_infinity=False)
                    | st.text(max_size=8),
                    lambda kids: st.lists(kids, max_size=4) | st.dictionaries(st.text(max_size=6), kids, max_size=4),
                    max_leaves=30),
       st.sampled_from([None, 1, 2, "\t"]), st.booleans())
def test_json_entries_placed_on_demand_equal_those_placed_at_once_generated(value, indent, touch):
    text = json.dumps(value, indent=indent, ensure_ascii=False)
    _same_entries(text, touch_first=next(iter(_eager_json(text).entries)) if touch else None)


def test_json_root_is_placed_without_scanning_and_the_rest_only_when_asked():
    doc = load_text('\n  {"a": {"b": 1}, "c": [2]}\n', "t.json")[0]
    places = doc.entries[("a", "b")]._lines
    assert (doc.entries[()].value.line, doc.entries[()].value.column) == (2, 3)
    assert places.found is None  # the root's place needed no scan
    assert doc.entries[("c", 0)].value.column == 25 and places.found is not None
    assert doc.entries[("a", "b")].key.column == 10 and doc.entries[("a",)].keyed
    assert not doc.entries[("c", 0)].keyed


def test_json_nested_past_the_limit_or_repeating_a_key_is_scanned_at_once():
    from cfgcheck.load import MAX_DEPTH

    deep = "[" * (MAX_DEPTH + 1) + "1" + "]" * (MAX_DEPTH + 1)
    with pytest.raises(LoadError, match="nested more than"):
        load_text(deep, "t.json")
    at_limit = "[" * MAX_DEPTH + "1" + "]" * MAX_DEPTH
    _same_entries(at_limit)
    doc = load_text('{"a": 1, "b": {"c": 2, "c": 3}}', "t.json")[0]
    assert [(d.path, d.first.column, d.second.column) for d in doc.duplicates] == [(("b", "c"), 16, 24)]
    assert doc.data == {"a": 1, "b": {"c": 3}}


def test_json_suite_files_place_their_entries_on_demand_as_at_once(shared_dir):
    suite = shared_dir / "standards" / "json-test-suite"
    checked = 0
    for path in sorted(suite.glob("y_*.json")):
        raw = path.read_bytes()
        try:
            text = raw.decode("utf-8")
            docs = load_text(text, "t.json")
        except (UnicodeDecodeError, LoadError):
            continue  # refused the same way whichever way it is placed (the suite tests cover that)
        if docs[0].duplicates:
            continue
        _same_entries(text)
        checked += 1
    assert checked > 50  # the suite's valid documents (JSONTestSuite, y_ files)
