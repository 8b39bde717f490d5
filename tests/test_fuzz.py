"""Fuzzing the whole pipeline: bytes -> load -> view -> every rule -> every output format (-> the
fixer, where there is one). Invariant: no exception escapes and no rule raises (a rule that raises
would be reported as an internal error: that is a bug too).

CI runs the derandomised profile from conftest.py; for a longer local run:
``HYPOTHESIS_PROFILE=long python -m pytest -q tests/test_fuzz.py``.
"""

from __future__ import annotations

import importlib
import importlib.util
import json

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cfgcheck import engine, findings, load
from cfgcheck.engine import Options
from cfgcheck.render import FORMATS, render
from cfgcheck.view import build_view

from . import fuzz_strategies as fs

def _options() -> list[Options]:
    """No knowledge at all, and a GPU, a GPU count and a row count (so the rules that need them run)."""
    from cfgcheck import api

    return [Options(), api.make_options(gpu="t4", gpus=8, rows=1000)]


def pipeline(name: str, raw: bytes) -> list[findings.FileReport]:
    """Everything lint does to a file's bytes; returns the reports made."""
    reports = []
    try:
        src = load.decode(raw, name)
        docs = load.load_text(src.text, name)
    except load.LoadError as exc:
        assert exc.reason and "\n" not in exc.reason and exc.line >= 1 and exc.column >= 1
        report = findings.FileReport(file=name, problem=findings.InputProblem(
            file=name, line=exc.line, column=exc.column, reason=exc.reason))
        reports.append(report)
    else:
        for doc in docs:
            build_view(doc)  # the view alone, as the fixer and other callers use it
        for options in _options():
            report = engine.lint_documents(docs, name, options)
            assert report.internal == [], report.internal
            for f in report.findings:
                assert f.line >= 1 and f.column >= 1 and f.message and f.hint
            reports.append(report)
    for report in reports:
        whole = findings.Report(files=[report])
        for fmt in FORMATS:
            out = render(fmt, whole, whole.findings)
            assert isinstance(out, str) and out.endswith("\n")
            if fmt == "json":
                json.loads(out)
    return reports


_settings = settings(suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@_settings
@given(fs.config_bytes())
def test_any_bytes_through_the_whole_pipeline(case):
    pipeline(*case)


@pytest.mark.parametrize("layout", sorted(fs.LAYOUTS))
def test_each_layout_valid(layout):
    @_settings
    @given(fs.valid_text(fs.LAYOUTS[layout]))
    def run(case):
        name, text = case
        reports = pipeline(name, text.encode("utf-8"))
        assert reports[0].problem is None, reports[0].problem  # valid text always loads

    run()


@_settings
@given(fs.mutated_text())
def test_mutated_texts(case):
    name, text = case
    pipeline(name, text.encode("utf-8", errors="surrogatepass"))


@_settings
@given(fs.truncated_text())
def test_truncated_texts(case):
    name, text = case
    pipeline(name, text.encode("utf-8"))


# --------------------------------------------------------------------------- the fixer

def _fix_text():
    if importlib.util.find_spec("cfgcheck.fix") is None:
        pytest.skip("no fixer in this checkout (cfgcheck.fix is absent)")
    fn = getattr(importlib.import_module("cfgcheck.fix"), "fix_text", None)
    if fn is None:
        pytest.skip("cfgcheck.fix has no fix_text(text, name, options) to fuzz")
    return fn


@_settings
@given(fs.config_bytes(), st.booleans())
def test_fixer_never_raises_its_proof_holds_and_it_settles(case, training):
    """The fixer on anything that decodes: no exception, no failed proof (a failed proof is a bug
    the fixer caught before writing), and fixing its own output again changes nothing."""
    fix_text = _fix_text()
    name, raw = case
    try:
        text = load.decode(raw, name).text
    except load.LoadError:
        return
    for options in _options():
        first = fix_text(text, name, options, training=training)
        assert first.old_text == text  # the input is never changed in place
        assert first.error is None, first.error
        if first.problem is not None:
            assert first.new_text == text  # unreadable input: nothing rewritten
            continue
        again = fix_text(first.new_text, name, options, training=training)
        assert again.error is None, again.error
        assert again.new_text == first.new_text, "a second pass changed the text"


# --------------------------------------------------------------------------- crashes found by fuzzing

@pytest.mark.parametrize("text", [
    "peft_type: LORA\nr: 1\nlora_alpha: 0\n",  # scale 0: 1/scale divided by zero
    "peft_type: LORA\nr: 4\nlora_alpha: -8\n",
    "peft_type: LORA\nr: 4\nlora_alpha: .nan\n",
    "peft_type: LORA\nr: 4\nlora_alpha: .inf\n",
])
def test_regression_non_positive_or_non_finite_alpha(text):
    reports = pipeline("adapter.yaml", text.encode())
    assert all(r.problem is None for r in reports)


@pytest.mark.parametrize("text", [
    # epochs .inf: ceil(inf x steps per epoch) overflowed in the step arithmetic
    "model:\n  model_name_or_path: tidewater/support-7b\ntraining:\n  learning_rate: 1.0\n"
    "  per_device_train_batch_size: auto\n  warmup_ratio: 0.0\n  save_steps: 1\n  num_train_epochs: .inf\n",
    "learning_rate: 1.0e-5\nper_device_train_batch_size: 4\nsave_steps: .inf\nmax_steps: 100\n",
    # eval_steps .inf with a steps strategy: int(inf) in the run-too-short-for-cadence rule
    "learning_rate: 1.0e-5\neval_strategy: steps\neval_steps: .inf\nmax_steps: 100\n",
])
def test_regression_infinite_epochs_or_interval(text):
    reports = pipeline("train.yaml", text.encode())
    assert all(r.problem is None for r in reports)


def test_regression_modules_to_save_that_is_not_a_pattern():
    # found by fuzzing: ")" in modules_to_save raised re.error inside the memory rule
    text = ("peft_type: LORA\nr: auto\nlora_alpha: auto\ntarget_modules: null\nmodules_to_save:\n- )\n"
            "base_model_name_or_path: meta-llama/Llama-2-7b-hf\n")
    reports = pipeline("adapter.yaml", text.encode())
    assert all(r.problem is None for r in reports)



def test_regression_fixer_proof_sees_nan_unchanged():
    # found by fuzzing: an untouched .nan beside a fixed value counted as changed (nan != nan)
    fix_text = _fix_text()
    result = fix_text("learning_rate: 1.0\nlora_dropout:\n- .nan\n- 1e-4\n", "config.yaml", Options())
    assert result.error is None, result.error
    assert result.new_text.endswith("- .nan\n- 1.0e-4\n")  # 1e-4 is text to PyYAML (YAML 1.1)


def test_regression_fixer_proof_counts_lines_as_the_edits_do():
    # found by fuzzing: U+0085 (NEL) inside a quoted key made the proof's line count differ
    # from the edit offsets, so a correct fix was refused as "line 5 changed but no edit touches it"
    fix_text = _fix_text()
    text = "learning_rate:\n- ? '\x85    '\n  : null\n- 1e-4\n"
    result = fix_text(text, "config.yaml", Options())
    assert result.error is None, result.error
    again = fix_text(result.new_text, "config.yaml", Options())
    assert again.error is None and again.new_text == result.new_text
