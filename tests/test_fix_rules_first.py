"""The fixer lints with the rules that propose fixes first and runs the others only where a fix is
to be made: what it reports is the same as when every rule lints every file first."""

from __future__ import annotations

from pathlib import Path

import pytest

from cfgcheck import api, engine, fix
from cfgcheck import fix as fixmod_pkg
from cfgcheck.catalogue import load_catalogue
from cfgcheck.checks import all_checks

from .conftest import SHARED

ROOT = Path(__file__).resolve().parents[1]
PUBLIC = SHARED / "corpus" / "public"

# invented configs: one with a keeps-meaning fix, one with only a training-changing one, one clean
TO_FIX = ("model_name_or_path: saltmarsh/base-1b\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
          "learning_rate: 1e-4  # a text under YAML 1.1\nper_device_train_batch_size: 4\n")
TRAINING_ONLY = ("model_name_or_path: saltmarsh/base-1b\nuse_peft: true\nlora_r: 16\nlora_alpha: 4\n"
                 "learning_rate: 0.0002\nper_device_train_batch_size: 4\n")
CLEAN = "model_name_or_path: saltmarsh/base-1b\nlearning_rate: 0.00002\nper_device_train_batch_size: 4\n"


def _shown(r: fix.FileFix) -> tuple:
    """Everything a fix run shows or writes for one file."""
    error = r.error and (r.error.rule, r.error.error.split("; evidence for a bug report")[0])
    return (r.new_text, r.applied, r.withheld, r.notes, r.needs, r.skipped, r.links, r.problem,
            error, r.evidence and r.evidence["reason"])


def _every_rule_first(monkeypatch):
    monkeypatch.setattr(fixmod_pkg, "_fixing_options", lambda options: None)


def _files():
    out = sorted(p for p in (ROOT / "fixtures").rglob("*") if p.suffix in (".yaml", ".yml", ".json"))
    if PUBLIC.is_dir():
        out += sorted(p for p in PUBLIC.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
    return out


@pytest.mark.parametrize("training", [False, True], ids=["keeps-meaning", "all-tiers"])
def test_fixing_rules_first_reports_what_every_rule_first_reports(monkeypatch, training):
    files = _files()
    assert len(files) > 50
    options = api.make_options(gpu="t4", rows=1000)
    quick = fix.fix_files([(f, options) for f in files], training=training, write=False)
    _every_rule_first(monkeypatch)
    full = fix.fix_files([(f, options) for f in files], training=training, write=False)
    assert [_shown(r) for r in quick.files] == [_shown(r) for r in full.files]
    assert any(r.changed for r in quick.files)
    assert any(r.withheld for r in quick.files) != training  # left as is, unless every tier is asked


def test_the_first_lint_runs_only_the_rules_that_fix():
    options = engine.Options()
    narrowed = fixmod_pkg._fixing_options(options)
    assert narrowed is not None
    catalogue = load_catalogue()
    assert set(narrowed.only) == {r for r in catalogue if catalogue[r].fix is not None}
    assert "yaml-version-dependent-value" in narrowed.only and "unknown-key" not in narrowed.only
    only_fixers = engine.Options(only=frozenset({"yaml-version-dependent-value"}))
    assert fixmod_pkg._fixing_options(only_fixers) is None  # nothing else runs: one lint


def test_every_rule_lints_a_file_that_gets_a_fix(monkeypatch):
    """The proof compares the fixed text's findings with every finding of the old text."""
    seen = []
    real = engine.lint_documents

    def spy(docs, file, options, *args, **kwargs):
        seen.append(options.only)
        return real(docs, file, options, *args, **kwargs)

    monkeypatch.setattr(engine, "lint_documents", spy)
    result = fix.fix_text(TO_FIX, "run.yaml")
    assert result.changed and [a.rule for a in result.applied] == ["yaml-version-dependent-value"]
    assert seen[0] is not None and seen[1] is None  # the fixing rules, then every rule
    seen.clear()
    result = fix.fix_text(CLEAN, "run.yaml")
    assert not result.changed and seen == [seen[0]] and seen[0] is not None


def test_a_failing_rule_is_reported_where_a_fix_is_to_be_made(monkeypatch):
    checks = dict(all_checks())

    def broken(ctx):
        raise RuntimeError("boom")

    checks["unknown-key"] = broken  # a rule that proposes no fixes
    monkeypatch.setattr(engine, "all_checks", lambda: checks)
    result = fix.fix_text(TO_FIX, "run.yaml")
    assert result.error is not None and result.error.rule == "unknown-key"
    assert "rule failed while checking, not fixing" in result.error.error
    assert not result.changed


def test_a_failing_fixing_rule_is_reported_as_every_rule_first_reports_it(monkeypatch):
    checks = dict(all_checks())

    def broken(ctx):
        raise RuntimeError("boom")

    checks["lora-scale-below-one"] = broken
    monkeypatch.setattr(engine, "all_checks", lambda: checks)
    quick = fix.fix_text(TRAINING_ONLY, "run.yaml")
    _every_rule_first(monkeypatch)
    full = fix.fix_text(TRAINING_ONLY, "run.yaml")
    assert quick.error is not None and _shown(quick) == _shown(full)


def test_a_fix_is_taken_only_from_a_rule_whose_record_makes_fixes(monkeypatch):
    from cfgcheck.fix import plan

    result = fix.fix_text(TO_FIX, "run.yaml")
    assert result.changed
    monkeypatch.setattr(plan, "_declares_fix", lambda rule_id: rule_id != "yaml-version-dependent-value")
    result = fix.fix_text(TO_FIX, "run.yaml")
    assert not result.changed and not result.applied
