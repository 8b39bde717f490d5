"""Batch arithmetic: declared global batch, and intervals against the length of the run."""

from __future__ import annotations

import math

from ..findings import Edit, Fix
from ..schedule import resolve_interval
from . import check
from .warmup import run_steps


@check("global-batch-mismatch", when=("batch.global", "batch.per_device"))
def global_batch_mismatch(ctx) -> None:
    view = ctx.view
    declared_f = view.get("batch.global")
    pd_f = view.get("batch.per_device")
    if declared_f is None or pd_f is None:
        return
    declared, pd = declared_f.value, pd_f.value
    if not isinstance(declared, int) or not isinstance(pd, int) or declared <= 0 or pd <= 0:
        return
    ga_f = view.effective("batch.accumulation")
    ga = ga_f.value if ga_f is not None else None
    gpus, gpus_f = ctx.num_gpus
    if ga_f is not None and ga_f.origin == "default" and ga_f.auto:
        # the runner derives the accumulation from the other two: train / (micro x GPUs)
        _derived_accumulation(ctx, declared_f, declared, pd, gpus, gpus_f, ga_f)
        return
    if ga_f is not None and not isinstance(ga, int):
        return  # "auto" or missing: filled in at launch
    product = pd * (ga or 1)
    if gpus:
        expected = product * gpus
        if declared == expected:
            return
        fix = Fix(tier="changes-training",
                  summary=f"{declared_f.key}: {declared} -> {expected}",
                  edits=(Edit(path=declared_f.path, old=declared_f.written, new=expected),))
        ctx.report(declared_f, fix=fix, key=declared_f.leaf, declared=declared, per_device=pd,
                   accumulation=ga or 1, gpus=gpus, expected=expected,
                   gpus_from=_gpus_from(ctx, gpus_f))
        return
    if declared % product != 0:
        ctx.report(declared_f, "no-gpu-count", key=declared_f.leaf, declared=declared,
                   per_device=pd, accumulation=ga or 1, product=product,
                   lower=declared // product * product or product,
                   upper=(declared // product + 1) * product)


def _gpus_from(ctx, gpus_f) -> str:
    if gpus_f is not None:
        return gpus_f.key
    run = ctx.run
    return (run.gpus_from if run is not None and run.gpus_from else "--gpus")


def _derived_accumulation(ctx, declared_f, declared: int, pd: int, gpus, gpus_f, ga_f) -> None:
    """An omitted gradient_accumulation_steps: DeepSpeed sets it to train // (micro x GPUs) and
    then asserts train == micro x accumulation x GPUs and accumulation > 0."""
    if not gpus:
        if declared % pd != 0:
            ctx.report(declared_f, "no-gpu-count", key=declared_f.leaf, declared=declared,
                       per_device=pd, accumulation=1, product=pd,
                       lower=declared // pd * pd or pd, upper=(declared // pd + 1) * pd)
        return
    derived = declared // (pd * gpus)
    if derived >= 1 and derived * pd * gpus == declared:
        return
    if derived < 1:
        ctx.report(declared_f, "accumulation-below-one", key=declared_f.leaf, declared=declared,
                   per_device=pd, gpus=gpus, gpus_from=_gpus_from(ctx, gpus_f),
                   product=pd * gpus, note=ga_f.note)
        return
    ctx.report(declared_f, "derived-not-whole", key=declared_f.leaf, declared=declared, per_device=pd,
               gpus=gpus, gpus_from=_gpus_from(ctx, gpus_f), derived=derived,
               lower=derived * pd * gpus, upper=(derived + 1) * pd * gpus)


# save_steps is not here: with a save strategy the trainer also saves at the last step
# (transformers DefaultFlowCallback.on_step_end: 4.46 for any strategy but "no", 4.57 and 5.24 for
# "steps"), so a save interval longer than the run still leaves the final checkpoint.
_INTERVALS = (
    ("cadence.eval_steps", "cadence.eval_strategy", "evaluation"),
    ("cadence.logging_steps", None, "logging"),
)


@check("cadence-longer-than-run", when=(("cadence.eval_steps", "cadence.logging_steps"),))
def cadence_longer_than_run(ctx) -> None:
    view = ctx.view
    intervals = []
    for n, s, what in _INTERVALS:
        f = view.get(n)
        if f is not None:
            v = f.value
            if isinstance(v, (int, float)) and not isinstance(v, bool) and v >= 1 and math.isfinite(v):
                intervals.append((f, s, what))
    if not intervals:
        return
    total, sched, how = run_steps(ctx)
    if total is None:
        ctx.cannot_judge("the number of training rows is unknown (--rows N) and max_steps is not set")
        return
    for f, strategy_name, what in intervals:
        if strategy_name:
            strategy = view.effective_value(strategy_name)  # written, or the runner's own
            if isinstance(strategy, str) and strategy.lower() in ("no", "epoch", "best"):
                continue
            if strategy is None and what == "evaluation":
                continue  # the trainer's default eval strategy is "no"
        every = resolve_interval(float(f.value), total)
        if every <= total:
            continue
        ctx.report(f, key=f.leaf, every=every, total=total, what=what, how=how,
                   suggestion=max(1, total // 4))
