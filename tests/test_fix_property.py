"""Property test: generated configs (comments, odd spacing, CRLF, unicode), every fix applied.

The conditions are checked here with the reference readers (PyYAML for YAML 1.1, ruamel.yaml for
YAML 1.2) and difflib, not with the fixer's own proof code.
"""

from __future__ import annotations

import difflib
import io
import json
import re

import pytest
import yaml
from hypothesis import HealthCheck, given, settings, strategies as st

from cfgcheck import api, fix

ruamel_yaml = pytest.importorskip("ruamel.yaml")

OPTIONS = api.make_options(gpu="t4", rows=1000)
WORDS = st.text(st.characters(whitelist_categories=("L", "N", "P", "S", "Zs")), max_size=12)
COMMENT = WORDS.map(lambda s: "# " + s.strip())


def _yaml12(text):
    return ruamel_yaml.YAML(typ="safe", pure=True).load(io.StringIO(text))


@st.composite
def configs(draw):
    """-> (text, comments in order). A trainer-style config, flat or in sections."""
    rank = draw(st.sampled_from([4, 8, 16, 64]))
    entries = {  # section -> [(key, written value)]
        "model": [("model_name_or_path", draw(st.sampled_from(
            ["acme/base-7b", "acme/base-1b", "'acme/base-3b'", '"acme/base-13b"'])))],
        "lora": [],
        "training": [],
    }
    adapter = draw(st.booleans())
    if adapter:
        entries["lora"] += [("use_peft", "true"), ("lora_r", str(rank)),
                            ("lora_alpha", str(draw(st.sampled_from([1, 2, 4, 8, 16, 32, 128]))))]
        targets = ["q_proj", "v_proj"]
        if draw(st.booleans()):
            entries["lora"].append(("lora_target_modules", "[" + ", ".join(targets) + "]"))
        else:
            entries["lora"].append(("lora_target_modules", targets))  # a block list
        if draw(st.booleans()):
            chat = draw(WORDS).replace("\\", "").replace('"', "")
            entries["training"].append(("chat_template", f'"<|turn|>{chat}"'))
    mantissa = draw(st.sampled_from(["1", "2", "3", "5", "1.5", "2.0"]))
    exponent = draw(st.sampled_from(["-4", "-5", "-6", "+4", "4"]))
    lr = draw(st.sampled_from([f"{mantissa}e{exponent}", f"{mantissa}E{exponent}", "0.0003",
                               "2.0e-5"]))
    entries["training"].append(("learning_rate", lr))
    for key in ("packing", "gradient_checkpointing", "bf16", "tf32"):
        if draw(st.booleans()):
            entries["training"].append((key, draw(st.sampled_from(
                ["yes", "no", "on", "off", "true", "false", "True", "Yes"]))))
    if draw(st.booleans()):
        entries["model"].append(("torch_dtype", draw(st.sampled_from(["bfloat16", "float16"]))))
    pd = draw(st.sampled_from([2, 4, 8, 16]))
    entries["training"].append(("per_device_train_batch_size", str(pd)))
    ga = draw(st.sampled_from([None, 1, 2, 4]))
    if ga:
        entries["training"].append(("gradient_accumulation_steps", str(ga)))
    if draw(st.booleans()):
        entries["training"] += [("num_gpus", str(draw(st.sampled_from([1, 2, 4])))),
                                ("global_batch_size", str(draw(st.sampled_from([8, 32, 64]))))]
    for section in entries.values():
        order = draw(st.permutations(list(range(len(section)))))
        section[:] = [section[i] for i in order]

    nl = draw(st.sampled_from(["\n", "\r\n"]))
    nested = draw(st.booleans())
    indent = draw(st.sampled_from([2, 4])) if nested else 0
    comments: list[str] = []
    lines: list[str] = []

    def maybe_comment(pad_before: str) -> str:
        if draw(st.booleans()):
            c = draw(COMMENT)
            comments.append(c)
            return pad_before + c
        return ""

    if draw(st.booleans()):
        c = draw(COMMENT)
        comments.append(c)
        lines.append(c)
    for name, section in entries.items():
        if not section:
            continue
        pre = " " * indent
        if nested and draw(st.integers(0, 3)) == 0:  # a section in flow style, on one line
            sep = draw(st.sampled_from([", ", ",", " , "]))
            body = sep.join(k + ": " + ("[" + ", ".join(v) + "]" if isinstance(v, list) else v)
                            for k, v in section)
            lines.append(name + ": {" + body + "}" + maybe_comment(" " * draw(st.integers(1, 3))))
            continue
        if nested:
            lines.append(name + ":" + maybe_comment(" "))
        for key, value in section:
            if draw(st.integers(0, 4)) == 0:
                c = draw(COMMENT)
                comments.append(c)
                lines.append(pre + c)
            if draw(st.integers(0, 5)) == 0:
                lines.append("")
            colon = ":" + " " * draw(st.integers(1, 3))
            if isinstance(value, list):
                lines.append(pre + key + ":" + maybe_comment(" "))
                dash = " " * draw(st.sampled_from([0, 2]))
                for item in value:
                    lines.append(pre + dash + "- " + item + maybe_comment(" " * draw(st.integers(1, 3))))
            else:
                lines.append(pre + key + colon + value + maybe_comment(" " * draw(st.integers(1, 6))))
    text = nl.join(lines) + (nl if draw(st.booleans()) else "")
    return text, comments


