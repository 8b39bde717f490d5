"""Pictures of a derived run: the learning rate over the optimizer steps, with the steps where
evaluation, checkpoints and logging fall, and the memory per GPU as a stacked bar against the card.

Pure functions of a ``Plan``. The text pictures use block characters (no plotting library: the
shapes are simple, and ``lint`` never imports this module). ``schedule_series`` and
``memory_segments`` give the same numbers to the HTML report.
"""

from __future__ import annotations

import bisect
import math

from .._records import replaced
from ..lrcurve import Curve, curve, schedule_kind
from ..plan import Plan

WIDTH = 60  # characters of the plot area
HEIGHT = 8  # rows of the learning-rate plot
_EIGHTHS = " ▁▂▃▄▅▆▇█"
GB = 1e9

# what each memory component is drawn with (text) and its colour (HTML)
SEGMENTS = (
    ("weights", "█", "#3b6ea5"),
    ("gradients", "▓", "#d9822b"),
    ("optimizer states", "▒", "#5a9e4b"),
    ("fp32 master weights", "▞", "#8c6bb1"),
    ("16-bit weight copies (autocast)", "▚", "#b07aa1"),
    ("activations", "░", "#c44e52"),
    ("logits and loss", ":", "#937860"),
    ("runtime overhead", ".", "#8c8c8c"),
)


class Series:
    """A learning-rate curve and the steps where things happen (a record class written out:
    ``cfgcheck._records``)."""

    curve: Curve
    scheduler_note: str  # how the schedule was chosen (written, or the default assumed)
    marks: dict[str, list[int]]  # "eval"/"save"/"log" -> steps (1-based)
    every: dict[str, str]  # in words: "every 100 steps", "each epoch"

    __slots__ = ("curve", "scheduler_note", "marks", "every")

    def __init__(self, curve, scheduler_note, marks=None, every=None):
        self.curve = curve
        self.scheduler_note = scheduler_note
        self.marks = {} if marks is None else marks
        self.every = {} if every is None else every

    def __repr__(self):
        return (f"{type(self).__qualname__}(curve={self.curve!r}, scheduler_note={self.scheduler_note!r}, "
                f"marks={self.marks!r}, every={self.every!r})")

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return ((self.curve, self.scheduler_note, self.marks, self.every)
                    == (other.curve, other.scheduler_note, other.marks, other.every))
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def _events(plan: Plan, what: str, total: int) -> tuple[list[int], str]:
    """The optimizer steps (1-based) at which evaluation / saving / logging happen."""
    strategy = plan.strategies.get(what)
    every = plan.cadence.get(what)
    default = {"eval": "no", "save": "steps", "logging": "steps"}[what]
    word = strategy if strategy is not None else default
    if word in ("no", "false", "none"):
        return [], "off"
    spe = plan.schedule.steps_per_epoch if plan.schedule else None
    if word == "epoch":
        if not spe:
            return [], "each epoch (steps per epoch unknown)"
        steps = list(range(spe, total + 1, spe))
        return steps, "each epoch"
    if word == "best" and what == "save":
        return [], "when the evaluation metric improves"
    if every is None:
        # TrainingArguments: save_steps and logging_steps default to 500; eval_steps to logging_steps
        every = plan.cadence.get("logging", 500) if what == "eval" else 500
    steps = list(range(every, total + 1, every))
    if what == "save" and total and (not steps or steps[-1] != total):
        steps.append(total)  # the Trainer also saves at the last step when a save strategy is set
    return steps, f"every {every:,} steps"


