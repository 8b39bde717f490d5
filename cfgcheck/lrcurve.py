"""The learning rate at every optimizer step, for the schedules the supported trainers accept.

The step count and the warm-up come from the run's schedule derivation (``plan.derive_plan``, which
uses ``schedule.derive_for``); this module only turns them into the multiplier the scheduler
applies at each step. The formulas are those of transformers' ``optimization.py`` (5.x, identical
in 4.46+ for the schedules both have), which the Trainer builds through ``get_scheduler`` from
``lr_scheduler_type`` and ``lr_scheduler_kwargs``; a reference test compares every step with
``get_scheduler`` itself. The learning rate used at optimizer step ``k`` (0-based) is
``base_lr * multiplier(k)``: ``LambdaLR`` starts at step 0 and advances once per optimizer step.
"""

from __future__ import annotations

import functools
import math
from types import MappingProxyType
from typing import Any, Callable

# the lr_scheduler_type words the transformers Trainer accepts (trainer_utils.SchedulerType, 5.x)
SCHEDULES = ("linear", "cosine", "cosine_with_restarts", "polynomial", "constant",
             "constant_with_warmup", "inverse_sqrt", "reduce_lr_on_plateau", "cosine_with_min_lr",
             "cosine_warmup_with_min_lr", "warmup_stable_decay", "greedy")
# schedules whose value depends on the evaluation metric, not on the step: drawn flat, and said
METRIC_DRIVEN = ("reduce_lr_on_plateau", "greedy")
# schedules that never read the warm-up (get_constant_schedule takes no warm-up argument)
IGNORE_WARMUP = ("constant", "reduce_lr_on_plateau", "greedy")


class Curve:
    """The multiplier of the base learning rate at each optimizer step (a record class written
    out: ``cfgcheck._records``)."""

    kind: str
    base_lr: float | None
    total_steps: int
    warmup_steps: int
    steps: list[int]  # the optimizer steps computed (all of them, or an even sample)
    values: list[float]  # the multiplier at each of ``steps``
    notes: list[str]
    ignored_warmup: int  # a warm-up written for a schedule that does not read it

    __slots__ = ("kind", "base_lr", "total_steps", "warmup_steps", "steps", "values", "notes", "ignored_warmup")

    def __init__(self, kind, base_lr, total_steps, warmup_steps, steps, values, notes=None, ignored_warmup=0):
        self.kind = kind
        self.base_lr = base_lr
        self.total_steps = total_steps
        self.warmup_steps = warmup_steps
        self.steps = steps
        self.values = values
        self.notes = [] if notes is None else notes
        self.ignored_warmup = ignored_warmup

    def __repr__(self):
        return (f"{type(self).__qualname__}(kind={self.kind!r}, base_lr={self.base_lr!r}, "
                f"total_steps={self.total_steps!r}, warmup_steps={self.warmup_steps!r}, steps={self.steps!r}, "
                f"values={self.values!r}, notes={self.notes!r}, ignored_warmup={self.ignored_warmup!r})")

    def _fields(self):
        return (self.kind, self.base_lr, self.total_steps, self.warmup_steps, self.steps, self.values,
                self.notes, self.ignored_warmup)

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return self._fields() == other._fields()
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    def lrs(self) -> list[float] | None:
        """The learning rate at each of ``steps`` (None without a base learning rate)."""
        if self.base_lr is None:
            return None
        return [self.base_lr * v for v in self.values]


def _warm(step: int, warmup: int) -> float:
    return float(step) / float(max(1, warmup))


def _linear(step, *, warmup, total, **_):
    if step < warmup:
        return _warm(step, warmup)
    return max(0.0, float(total - step) / float(max(1, total - warmup)))


def _cosine(step, *, warmup, total, num_cycles=0.5, **_):
    if step < warmup:
        return _warm(step, warmup)
    progress = float(step - warmup) / float(max(1, total - warmup))
    return max(0.0, 0.5 * (1.0 + math.cos(math.pi * float(num_cycles) * 2.0 * progress)))


