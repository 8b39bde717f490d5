"""``engine.lint_rest``: the other rules run on the views a pass by some rules opened give the
report one pass by every rule gives, or it declines (None) and the caller lints again."""

from __future__ import annotations

import inspect
import re
from pathlib import Path

import pytest

from cfgcheck import engine, load as loadmod
from cfgcheck._records import replaced
from cfgcheck.checks import all_checks
from cfgcheck.fix import _fixing_options

from .conftest import SHARED

ROOT = Path(__file__).resolve().parents[1]
PUBLIC = SHARED / "corpus" / "public"

# invented: a config the fixing rules and the others both have something to say about
MIXED = ("model_name_or_path: saltmarsh/base-1b\nuse_peft: true\nlora_r: 16\nlora_alpha: 4\n"
         "learning_rate: 1e-4\nper_device_train_batch_size: 4\nlearnig_rate_typo: 3\n"
         "bf16: true\nfp16: true\n")


def _files():
    out = sorted(p for p in (ROOT / "fixtures").rglob("*") if p.suffix in (".yaml", ".yml", ".json"))
    if PUBLIC.is_dir():
        out += sorted(p for p in PUBLIC.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
    return out


def _said(report) -> tuple:
    return ([(f.rule, f.severity, f.file, f.line, f.column, f.key, f.message, f.hint, dict(f.data),
              f.path, f.document, f.fix, f.related) for f in report.findings],
            [(e.rule, e.error) for e in report.internal], report.layout, report.skipped,
            report.compose_problem, [(f.rule, f.line, r, k) for f, r, k in report.waived],
            report.problem)


def _both(text: str, name: str, options: engine.Options, ran: frozenset[str]):
    fmt = loadmod.guess_format(name, text)
    docs = loadmod.load_text(text, name, fmt)
    whole = engine.lint_documents(docs, name, options, None, text)
    docs = loadmod.load_text(text, name, fmt)
    first = engine.lint_documents(docs, name, replaced(options, only=ran), None, text)
    return whole, engine.lint_rest(first, docs, name, options, ran, text)


def _subsets(options):
    """The rules the fixer runs first, and two other ways of cutting the rules in two."""
    running = sorted(r.id for r, _fn in engine.active_rules(options))
    free = [r for r in running if r not in engine.SELECTION_DEPENDENT]
    return [_fixing_options(options).only, frozenset(free[::2]), frozenset(free[1::3])]


@pytest.mark.parametrize("options", [engine.Options(), None], ids=["no-flags", "t4-rows"])
def test_the_rest_on_opened_views_says_what_one_pass_says(options):
    from cfgcheck import api

    options = options or api.make_options(gpu="t4", rows=1000)
    files = _files()
    assert len(files) > 50
    merged = 0
    for ran in _subsets(options):
        for path in files:
            try:
                text = path.read_text(encoding="utf-8")
            except UnicodeDecodeError:  # a hostile fixture that is no text at all
                continue
            try:
                whole, rest = _both(text, str(path), options, ran)
            except loadmod.LoadError:
                continue
            if rest is None:
                continue
            merged += 1
            assert _said(rest) == _said(whole), path
    assert merged > len(files)  # most files are merged, not declined


def test_an_invented_config_with_findings_of_both_halves():
    options = engine.Options()
    ran = _fixing_options(options).only
    whole, rest = _both(MIXED, "mixed.yaml", options, ran)
    assert rest is not None
    rules = {f.rule for f in whole.findings}
    assert rules & ran and rules - ran  # findings from both passes
    assert _said(rest) == _said(whole)


@pytest.mark.parametrize("text,why", [
    (MIXED + "lora_alpha_extra: 1  # cfgcheck: ignore unknown-key -- kept for a sibling run\n",
     "a waiver comment is to be applied"),
    ("program: train.py\nmethod: grid\nparameters:\n  learning_rate:\n    values: [1.0e-5, 1.0e-4]\n",
     "a sweep of runs"),
])
def test_it_declines_where_one_pass_could_say_otherwise(text, why):
    options = engine.Options()
    ran = _fixing_options(options).only
    fmt = loadmod.guess_format("a.yaml", text)
    docs = loadmod.load_text(text, "a.yaml", fmt)
    first = engine.lint_documents(docs, "a.yaml", replaced(options, only=ran), None, text)
    if why == "a sweep of runs":
        assert len(first.views) > len(docs)  # one view a run of the sweep
    assert engine.lint_rest(first, docs, "a.yaml", options, ran, text) is None, why


def test_it_declines_a_first_pass_by_a_rule_that_depends_on_the_others():
    options = engine.Options()
    ran = frozenset({"unknown-key"})
    docs = loadmod.load_text(MIXED, "m.yaml", "yaml")
    first = engine.lint_documents(docs, "m.yaml", replaced(options, only=ran), None, MIXED)
    assert engine.lint_rest(first, docs, "m.yaml", options, ran, MIXED) is None


def test_every_check_that_reads_the_selection_is_declared():
    """A check reading which rules run (``ctx.active``), the other rules' findings
    (``ctx.earlier``) or the selection in the options says something else in a pass by some
    rules: its rule must be declared, or run last."""
    stage = {r.id: r.stage for r, _fn in engine.active_rules(engine.Options())}
    reads = re.compile(r"\.(active|earlier)\b|options\.(only|skip)\b")
    found = set()
    for rule_id, fn in all_checks().items():
        source = inspect.getsource(inspect.getmodule(fn))  # the whole module: helpers too
        if reads.search(source):
            found.add(rule_id)
            assert rule_id in engine.SELECTION_DEPENDENT or stage.get(rule_id) == "last", rule_id
    assert found >= {"unknown-key", engine.WAIVER_RULE}  # the scan sees the two that do