def _leaves(data, path=()):
    if isinstance(data, dict):
        for k, v in data.items():
            yield from _leaves(v, path + (k,))
    else:
        yield path, data


def _flat(data):
    return {".".join(map(str, p)): v for p, v in _leaves(data)}


def _check_rewrite(old: str, result, *, training: bool):
    assert result.error is None and result.problem is None, (result.error, result.problem)
    new = result.new_text
    paths = {p for a in result.applied for p in a.paths}
    leaf_keys = {p.rsplit(".", 1)[-1] for p in paths}
    # 1. data: only the fixed paths differ (PyYAML, the YAML 1.1 reader trainers use)
    before, after = _flat(yaml.safe_load(old)), _flat(yaml.safe_load(new))
    changed = {k for k in before.keys() | after.keys()
               if k not in before or k not in after or type(before[k]) is not type(after[k])
               or before[k] != after[k]}
    assert all(any(k == p or k.startswith(p + ".") for p in paths) for k in changed), (changed, paths)
    if not training:  # the meaning kept is the one either reader gave; now both readers agree
        old12 = _flat(_yaml12(old))
        assert _flat(_yaml12(new)) == after
        for k in changed:
            assert after[k] == old12.get(k) or after[k] == before.get(k)
    # 2. every line the fixes did not touch is byte-identical (newline bytes included)
    a, b = old.splitlines(keepends=True), new.splitlines(keepends=True)
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, a, b, autojunk=False).get_opcodes():
        if tag == "equal":
            continue
        for line in a[i1:i2] + b[j1:j2]:
            key = line.strip().lstrip("- ").split(":", 1)[0].strip().strip("'\"")
            if re.match(r"\w+: \{", line):  # a flow section line:
                assert tag == "replace" and any(k + ":" in x for x in b[j1:j2] for k in leaf_keys)
                continue  # it is rewritten into a line that holds a fixed key
            assert key in leaf_keys or key in ("embed_tokens", "lm_head"), (tag, line, leaf_keys)
    # 3. newline style and the final newline are kept
    assert (new.count("\r\n") == new.count("\n")) == (old.count("\r\n") == old.count("\n"))
    assert new.endswith("\n") == old.endswith("\n")


@settings(suppress_health_check=[HealthCheck.too_slow], max_examples=80)
@given(configs(), st.booleans())
def test_every_fix_keeps_the_file_and_is_idempotent(config, training):
    text, comments = config
    result = fix.fix_text(text, "gen.yaml", OPTIONS, training=training)
    _check_rewrite(text, result, training=training)
    # comments: all of them, in the same order
    pos = 0
    for c in comments:
        found = result.new_text.find(c, pos)
        assert found >= 0, c
        pos = found + len(c)
    assert fix.yaml_comments(result.new_text) == fix.yaml_comments(text)
    # the fixed findings are gone
    after = api.lint_text(result.new_text, "gen.yaml", gpu="t4", rows=1000)
    left = {(f.rule, f.key) for f in after.findings}
    assert not left & {(a.rule, a.key) for a in result.applied}
    # a second run changes nothing
    again = fix.fix_text(result.new_text, "gen.yaml", OPTIONS, training=training)
    assert again.error is None and not again.changed and not again.applied


