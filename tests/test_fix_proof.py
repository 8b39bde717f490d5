"""The safety proof refuses a wrong rewrite (naming the rule, saving nothing); the CLI wiring."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from hypothesis import given, strategies as st
from typer.testing import CliRunner

from cfgcheck import api, fix
from cfgcheck.fix import edits as fix_edits, proof as fix_proof
from cfgcheck.cli import app

ROOT = Path(__file__).resolve().parents[1]
TEXT = ("# Harborlight Logistics\nmodel_name_or_path: harborlight/base-7b\nuse_peft: true\n"
        "lora_r: 16\nlora_alpha: 8   # low\nlearning_rate: 2e-4  # a text under YAML 1.1\n"
        "packing: yes\nbf16: true\n")


def _broken_render(replacement):
    real = fix_edits._render

    def render(value, fmt, like=None, raw=""):
        out = real(value, fmt, like, raw)
        return replacement(out) if isinstance(value, float) else out

    return render


@pytest.mark.parametrize("breakage,reason", [
    (lambda s: "2.0e-3", "reads back as"),  # the wrong number
    (lambda s: s + "  # sneaky", "comments"),  # a comment appears
    (lambda s: s + "\nextra_key: 1", "changed but no fix meant"),  # a key appears
    (lambda s: "'" + s + "'", "reads back as"),  # quoted: the value is a string again
])
def test_a_wrong_rewrite_is_refused_and_names_the_rule(tmp_path, monkeypatch, breakage, reason):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    monkeypatch.setattr(fix_edits, "_render", _broken_render(breakage))
    result = fix.fix_file(p, api.make_options())
    assert result.error is not None and result.problem is None
    assert result.error.rule == "yaml-version-dependent-value"
    assert reason in result.error.error and "nothing saved" in result.error.error
    assert not result.written and p.read_text() == TEXT
    assert api.fix_exit_code(fix.FixReport([result])) == api.EXIT_INTERNAL


def test_a_rewrite_that_touches_another_line_is_refused(monkeypatch):
    real = fix._apply

    def sloppy(text, edits):  # also "tidies" the first comment
        return real(text, edits).replace("# Harborlight Logistics", "#Harborlight Logistics", 1)

    monkeypatch.setattr(fix, "_apply", sloppy)  # the fixer's rewrite
    monkeypatch.setattr(fix_proof, "_apply", sloppy)  # and the proof's tries of one fix alone
    result = fix.fix_text(TEXT, "run.yaml", api.make_options())
    assert result.error is not None
    assert "comments" in result.error.error or "no edit touches" in result.error.error


def test_a_fix_that_leaves_its_finding_is_refused(monkeypatch):
    """A fix whose value does not cure the finding: the re-lint catches it."""
    from cfgcheck.checks import adapter

    monkeypatch.setattr(adapter, "target_alpha", lambda rank, rslora, scale: 9)
    result = fix.fix_text(TEXT, "run.yaml", api.make_options(), training=True)
    assert result.error is not None and "lora-scale-below-one" in result.error.rule
    assert "still there" in result.error.error


def test_a_fix_another_fix_of_the_file_overtakes_is_left_out_not_refused():
    """Two fixes that touch one pair of values: on a T4 (no bf16) the precision fix turns
    torch_dtype to float16, and the storage fix would set the 4-bit storage to the old
    bfloat16, so together the storage finding would stay. Proven alone the storage fix clears
    its finding: it is left out with a note (the dtype fix makes the pair match), not reported
    as a bug in cfgcheck."""
    text = ("model_name_or_path: harborlight/base-7b\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
            "load_in_4bit: true\ntorch_dtype: bfloat16\nbnb_4bit_quant_storage: float16\n"
            "fsdp: full_shard auto_wrap\n")
    # T4: compute capability 7.5, below the 8.0 bf16 needs (NVIDIA's CUDA GPUs compute
    # capability table; A100: 8.0)
    options = api.make_options(gpu="t4")
    result = fix.fix_text(text, "run.yaml", options, training=True)
    assert result.error is None
    assert [a.rule for a in result.applied] == ["precision-unsupported-on-gpu"]
    assert "torch_dtype: float16\n" in result.new_text
    assert "bnb_4bit_quant_storage: float16\n" in result.new_text
    assert any(n.startswith("quant-storage-differs-from-model-dtype at bnb_4bit_quant_storage: not applied")
               for n in result.notes)
    from cfgcheck.engine import lint_text

    after = lint_text(result.new_text, "run.yaml", options)
    assert not [f for f in after.findings if f.rule == "quant-storage-differs-from-model-dtype"]
    # the storage fix alone, on a GPU with bf16, is applied as before
    alone = fix.fix_text(text, "run.yaml", api.make_options(gpu="a100-80gb"), training=True)
    assert alone.error is None
    assert "bnb_4bit_quant_storage: bfloat16\n" in alone.new_text


def test_the_re_lint_of_the_parsed_fixed_text_says_what_a_lint_of_that_text_says():
    """The proof parses the fixed text once and lints those documents: the findings (rule,
    place, words, fixes) are those a lint of the fixed text itself gives."""
    from cfgcheck import engine, load

    opts = api.make_options()
    result = fix.fix_text(TEXT, "run.yaml", opts, training=True)
    assert result.error is None and result.changed and len(result.applied) >= 2
    new = result.new_text

    def seen(report):
        return [(f.rule, f.line, f.column, f.key, f.message, f.hint, f.severity, f.fix is None)
                for f in report.findings]

    direct = engine.lint_text(new, "run.yaml", opts, "yaml")
    parsed = fix_proof._lint_parsed(load.load_text(new, "run.yaml", "yaml"), new, "run.yaml", opts)
    assert seen(parsed) == seen(direct) and direct.findings
    assert parsed.problem is None and parsed.internal == direct.internal == []


def test_a_crash_while_re_linting_the_fixed_text_refuses_the_fix(monkeypatch):
    """Outside any rule's own crash boundary (opening the documents): still a refused fix."""
    from cfgcheck import engine

    real = engine.lint_documents

    def crashing(docs, file, options, layout=None, text=None, located_in=None):
        if text is not None and "1.0e-4" in text:
            raise RuntimeError("injected while opening the fixed text")
        return real(docs, file, options, layout, text, located_in)

    monkeypatch.setattr(engine, "lint_documents", crashing)
    text = "model_name_or_path: harborlight/base-7b\nlearning_rate: 1e-4\n"
    result = fix.fix_text(text, "run.yaml", api.make_options())
    assert result.error is not None and "does not lint cleanly" in result.error.error
    assert "injected" in result.error.error and not result.changed


