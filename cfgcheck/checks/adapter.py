"""Checks on the LoRA adapter settings."""

from __future__ import annotations

import math

from ..findings import Edit, Fix
from . import check


from ..knowledge.models import lora_scale as adapter_scale  # alpha/r, or alpha/sqrt(r) under rsLoRA


def target_alpha(rank: int, rslora: bool, target_scale: float) -> int:
    """The smallest whole alpha that gives at least ``target_scale``."""
    return math.ceil(target_scale * (math.sqrt(rank) if rslora else rank) - 1e-9)


@check("lora-scale-below-one")
def lora_scale_below_one(ctx) -> None:
    view = ctx.view
    if not view.is_adapter:
        return
    rank_f, alpha_f = view.get("adapter.rank"), view.get("adapter.alpha")
    rank = rank_f.value if rank_f else None
    alpha = alpha_f.value if alpha_f else None
    if rank_f is not None and rank_f.auto or alpha_f is not None and alpha_f.auto:
        return
    if not isinstance(rank, int) or rank <= 0 or not isinstance(alpha, (int, float)):
        if isinstance(rank, int) and alpha_f is None:
            ctx.cannot_judge("lora_alpha is not set, and its default differs between libraries")
        return
    if isinstance(alpha, float) and not math.isfinite(alpha):
        return  # .nan / .inf: no scale to speak of; the value itself is the problem
    rslora = view.is_on("adapter.rslora")
    scale = adapter_scale(alpha, rank, rslora)
    if scale >= ctx.thresholds["min_scale"]:
        return
    target_scale = ctx.thresholds["target_scale"]
    new_alpha = target_alpha(rank, rslora, target_scale)
    new_scale = adapter_scale(new_alpha, rank, rslora)
    hidden = None
    arch = ctx.model()
    if arch is not None and rslora:
        hidden = math.isqrt(arch.hidden_size)
    fix = Fix(
        tier="changes-training",
        summary=f"{alpha_f.key}: {alpha:g} -> {new_alpha} (adapter scale {scale:.3g} -> {new_scale:.3g})",
        edits=(Edit(path=alpha_f.path, old=alpha_f.written, new=new_alpha),),
    )
    if alpha <= 0:  # scale 0 (or negative): "Nx smaller" has no N
        ctx.report(alpha_f, "not-positive", fix=fix, alpha_key=alpha_f.leaf, alpha=alpha,
                   rank=rank, scale=round(scale, 4), new_alpha=new_alpha,
                   new_scale=round(new_scale, 4))
        return
    ctx.report(
        alpha_f,
        "rslora" if rslora else "default",
        fix=fix,
        alpha_key=alpha_f.leaf,
        alpha=alpha,
        rank=rank,
        sqrt_rank=round(math.sqrt(rank), 3),
        scale=round(scale, 4),
        new_alpha=new_alpha,
        new_scale=round(new_scale, 4),
        slowdown=round(1 / scale, 2),
        width_hint=(f"; for this model's width alpha ≈ √hidden_size = {hidden}" if hidden else ""),
    )