@settings(suppress_health_check=[HealthCheck.too_slow], max_examples=40)
@given(configs())
def test_halving_keeps_the_effective_batch(config):
    text, _ = config
    result = fix.fix_text(text, "gen.yaml", OPTIONS, halve_batch=True)
    _check_rewrite(text, result, training=True)
    old, new = _flat(yaml.safe_load(text)), _flat(yaml.safe_load(result.new_text))

    def product(d):
        pd = next(v for k, v in d.items() if k.endswith("per_device_train_batch_size"))
        ga = next((v for k, v in d.items() if k.endswith("gradient_accumulation_steps")), 1)
        return pd * ga

    assert product(new) == product(old)  # per-device × accumulation (× GPUs, unchanged)
    assert "--halve-batch" in {a.rule for a in result.applied}


@st.composite
def json_configs(draw):
    """A JSON config (trainer arguments or DeepSpeed) with odd spacing, CRLF and unicode."""
    deepspeed = draw(st.booleans())
    if deepspeed:
        pd = draw(st.sampled_from([2, 4, 8]))
        members = [("train_micro_batch_size_per_gpu", pd),
                   ("train_batch_size", draw(st.sampled_from([16, 48, 64]))),
                   ("bf16", {"enabled": draw(st.booleans())}),
                   ("zero_optimization", {"stage": draw(st.sampled_from([1, 2, 3]))})]
        if draw(st.booleans()):
            members.append(("gradient_accumulation_steps", draw(st.sampled_from([1, 2, 4]))))
        if draw(st.booleans()):
            members.append(("fp16", {"enabled": draw(st.booleans())}))
    else:
        members = [("model_name_or_path", draw(st.sampled_from(["acme/base-7b", "acme/base-1b"]))),
                   ("learning_rate", draw(st.sampled_from([0.0003, 2e-05, 1e-4]))),
                   ("per_device_train_batch_size", draw(st.sampled_from([2, 4, 8]))),
                   ("bf16", draw(st.booleans())),
                   ("run_name", draw(WORDS))]
        if draw(st.booleans()):
            members += [("use_peft", True), ("lora_r", 16), ("lora_alpha", draw(st.sampled_from([4, 32]))),
                        ("lora_target_modules", ["q_proj", "v_proj"]),
                        ("chat_template", "<|turn|>" + draw(WORDS))]
    order = draw(st.permutations(list(range(len(members)))))
    members = [members[i] for i in order]
    nl = draw(st.sampled_from(["\n", "\r\n"]))
    ind = " " * draw(st.sampled_from([0, 1, 2, 4]))
    colon = draw(st.sampled_from([":", ": ", " : "]))

    def value(v):
        if isinstance(v, dict):
            inner = ", ".join(f'"{k}"{colon}{json.dumps(x)}' for k, x in v.items())
            return "{" + inner + "}"
        return json.dumps(v, ensure_ascii=draw(st.booleans()))

    body = ("," + nl).join(f'{ind}"{k}"{colon}{value(v)}' for k, v in members)
    text = "{" + nl + body + nl + "}" + (nl if draw(st.booleans()) else "")
    return text


@settings(suppress_health_check=[HealthCheck.too_slow], max_examples=60)
@given(json_configs(), st.booleans())
def test_json_fixes_change_only_their_values(text, halve):
    result = fix.fix_text(text, "gen.json", OPTIONS, training=True, halve_batch=halve)
    assert result.error is None and result.problem is None, result.error
    paths = {p for a in result.applied for p in a.paths}
    before, after = _flat(json.loads(text)), _flat(json.loads(result.new_text))
    changed = {k for k in before.keys() | after.keys()
               if k not in before or k not in after or type(before[k]) is not type(after[k])
               or before[k] != after[k]}
    assert all(any(k == p or k.startswith(p + ".") for p in paths) for k in changed), (changed, paths)
    leaf_keys = {p.split(".")[0] for p in paths} | {p.rsplit(".", 1)[-1] for p in paths}
    a, b = text.splitlines(keepends=True), result.new_text.splitlines(keepends=True)
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, a, b, autojunk=False).get_opcodes():
        for line in (a[i1:i2] + b[j1:j2]) if tag != "equal" else []:
            key = line.strip().split(":", 1)[0].strip().strip('"')
            if key not in leaf_keys:  # only a member that a new one follows: it gains a comma
                bare = line.rstrip("\r\n")
                olds = [x.rstrip("\r\n") for x in a[i1:i2]]
                assert (bare in olds and bare + "," in result.new_text) or \
                    (bare.endswith(",") and bare[:-1] in olds), line
    assert (result.new_text.count("\r\n") == result.new_text.count("\n")) == ("\r\n" in text)
    assert result.new_text.endswith("\n") == text.endswith("\n")
    again = fix.fix_text(result.new_text, "gen.json", OPTIONS, training=True)
    assert again.error is None and not again.changed
