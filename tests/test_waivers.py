"""Waiver comments: the comment scanner (checked against PyYAML on the YAML test suite), the
waiver syntax, what a waiver covers, and the reports about stale or unexplained waivers."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import yaml

from cfgcheck import api
from cfgcheck.findings import Severity
from cfgcheck.waivers import comments, scan

ROOT = Path(__file__).resolve().parents[1]
SUITE = ROOT.parent / "shared" / "standards" / "yaml-test-suite"

TRICKY = """\
a: "x # not a comment" # one
b: 'it''s # still text' # two
c: |
  # block text, not a comment
  more # text
d: don't # three
e: x#y
"multi
 # still inside the string"
f: >-
    folded # text
  # four
g:
  - |
    # text
  - h # five
i: [1, "#", 2]  # six
j: {k: '#'} # seven
"""


def _load(text):
    return list(yaml.safe_load_all(text))


def _comment_positions_agree_with_pyyaml(text: str) -> list[str]:
    """For every '#': cutting the rest of its line after it must leave PyYAML's data unchanged
    exactly when the scanner calls it a comment. Returns the disagreements."""
    try:
        before = _load(text)
    except yaml.YAMLError:
        return []
    found = {c[2] for c in comments(text)}
    problems = []
    for i, ch in enumerate(text):
        if ch != "#":
            continue
        end = text.find("\n", i)
        end = len(text) if end == -1 else end
        if not text[i + 1:end].strip():
            continue  # nothing after the '#' to cut: this method cannot tell
        cut = text[:i + 1] + text[end:]  # keep the '#' so a comment line still ends a block
        try:
            same = _load(cut) == before
        except yaml.YAMLError:
            same = False
        if same != (i in found) and not _inside_found_comment(text, i, found):
            problems.append(f"offset {i}: scanner says {'comment' if i in found else 'text'}, "
                            f"PyYAML says {'comment' if same else 'text'}")
    return problems


def _inside_found_comment(text, i, found):
    line_start = text.rfind("\n", 0, i) + 1
    return any(line_start <= f < i for f in found)


def test_scanner_on_tricky_text():
    bodies = [c[3].strip() for c in comments(TRICKY)]
    assert bodies == ["one", "two", "three", "four", "five", "six", "seven"]
    assert _comment_positions_agree_with_pyyaml(TRICKY) == []


def _suite_cases():
    if not SUITE.is_dir():
        return []
    return sorted(p for p in SUITE.rglob("in.yaml") if not (p.parent / "error").exists())


@pytest.mark.skipif(not SUITE.is_dir(), reason="../shared/standards/yaml-test-suite is not present")
def test_scanner_agrees_with_pyyaml_on_the_yaml_test_suite():
    """YAML test suite (yaml/yaml-test-suite, data branch): every valid case that PyYAML loads.
    A disagreement is recorded; we require agreement on at least 99% of the '#' characters."""
    total = wrong = 0
    bad = []
    for case in _suite_cases():
        text = case.read_text(encoding="utf-8")
        if "#" not in text:
            continue
        total += text.count("#")  # an upper bound: '#' with nothing after it are not judged
        problems = _comment_positions_agree_with_pyyaml(text)
        wrong += len(problems)
        if problems:
            bad.append(f"{case.parent.relative_to(SUITE)}: {problems[0]}")
    assert total > 100  # the suite has plenty of comments
    assert wrong <= total // 100, "\n".join(bad)


# --------------------------------------------------------------------------- syntax

def test_waiver_syntax():
    (w,) = scan("lora_alpha: 8  # cfgcheck: waive lora-scale-below-one, duplicate-key because raised lr\n")
    assert w.rules == ("lora-scale-below-one", "duplicate-key") and w.reason == "raised lr"
    assert (w.line, w.column, w.target) == (1, 16, 1)
    (w,) = scan("# cfgcheck: waive lora-scale-below-one\n\n# other comment\nlora_alpha: 8\n")
    assert w.reason is None and w.target == 4  # past the blank line and the other comment
    (w,) = scan("a: 1 # cfgcheck: ignore everything\n")
    assert w.problem and "ignore" in w.problem
    (w,) = scan("a: 1 # cfgcheck: waive\n")
    assert w.problem
    assert scan("a: '# cfgcheck: waive x because y'\n") == []  # inside a string
    assert scan("a: |\n  # cfgcheck: waive x because y\n") == []  # inside a block scalar


LORA = "use_peft: true\nlora_r: 16\nlora_alpha: 8{tail}\n"


def loud(report):
    """Findings at warning or above (info findings say what a rule could not judge)."""
    return [f for f in report.findings if f.severity >= Severity.WARNING]


def rules_of(report):
    return sorted((f.rule, f.key, f.data.get("variant", "default")) for f in loud(report))


def test_trailing_waiver_waives_its_line():
    r = api.lint_text(LORA.format(tail="  # cfgcheck: waive lora-scale-below-one because lr raised 2x"), "w.yaml")
    assert rules_of(r) == []
    assert [(f.rule, reason, kind) for f, reason, kind in r.waived] == [
        ("lora-scale-below-one", "lr raised 2x", "comment")]


def test_waiver_above_a_section_covers_the_keys_under_it():
    text = ("use_peft: true\n# cfgcheck: waive lora-scale-below-one because scale kept on purpose\n"
            "lora:\n  r: 64\n  alpha: 4\n")
    r = api.lint_text(text, "w.yaml")
    assert rules_of(r) == [] and len(r.waived) == 1


def test_waiver_for_another_rule_does_not_waive_and_is_stale():
    r = api.lint_text(LORA.format(tail="  # cfgcheck: waive duplicate-key because no reason really"), "w.yaml")
    assert rules_of(r) == [("lora-scale-below-one", "lora_alpha", "default"),
                           ("waiver-comment-problem", "lora_alpha", "default")]
    stale = [f for f in loud(r) if f.rule == "waiver-comment-problem"][0]
    assert (stale.line, stale.column) == (3, 16)  # at the comment itself
    assert "duplicate-key" in stale.message and stale.hint


def test_waiver_without_reason_waives_and_is_reported():
    r = api.lint_text(LORA.format(tail="  # cfgcheck: waive lora-scale-below-one"), "w.yaml")
    assert rules_of(r) == [("waiver-comment-problem", "lora_alpha", "no-reason")]


def test_unknown_rule_gets_a_suggestion():
    r = api.lint_text(LORA.format(tail="  # cfgcheck: waive lora-scale-below-on because typo"), "w.yaml")
    assert ("waiver-comment-problem", "lora_alpha", "unknown-rule") in rules_of(r)
    msg = [f.message for f in r.findings if f.rule == "waiver-comment-problem"][0]
    assert "did you mean lora-scale-below-one" in msg


def test_waiver_of_a_rule_that_did_not_run_is_not_called_stale():
    text = LORA.format(tail="  # cfgcheck: waive duplicate-key because kept for a later edit")
    r = api.lint_text(text, "w.yaml", skip=["duplicate-key"])
    assert [f.rule for f in loud(r)] == ["lora-scale-below-one"]


def test_waiver_with_nothing_after_it():
    r = api.lint_text("use_peft: true\nlora_r: 16\nlora_alpha: 32\n# cfgcheck: waive duplicate-key because x\n", "w.yaml")
    assert rules_of(r) == [("waiver-comment-problem", "", "no-target")]


def test_waivers_in_a_multi_document_stream_stay_in_their_document():
    text = ("use_peft: true\nlora_r: 16\nlora_alpha: 8  # cfgcheck: waive lora-scale-below-one because on purpose\n"
            "---\nuse_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    r = api.lint_text(text, "w.yaml")
    assert [(f.rule, f.line, f.document) for f in loud(r)] == [("lora-scale-below-one", 7, 1)]
    assert len(r.waived) == 1


def test_waiver_comment_in_json_is_not_possible_but_project_waivers_are(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text(
        "waive:\n  - rule: bf16-and-fp16-both-on\n    files: ds/*.json\n    reason: the launcher drops fp16\n")
    ds = tmp_path / "ds"
    ds.mkdir()
    (ds / "zero2.json").write_text('{"train_micro_batch_size_per_gpu": 4, "bf16": {"enabled": true},'
                                   ' "fp16": {"enabled": true}, "zero_optimization": {"stage": 2}}')
    report = api.lint([ds / "zero2.json"])
    assert [f.rule for f in report.findings if f.rule == "bf16-and-fp16-both-on"] == []
    assert [(f.rule, kind) for fr in report.files for f, _, kind in fr.waived] == [("bf16-and-fp16-both-on", "project")]
    plain = api.lint([ds / "zero2.json"], project=None)
    assert "bf16-and-fp16-both-on" in {f.rule for f in plain.findings}


def test_stale_waiver_after_the_last_document_is_still_reported():
    text = ("use_peft: true\nlora_r: 16\nlora_alpha: 32\n---\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
            "# cfgcheck: waive lora-scale-below-one because left over\n")
    r = api.lint_text(text, "w.yaml")
    assert [(f.rule, f.data.get("variant"), f.line) for f in loud(r)] == [
        ("waiver-comment-problem", "no-target", 8)]


try:
    from hypothesis import given
    from hypothesis import strategies as st
except ImportError:  # pragma: no cover
    given = None

if given is not None:
    _text = st.text(alphabet=st.sampled_from(list("ab #'\":-|>{}[],\n\t\\")), max_size=30)
    _values = st.recursive(st.one_of(_text, st.integers(), st.booleans()),
                           lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                   st.dictionaries(_text, inner, max_size=3)),
                           max_leaves=12)

    @given(data=st.dictionaries(_text, _values, min_size=1, max_size=4),
           style=st.sampled_from([None, '"', "'", "|", ">"]), flow=st.booleans())
    def test_text_dumped_by_pyyaml_has_no_comments(data, style, flow):
        """PyYAML's emitter writes no comments, whatever the strings hold: every '#' it writes is
        inside a scalar, so the scanner must find none."""
        text = yaml.safe_dump(data, default_style=style, default_flow_style=flow, allow_unicode=True)
        assert comments(text) == []

    @given(data=st.dictionaries(st.text(alphabet="abc_", min_size=1, max_size=8), _values,
                                min_size=1, max_size=4))
    def test_comment_appended_to_block_keys_is_found(data):
        """A comment after a plain top-level key line (``key:`` opening a nested block) is found."""
        text = yaml.safe_dump(data, default_flow_style=False)
        lines = text.splitlines()
        marked = [i for i, l in enumerate(lines) if re.fullmatch(r"[abc_]+:", l)]
        for i in marked:
            lines[i] += "  # cfgcheck: waive duplicate-key because checked"
        found = [c[0] for c in comments("\n".join(lines) + "\n")]
        assert found == [i + 1 for i in marked]
