"""The pictures of a derived run: learning-rate curve with cadence marks, memory bar."""

from __future__ import annotations

from typer.testing import CliRunner

from cfgcheck import api
from cfgcheck.cli import app
from cfgcheck.lrcurve import curve
from cfgcheck.render.pictures import WIDTH, memory_picture, schedule_picture, schedule_series

LORA = """\
model_name_or_path: meta-llama/Llama-2-7b-hf
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
lr_scheduler_type: {sched}
{warmup}
per_device_train_batch_size: 4
gradient_accumulation_steps: 4
num_train_epochs: 2
eval_strategy: steps
eval_steps: 100
save_steps: 250
logging_steps: 10
bf16: true
gradient_checkpointing: true
max_seq_length: 1024
"""


def _plan(tmp_path, sched="cosine", warmup="warmup_steps: 125", **opts):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LORA.format(sched=sched, warmup=warmup))
    ((_, plan),) = api.derive([cfg], project=None, **opts).runs
    return plan


def test_curve_follows_the_schedule_and_the_marks_follow_the_cadence(tmp_path):
    # 20,000 rows / (4 x 4 x 1 GPU) = 1,250 steps per epoch x 2 epochs = 2,500 steps (Trainer ceil rounding)
    plan = _plan(tmp_path, rows=20000)
    series, why = schedule_series(plan)
    assert why is None and series.curve.total_steps == 2500 and series.curve.warmup_steps == 125
    assert series.marks["eval"] == list(range(100, 2501, 100))  # eval_steps 100 -> 25 evaluations
    assert series.marks["save"] == list(range(250, 2501, 250))  # the last step (2,500) is a multiple
    assert len(series.marks["log"]) == 250
    # the drawn values are the curve's own: the peak at the end of warm-up, zero at the end
    c = curve("cosine", total_steps=2500, warmup_steps=125, base_lr=2e-4)
    assert max(c.values) == 1.0 and c.values[125] == 1.0 and c.values[-1] < 1e-5
    lines = schedule_picture(plan)
    assert "2,500 optimizer steps" in lines[0] and "cosine (written)" in lines[0] and "peak 0.0002" in lines[0]
    eval_row = next(l for l in lines if l.strip().startswith("eval |"))
    assert eval_row.count("|") - 1 == len({min(WIDTH - 1, -(-s * WIDTH // 2500) - 1) for s in series.marks["eval"]})
    top_row = lines[1].split("|", 1)[1]
    # the top row (at least 7/8 of the peak) holds only the first quarter of the run: cosine with
    # 125 warm-up steps is above 0.875 up to about step 125 + 0.23 x 2,375 = 671 of 2,500
    assert "█" in top_row[:15] and top_row[20:].strip() == ""


def test_a_constant_schedule_shows_the_warmup_it_ignores(tmp_path):
    plan = _plan(tmp_path, sched="constant", warmup="warmup_steps: 100", rows=2000)
    lines = schedule_picture(plan)
    assert any("100 warm-up steps written, ignored" in l for l in lines)
    assert any(l.startswith("note: constant does not read the warm-up") for l in lines)
    body = [l for l in lines[1:9]]
    assert all(set(l.split("|", 1)[1]) == {"█"} for l in body)  # flat at the peak from step 1


def test_an_unwritten_schedule_is_the_trainer_default_and_says_so(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1.0e-5\nmax_steps: 300\nwarmup_steps: 30\n")
    ((_, plan),) = api.derive([cfg], project=None).runs
    head = schedule_picture(plan)[0]
    assert "linear (not written: the transformers default, assumed)" in head  # TrainingArguments lr_scheduler_type="linear"


def test_no_steps_no_curve(tmp_path):
    plan = _plan(tmp_path)  # no rows: the step count is unknown
    assert schedule_picture(plan) == ["learning rate: not drawn: the number of optimizer steps is unknown (pass --rows, or set max_steps)"]


def test_memory_bar_marks_the_card_and_overflow(tmp_path):
    cfg = tmp_path / "full.yaml"
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1.0e-5\nbf16: true\nper_device_train_batch_size: 1\n")
    ((_, plan),) = api.derive([cfg], project=None, gpu="t4").runs
    head, bar, legend = memory_picture(plan)
    assert "does not fit" in head and "Tesla T4" in head
    inside = bar.strip()[1:-1]
    # the card's 16 GB mark sits at capacity / total of the bar's width
    at = round(plan.capacity_bytes / plan.memory.total_bytes * WIDTH)
    assert inside[at] == "|"
    assert "weights" in legend and "optimizer states" in legend


def test_derive_command_draws_unless_asked_not_to(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LORA.format(sched="linear", warmup="warmup_steps: 50"))
    runner = CliRunner()
    out = runner.invoke(app, ["derive", str(cfg), "--rows", "4000", "--gpu", "a100-40gb", "--no-project"]).output
    assert "learning rate over 500 optimizer steps" in out and "memory per GPU:" in out
    plain = runner.invoke(app, ["derive", str(cfg), "--rows", "4000", "--no-pictures", "--no-project"]).output
    assert "learning rate over" not in plain and "memory per GPU:" not in plain


def _peaks_by_definition(steps, values, total):
    """Each column's highest multiplier, scanning every sample for every column."""
    cols = []
    for col in range(WIDTH):
        lo, hi = col * total / WIDTH, (col + 1) * total / WIDTH
        vals = [v for s, v in zip(steps, values) if lo <= s < hi]
        if not vals:  # no sample in the column: the one nearest its start
            i = min(range(len(steps)), key=lambda k: abs(steps[k] - lo))
            vals = [values[i]]
        cols.append(max(vals))
    return cols


def test_the_column_peaks_are_those_of_their_definition_for_short_and_long_runs():
    from cfgcheck.render.pictures import _column_peaks

    totals = [1, 2, 7, 59, 60, 61, 119, 480, 481, 999, 12_345, 1_000_003, 3 * 10**9 + 11]
    for total in totals:
        for kind, warmup in (("linear", total // 10), ("cosine", 0), ("constant_with_warmup", total // 3),
                             ("cosine_with_restarts", 1)):
            c = curve(kind, total_steps=total, warmup_steps=warmup, base_lr=2e-4,
                      kwargs={"num_cycles": 3} if kind == "cosine_with_restarts" else None, sample=WIDTH * 8)
            assert _column_peaks(c.steps, c.values, total) == _peaks_by_definition(c.steps, c.values, total), (kind, total)


def test_configs_of_one_run_sharing_a_schedule_compute_its_curve_once_and_draw_their_own_copy(tmp_path, monkeypatch):
    from cfgcheck._records import replaced as replace  # the records are plain classes

    from cfgcheck import memo
    from cfgcheck.render import pictures

    calls = []
    monkeypatch.setattr(pictures, "curve", lambda *a, **k: calls.append(k) or curve(*a, **k))
    plan = _plan(tmp_path, rows=20000)
    with memo.scope():
        first, _ = schedule_series(plan)
        second, _ = schedule_series(replace(plan))
        assert len(calls) == 1  # the same kind, steps, warm-up, rate and keywords: once
        assert first.curve == second.curve and first.curve.values is not second.curve.values
        first.curve.values[0] = 99.0  # one picture's copy is its own
        assert second.curve.values[0] != 99.0
        # a rate that differs only in its type or sign is another curve
        schedule_series(replace(plan, learning_rate=-0.0))
        schedule_series(replace(plan, learning_rate=0.0))
        assert len(calls) == 3
    schedule_series(plan)  # outside a run nothing is remembered
    assert len(calls) == 4


def test_a_curve_drawn_once_per_run_gives_each_plan_its_own_marks(tmp_path):
    # two configs with the same schedule share one drawn curve inside a run (cfgcheck.memo); their
    # cadence rows stay their own, and each picture is the one drawn without sharing
    from cfgcheck.memo import scope

    one = tmp_path / "a"
    two = tmp_path / "b"
    one.mkdir()
    two.mkdir()
    (one / "run.yaml").write_text(LORA.format(sched="cosine", warmup="warmup_steps: 125"))
    (two / "run.yaml").write_text(LORA.format(sched="cosine", warmup="warmup_steps: 125")
                                  .replace("eval_steps: 100", "eval_steps: 400"))
    plans = [p for _f, p in api.derive([one / "run.yaml", two / "run.yaml"], project=None, rows=20000).runs]
    alone = [schedule_picture(p) for p in plans]
    with scope():
        shared = [schedule_picture(p) for p in plans]
    assert shared == alone
    assert alone[0][:9] == alone[1][:9]  # heading and the eight rows of the plot
    assert alone[0] != alone[1]  # the eval row: every 100 steps, every 400 steps