def test_the_lines_check_on_its_own():
    old = "a: 1\nb: 2\nc: 3\n"
    edit = fix_edits._TextEdit(start=8, end=9, text="5", rule="r")
    assert fix_proof._outside_lines_identical(old, "a: 1\nb: 5\nc: 3\n", [edit]) is None
    assert "line 1" in fix_proof._outside_lines_identical(old, "a: 0\nb: 5\nc: 3\n", [edit])
    assert fix_proof._outside_lines_identical(old, "a: 1\nb: 5\nc: 3", [edit]) is not None  # lost newline


def test_comments_are_read_outside_scalars_only():
    text = "a: 'x # not'  # one\nb: |\n  # not either\n  y\n# two\nc: \"#no\" #three\n"
    assert fix.yaml_comments(text) == ["# one", "# two", "#three"]


# texts where a "#" after a blank is, or is not, a comment; every one parses as YAML
_HASH_TEXTS = [
    "a: 1  # one\nb: x#y  # two\n",
    "# top\na: 'x # not'  # one\n",
    'a: "x # not" # one\nb: "multi\n  line # still not"\n# two\n',
    "a: |\n  # not\n  text # not\nb: 2 # yes\n",
    "a: >- # header comment\n  folded # not\n",
    "%YAML 1.1 # directive comment\n---\na: 1 # yes\n",
    "a: [1, 2] # yes\nb: {c: d} # yes\n",
    "a: &anchor # yes\n  value\nb: *anchor # yes\n",
    "a: !!str 5 # yes\n",
    "a: plain\n  # yes, the scalar ends here\n",
    "\ufeff# after a BOM\na: 1\n",
    "a: 1\r\n# crlf\r\nb: 2 # also\r\n",
    "a: 1\t# after a tab\n",
    "a: it's # yes\n",
    "a: 5%  # yes\n",
    "a: x>y # yes\n",
    "a: 1 # q'uote inside a comment\nb: 2 # \"another\"\n",
    "#\n#\n##\n",
    "a: 1\n",
]


