"""Checks on the learning rate."""

from __future__ import annotations

from ..findings import Edit, Fix
from ..knowledge.models import UnsupportedFamily, size_from_name, total_parameters
from . import check


def model_size_billions(ctx) -> tuple[float | None, str]:
    """Parameters of the base model in billions, and how we know."""
    arch = ctx.model()
    if arch is not None:
        try:
            return total_parameters(arch) / 1e9, arch.source or "model config"
        except UnsupportedFamily:
            pass  # a family we cannot count: fall back to the size in the name
    ref = ctx.view.value("model.ref")
    if isinstance(ref, str):
        size = size_from_name(ref)
        if size is not None:
            return size, f"the size in the name {ref!r}"
    return None, ""


@check("full-finetune-lr-too-high", when=("optim.lr",), methods=("full",))
def full_finetune_lr(ctx) -> None:
    view = ctx.view
    if view.method != "full":
        return
    lr_f = view.get("optim.lr")
    if lr_f is None or not isinstance(lr_f.value, (int, float)) or isinstance(lr_f.value, bool):
        return
    size, how = model_size_billions(ctx)
    if size is None:
        ref = view.value("model.ref")
        ctx.cannot_judge(
            "the model size is unknown" + (f" (model {ref!r} not found offline)" if ref else
                                           " (no model named)"))
        return
    bands = ctx.thresholds["ceilings"]
    band = next(b for b in bands if b.get("below_billions") is None or size < b["below_billions"])
    ceiling = float(band["max_lr"])
    lr = float(lr_f.value)
    if lr <= ceiling:
        return
    usual = float(band["usual_lr"])
    fix = Fix(tier="changes-training", summary=f"{lr_f.key}: {lr:g} -> {ceiling:g}",
              edits=(Edit(path=lr_f.path, old=lr_f.written, new=ceiling),))
    ctx.report(lr_f, fix=fix, key=lr_f.leaf, lr=f"{lr:g}", size=f"{size:.3g}", how=how,
               ceiling=f"{ceiling:g}", usual=f"{usual:g}", ratio=round(lr / ceiling, 2),
               band=band["label"])
