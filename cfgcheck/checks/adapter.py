"""Checks on the LoRA adapter settings."""

from __future__ import annotations

import math

from ..findings import Edit, Fix
from ..knowledge.models import lora_scale as adapter_scale  # alpha/r, or alpha/sqrt(r) under rsLoRA
from . import ADAPTER, check


def target_alpha(rank: int, rslora: bool, target_scale: float) -> int:
    """The smallest whole alpha that gives at least ``target_scale``."""
    return math.ceil(target_scale * (math.sqrt(rank) if rslora else rank) - 1e-9)


def _written_lr(view):
    """(learning rate, field) when the run's learning rate is written in this file, else (None, field)."""
    f = view.get("optim.lr")
    if f is None or f.auto or isinstance(f.value, bool) or not isinstance(f.value, (int, float)):
        return None, f
    if not math.isfinite(f.value) or f.value <= 0:
        return None, f
    return float(f.value), f


def _g(x: float) -> str:
    """3 significant digits, exponents without a leading zero (2e-05 -> 2e-5)."""
    text = f"{x:.3g}"
    if "e" in text:
        mant, exp = text.split("e")
        text = f"{mant}e{int(exp)}"
    return text


@check("lora-scale-below-one", when=("adapter.rank",), methods=ADAPTER)
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
    # scale 1 (alpha = r, or sqrt(r) under rsLoRA): the update is as large as the learning rate says
    new_alpha = target_alpha(rank, rslora, ctx.thresholds["target_scale"])
    new_scale = adapter_scale(new_alpha, rank, rslora)
    common = dict(alpha_key=alpha_f.leaf, alpha=alpha, rank=rank, scale=round(scale, 4),
                  new_alpha=new_alpha, new_scale=round(new_scale, 4))
    if alpha <= 0:  # scale 0 (or negative): "Nx smaller" has no N
        fix = Fix(tier="changes-training",
                  summary=f"{alpha_f.key}: {alpha:g} -> {new_alpha} (adapter scale {scale:.3g} -> {new_scale:.3g})",
                  edits=(Edit(path=alpha_f.path, old=alpha_f.written, new=new_alpha),))
        ctx.report(alpha_f, "not-positive", fix=fix, **common)
        return
    lr, lr_f = _written_lr(view)
    step = lr * scale if lr is not None else None
    floor = float(ctx.thresholds["min_effective_step"])
    if step is not None and step >= floor:
        # a tuned recipe: the learning rate makes up for the small scale. Moving alpha alone would
        # multiply every step by 1/scale; the paired change keeps lr x scale.
        new_lr = float(f"{step / new_scale:.6g}")  # lr x scale kept: new_lr x new_scale = step
        fix = None
        if lr_f is not None and lr_f.origin == "written" and lr_f.path[:1] and \
                view.doc.get(lr_f.path) is not None:
            fix = Fix(tier="changes-training",
                      summary=(f"{alpha_f.key}: {alpha:g} -> {new_alpha} and {lr_f.key}: {_g(lr)} -> "
                               f"{_g(new_lr)} (adapter scale {scale:.3g} -> {new_scale:.3g}; "
                               f"the paired learning rate keeps lr x scale at {_g(step)})"),
                      edits=(Edit(path=alpha_f.path, old=alpha_f.written, new=new_alpha),
                             Edit(path=lr_f.path, old=lr_f.written, new=new_lr)))
        ctx.report(alpha_f, "compensated", fix=fix, lr_key=lr_f.leaf, lr=_g(lr), step=_g(step),
                   floor=_g(floor), new_lr=_g(new_lr), **common)
        return
    hidden = None
    arch = ctx.model() if rslora else None
    if arch is not None:
        hidden = math.isqrt(arch.hidden_size)
    grow = new_scale / scale
    fix = Fix(tier="changes-training",
              summary=(f"{alpha_f.key}: {alpha:g} -> {new_alpha} (adapter scale {scale:.3g} -> "
                       f"{new_scale:.3g} at the same learning rate: each step moves the adapter "
                       f"{grow:.3g}x further)"),
              edits=(Edit(path=alpha_f.path, old=alpha_f.written, new=new_alpha),))
    if lr is None:
        lr_words = "no learning rate is written here, so the step size cannot be weighed"
    else:
        lr_words = (f"{lr_f.leaf} {_g(lr)} x scale {scale:.4g} = an effective step of {_g(step)}, "
                    f"below {_g(floor)}, the smallest in published adapter recipes")
    ctx.report(
        alpha_f,
        "rslora" if rslora else "default",
        fix=fix,
        sqrt_rank=round(math.sqrt(rank), 3),
        slowdown=round(1 / scale, 2),
        lr_words=lr_words,
        width_hint=(f"; for this model's width alpha ≈ √hidden_size = {hidden}" if hidden else ""),
        **common,
    )
