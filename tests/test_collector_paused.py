"""The cycle collector is paused while one file is read and checked, and left as it was after.

A file's documents, views and findings stay alive until its report is made; with the collector
running, every pass walks them again (a one-document file of 100,000 keys spent about half its
time there: bench/growth.py). These tests pin what the pause promises: paused while the rules
run, for lint and fix; restored after, also when a rule fails; left off when the caller had it
off; and the same findings either way."""

from __future__ import annotations

import contextlib
import gc

import pytest

from cfgcheck import checks, engine, memo
from cfgcheck.checks import all_checks
from cfgcheck.engine import Options, lint_text
from cfgcheck.fix import fix_text

CONFIG = "model_name_or_path: acme/tiny-7b\nlearning_rate: 1e-4\nlora_r: 16\nlora_alpha: 8\n"
RULE = "unknown-key"  # runs on every trainer config


@pytest.fixture
def spy(monkeypatch):
    """Replace one check by one that records whether the collector was on while it ran."""
    all_checks()
    seen: list[bool] = []
    real = checks._CHECKS_CACHE[RULE]

    def recording(ctx):
        seen.append(gc.isenabled())
        return real(ctx)

    monkeypatch.setitem(checks._CHECKS_CACHE, RULE, recording)
    return seen


@pytest.fixture(autouse=True)
def collector_back_on():
    yield
    gc.enable()  # whatever a failing test left


def test_lint_runs_the_rules_with_the_collector_paused_and_restores_it(spy):
    assert gc.isenabled()
    lint_text(CONFIG, "run.yaml", Options())
    assert spy == [False]
    assert gc.isenabled()


def test_fix_runs_the_rules_with_the_collector_paused_and_restores_it(spy):
    fix_text(CONFIG, "run.yaml", Options())
    assert spy and not any(spy)
    assert gc.isenabled()


def test_a_caller_that_turned_the_collector_off_finds_it_off(spy):
    gc.disable()
    lint_text(CONFIG, "run.yaml", Options())
    fix_text(CONFIG, "run.yaml", Options())
    assert not gc.isenabled()


def test_the_collector_comes_back_when_a_rule_fails(monkeypatch):
    all_checks()

    def failing(ctx):
        raise RuntimeError("a bug in a rule")

    monkeypatch.setitem(checks._CHECKS_CACHE, RULE, failing)
    report = lint_text(CONFIG, "run.yaml", Options())
    assert [e.rule for e in report.internal] == [RULE]
    assert gc.isenabled()


def test_the_collector_comes_back_when_the_lint_itself_raises(monkeypatch):
    def broken(*args, **kwargs):
        raise KeyboardInterrupt  # not caught by any crash boundary

    monkeypatch.setattr(engine, "_lint_text", broken)
    with pytest.raises(KeyboardInterrupt):
        lint_text(CONFIG, "run.yaml", Options())
    assert gc.isenabled()


def test_findings_are_the_same_with_the_collector_running(monkeypatch):
    def as_list(report):
        return [(f.rule, f.line, f.column, f.severity, f.message) for f in report.findings]

    paused = as_list(lint_text(CONFIG, "run.yaml", Options()))
    monkeypatch.setattr(memo, "collector_paused", contextlib.nullcontext)
    running = as_list(lint_text(CONFIG, "run.yaml", Options()))
    assert paused == running
    assert any(r == "lora-scale-below-one" for r, *_ in paused)