@pytest.mark.parametrize("text", _HASH_TEXTS)
def test_comments_of_a_parsed_text_are_those_a_scan_finds(text):
    from cfgcheck import load

    load.load_text(text, "run.yaml", "yaml")  # the proof reads only texts that parse
    assert fix_proof._parsed_comments(text) == fix.yaml_comments(text)


def test_comments_of_every_fixture_are_those_a_scan_finds():
    from cfgcheck import load

    seen = 0
    for path in sorted((ROOT / "fixtures").rglob("*.y*ml")):
        try:
            text = path.read_text(encoding="utf-8")
            load.load_text(text, str(path), "yaml")
        except (UnicodeDecodeError, load.LoadError):
            continue  # the fixtures of bad input
        seen += 1
        assert fix_proof._parsed_comments(text) == fix.yaml_comments(text), path
    assert seen > 20


def test_the_lines_check_names_the_first_changed_line_past_several_edits():
    old = "a: 1\nb: 2\nc: 3\nd: 4\ne: 5\n"
    edits = [fix_edits._TextEdit(start=3, end=4, text="10", rule="r"),
             fix_edits._TextEdit(start=15, end=16, text="", rule="r")]
    assert fix_proof._outside_lines_identical(old, "a: 10\nb: 2\nc: 3\nd: \ne: 5\n", edits) is None
    why = fix_proof._outside_lines_identical(old, "a: 10\nb: 2\nc: 9\nd: \ne: 6\n", edits)
    assert why == "line 3 changed but no edit touches it"
    why = fix_proof._outside_lines_identical(old, "a: 10\nb: 2\nc: 3\nd: \ne: 6\n", edits)
    assert why == "line 5 changed but no edit touches it"
    insert = [fix_edits._TextEdit(start=10, end=10, text="x: 0\n", rule="r")]  # at line 3's start
    assert fix_proof._outside_lines_identical(old, "a: 1\nb: 2\nx: 0\nc: 3\nd: 4\ne: 5\n", insert) is None
    assert fix_proof._outside_lines_identical(old, "a: 7\nb: 2\nx: 0\nc: 3\nd: 4\ne: 5\n",
                                              insert) == "line 1 changed but no edit touches it"


def _cli(*args):
    return CliRunner().invoke(app, list(map(str, args)))


