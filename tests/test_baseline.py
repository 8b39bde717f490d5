"""Baselines: recorded findings stay hidden when lines move; a new finding still shows."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from cfgcheck import api
from cfgcheck import baseline as baselinemod
from cfgcheck.baseline import BaselineError
from cfgcheck.cli import app

runner = CliRunner()

# Two findings today: alpha 8 < r 16 (LoRA paper sec. 4.1, scale alpha/r = 0.5) and "2e-4",
# which PyYAML (YAML 1.1) reads as text (PyYAML resolver: a float needs a dot).
TODAY = "use_peft: true\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2e-4\nnum_train_epochs: 2\n"


def test_baseline_hides_old_findings_after_lines_move_and_shows_a_new_one(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(TODAY)
    base = tmp_path / "cfgcheck-baseline.json"
    before = api.lint([cfg], project=None)
    assert {f.rule for f in before.findings} >= {"lora-scale-below-one", "yaml-version-dependent-value"}
    assert baselinemod.save(before, base) == len(before.findings)

    # edits elsewhere: a comment block on top moves every line down by three
    cfg.write_text("# Tidewater Freight: route-planner adapter\n# owner: ml-platform\n\n" + TODAY)
    after = api.lint([cfg], project=None, baseline=base)
    assert after.findings == [] and after.baselined == len(before.findings)

    # a new mistake: "yes" is a boolean in YAML 1.1 and text in YAML 1.2 (YAML 1.2.2 spec, 10.3.2)
    cfg.write_text("# moved\n" + TODAY + "packing: yes\n")
    new = api.lint([cfg], project=None, baseline=base)
    assert [(f.rule, f.key) for f in new.findings if f.severity.word != "info"] == [
        ("yaml-version-dependent-value", "packing")]


def test_a_changed_value_is_a_new_finding(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(TODAY)
    base = tmp_path / "b.json"
    baselinemod.save(api.lint([cfg], project=None), base)
    cfg.write_text(TODAY.replace("lora_alpha: 8", "lora_alpha: 4"))  # same rule and key, new values
    report = api.lint([cfg], project=None, baseline=base)
    assert [f.rule for f in report.findings] == ["lora-scale-below-one"]


def test_counts_matter_and_paths_are_relative_to_the_baseline(tmp_path, monkeypatch):
    (tmp_path / "cfg").mkdir()
    for n in ("a", "b"):
        (tmp_path / "cfg" / f"{n}.yaml").write_text(TODAY)
    monkeypatch.chdir(tmp_path)
    base = tmp_path / "b.json"
    baselinemod.save(api.lint(["cfg/a.yaml"], project=None), base)
    doc = json.loads(base.read_text())
    assert doc["kind"] == "cfgcheck-baseline" and {r["file"] for r in doc["findings"]} == {"cfg/a.yaml"}
    monkeypatch.chdir(tmp_path / "cfg")  # another working folder, same files
    report = api.lint(["a.yaml", "b.yaml"], project=None, baseline=base)
    assert {Path(f.file).name for f in report.findings} == {"b.yaml"}


def test_bad_baseline_files(tmp_path):
    with pytest.raises(BaselineError, match="no such file"):
        baselinemod.load(tmp_path / "none.json")
    (tmp_path / "x.json").write_text("{\"kind\": \"other\"}")
    with pytest.raises(BaselineError, match="not a cfgcheck baseline"):
        baselinemod.load(tmp_path / "x.json")
    (tmp_path / "y.json").write_text("{")
    with pytest.raises(BaselineError, match=r"y\.json:1:2: baseline: invalid JSON"):
        baselinemod.load(tmp_path / "y.json")  # where the json module places the error


def test_cli_save_then_compare(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(TODAY)
    base = tmp_path / "known.json"
    r = runner.invoke(app, ["lint", str(cfg), "--no-project", "--save-baseline", str(base)])
    assert r.exit_code == 0 and base.is_file() and "recorded" in r.output
    r = runner.invoke(app, ["lint", str(cfg), "--no-project", "--baseline", str(base)])
    assert r.exit_code == 0 and "in the baseline" in r.output
    r = runner.invoke(app, ["lint", str(cfg), "--no-project", "--baseline", str(tmp_path / "nope.json")])
    assert r.exit_code == 2 and "nope.json:1:1: baseline: no such file" in r.output


def test_project_names_the_baseline(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text("baseline: .cfgcheck-baseline.json\n")
    cfg = tmp_path / "run.yaml"
    cfg.write_text(TODAY)
    baselinemod.save(api.lint([cfg]), tmp_path / ".cfgcheck-baseline.json")
    assert api.lint([cfg]).findings == []
    assert api.lint([cfg], project=None).findings != []


def test_line_numbers_in_finding_data_do_not_enter_the_identity(tmp_path):
    # duplicate-key reports the two line numbers in its data; a shift must not make it new
    cfg = tmp_path / "run.yaml"
    body = "learning_rate: 2.0e-5\nnum_train_epochs: 3\nlearning_rate: 1.0e-4\n"
    cfg.write_text(body)
    base = tmp_path / "b.json"
    first = api.lint([cfg], project=None)
    assert "duplicate-key" in [f.rule for f in first.findings]
    baselinemod.save(first, base)
    cfg.write_text("# header\n" + body)
    shifted = api.lint([cfg], project=None, baseline=base)
    assert shifted.findings == [] and shifted.baselined == len(first.findings)


def test_saving_again_records_everything_even_with_a_project_baseline(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text("baseline: known.json\n")
    cfg = tmp_path / "run.yaml"
    cfg.write_text(TODAY)
    known = tmp_path / "known.json"
    r = runner.invoke(app, ["lint", str(cfg), "--save-baseline", str(known)])
    first = json.loads(known.read_text())["findings"]
    assert r.exit_code == 0 and first
    r = runner.invoke(app, ["lint", str(cfg), "--save-baseline", str(known)])  # the baseline is in use now
    assert json.loads(known.read_text())["findings"] == first
    assert runner.invoke(app, ["lint", str(cfg)]).exit_code == 0
