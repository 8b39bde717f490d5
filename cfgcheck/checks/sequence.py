"""Checks on sequence length and packing."""

from __future__ import annotations

from ..findings import Edit, Fix
from . import check


@check("seq-len-above-context-window")
def seq_len_above_context(ctx) -> None:
    f = ctx.view.get("data.seq_len")
    if f is None or not isinstance(f.value, int) or isinstance(f.value, bool) or f.value <= 0:
        return
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's context window is not known offline")
        return
    window = arch.max_position_embeddings
    if not window or f.value <= window:
        return
    fix = Fix(tier="changes-training", summary=f"{f.key}: {f.value} -> {window}",
              edits=(Edit(path=f.path, old=f.written, new=window),))
    ctx.report(f, fix=fix, key=f.leaf, length=f.value, window=window, family=arch.family,
               source=arch.source or "model config")


_AWARE = {"flash_attention_2", "flash_attention_3", "kernels-community/flash-attn",
          "kernels-community/vllm-flash-attn3", "flex_attention", "fa2", "fa3"}


@check("packing-without-boundary-aware-attention")
def packing_attention(ctx) -> None:
    view = ctx.view
    f = view.get("data.packing")
    if f is None or f.value is not True:
        return
    if view.layout is not None and view.layout.name == "torchtune":
        return  # torchtune builds a block-causal mask for packed samples itself
    if view.is_on("model.flash_attention"):
        return
    att = view.get("model.attention")
    value = att.value.strip().lower() if att is not None and isinstance(att.value, str) else None
    if value in _AWARE or (att is not None and att.auto):
        return
    ctx.report(f, key=f.leaf, attention=value or "not set")
