"""Step arithmetic against worked examples and the transformers Trainer's rounding."""

from __future__ import annotations

from cfgcheck.schedule import derive, resolve_interval, steps_per_epoch


def test_worked_example_1000_rows():
    # Worked example (common practice, no source): 1,000 rows, per-device 8, accumulation 4, 1 GPU
    # -> effective batch 32, 32 optimizer steps per epoch; eval every quarter of the run = every 8 steps.
    s = derive({"batch.per_device": 8, "batch.accumulation": 4, "optim.epochs": 1}, gpus=1, rows=1000,
               use_trainer_defaults=True)
    assert s.effective_batch == 32
    assert s.steps_per_epoch == 32 and s.total_steps == 32
    assert resolve_interval(0.25, s.total_steps) == 8


def test_trainer_ceil_rounding():
    # REFERENCES.md sec. 9 (transformers Trainer set_initial_training_values, 4.57/5.x): 1000 examples,
    # per-device 8, GA 16, 3 epochs -> 125 batches, 8 update steps per epoch, max_steps 24
    # (the old floor rounding would give 7 and 21).
    assert steps_per_epoch(1000, 8, 16) == 8
    s = derive({"batch.per_device": 8, "batch.accumulation": 16, "optim.epochs": 3}, gpus=1, rows=1000,
               use_trainer_defaults=False)
    assert s.total_steps == 24


def test_fraction_of_run():
    # REFERENCES.md sec. 9: logging_steps 0.1 with max_steps 1875 -> ceil(187.5) = 188
    assert resolve_interval(0.1, 1875) == 188


def test_max_steps_overrides_epochs_and_gpus_divide_rows():
    s = derive({"batch.per_device": 4, "batch.accumulation": 2, "optim.epochs": 3, "optim.max_steps": 50},
               gpus=4, rows=10_000, use_trainer_defaults=False)
    assert s.total_steps == 50 and s.max_steps_override
    assert s.effective_batch == 32
    # 10,000 rows over 4 processes -> 2,500 each -> 625 batches -> ceil(625 / 2) = 313 (Trainer rounding)
    assert s.steps_per_epoch == 313


def test_trainer_defaults_fill_gaps():
    # transformers TrainingArguments defaults: per_device_train_batch_size 8, gradient_accumulation_steps 1,
    # num_train_epochs 3 (REFERENCES.md sec. 9)
    s = derive({}, gpus=None, rows=800, use_trainer_defaults=True)
    assert (s.per_device, s.accumulation, s.total_steps) == (8, 1, 300)
    assert set(s.defaults_used) >= {"batch.per_device", "batch.accumulation", "optim.epochs"}
