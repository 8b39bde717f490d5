"""Checks on sequence length and packing."""

from __future__ import annotations

from ..findings import Edit, Fix
from . import check


def _rope_scaling(data, depth: int = 0) -> bool:
    """Whether the file sets up RoPE scaling (``rope_scaling`` at the top or in a section)."""
    if not isinstance(data, dict) or depth > 2:
        return False
    if "rope_scaling" in data and data["rope_scaling"] not in (None, False, "", {}, "none", "null"):
        return True
    if depth == 2:
        return False  # the mappings inside are past the depth looked at
    for value in data.values():
        if isinstance(value, dict) and _rope_scaling(value, depth + 1):
            return True
    return False


@check("seq-len-above-context-window", when=("data.seq_len",))
def seq_len_above_context(ctx) -> None:
    f = ctx.view.get("data.seq_len")
    if f is None or not isinstance(f.value, int) or isinstance(f.value, bool) or f.value <= 0:
        return
    # a longer context with RoPE scaling set up is on purpose (LLaMA-Factory's rope_scaling
    # derives the factor from cutoff_len; transformers' config.rope_scaling extends positions)
    if _rope_scaling(ctx.view.doc.data):
        return
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's context window is not known offline")
        return
    window = arch.max_position_embeddings
    if not window or f.value <= window:
        return
    if getattr(arch, "assumed", False):
        # matched by name only: the context window is what fine-tunes change most often (RoPE
        # scaling, long-context continued pre-training), so the base shape's window is no verdict
        ctx.report(f, "name-match", key=f.leaf, length=f.value, window=window, family=arch.family,
                   model=getattr(arch, "how", "") or "matched by name")
        return
    fix = Fix(tier="changes-training", summary=f"{f.key}: {f.value} -> {window}",
              edits=(Edit(path=f.path, old=f.written, new=window),))
    ctx.report(f, fix=fix, key=f.leaf, length=f.value, window=window, family=arch.family,
               source=arch.source or "model config")


_AWARE = frozenset({"flash_attention_2", "flash_attention_3", "kernels-community/flash-attn",
          "kernels-community/vllm-flash-attn3", "flex_attention", "fa2", "fa3"})


@check("packing-without-boundary-aware-attention", when=("data.packing",))
def packing_attention(ctx) -> None:
    view = ctx.view
    f = view.get("data.packing")
    if f is None or f.value is not True:
        return
    if view.layout is not None and view.layout.packing_masks_boundaries:
        return  # the runner builds a block-causal mask for packed samples itself
    if view.is_on("model.flash_attention"):
        return
    att = view.get("model.attention")
    value = att.value.strip().lower() if att is not None and isinstance(att.value, str) else None
    if value in _AWARE or (att is not None and att.auto):
        return
    ctx.report(f, key=f.leaf, attention=value or "not set")