def _cosine_restarts(step, *, warmup, total, num_cycles=1, **_):
    if step < warmup:
        return _warm(step, warmup)
    progress = float(step - warmup) / float(max(1, total - warmup))
    if progress >= 1.0:
        return 0.0
    return max(0.0, 0.5 * (1.0 + math.cos(math.pi * ((float(num_cycles) * progress) % 1.0))))


def _polynomial(step, *, warmup, total, base_lr, lr_end=1e-7, power=1.0, **_):
    if step < warmup:
        return _warm(step, warmup)
    if step > total:
        return lr_end / base_lr
    pct_remaining = 1 - (step - warmup) / (total - warmup)
    return ((base_lr - lr_end) * pct_remaining ** power + lr_end) / base_lr


def _constant(step, **_):
    return 1.0


def _constant_warmup(step, *, warmup, **_):
    if step < warmup:
        return _warm(step, warmup)
    return 1.0


def _inverse_sqrt(step, *, warmup, timescale=None, **_):
    timescale = timescale if timescale is not None else (warmup or 10_000)
    if step < warmup:
        return _warm(step, warmup)
    shift = timescale - warmup
    return 1.0 / math.sqrt((step + shift) / timescale)


def _min_lr_rate(base_lr, min_lr=None, min_lr_rate=None) -> float:
    if min_lr is not None and min_lr_rate is not None:
        raise ValueError("only one of min_lr and min_lr_rate may be set")
    if min_lr is not None:
        return min_lr / base_lr
    if min_lr_rate is None:
        raise ValueError("cosine_with_min_lr needs min_lr or min_lr_rate in lr_scheduler_kwargs")
    return min_lr_rate


def _cosine_min_lr(step, *, warmup, total, base_lr, num_cycles=0.5, min_lr=None, min_lr_rate=None, **_):
    rate = _min_lr_rate(base_lr, min_lr, min_lr_rate)
    if step < warmup:
        return _warm(step, warmup)
    progress = float(step - warmup) / float(max(1, total - warmup))
    factor = 0.5 * (1.0 + math.cos(math.pi * float(num_cycles) * 2.0 * progress))
    return max(0, factor * (1 - rate) + rate)


def _cosine_warmup_min_lr(step, *, warmup, total, base_lr, num_cycles=0.5, min_lr=None,
                          min_lr_rate=None, warmup_lr_rate=None, **_):
    rate = _min_lr_rate(base_lr, min_lr, min_lr_rate)
    s, w, t = float(step), float(warmup), float(total)
    if s < w:
        if warmup_lr_rate is None:
            return (s + 1.0) / max(1.0, w)
        return warmup_lr_rate + (1.0 - warmup_lr_rate) * s / max(1, w - 1)
    progress = (s - w + 1.0) / max(1.0, t - w)
    factor = 0.5 * (1.0 + math.cos(math.pi * num_cycles * 2.0 * progress))
    return max(0, factor * (1 - rate) + rate)


def _wsd(step, *, warmup, total, num_decay_steps=None, num_stable_steps=None, warmup_type="linear",
         decay_type="cosine", min_lr_ratio=0.0, num_cycles=0.5, **_):
    if num_decay_steps is None:
        raise ValueError("warmup_stable_decay needs num_decay_steps in lr_scheduler_kwargs")
    if num_stable_steps is None:
        num_stable_steps = total - warmup - num_decay_steps
    shapes = {"linear": lambda p: p, "cosine": lambda p: 0.5 * (1.0 - math.cos(math.pi * p)),
              "1-sqrt": lambda p: 1.0 - math.sqrt(1.0 - p)}
    if step < warmup:
        progress = float(step) / float(max(1, warmup))
        return max(0.0, shapes[warmup_type](progress) * (1.0 - min_lr_ratio) + min_lr_ratio)
    if step < warmup + num_stable_steps:
        return 1.0
    if step < warmup + num_stable_steps + num_decay_steps:
        progress = float(step - warmup - num_stable_steps) / float(max(1, num_decay_steps))
        decay = {"linear": lambda p: 1.0 - p,
                 "cosine": lambda p: 0.5 * (1.0 + math.cos(math.pi * float(num_cycles) * 2.0 * p)),
                 "1-sqrt": lambda p: 1.0 - math.sqrt(p)}[decay_type](progress)
        return max(0.0, decay * (1.0 - min_lr_ratio) + min_lr_ratio)
    return min_lr_ratio


