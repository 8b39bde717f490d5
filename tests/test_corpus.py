"""Real public recipes (written by others) lint with no traceback, no internal error and no false alarm."""

from __future__ import annotations

import csv

import pytest

from cfgcheck import engine
from cfgcheck.findings import Severity


def _corpus(shared_dir):
    root = shared_dir / "corpus" / "public"
    if not root.is_dir():
        pytest.skip("no public corpus")
    return root


# The one file in the corpus that is not valid JSON on purpose (bare placeholders, see its README).
KNOWN_INVALID = {"DeepSpeedExamples__training__data_efficiency__gpt_finetuning__finetune__ds_config_gpt2_TEMPLATE.json"}


def test_every_corpus_file_lints_cleanly(shared_dir):
    root = _corpus(shared_dir)
    files = sorted(p for p in root.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
    assert len(files) > 50
    report = engine.lint_paths(files, engine.Options())
    assert report.internal == []
    bad = {p.file.rsplit("/", 1)[-1] for p in report.problems}
    assert bad == KNOWN_INVALID
    for p in report.problems:
        assert p.line >= 1 and p.column >= 1 and p.reason.startswith("invalid JSON")


def test_no_error_level_findings_in_the_corpus(shared_dir):
    """Error-level findings on published, working recipes would be false alarms."""
    root = _corpus(shared_dir)
    report = engine.lint_paths([root], engine.Options())
    errors = [f"{f.file}:{f.line}: {f.rule}: {f.message}" for f in report.findings if f.severity == Severity.ERROR]
    assert errors == []


def test_corpus_provenance_lists_every_file(shared_dir):
    root = _corpus(shared_dir)
    with open(root / "PROVENANCE.tsv", newline="") as fh:
        listed = {row["file"] for row in csv.DictReader(fh, delimiter="\t")}
    present = {p.name for p in root.iterdir() if p.name != "PROVENANCE.tsv"}
    assert present <= listed | {"README.md"}
