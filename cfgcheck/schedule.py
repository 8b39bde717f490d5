"""Step arithmetic of a run: effective batch, optimizer steps, warm-up and cadence in steps.

The rounding is the one of the transformers Trainer (4.46 and later, and 5.x):
``len_dataloader = ceil(rows_per_process / per_device)`` (``dataloader_drop_last`` False),
``steps_per_epoch = max(ceil(len_dataloader / accumulation), 1)``,
``total = ceil(epochs * steps_per_epoch)`` unless ``max_steps > 0``, which overrides epochs;
fractional logging/eval/save steps (below 1) resolve to ``ceil(total * fraction)``.
"""

from __future__ import annotations

import math
from types import MappingProxyType
from typing import Any

from ._records import guarded_repr

# transformers TrainingArguments defaults (identical in 4.57 and 5.x)
TRAINER_DEFAULTS = MappingProxyType({
    "batch.per_device": 8,
    "batch.accumulation": 1,
    "optim.epochs": 3.0,
    "optim.max_steps": -1,
    "cadence.logging_steps": 500,
    "cadence.save_steps": 500,
})


class Schedule:
    per_device: int | None
    accumulation: int | None
    gpus: int
    effective_batch: int | None
    rows: int | None
    steps_per_epoch: int | None
    total_steps: int | None
    epochs: float | None
    max_steps_override: bool
    generations: int  # completions sampled per prompt (online RL): each row counts that often
    defaults_used: list[str]

    __slots__ = ('per_device', 'accumulation', 'gpus', 'effective_batch', 'rows', 'steps_per_epoch', 'total_steps', 'epochs', 'max_steps_override', 'generations', 'defaults_used')

    def __init__(self, per_device, accumulation, gpus, effective_batch, rows=None, steps_per_epoch=None, total_steps=None, epochs=None, max_steps_override=False, generations=1, defaults_used=None):
        self.per_device = per_device
        self.accumulation = accumulation
        self.gpus = gpus
        self.effective_batch = effective_batch
        self.rows = rows
        self.steps_per_epoch = steps_per_epoch
        self.total_steps = total_steps
        self.epochs = epochs
        self.max_steps_override = max_steps_override
        self.generations = generations
        self.defaults_used = [] if defaults_used is None else defaults_used

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(per_device={self.per_device!r}, accumulation={self.accumulation!r}, gpus={self.gpus!r}, effective_batch={self.effective_batch!r}, rows={self.rows!r}, steps_per_epoch={self.steps_per_epoch!r}, total_steps={self.total_steps!r}, epochs={self.epochs!r}, max_steps_override={self.max_steps_override!r}, generations={self.generations!r}, defaults_used={self.defaults_used!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.per_device, self.accumulation, self.gpus, self.effective_batch, self.rows, self.steps_per_epoch, self.total_steps, self.epochs, self.max_steps_override, self.generations, self.defaults_used) == (other.per_device, other.accumulation, other.gpus, other.effective_batch, other.rows, other.steps_per_epoch, other.total_steps, other.epochs, other.max_steps_override, other.generations, other.defaults_used)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def steps_per_epoch(rows: int, per_device: int, accumulation: int, gpus: int = 1) -> int:
    rows_per_process = math.ceil(rows / gpus)
    batches = math.ceil(rows_per_process / per_device)
    return max(math.ceil(batches / accumulation), 1)


def resolve_interval(value: float, total: int) -> int:
    """An interval as steps: values below 1 are a fraction of the run."""
    if 0 < value < 1:
        return math.ceil(total * value)
    return int(value)


def derive(values: dict, *, gpus: int | None, rows: int | None, use_trainer_defaults: bool) -> Schedule:
    """``values``: our field names -> values (None when unset)."""
    used: list[str] = []

    def get(name):
        v = values.get(name)
        if v is None and use_trainer_defaults and name in TRAINER_DEFAULTS:
            if name != "optim.max_steps":  # -1 = "no override", not an assumption worth stating
                used.append(name)
            return TRAINER_DEFAULTS[name]
        return v

    pd = get("batch.per_device")
    ga = get("batch.accumulation")
    n = gpus or 1
    eff = pd * ga * n if isinstance(pd, int) and isinstance(ga, int) else None
    sched = Schedule(per_device=pd, accumulation=ga, gpus=n, effective_batch=eff, rows=rows,
                     defaults_used=used)
    max_steps = get("optim.max_steps")
    epochs = get("optim.epochs")
    if isinstance(max_steps, int) and max_steps > 0:
        sched.total_steps = max_steps
        sched.max_steps_override = True
    if rows and isinstance(pd, int) and pd > 0 and isinstance(ga, int) and ga > 0:
        sched.steps_per_epoch = steps_per_epoch(rows, pd, ga, n)
        if (sched.total_steps is None and isinstance(epochs, (int, float)) and epochs > 0
                and math.isfinite(epochs)):
            sched.total_steps = math.ceil(epochs * sched.steps_per_epoch)
            sched.epochs = float(epochs)
    return sched


_FIELDS = ("batch.per_device", "batch.accumulation", "optim.epochs", "optim.max_steps")


def derive_for(view, *, gpus: int | None, rows: int | None) -> Schedule:
    """The schedule of a typed view (rows from the command line win over the config's own).

    Values the file leaves out come from the opened run (``view.effective``: runner defaults,
    launch context). An online RL trainer that samples ``rl.num_generations`` completions per prompt
    (TRL GRPO: each prompt repeated num_generations times by its sampler, and the per-device batch
    counts completions) steps through rows x generations samples per epoch.
    """
    # layouts whose file goes to TrainingArguments as it is: its defaults fill unset values
    trainer = view.layout is not None and view.layout.trainer_defaults
    effective = getattr(view, "effective_value", view.value)
    values = {name: effective(name) for name in _FIELDS}
    rows = rows or view.value("data.rows")
    cap = max_rows(view)
    if rows is not None and cap is not None and rows > cap:
        rows = cap
    sched = derive(values, gpus=gpus, rows=None if rows is None else rows * _generations(view),
                   use_trainer_defaults=trainer)
    if rows is not None and _generations(view) > 1:
        sched.rows = rows
        sched.generations = _generations(view)
    return sched


def per_device_for(view) -> Any:
    """The per-device batch of a typed view as ``derive_for`` reads it (written or supplied, else
    the trainer default where the layout's file goes to TrainingArguments), without the rest of
    the schedule."""
    effective = getattr(view, "effective_value", view.value)
    pd = effective("batch.per_device")
    if pd is None and view.layout is not None and view.layout.trainer_defaults:
        pd = TRAINER_DEFAULTS["batch.per_device"]
    return pd


def max_rows(view) -> int | None:
    """The most rows the run reads when the file caps them (``Layout.rows_cap_key``: LLaMA-Factory's
    ``max_samples`` truncates each dataset it lists, comma-separated ``dataset``, to that many
    rows; LLaMA-Factory data/loader.py, from memory)."""
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    key = view.layout.rows_cap_key if view.layout is not None else None
    cap = data.get(key) if key else None
    if not isinstance(cap, int) or isinstance(cap, bool) or cap <= 0:
        return None
    names = data.get("dataset")
    n = len([x for x in names.split(",") if x.strip()]) if isinstance(names, str) else \
        len(names) if isinstance(names, list) else 1
    return cap * max(1, n)


def _generations(view) -> int:
    effective = getattr(view, "effective_value", view.value)
    g = effective("rl.num_generations")
    return g if isinstance(g, int) and not isinstance(g, bool) and g > 1 else 1


def how_text(sched: Schedule) -> str:
    """How the number of steps follows, in words, for messages."""
    if sched.max_steps_override:
        return f"max_steps {sched.total_steps}"
    gpus = f"{sched.gpus} GPU{'s' if sched.gpus != 1 else ''}"
    epochs = f"{sched.epochs:g} epoch{'' if sched.epochs == 1 else 's'}"
    rows = (f"{sched.rows:,} rows x {sched.generations} generations" if sched.generations > 1
            else f"{sched.rows:,} rows")
    return (f"{rows} / ({sched.per_device} per device x {sched.accumulation} accumulation"
            f" x {gpus}) = {sched.steps_per_epoch} steps per epoch x {epochs}")