def _curve(kind: str, total: int, warmup: int, base_lr: float | None, kwargs: dict,
           copy: bool = True) -> tuple[Curve, str | None]:
    """``lrcurve.curve`` sampled for a picture, worked out once per run for the same arguments
    (cfgcheck.memo: the configs of one recipe share their schedule), and the key it is shared
    under (None: not shared). Each caller gets its own copy unless ``copy`` is False (a caller
    that only reads it). The arguments are told apart by their ``repr`` (1, 1.0 and True, 0.0 and
    -0.0 differ)."""
    from ..memo import remembered

    def compute() -> Curve:
        return curve(kind, total_steps=total, warmup_steps=warmup, base_lr=base_lr, kwargs=kwargs,
                     sample=WIDTH * 8)

    try:
        key = repr((kind, total, warmup, base_lr, kwargs))
    except Exception:  # noqa: BLE001 - a value that cannot say what it is: no sharing
        return compute(), None
    c = remembered("lr_curve", key, compute)
    if not copy:
        return c, key
    return replaced(c, steps=list(c.steps), values=list(c.values), notes=list(c.notes)), key


def schedule_series(plan: Plan) -> tuple[Series | None, str | None]:
    """The curve of a plan, or why it cannot be drawn."""
    series, why, _key = _series(plan)
    return series, why


def _series(plan: Plan, copy: bool = True) -> tuple[Series | None, str | None, str | None]:
    """schedule_series, and the key its curve is shared under in this run (None: not shared)."""
    total = plan.schedule.total_steps if plan.schedule else None
    if not total:
        return None, "the number of optimizer steps is unknown (pass --rows, or set max_steps)", None
    written = plan.scheduler
    kind = schedule_kind(written) if written else "linear"
    if kind is None:
        return None, f"the schedule {written!r} is not one cfgcheck can draw", None
    note = f"{kind} (written)" if written else "linear (not written: the transformers default, assumed)"
    try:
        c, key = _curve(kind, total, plan.warmup_steps or 0, plan.learning_rate, plan.scheduler_kwargs, copy)
    except (ValueError, TypeError, ZeroDivisionError, OverflowError) as exc:
        return None, f"the {kind} schedule cannot be built from this config: {exc}", None
    s = Series(curve=c, scheduler_note=note)
    for what, label in (("eval", "eval"), ("save", "save"), ("logging", "log")):
        steps, words = _events(plan, what, total)
        s.marks[label] = steps
        s.every[label] = words
    return s, None, key


def _column_of(step: int, total: int) -> int:
    """The plot column of a 1-based optimizer step."""
    return min(WIDTH - 1, max(0, math.ceil(step * WIDTH / total) - 1))


def _lr_text(lr: float | None) -> str:
    return "-" if lr is None else f"{lr:.3g}"


def _column_peaks(steps: list[int], values: list[float], total: int) -> list[float]:
    """Per plot column, the highest multiplier among the sampled steps it covers (the steps s
    with ``col * total / WIDTH <= s < (col + 1) * total / WIDTH``); a column that covers none
    (fewer sampled steps than columns) takes the step nearest its start. One pass over the
    samples: each falls in the column whose start is the last at or below it."""
    bounds = [col * total / WIDTH for col in range(WIDTH + 1)]
    covered: list[list[float]] = [[] for _ in range(WIDTH)]
    for s, v in zip(steps, values):
        col = bisect.bisect_right(bounds, s) - 1
        if 0 <= col < WIDTH:
            covered[col].append(v)
    cols: list[float] = []
    for col, vals in enumerate(covered):
        if not vals:
            lo = bounds[col]
            i = min(range(len(steps)), key=lambda k: abs(steps[k] - lo))
            vals = [values[i]]
        cols.append(max(vals))
    return cols