_FORMULAS: MappingProxyType[str, Callable[..., float]] = MappingProxyType({
    "linear": _linear, "cosine": _cosine, "cosine_with_restarts": _cosine_restarts,
    "polynomial": _polynomial, "constant": _constant, "constant_with_warmup": _constant_warmup,
    "inverse_sqrt": _inverse_sqrt, "reduce_lr_on_plateau": _constant,
    "cosine_with_min_lr": _cosine_min_lr, "cosine_warmup_with_min_lr": _cosine_warmup_min_lr,
    "warmup_stable_decay": _wsd, "greedy": _constant,
})
# other spellings of the same schedules (recipe runners, torchtune component names)
_ALIASES = MappingProxyType({"cosine_with_warmup": "cosine", "get_cosine_schedule_with_warmup": "cosine",
            "wsd": "warmup_stable_decay", "constant_schedule_with_warmup": "constant_with_warmup",
            "linear_with_warmup": "linear"})
MAX_STEPS_DRAWN = 1_000_000  # a longer run is drawn from a sample of its steps


def schedule_kind(word: Any) -> str | None:
    """Our name for a scheduler word, or None when it is not one we can draw."""
    if not isinstance(word, str):
        return None
    w = word.strip().lower().rsplit(".", 1)[-1]
    w = _ALIASES.get(w, w)
    return w if w in _FORMULAS else None


def curve(kind: str, *, total_steps: int, warmup_steps: int = 0, base_lr: float | None = None,
          kwargs: dict | None = None, sample: int | None = None) -> Curve:
    """The multiplier at each optimizer step (or at ``sample`` evenly spread steps).

    ``kwargs`` are the trainer's ``lr_scheduler_kwargs``. Raises ValueError for a schedule that
    cannot be built from them (as the trainer would at launch)."""
    kind = schedule_kind(kind) or kind
    if kind not in _FORMULAS:
        raise ValueError(f"unknown schedule {kind!r}")
    total = max(0, int(total_steps))
    warmup = max(0, int(warmup_steps))
    kw = dict(kwargs or {})
    lr = base_lr if base_lr is not None else 1.0
    if kind == "polynomial" and not lr > kw.get("lr_end", 1e-7):
        raise ValueError(f"polynomial needs lr_end ({kw.get('lr_end', 1e-7)}) below the learning rate ({lr})")
    fn = _FORMULAS[kind]
    count = min(total, sample if sample is not None else MAX_STEPS_DRAWN)
    if count == total:
        steps = list(range(total))
    else:
        last, gaps = total - 1, max(1, count - 1)
        steps = sorted({round(i * last / gaps) for i in range(count)})
    at = functools.partial(fn, warmup=0 if kind in IGNORE_WARMUP else warmup, total=total,
                           base_lr=lr, **kw)  # the same call for every step, its keywords bound once
    values = [at(s) for s in steps]
    out = Curve(kind=kind, base_lr=base_lr, total_steps=total, warmup_steps=warmup, steps=steps,
                values=values)
    if kind in IGNORE_WARMUP and warmup:
        out.ignored_warmup = warmup
        out.warmup_steps = 0
        out.notes.append(f"{kind} does not read the warm-up: the {warmup} warm-up steps written have no effect")
    if kind in METRIC_DRIVEN:
        out.notes.append(f"{kind} lowers the rate when the evaluation metric stops improving; drawn at its starting value")
    return out
