"""'Not checked' notes: counted once per run in text output, listed per file only when asked,
and kept out of SARIF unless asked."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from typer.testing import CliRunner

from cfgcheck import api
from cfgcheck.cli import app
from cfgcheck.render import notes

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()

# three full fine-tunes of models no offline source knows, two of them the same name, and one
# that names no model: the memory rule cannot judge any of them
RUNS = {
    "a.yaml": "model_name_or_path: acme/unknown-7b\nlearning_rate: 2.0e-5\nbf16: true\n",
    "b.yaml": "model_name_or_path: acme/unknown-7b\nlearning_rate: 2.0e-5\nbf16: true\n",
    "c.yaml": "model_name_or_path: acme/other-3b\nlearning_rate: 2.0e-5\nbf16: true\n",
    "d.yaml": "learning_rate: 2.0e-5\nbf16: true\nper_device_train_batch_size: 4\n",
}


def _tree(tmp_path: Path) -> Path:
    for name, text in RUNS.items():
        (tmp_path / name).write_text(text)
    return tmp_path


def test_notes_are_grouped_by_rule_and_reason_with_file_and_name_counts(tmp_path):
    report = api.lint([_tree(tmp_path)], project=None, gpu="a100-80gb")
    groups = {(g.rule, g.reason): g for g in notes.summarise(report.findings)}
    memory = groups[("memory-exceeds-gpu", "model not known offline")]
    assert len(memory.files) == 4 and memory.names == {"acme/unknown-7b", "acme/other-3b"}
    line = next(l for l in notes.lines(report.findings) if "memory-exceeds-gpu" in l)
    assert line == "not checked: memory-exceeds-gpu for 4 files: model not known offline (2 distinct names)"


def test_text_output_counts_notes_and_lists_them_per_file_only_with_show_info(tmp_path):
    folder = _tree(tmp_path)
    plain = runner.invoke(app, ["lint", str(folder), "--gpu", "a100-80gb", "--no-project", "--no-frame"])
    assert "cfgcheck: not checked: memory-exceeds-gpu for 4 files" in plain.output
    assert ": info: memory against the GPU not checked" not in plain.output  # no per-file lines
    full = runner.invoke(app, ["lint", str(folder), "--gpu", "a100-80gb", "--no-project", "--no-frame",
                               "--show", "info"])
    assert full.output.count(": info: memory against the GPU not checked") == 4
    assert "cfgcheck: not checked: memory-exceeds-gpu for 4 files" in full.output


def test_sarif_leaves_notes_out_unless_asked_and_json_keeps_them(tmp_path):
    folder = _tree(tmp_path)
    args = ["lint", str(folder), "--gpu", "a100-80gb", "--no-project"]
    plain = json.loads(runner.invoke(app, args + ["--format", "sarif"]).output)
    asked = json.loads(runner.invoke(app, args + ["--format", "sarif", "--sarif-not-checked"]).output)
    as_json = json.loads(runner.invoke(app, args + ["--format", "json"]).output)

    def judged(results):
        return [r for r in results if r["properties"]["data"].get("judged") is False]

    assert judged(plain["runs"][0]["results"]) == []
    assert len(judged(asked["runs"][0]["results"])) >= 4
    assert len(plain["runs"][0]["results"]) < len(asked["runs"][0]["results"])
    assert sum(1 for f in as_json["findings"] if f["data"].get("judged") is False) == \
        len(judged(asked["runs"][0]["results"]))


def test_the_direct_command_line_path_knows_the_sarif_option(tmp_path):
    folder = _tree(tmp_path)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    args = ["lint", str(folder), "--format", "sarif", "--sarif-not-checked", "--no-project"]
    direct = subprocess.run([sys.executable, "-m", "cfgcheck", *args], capture_output=True, text=True,
                            env=env, timeout=120)
    via_typer = subprocess.run([sys.executable, "-c", "from cfgcheck.cli import app; app()", *args],
                               capture_output=True, text=True, env=env, timeout=120)
    assert (direct.returncode, direct.stdout) == (via_typer.returncode, via_typer.stdout)
    assert direct.stdout and '"judged": false' in direct.stdout


def test_a_finding_about_a_value_is_never_a_note():
    report = api.lint_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n", "x.yaml")
    assert [f.rule for f in report.findings if not notes.is_note(f) and f.severity.word == "warning"] == \
        ["lora-scale-below-one"]


def test_a_linked_file_reason_groups_across_file_names():
    from types import SimpleNamespace as NS

    def note(file, linked):
        return NS(rule="deepspeed-file-contradicts-config", file=file,
                  data={"judged": False, "linked": linked,
                        "reason": f"the DeepSpeed file {linked} was not found (looked in /srv/{file})"})

    found = [note("a.yaml", "ds/z3.json"), note("b.yaml", "ds/z2.json"), note("c.yaml", "ds/z3.json")]
    (g,) = notes.summarise(found)
    assert g.reason == "the DeepSpeed file was not found" and len(g.files) == 3
    assert g.names == {"ds/z3.json", "ds/z2.json"}


def test_memory_rule_without_a_gpu_says_so_without_estimating(tmp_path, monkeypatch):
    """With no card to compare with, the memory rule works out no estimate (it would change no
    verdict): its note says a GPU is missing and where the estimate is shown; with --gpu the
    same config is estimated and judged."""
    from cfgcheck.checks import memory as memory_check

    cfg = tmp_path / "run.yaml"  # a known model, fully tuned: estimable
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
                   "per_device_train_batch_size: 1\nbf16: true\n")
    calls = []
    real = memory_check.derive_plan
    monkeypatch.setattr(memory_check, "derive_plan", lambda *a, **k: calls.append(1) or real(*a, **k))
    report = api.lint([cfg], project=None, cache=False)
    notes_ = [f for f in report.findings if f.rule == "memory-exceeds-gpu"]
    assert [f.severity.word for f in notes_] == ["info"] and calls == []
    assert "no GPU named (--gpu NAME)" in notes_[0].message
    assert "cfgcheck derive shows the estimate" in notes_[0].message
    judged = api.lint([cfg], project=None, cache=False, gpu="rtx-4090")
    assert calls  # estimated once a card is named
    verdicts = [f for f in judged.findings if f.rule == "memory-exceeds-gpu"]
    # 7B fully tuned: 16 bytes a parameter of model states alone, ~108 GB > 24 GB (ZeRO paper
    # sec. 3.1); a warning, as the sequence length is assumed
    assert len(verdicts) == 1 and "does not fit the" in verdicts[0].message
