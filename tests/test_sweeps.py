"""Sweeps expand to runs: the combinations are linted and the failing ones named at the sweep line.

Sweep files follow the shape of W&B sweep configurations (program, method, parameters with
values / value / min / max; from memory). Organisations and tasks are invented.
"""

from __future__ import annotations

from cfgcheck import api, engine
from cfgcheck.sweep import ALL_UP_TO, MAX_RUNS, _sample, is_sweep

BASE = "model_name_or_path: meta-llama/Llama-2-7b-hf\nper_device_train_batch_size: 4\nbf16: true\n"
SWEEP = """\
program: train.py
method: grid
metric:
  name: eval/loss
  goal: minimize
command: [python, train.py, --config, base.yaml]
parameters:
  learning_rate:
    values: [1.0e-5, 2.0e-5, 1.0e-4]
  lr_scheduler_type:
    values: [cosine, constant]
  warmup_steps:
    value: 100
"""


def _lint(tmp_path, sweep=SWEEP, base=BASE):
    (tmp_path / "base.yaml").write_text(base)
    path = tmp_path / "sweep.yaml"
    path.write_text(sweep)
    report = engine.lint_file(path)
    assert report.problem is None and not report.internal
    return path, report


def test_a_sweep_file_is_recognised():
    import yaml

    assert is_sweep(yaml.safe_load(SWEEP))
    assert not is_sweep({"parameters": {"lr": 1}})
    assert not is_sweep({"learning_rate": 1.0e-5})


def test_failing_combinations_are_named_at_the_sweep_line(tmp_path):
    path, report = _lint(tmp_path)
    lr = [f for f in report.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word == "warning"]
    # Llama 2 7B (6.74B parameters, Touvron et al. 2023): only the 1e-4 runs are too hot
    assert len(lr) == 1
    assert lr[0].file == str(path) and lr[0].line == 9  # the line of `values: [..., 1.0e-4]`
    assert lr[0].data["sweep"].startswith("in 2 of 6 runs linted (6 in the sweep)")
    assert "learning_rate=0.0001" in lr[0].data["sweep"]
    const = [f for f in report.findings if f.rule == "constant-schedule-ignores-warmup"]
    assert len(const) == 1 and const[0].line == 11 and "in 3 of 6" in const[0].data["sweep"]
    assert all(f.fix is None for f in report.findings)


def test_a_clean_sweep_has_no_warnings(tmp_path):
    clean = SWEEP.replace("1.0e-4]", "3.0e-5]").replace("constant]", "linear]")
    _path, report = _lint(tmp_path, clean)
    assert [f for f in report.findings if f.severity.word != "info"] == []


def test_min_max_parameters_are_linted_at_both_ends(tmp_path):
    sweep = SWEEP.replace("    values: [1.0e-5, 2.0e-5, 1.0e-4]", "    min: 1.0e-5\n    max: 2.0e-4")
    _path, report = _lint(tmp_path, sweep)
    lr = [f for f in report.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word == "warning"]
    assert lr and "learning_rate=0.0002" in lr[0].data["sweep"]


def test_many_combinations_are_sampled_with_the_extremes():
    picks = _sample([5, 5, 5])
    assert len(picks) == MAX_RUNS
    assert (0, 0, 0) in picks and (4, 4, 4) in picks
    assert (4, 0, 0) in picks and (0, 4, 0) in picks and (0, 0, 4) in picks
    assert len(set(picks)) == len(picks)
    assert _sample([5, 5, 5]) == picks  # the same sample every run
    assert len(_sample([2, 2, 2, 2])) == 16 <= ALL_UP_TO  # few: all of them


def test_list_valued_overrides_expand_to_runs(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(BASE)
    report = api.lint([cfg], project=None, overrides=["learning_rate=1e-5,1e-4"])
    hits = [f for f in report.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word == "warning"]
    assert len(hits) == 1 and hits[0].data["sweep"] == "in 1 of 2 runs linted (2 in the sweep): learning_rate=0.0001"


def test_the_sweep_parameters_alone_are_trainer_arguments(tmp_path):
    sweep = SWEEP.replace("command: [python, train.py, --config, base.yaml]\n", "")
    sweep += "  model_name_or_path:\n    value: meta-llama/Llama-2-7b-hf\n"
    path = tmp_path / "sweep.yaml"
    path.write_text(sweep)
    report = engine.lint_file(path)
    assert report.layout == "trainer"
    assert [f for f in report.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word == "warning"]