def test_cli_diff_writes_nothing_and_no_write_exits_one(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    out = _cli("fix", "--diff", p)
    assert out.exit_code == 0, out.output
    assert "-learning_rate: 2e-4  # a text under YAML 1.1" in out.output
    assert "+learning_rate: 2.0e-4 # a text under YAML 1.1" in out.output
    assert "+packing: true" in out.output and "lora_alpha: 32" not in out.output
    assert p.read_text() == TEXT
    assert _cli("fix", "--no-write", p).exit_code == 1
    assert p.read_text() == TEXT
    done = _cli("fix", p)
    assert done.exit_code == 0 and "2 fixes, written" in done.output
    assert "[yaml-version-dependent-value]" in done.output
    assert "left as is (changes training, --allow-training-changes)" in done.output
    assert _cli("fix", "--no-write", p).exit_code == 0  # nothing left in the default tier


def test_cli_training_tier_and_halving(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT + "added_tokens: [\"<|turn|>\"]\nper_device_train_batch_size: 8\n"
                 "gradient_accumulation_steps: 2\n")
    out = _cli("fix", "--allow-training-changes", "--halve-batch", "--gpu", "t4", p)
    assert out.exit_code == 0, out.output
    data = yaml.safe_load(p.read_text())
    # r 16, alpha 8 at 2e-4: a tuned recipe (lr x scale 1e-4); scale 1 (alpha = r) paired with
    # the learning rate that keeps lr x scale (PEFT LoRA scaling alpha/r)
    assert data["lora_alpha"] == 16 and data["learning_rate"] == 1.0e-4
    assert data["bf16"] is False and data["fp16"] is True
    # the embeddings fix (PEFT troubleshooting guide: modules_to_save embed_tokens, lm_head) would
    # train them in full at the adapter rate, which full-modules-at-adapter-lr flags: withheld
    assert "lora_modules_to_save" not in data
    assert "not applied, it would bring a new finding: full-modules-at-adapter-lr" in out.output
    assert (data["per_device_train_batch_size"], data["gradient_accumulation_steps"]) == (4, 4)
    assert "[--halve-batch]" in out.output


def test_cli_input_error_and_unknown_gpu(tmp_path):
    p = tmp_path / "bad.json"
    p.write_text('{"learning_rate": 1e-4,}')
    out = _cli("fix", p)
    assert out.exit_code == 2 and "input error" in out.output and "not fixing" in out.output
    assert _cli("fix", "--gpu", "no-such-card", p).exit_code == 2


def test_pre_commit_hook_for_the_fixer_applies_only_the_default_tier():
    hooks = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    by_id = {h["id"]: h for h in hooks}
    hook = by_id["cfgcheck-fix"]
    assert hook["entry"].split()[:2] == ["cfgcheck", "fix"]
    assert "--allow-training-changes" not in hook["entry"] and "--halve-batch" not in hook["entry"]
    assert set(hook["types_or"]) == {"yaml", "json"}
    assert "cfgcheck-lint" in by_id


def test_lint_does_not_load_the_fixer_or_ruamel():
    code = ("import sys; from cfgcheck import api; api.lint_text('learning_rate: 1e-4\\n', 'a.yaml');"
            "print('cfgcheck.fix' in sys.modules, any(m.startswith('ruamel') for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert out.stdout.split() == ["False", "False"], out.stderr


# the characters that decide where a comment is: blanks, line breaks YAML knows (NEL, the Unicode
# separators, a lone CR), a BOM, quotes, block indicators, a directive's "%", and plain text
_COMMENT_ALPHABET = " \t\n\r#'\"|>%:-ab1\ufeff\x85\u2028\u2029"
_texts = st.text(alphabet=_COMMENT_ALPHABET, max_size=60)


@given(_texts)
def test_the_quick_tests_of_the_comment_reader_say_what_their_patterns_say(text):
    """The string searches give what the patterns they stand for give (YAML 1.2 sec. 5.4: the
    line breaks; sec. 6.6: a comment starts with "#" after a blank)."""
    import re

    assert fix_proof._odd_break(text) == bool(re.search("[\x85\u2028\u2029]|\r(?!\n)|(?<=[\\s\\S])\ufeff", text))
    assert fix_proof._may_hold_hash(text) == bool(re.search("[\"'|>]|^%", text, re.M))


@given(_texts)
def test_comments_of_any_text_that_parses_are_those_a_scan_finds(text):
    from cfgcheck import load

    try:
        load.load_text(text, "run.yaml", "yaml")
    except load.LoadError:
        return  # the proof reads only texts that parse
    assert fix_proof._parsed_comments(text) == fix.yaml_comments(text)
