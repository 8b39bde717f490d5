"""Our learning-rate curve against transformers' own schedulers, step by step.

The reference is ``transformers.get_scheduler`` (the function the Trainer builds its scheduler
with from ``lr_scheduler_type`` / ``lr_scheduler_kwargs``) on a one-parameter torch optimizer:
the learning rate in the optimizer's param group before each optimizer step is the rate that
step uses.
"""

from __future__ import annotations

import warnings

import pytest

torch = pytest.importorskip("torch")
transformers = pytest.importorskip("transformers")

from cfgcheck.lrcurve import SCHEDULES, curve  # noqa: E402

CASES = [
    ("linear", 100, 10, {}), ("linear", 7, 0, {}),
    ("cosine", 100, 10, {}), ("cosine", 50, 0, {"num_cycles": 1.5}),
    ("cosine_with_restarts", 120, 12, {"num_cycles": 3}),
    ("polynomial", 100, 5, {"lr_end": 1e-5, "power": 2.0}), ("polynomial", 40, 0, {}),
    ("constant", 30, 0, {}),
    ("constant_with_warmup", 60, 15, {}),
    ("inverse_sqrt", 200, 20, {}), ("inverse_sqrt", 100, 10, {"timescale": 40}),
    ("cosine_with_min_lr", 100, 10, {"min_lr_rate": 0.1}), ("cosine_with_min_lr", 80, 8, {"min_lr": 2e-5}),
    ("cosine_warmup_with_min_lr", 100, 10, {"min_lr_rate": 0.1}),
    ("warmup_stable_decay", 100, 10, {"num_decay_steps": 30}),
    ("warmup_stable_decay", 100, 10, {"num_decay_steps": 20, "decay_type": "linear", "warmup_type": "cosine", "min_lr_ratio": 0.05}),
]


def _reference(kind, total, warmup, kwargs, base_lr):
    param = torch.nn.Parameter(torch.zeros(1))
    opt = torch.optim.SGD([param], lr=base_lr)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sched = transformers.get_scheduler(kind, opt, num_warmup_steps=warmup, num_training_steps=total,
                                           scheduler_specific_kwargs=dict(kwargs))
    out = []
    for _ in range(total):
        out.append(opt.param_groups[0]["lr"])
        opt.step()
        sched.step()
    return out


@pytest.mark.parametrize("kind,total,warmup,kwargs", CASES, ids=lambda v: str(v))
def test_curve_equals_the_reference_scheduler_at_every_step(kind, total, warmup, kwargs):
    base_lr = 1e-4
    ours = curve(kind, total_steps=total, warmup_steps=warmup, base_lr=base_lr, kwargs=kwargs).lrs()
    ref = _reference(kind, total, warmup, kwargs, base_lr)
    assert len(ours) == len(ref) == total
    for step, (a, b) in enumerate(zip(ours, ref)):
        assert a == pytest.approx(b, rel=1e-9, abs=1e-15), f"step {step}"


def test_every_step_driven_schedule_the_trainer_accepts_is_compared():
    names = {c[0] for c in CASES}
    step_driven = set(SCHEDULES) - {"reduce_lr_on_plateau", "greedy"}  # metric-driven: no step formula
    assert step_driven <= names
    assert set(SCHEDULES) == {s.value for s in transformers.SchedulerType}
