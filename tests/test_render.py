"""Formatters: golden output byte for byte on a fixed report; SARIF against the OASIS schema;
GitHub workflow-command escaping; the code frame and colours of the text format."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from cfgcheck import __version__, engine, findings
from cfgcheck.api import make_options, visible
from cfgcheck.catalogue import load_catalogue
from cfgcheck.findings import Severity
from cfgcheck.render import FORMATS, render
from cfgcheck.render import github as gh
from cfgcheck.render import sarif
from cfgcheck.render.text import frame

ROOT = Path(__file__).resolve().parents[1]
GOLDEN = Path(__file__).resolve().parent / "golden"
SARIF_SCHEMA = ROOT.parent / "shared" / "standards" / "sarif-schema-2.1.0.json"
CATALOGUE = load_catalogue()
UPDATE = os.environ.get("CFGCHECK_UPDATE_GOLDEN") == "1"  # regenerate after a deliberate change

LORA = """\
# Tidewater Freight: LoRA adapter for the route-planning assistant
use_peft: true
lora_r: 16
lora_alpha: 8
learning_rate: 2e-5
bf16: true
per_device_train_batch_size: 4
max_grad_norm: 1.0  # cfgcheck: waive duplicate-key because kept while the template settles
"""
DS = ('{"train_batch_size": 60, "train_micro_batch_size_per_gpu": 4,\n'
      ' "gradient_accumulation_steps": 8, "bf16": {"enabled": true}, "zero_optimization": {"stage": 2}}\n')
BROKEN = "learning_rate: [1, 2\n"


# The rules the fixed report runs, so that rules added to the catalogue later do not change it.
RULES = ("duplicate-key", "global-batch-mismatch", "lora-scale-below-one",
         "precision-unsupported-on-gpu", "waiver-comment-problem", "yaml-version-dependent-value")


def fixed_report() -> findings.Report:
    opts = make_options(gpu="t4", only=RULES)
    return findings.Report(files=[
        engine.lint_text(LORA, "configs/tidewater-lora.yaml", opts),
        engine.lint_text(DS, "configs/ds, zero2: test.json", opts),
        engine.lint_text(BROKEN, "configs/broken.yaml", opts),
        engine.lint_text("name: ci\non: push\njobs: {}\n", ".github/workflows/ci.yaml", opts),
    ])


def _golden(name: str, text: str) -> None:
    text = text.replace(__version__, "VERSION")
    path = GOLDEN / name
    if UPDATE:
        path.write_bytes(text.encode("utf-8"))
    assert path.is_file(), f"{path} missing: run with CFGCHECK_UPDATE_GOLDEN=1 once"
    assert text == path.read_bytes().decode("utf-8")


def test_every_format_is_registered():
    assert set(FORMATS) == {"text", "json", "sarif", "github"}


@pytest.mark.parametrize("fmt", ["text", "json", "sarif", "github"])
def test_golden_output(fmt):
    report = fixed_report()
    shown = report.findings if fmt in ("json", "sarif") else visible(report.findings, Severity.WARNING)
    extra = {"rules": {r: CATALOGUE[r] for r in RULES}} if fmt == "sarif" else {}
    _golden(f"report.{fmt}", render(fmt, report, shown, **extra))


def test_golden_text_with_frames_and_colour():
    report = fixed_report()
    shown = visible(report.findings, Severity.WARNING)
    frames = {"configs/tidewater-lora.yaml": LORA.splitlines(), "configs/ds, zero2: test.json": DS.splitlines()}
    _golden("report-frames.text", render("text", report, shown, frames=frames))
    _golden("report-colour.text", render("text", report, shown, color=True))
    _golden("report-quiet.text", render("text", report, shown, mode="quiet"))
    _golden("report-summary.text", render("text", report, shown, mode="summary"))


def test_plain_text_has_no_escape_codes():
    report = fixed_report()
    out = render("text", report, visible(report.findings, Severity.WARNING))
    assert "\x1b[" not in out
    assert "\x1b[1;31merror\x1b[0m" in render("text", report, report.findings, color=True)


def test_frame_marks_the_written_value_in_its_line():
    lines = ["lora:", "\talpha: 8   # tab-indented"]
    assert frame(lines, 2, 9) == ["    in line 2: \talpha: >>8<<   # tab-indented"]
    assert frame(lines, 9, 1) == []
    # a quoted value is marked up to its closing quote, a flow/JSON value up to its separator
    assert frame(['x: "a # b"  # c'], 1, 4) == ['    in line 1: x: >>"a # b"<<  # c']
    assert frame(['{"train_batch_size": 60, "micro": 4}'], 1, 22) == [
        '    in line 1: {"train_batch_size": >>60<<, "micro": 4}']
    # a key with no value on its line: an empty mark where the value would be
    assert frame(["lora:"], 1, 6) == ["    in line 1: lora:>><<"]
    long = ["x: " + "a" * 300 + "Z" + "b" * 300]
    (out,) = frame(long, 1, 304)
    assert ">>Z" in out and out.endswith("...<<") and "in line 1: ..." in out and len(out) < 200


# --------------------------------------------------------------------------- SARIF

@pytest.fixture(scope="module")
def sarif_validator():
    if not SARIF_SCHEMA.is_file():
        pytest.skip("../shared/standards/sarif-schema-2.1.0.json is not present")
    import jsonschema

    schema = json.loads(SARIF_SCHEMA.read_text(encoding="utf-8"))
    return jsonschema.Draft4Validator(schema)  # the OASIS schema is draft-04


def test_sarif_validates_against_the_oasis_schema(sarif_validator):
    report = fixed_report()
    doc = json.loads(render("sarif", report, report.findings))
    errors = sorted(sarif_validator.iter_errors(doc), key=lambda e: list(e.absolute_path))
    assert errors == [], [f"{list(e.absolute_path)}: {e.message}" for e in errors[:5]]
    run = doc["runs"][0]
    assert doc["version"] == "2.1.0"
    rules = run["tool"]["driver"]["rules"]
    assert [r["id"] for r in rules] == sorted(r["id"] for r in rules)
    by_id = {r["id"]: r for r in rules}
    assert by_id["duplicate-key"]["defaultConfiguration"]["level"] == "error"
    assert by_id["lora-scale-below-one"]["help"]["text"].startswith("LoRA multiplies")
    for res in run["results"]:
        assert rules[res["ruleIndex"]]["id"] == res["ruleId"]
        region = res["locations"][0]["physicalLocation"]["region"]
        assert region["startLine"] >= 1 and region["startColumn"] >= 1
    waived = [r for r in run["results"] if r.get("suppressions")]
    assert waived == []  # the waiver in LORA names a rule that did not fire there
    notes = run["invocations"][0]["toolExecutionNotifications"]
    assert notes and "invalid YAML" in notes[0]["message"]["text"]


def test_sarif_carries_waived_findings_as_suppressed(sarif_validator):
    text = LORA.replace("lora_alpha: 8\n", "lora_alpha: 8  # cfgcheck: waive lora-scale-below-one because lr is raised 2x\n")
    report = findings.Report(files=[engine.lint_text(text, "configs/w.yaml", make_options(gpu="t4"))])
    doc = json.loads(render("sarif", report, report.findings))
    assert list(sarif_validator.iter_errors(doc)) == []
    (res,) = [r for r in doc["runs"][0]["results"] if r.get("suppressions")]
    assert res["ruleId"] == "lora-scale-below-one"
    assert res["suppressions"] == [{"kind": "inSource", "status": "accepted", "justification": "lr is raised 2x"}]


def test_fingerprints_survive_line_shifts_and_change_with_values():
    opts = make_options(gpu="t4")
    a = engine.lint_text(LORA, "c.yaml", opts).findings
    b = engine.lint_text("# a\n# b\n" + LORA, "c.yaml", opts).findings
    assert [f.line + 2 for f in a] == [f.line for f in b]
    assert [sarif.fingerprint(f) for f in a] == [sarif.fingerprint(f) for f in b]
    c = engine.lint_text(LORA.replace("lora_alpha: 8", "lora_alpha: 4"), "c.yaml", opts).findings
    fa = {f.rule: sarif.fingerprint(f) for f in a}
    fc = {f.rule: sarif.fingerprint(f) for f in c}
    assert fa["lora-scale-below-one"] != fc["lora-scale-below-one"]
    assert fa["yaml-version-dependent-value"] == fc["yaml-version-dependent-value"]


# --------------------------------------------------------------------------- GitHub

def test_github_escaping():
    # GitHub Actions "Workflow commands" docs and actions/toolkit command.ts (escapeData,
    # escapeProperty): data escapes % CR LF; properties also ':' and ','.
    assert gh.escape_data("50% a\r\nb: c, d") == "50%25 a%0D%0Ab: c, d"
    assert gh.escape_property("a: b, 50%\n") == "a%3A b%2C 50%25%0A"


def test_github_lines_have_the_documented_shape():
    report = fixed_report()
    out = render("github", report, visible(report.findings, Severity.WARNING)).splitlines()
    commands = [l for l in out if l.startswith("::")]
    assert commands and all(l.split(" ", 1)[0] in ("::error", "::warning", "::notice") for l in commands)
    ds = [l for l in commands if "test.json" in l]
    assert ds[0].startswith("::error file=configs/ds%2C zero2%3A test.json,line=1,col=22,title=cfgcheck ")
    assert out[-1].startswith("cfgcheck: ")
