"""Does the run fit the GPU's memory? The estimate comes from cfgcheck.plan (weights, gradients,
optimizer states, master weights, activations, logits, overhead; sharded across GPUs as the opened
run's launch context says).

Above the card with every input known: an error. Above the warning fraction: a warning. An
estimate that rests on an assumption (a guessed sequence length, a sharded run whose GPU count
nothing names) is at most a warning, and the message names the assumption."""

from __future__ import annotations

from ..plan import derive_plan, fitting_changes, no_estimate
from . import check

GB = 1e9


def _gb(n: int) -> str:
    return f"{n / GB:.1f} GB"


@check("memory-exceeds-gpu", methods=("full", "lora", "qlora"))
def memory_exceeds_gpu(ctx) -> None:
    view = ctx.view
    if view.method not in ("full", "lora", "qlora"):
        return
    # the estimate first; the words that describe the run only for a finding (below)
    arch = ctx.model()
    problem = no_estimate(view, arch)
    if problem is not None:  # said before any number is worked out
        ctx.cannot_judge(problem)
        return
    if ctx.gpu is None:
        # nothing to compare an estimate with: none is worked out (`cfgcheck derive` shows it)
        ctx.cannot_judge("no GPU named (--gpu NAME) to compare an estimate with "
                         "(cfgcheck derive shows the estimate)")
        return
    gpus, _ = ctx.num_gpus
    plan = derive_plan(view, arch, gpu=ctx.gpu, gpus=gpus, rows=ctx.options.rows, describe=False)
    if plan.memory is None:
        ctx.cannot_judge(plan.memory_problem or "no estimate")
        return
    total, capacity = plan.memory.total_bytes, ctx.gpu.memory_bytes
    share = total / capacity
    if share <= ctx.thresholds["warn_fraction"]:
        return
    plan = derive_plan(view, arch, gpu=ctx.gpu, gpus=gpus, rows=ctx.options.rows)  # the same estimate, described
    parts = ", ".join(f"{name} {_gb(b)}" for name, b in plan.memory.components() if b)
    changes = fitting_changes(plan) if share > 1 else []
    if changes:
        fixes = "; ".join(f"({i}) " + " + ".join(label.split("; ")) + f" -> {_gb(est.total_bytes)}"
                          for i, (label, est) in enumerate(changes[:4], 1))
    elif share > 1:
        fixes = "none of the single or combined changes cfgcheck knows fits this card; use more GPUs or a larger card"
    else:
        fixes = ""
    context = plan.context or "1 GPU, no sharding"
    at = view.get("batch.per_device") or view.get("model.ref")
    ctx.report(
        at,
        "too-big" if share > 1 else "tight",
        total=_gb(total),
        capacity=_gb(capacity),
        gpu=ctx.gpu.label,
        percent=round(share * 100),
        breakdown=parts,
        changes=fixes,
        gpus=plan.memory_inputs.num_gpus,
        sharding=plan.memory_inputs.sharding,
        context=context,
        total_bytes=total,
        capacity_bytes=capacity,
        assumed=plan.assumptions,
    )
