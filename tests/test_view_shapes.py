"""The view keeps what detection and the field index work out per key structure
(``view.shape``): a view built through those kept answers is the view a fresh build gives, for
every document of the fixtures and the public corpus, and for documents that share a structure
but not their values."""

from __future__ import annotations

from pathlib import Path

import pytest

from cfgcheck import load as loadmod
from cfgcheck import view as viewmod
from cfgcheck.view import build_view, shape

ROOT = Path(__file__).resolve().parents[1]


def _documents() -> list:
    from .conftest import SHARED

    roots = [ROOT / "fixtures"]
    if (SHARED / "corpus" / "public").is_dir():
        roots.append(SHARED / "corpus" / "public")
    docs = []
    for root in roots:
        for path in sorted(root.rglob("*")):
            if path.suffix not in (".yaml", ".yml", ".json") or not path.is_file():
                continue
            try:
                docs += loadmod.load_path(path)[1]
            except Exception:  # an unreadable file has no view
                continue
    return docs


def _fresh(doc, layout=None):
    """The view built without any kept answer."""
    kept = viewmod.shape
    viewmod.shape = lambda data: None
    try:
        return build_view(doc, layout)
    finally:
        viewmod.shape = kept


def _clear():
    viewmod._BEST_BY_SHAPE_CACHE.clear()
    viewmod._CHOICES_BY_SHAPE_CACHE.clear()


def _rewritten(data, i=[0]):
    """DATA with the same keys and other values: numbers as text, text as other text, "auto"
    and interpolations mixed in."""
    if isinstance(data, dict):
        return {k: _rewritten(v) for k, v in data.items()}
    if isinstance(data, list):
        return [_rewritten(v) for v in data]
    i[0] += 1
    turn = i[0] % 5
    if turn == 0:
        return "auto"
    if turn == 1:
        return str(data)
    if turn == 2:
        return "${lora_r}"
    if turn == 3:
        return 7 if not isinstance(data, int) else data + 1
    return data


def test_the_fixtures_hold_documents_that_share_a_structure():
    docs = _documents()
    shapes = [shape(d.data) for d in docs]
    kept = [s for s in shapes if s is not None]
    assert len(docs) > 50 and len(kept) > 50
    assert len(set(kept)) < len(kept)  # some structures repeat: the kept answers are used


def test_a_view_built_through_the_kept_answers_is_a_fresh_one():
    docs = _documents()
    _clear()
    for _round in range(2):  # the first round keeps the answers, the second reads them
        for doc in docs:
            assert build_view(doc) == _fresh(doc), doc.name


def test_documents_that_share_a_structure_but_not_their_values_get_their_own_views():
    docs = _documents()
    _clear()
    for doc in docs:
        build_view(doc)  # the answers of each structure kept from the document as written
    for doc in docs:
        other = loadmod.Document(name=doc.name, format=doc.format, data=_rewritten(doc.data),
                                 entries=doc.entries, assumed=doc.assumed)
        assert shape(other.data) == shape(doc.data)
        assert build_view(other) == _fresh(other), doc.name


def test_a_named_layout_and_another_kind_are_filled_as_fresh():
    text = "kind: OTHER\nlearning_rate: 1e-4\nper_device_train_batch_size: 8\nlora_r: 8\nlora_alpha: 16\n"
    same_keys = "kind: SFT\nlearning_rate: 2e-4\nper_device_train_batch_size: auto\nlora_r: 8\nlora_alpha: 16\n"
    _clear()
    for t in (text, same_keys, text):
        doc = loadmod.load_text(t, "x.yaml")[0]
        assert build_view(doc) == _fresh(doc)
        for layout in ("trainer", "axolotl", "deepspeed"):
            assert build_view(doc, layout) == _fresh(doc, layout)


def test_a_written_twice_setting_says_so_with_its_own_values():
    a = "learning_rate: 1e-4\ntraining:\n  learning_rate: 1e-4\n  per_device_train_batch_size: 4\n"
    b = "learning_rate: 1e-4\ntraining:\n  learning_rate: 3e-4\n  per_device_train_batch_size: 4\n"
    _clear()
    va = build_view(loadmod.load_text(a, "a.yaml")[0])
    vb = build_view(loadmod.load_text(b, "b.yaml")[0])
    assert va.fields["optim.lr"].note == ""
    assert "also written: training.learning_rate: '3e-4'" in vb.fields["optim.lr"].note
    assert vb == _fresh(loadmod.load_text(b, "b.yaml")[0])


@pytest.mark.parametrize("data", [
    {1: {"r": 8}}, {"lora": {True: 1}}, {"a": {"b": {"c": {"d": {1: 2}}}}},
])
def test_a_key_that_is_not_text_keeps_no_structure(data):
    assert shape(data) is None  # 1, 1.0 and True are equal keys, but prefixed they are other names


def test_structures_differ_where_detection_could():
    assert shape({"lora": {"r": 8}}) != shape({"lora": 8})
    assert shape({"a": 1, "b": 2}) != shape({"b": 2, "a": 1})  # file order decides which path is used
    assert shape({"a": {}}) != shape({"a": []})
    assert shape([1]) is None and shape(None) is None
    assert shape({str(i): i for i in range(viewmod._SHAPE_MAX_KEYS + 1)}) is None


def test_the_kept_answers_stay_bounded():
    _clear()
    for i in range(viewmod._SHAPE_MEMO_MAX * 2 + 3):
        doc = loadmod.load_text(f"learning_rate: 1e-4\nlora_r: 8\nkey_{i}: 1\n", "x.yaml")[0]
        assert build_view(doc) == _fresh(doc)
    assert 0 < len(viewmod._BEST_BY_SHAPE_CACHE) <= viewmod._SHAPE_MEMO_MAX
    assert 0 < len(viewmod._CHOICES_BY_SHAPE_CACHE) <= viewmod._SHAPE_MEMO_MAX
