"""The demo fixtures: fixing removes the fixed findings, keeps every comment, and is idempotent."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from cfgcheck import api, fix

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo"


@pytest.mark.parametrize("training", [False, True])
def test_demo_fixes(tmp_path, training):
    shutil.copytree(DEMO, tmp_path / "demo")
    folder = tmp_path / "demo"
    options = dict(gpu="t4", rows=1000)  # a T4 (compute capability 7.5, NVIDIA table): bf16 fixes fire
    before = api.lint([folder], **options)
    report = api.fix([folder], training=training, **options)
    assert not report.errors and not report.problems
    fixed = {(a.rule, f.file, a.key) for f in report.files for a in f.applied}
    assert fixed and all(f.written for f in report.changed)
    after = api.lint([folder], **options)
    assert not fixed & {(x.rule, x.file, x.key) for x in after.findings}
    tiers = {"keeps-meaning", "changes-training"} if training else {"keeps-meaning"}
    # every fix left is one the fixer withheld, with a note that names it
    notes = {f.file: " ".join(f.notes) for f in report.files}
    assert not [x for x in after.findings if x.fix is not None and x.fix.tier in tiers
                and f"{x.rule} at {x.key}: not applied" not in notes.get(x.file, "")]
    # no finding appears that was not there before (same rule and key), info included; only
    # "not checked" notes (what a rule could not judge) may differ
    assert {(x.rule, x.file, x.key) for x in after.findings if x.data.get("judged") is not False} <= {
        (x.rule, x.file, x.key) for x in before.findings}
    for src in DEMO.iterdir():
        old = src.read_text(encoding="utf-8")
        new = (folder / src.name).read_text(encoding="utf-8")
        if src.suffix == ".yaml":
            assert fix.yaml_comments(new) == fix.yaml_comments(old) and fix.yaml_comments(old)
    again = api.fix([folder], training=training, **options)
    assert not again.changed and not again.errors
