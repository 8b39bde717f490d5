"""Checks on the learning-rate schedule: warm-up length, warm-up a schedule ignores, step budget."""

from __future__ import annotations

import math

from ..findings import Edit, Fix
from ..schedule import derive_for, how_text
from . import check



def _trainer_schedule(view) -> bool:
    """The schedule keys reach the transformers Trainer with its meaning."""
    return view.layout is not None and view.layout.trainer_schedule


def _num(f):
    if f is None or f.auto or isinstance(f.value, bool) or not isinstance(f.value, (int, float)):
        return None
    if isinstance(f.value, float) and not math.isfinite(f.value):
        return None  # .inf / .nan: no step count to reason about (found by fuzzing)
    return f.value


def run_steps(ctx):
    """(total optimizer steps or None, schedule, how the number was found). Several rules of a
    view ask for the schedule in turn: it is worked out once per view (for its opened run, the
    values it was supplied, the GPUs and rows); the Schedule is only read by the rules."""
    gpus, _ = ctx.num_gpus
    view, rows = ctx.view, ctx.options.rows
    sched = ctx.once(("schedule", id(view.run), len(view.supplied), gpus, rows),
                     lambda: derive_for(view, gpus=gpus, rows=rows))
    if sched.total_steps is None:
        return None, sched, ""
    return sched.total_steps, sched, how_text(sched)


@check("warmup-longer-than-run", when=(("optim.warmup_steps", "optim.warmup_ratio"),))
def warmup_longer_than_run(ctx) -> None:
    view = ctx.view
    steps_f, ratio_f = view.get("optim.warmup_steps"), view.get("optim.warmup_ratio")
    steps, ratio = _num(steps_f), _num(ratio_f)
    limit = ctx.thresholds["max_fraction"]
    # warmup_steps below 1 is a ratio of the run (transformers 5 warmup_steps: float)
    if steps is not None and 0 < steps < 1:
        ratio, ratio_f, steps = steps, steps_f, None
    if steps is not None and steps >= 1:
        total, _, how = run_steps(ctx)
        if total is None:
            ctx.cannot_judge("the run length is unknown (pass --rows N, or set max_steps)")
            return
        fraction = steps / total
        if steps >= total:
            ctx.report(steps_f, "steps-longer", key=steps_f.leaf, warmup=int(steps), total=total,
                       how=how, suggestion=max(1, math.ceil(total * 0.05)))
        elif fraction > limit:
            ctx.report(steps_f, "steps-over-limit", key=steps_f.leaf, warmup=int(steps), total=total,
                       how=how, percent=round(100 * fraction, 1), limit=round(100 * limit),
                       suggestion=max(1, math.ceil(total * 0.05)))
        return
    if ratio is not None and ratio > limit:
        fix = None
        if ratio < 1:
            fix = Fix(tier="changes-training", summary=f"{ratio_f.key}: {ratio:g} -> 0.05",
                      edits=(Edit(path=ratio_f.path, old=ratio_f.written, new=0.05),))
        ctx.report(ratio_f, "ratio-longer" if ratio >= 1 else "ratio-over-limit", fix=fix,
                   key=ratio_f.leaf, ratio=ratio, percent=round(100 * ratio, 1),
                   limit=round(100 * limit))


_CONSTANT = frozenset({"constant"})


@check("constant-schedule-ignores-warmup", when=("optim.scheduler", ("optim.warmup_steps", "optim.warmup_ratio")))
def constant_ignores_warmup(ctx) -> None:
    view = ctx.view
    sched = view.get("optim.scheduler")
    if sched is None or not isinstance(sched.value, str) or sched.value.strip().lower() not in _CONSTANT:
        return
    if not _trainer_schedule(view):
        return
    for name in ("optim.warmup_steps", "optim.warmup_ratio"):
        f = view.get(name)
        v = _num(f)
        if v is not None and v > 0:
            fix = Fix(tier="changes-training",
                      summary=f"{sched.key}: {sched.value} -> constant_with_warmup",
                      edits=(Edit(path=sched.path, old=sched.written, new="constant_with_warmup"),))
            ctx.report(sched, fix=fix, key=sched.leaf, warmup_key=f.leaf, warmup=v)
            return


@check("warmup-ratio-and-steps-both-set", when=("optim.warmup_steps", "optim.warmup_ratio"))
def warmup_both(ctx) -> None:
    view = ctx.view
    if not _trainer_schedule(view):
        return
    steps_f, ratio_f = view.get("optim.warmup_steps"), view.get("optim.warmup_ratio")
    steps, ratio = _num(steps_f), _num(ratio_f)
    if steps is None or ratio is None or steps <= 0 or ratio <= 0:
        return
    ctx.report(ratio_f, steps_key=steps_f.leaf, steps=steps, ratio_key=ratio_f.leaf, ratio=ratio)


@check("max-steps-overrides-epochs", when=("optim.max_steps", "optim.epochs"))
def max_steps_overrides_epochs(ctx) -> None:
    view = ctx.view
    if not _trainer_schedule(view):
        return
    ms_f, ep_f = view.get("optim.max_steps"), view.get("optim.epochs")
    ms, ep = _num(ms_f), _num(ep_f)
    if ms is None or ep is None or ms <= 0 or ep <= 0:
        return
    total, sched, _ = run_steps(ctx)
    if sched.steps_per_epoch:
        epochs_run = ms / sched.steps_per_epoch
        detail = (f"; with {sched.steps_per_epoch} steps per epoch that is {epochs_run:.3g} epochs,"
                  f" not {ep:g}")
    else:
        detail = ""
    ctx.report(ms_f, key=ms_f.leaf, max_steps=int(ms), epochs_key=ep_f.leaf, epochs=ep,
               detail=detail)


_CADENCE = (("cadence.eval_steps", "cadence.eval_strategy", "evaluation"),
            ("cadence.logging_steps", None, "logging"))


@check("run-too-short-for-cadence", when=(("cadence.eval_steps", "cadence.logging_steps"),))
def run_too_short(ctx) -> None:
    view = ctx.view
    total, _, how = run_steps(ctx)
    if total is None:
        return
    min_points = ctx.thresholds["min_points"]
    for name, strategy_name, what in _CADENCE:
        f = view.get(name)
        every = _num(f)
        if every is None or every <= 0:
            continue
        if strategy_name:
            strategy = view.value(strategy_name)
            if not (isinstance(strategy, str) and strategy.strip().lower() == "steps"):
                continue
        steps = math.ceil(total * every) if every < 1 else int(every)
        if steps > total:
            continue  # cadence-longer-than-run reports that one
        points = total // steps
        if points < min_points:
            ctx.report(f, key=f.leaf, what=what, total=total, how=how, every=steps, points=points,
                       min_points=min_points, suggestion=max(1, total // min_points))