def _plot(c: Curve, scheduler_note: str) -> tuple[list[str], int]:
    """The heading and the rows of the learning-rate plot, and the width of its labels."""
    total = c.total_steps
    cols = _column_peaks(c.steps, c.values, total)
    top = max(cols) or 1.0
    peak = c.base_lr * top if c.base_lr is not None else None
    head = (f"learning rate over {total:,} optimizer steps: {scheduler_note}"
            + (f", {c.warmup_steps:,} warm-up steps" if c.warmup_steps else "")
            + (f", peak {_lr_text(peak)}" if peak is not None else " (multiplier of the base rate)"))
    lines = [head]
    label_w = max(len(_lr_text(peak)), 1) + 1
    heights = [round(v / top * HEIGHT * 8) for v in cols]  # in eighths of a row
    for row in range(HEIGHT - 1, -1, -1):
        floor = row * 8
        cells = [_EIGHTHS[max(0, min(8, h - floor))] for h in heights]
        label = _lr_text(peak) if row == HEIGHT - 1 else ("0" if row == 0 else "")
        lines.append(f"{label:>{label_w}} |{''.join(cells)}")
    return lines, label_w


def schedule_picture(plan: Plan) -> list[str]:
    series, why, key = _series(plan, copy=False)  # read, never changed here
    if series is None:
        return [f"learning rate: not drawn: {why}"]
    c = series.curve
    total = c.total_steps
    if key is None:
        plot, label_w = _plot(c, series.scheduler_note)
    else:  # the same curve in the same words: drawn once per run (cfgcheck.memo)
        from ..memo import remembered

        plot, label_w = remembered("lr_plot", (key, series.scheduler_note),
                                   lambda: _plot(c, series.scheduler_note))
    lines = list(plot)
    if c.ignored_warmup:
        span = _column_of(c.ignored_warmup, total) + 1
        lines.append(f"{'':>{label_w}} |{'~' * span}  <- {c.ignored_warmup:,} warm-up steps written, ignored")
    for label in ("eval", "save", "log"):
        steps = series.marks.get(label, [])
        row = [" "] * WIDTH
        for st in steps:
            row[_column_of(st, total)] = "|"
        every = series.every.get(label, "")
        lines.append(f"{label:>{label_w}} |{''.join(row).rstrip():<{WIDTH}}  {every}"
                     + (f" ({len(steps):,})" if steps else ""))
    lines.append(f"{'':>{label_w}} 1{'':>{WIDTH - 2 - len(f'{total:,}')}} {total:,}")
    for note in c.notes:
        lines.append(f"note: {note}")
    return lines


def memory_segments(plan: Plan) -> list[tuple[str, int, str, str]]:
    """(component, bytes, text character, HTML colour) for the non-empty components."""
    m = plan.memory
    if m is None:
        return []
    sizes = dict(m.components())
    return [(name, sizes.get(name, 0), ch, colour) for name, ch, colour in SEGMENTS if sizes.get(name, 0) > 0]


def memory_picture(plan: Plan) -> list[str]:
    m = plan.memory
    if m is None:
        return [f"memory per GPU: not drawn: {plan.memory_problem or 'no estimate'}"]
    cap = plan.capacity_bytes
    scale_to = max(m.total_bytes, cap or 0) or 1
    segments = memory_segments(plan)
    bar = []
    for _name, size, ch, _c in segments:
        bar.append(ch * max(1, round(size / scale_to * WIDTH)))
    text = "".join(bar)[: WIDTH + 1]
    if cap:
        at = min(WIDTH, round(cap / scale_to * WIDTH))
        text = text.ljust(at)
        text = text[:at] + "|" + text[at:]
        verdict = "fits" if m.total_bytes <= cap else "does not fit"
        head = (f"memory per GPU: {m.total_bytes / GB:.1f} GB of {cap / GB:.0f} GB "
                f"({100 * m.total_bytes / cap:.0f}%, {plan.gpu.label}): {verdict}; | marks the card")
    else:
        head = f"memory per GPU: {m.total_bytes / GB:.1f} GB (no --gpu: not compared with a card)"
    legend = "  ".join(f"{ch} {name} {size / GB:.1f} GB" for name, size, ch, _c in segments)
    return [head, f"  [{text}]", f"  {legend}"]


def pictures(plan: Plan) -> str:
    return "\n".join(schedule_picture(plan) + [""] + memory_picture(plan)) + "\n"
