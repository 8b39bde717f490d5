"""The Python API: findings as data for an in-memory sweep, the guard for launch scripts, and a
cheap ``import cfgcheck``."""

from __future__ import annotations

import itertools
import math
import subprocess
import sys
from pathlib import Path

import pytest

import cfgcheck
from cfgcheck.findings import Severity

ROOT = Path(__file__).resolve().parents[1]


def sweep():
    """A generated grid, as a sweep script would build it: ranks x alphas x learning rates."""
    for r, alpha, lr in itertools.product((8, 16, 64), (8, 16, 32), (2.0e-4, 3.0e-3)):
        yield {"model_name_or_path": "tidewater/planner-1b", "use_peft": True, "lora_r": r,
               "lora_alpha": alpha, "learning_rate": lr, "per_device_train_batch_size": 4,
               "gradient_accumulation_steps": 4, "bf16": True}


def test_sweep_findings_follow_the_lora_scale():
    flagged = set()
    for i, point in enumerate(sweep()):
        fr = cfgcheck.lint_mapping(point, f"sweep/point-{i}.json", gpu="a100-80gb")
        assert fr.problem is None and not fr.internal
        for f in fr.findings:
            if f.rule == "lora-scale-below-one":
                assert f.key == "lora_alpha" and f.data["rank"] == point["lora_r"]
                # LoRA paper sec. 4.1 / PEFT LoraLayer: scaling = lora_alpha / r
                assert math.isclose(f.data["scale"], point["lora_alpha"] / point["lora_r"], rel_tol=1e-3)
                flagged.add((point["lora_r"], point["lora_alpha"]))
    # alpha/r < 1 exactly for these pairs (LoRA paper sec. 4.1)
    assert flagged == {(r, a) for r in (8, 16, 64) for a in (8, 16, 32) if a / r < 1}


def test_guard_passes_a_good_point_and_rejects_a_bad_one():
    good = dict(next(sweep()), lora_r=16, lora_alpha=32)
    assert all(f.severity < Severity.ERROR for f in cfgcheck.guard(good, gpu="a100-80gb"))
    with pytest.raises(cfgcheck.ConfigRejected) as exc:  # the same bf16 point on a T4
        cfgcheck.guard(good, gpu="t4", name="sweep/point-7.json")  # T4: compute capability 7.5 < 8.0
    err = exc.value
    assert [f.rule for f in err.findings] == ["precision-unsupported-on-gpu"]
    text = str(err)
    assert text.startswith("cfgcheck rejected the config: 1 problem at error or above")
    assert "sweep/point-7.json:" in text and "[precision-unsupported-on-gpu]" in text and "hint:" in text


def test_guard_gate_warning_and_files(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")  # a warning (scale 0.5)
    below = cfgcheck.guard(cfg, project=None)
    assert [f.rule for f in below if f.severity >= Severity.WARNING] == ["lora-scale-below-one"]
    with pytest.raises(cfgcheck.ConfigRejected) as exc:
        cfgcheck.guard(cfg, gate="warning", project=None)
    assert exc.value.gate is Severity.WARNING
    broken = tmp_path / "broken.yaml"
    broken.write_text("lora_r: [16\n")
    with pytest.raises(cfgcheck.ConfigRejected, match="input error: invalid YAML"):
        cfgcheck.guard([broken], project=None)


def test_lint_text_and_exit_code():
    fr = cfgcheck.lint_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n", "inline.yaml")
    assert [(f.rule, f.line, f.column) for f in fr.findings if f.severity >= Severity.WARNING] == [
        ("lora-scale-below-one", 3, 13)]
    report = cfgcheck.Report(files=[fr])
    assert cfgcheck.exit_code(report) == cfgcheck.EXIT_FINDINGS
    assert cfgcheck.exit_code(report, Severity.ERROR) == cfgcheck.EXIT_CLEAN


def test_bad_option_values_are_value_errors():
    with pytest.raises(ValueError, match="a100-80gb"):
        cfgcheck.lint_mapping({"lora_r": 16}, gpu="a100-8gb")
    with pytest.raises(ValueError, match="unknown severity"):
        cfgcheck.lint_mapping({"lora_r": 16}, severity={"duplicate-key": "fatal"})


def test_import_is_cheap_and_the_api_loads_on_use():
    code = ("import sys, cfgcheck; heavy = [m for m in ('cfgcheck.api', 'cfgcheck.engine', 'yaml', "
            "'ruamel', 'jsonschema', 'typer') if m in sys.modules]; print(heavy); "
            "cfgcheck.guard; print('cfgcheck.api' in sys.modules)")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert p.returncode == 0, p.stderr
    assert p.stdout.split("\n")[:2] == ["[]", "True"]
    assert sorted(dir(cfgcheck)) == sorted(cfgcheck.__all__)
    with pytest.raises(AttributeError):
        cfgcheck.no_such_name


def test_a_run_that_raises_leaves_nothing_remembered_for_the_next_run(tmp_path):
    # A run remembers what it looked up on disk (memo.py) until it ends. A run that ends in an
    # exception held by its caller (here: a baseline that does not exist) must still end, or the
    # next run would see a checkpoint folder as it was before it changed.
    import json

    from cfgcheck import api
    from cfgcheck.baseline import BaselineError

    from .helpers import LLAMA2_7B_CONFIG, SMALLER_LLAMA_CONFIG

    ckpt = tmp_path / "ckpt"
    ckpt.mkdir()
    shape = LLAMA2_7B_CONFIG
    (ckpt / "config.json").write_text(json.dumps(shape))
    cfg = tmp_path / "run.yaml"
    cfg.write_text(f"model_name_or_path: {ckpt}\nlearning_rate: 2.0e-5\nper_device_train_batch_size: 8\n"
                   "max_seq_length: 4096\n")
    with pytest.raises(BaselineError) as held:
        api.lint([cfg], project=None, gpu="t4", baseline=tmp_path / "none.json")
    before = sorted(f.message for f in api.lint([cfg], project=None, gpu="t4").findings)
    (ckpt / "config.json").write_text(json.dumps(SMALLER_LLAMA_CONFIG))
    after = sorted(f.message for f in api.lint([cfg], project=None, gpu="t4").findings)
    assert held.value is not None and before and after != before
