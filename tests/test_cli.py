"""The command line: exit codes, output formats, and bad input that does not stop the run."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from cfgcheck.cli import app

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"
CLEAN = ROOT / "fixtures" / "clean"
runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_clean_configs_exit_zero():
    r = run("lint", CLEAN, "--gpu", "t4", "--rows", "1000")
    assert r.exit_code == 0, r.output
    assert "0 errors, 0 warnings" in r.output


def test_demo_configs_show_every_core_rule():
    r = run("lint", DEMO, "--gpu", "t4", "--rows", "1000", "--format", "json")
    assert r.exit_code == 1
    data = json.loads(r.output)
    rules = {f["rule"] for f in data["findings"]}
    assert {"lora-scale-below-one", "full-finetune-lr-too-high", "chat-format-untrained-embeddings",
            "precision-unsupported-on-gpu", "global-batch-mismatch", "bf16-and-fp16-both-on",
            "cadence-longer-than-run", "duplicate-key", "yaml-version-dependent-value",
            "value-type-mismatch"} <= rules
    for f in data["findings"]:
        assert set(f) >= {"rule", "severity", "file", "line", "column", "key", "message", "hint"}
        assert f["severity"] in ("error", "warning", "info") and f["line"] >= 1 and f["column"] >= 1


def test_text_lines_follow_the_gnu_form():
    r = run("lint", DEMO / "harborlight-support-lora.yaml")
    first = r.output.splitlines()[0]
    path, line, col, rest = first.split(":", 3)
    assert path.endswith("harborlight-support-lora.yaml") and line.isdigit() and col.isdigit()
    assert rest.startswith(" warning: ") or rest.startswith(" error: ")
    assert r.output.splitlines()[1].startswith("    hint: ")


def test_json_key_paths_as_written():
    r = run("lint", DEMO / "fjordline-full-7b.yaml", "--gpu", "t4", "--format", "json")
    keys = {f["key"] for f in json.loads(r.output)["findings"]}
    assert {"training.learning_rate", "training.bf16", "training.tf32"} <= keys


def test_broken_file_is_reported_and_the_others_still_linted(tmp_path):
    (tmp_path / "a-broken.yaml").write_text("learning_rate: [1, 2\nbf16: true\n")
    (tmp_path / "b-good.yaml").write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    r = run("lint", tmp_path)
    assert r.exit_code == 2
    lines = r.output.splitlines()
    assert any(l.startswith(f"{tmp_path / 'a-broken.yaml'}:") and "input error: invalid YAML" in l for l in lines)
    assert any("lora-scale-below-one" in l for l in lines)
    assert "Traceback" not in r.output


def test_unknown_gpu_is_a_usage_error():
    r = run("lint", CLEAN, "--gpu", "a100-8gb")
    assert r.exit_code == 2 and "a100-80gb" in r.output


def test_missing_path_is_input_error(tmp_path):
    r = run("lint", tmp_path / "nope.yaml")
    assert r.exit_code == 2 and "no such file" in r.output


def test_info_is_hidden_by_default_and_shown_on_request(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text("learning_rate: 2.0e-5\nbf16: true\n")
    r = run("lint", cfg)  # no --gpu: the precision rule says it could not judge, at info level
    assert r.exit_code == 0 and ": info:" not in r.output and "info not shown" in r.output
    r = run("lint", cfg, "--show", "info")
    assert r.exit_code == 0 and ": info:" in r.output and "--gpu" in r.output


def test_rules_and_describe():
    r = run("rules")
    assert r.exit_code == 0 and "lora-scale-below-one" in r.output
    r = run("describe", "lora-scale-below-one")
    assert r.exit_code == 0 and "rsLoRA" in r.output and "Example (bad)" in r.output
    r = run("describe", "lora-scale-below-on")
    assert r.exit_code == 2 and "lora-scale-below-one" in r.output


def test_gpus_lists_the_table():
    r = run("gpus")
    assert r.exit_code == 0 and "a100-80gb" in r.output and "cc 8.0" in r.output


def test_module_entry_point_in_a_subprocess():
    env = dict(os.environ, NO_COLOR="1")
    p = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(DEMO / "larkspur-zero2.json")],
                       capture_output=True, text=True, env=env, cwd=ROOT)
    assert p.returncode == 1 and "bf16-and-fp16-both-on" in p.stdout and p.stderr == ""
