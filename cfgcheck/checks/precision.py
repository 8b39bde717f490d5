"""Precision settings against what the GPU can run."""

from __future__ import annotations

from ..findings import Edit, Fix
from ..knowledge.hardware import FEATURE_MIN_CAPABILITY
from ..load import dotted
from . import check

_BF16_WORDS = {"bfloat16", "bf16"}


def _wanted(view):
    """(feature, field) pairs for every precision feature the config turns on."""
    out = []
    for name in ("precision.bf16",):
        f = view.get(name)
        if f is not None and f.value is True:
            out.append(("bf16", f))
    for name in ("model.dtype", "quant.compute_dtype"):
        f = view.get(name)
        if f is not None and isinstance(f.value, str) and f.value.strip().lower() in _BF16_WORDS:
            out.append(("bf16", f))
    f = view.get("precision.mixed")
    if f is not None and isinstance(f.value, str):
        word = f.value.strip().lower()
        if word in _BF16_WORDS:
            out.append(("bf16", f))
        elif word == "fp8":
            out.append(("fp8", f))
    f = view.get("precision.tf32")
    if f is not None and f.value is True:
        out.append(("tf32", f))
    f = view.get("model.attention")
    if f is not None and isinstance(f.value, str) and f.value.strip().lower() == "flash_attention_2":
        out.append(("flash_attention_2", f))
    return out


_REPLACEMENT = {"bf16": "fp16", "tf32": "false", "fp8": "bf16", "flash_attention_2": "sdpa"}


def _fp16_edit(view, bf16):
    """Switching bf16 off leaves fp32: turn fp16 on beside it (inserting the key if absent)."""
    fp = view.get("precision.fp16")
    if fp is not None:
        return () if fp.value is True else (Edit(path=fp.path, old=fp.written, new=True),)
    if bf16.path[-1] == "enabled" and len(bf16.path) >= 2:  # DeepSpeed: {"bf16": {"enabled": true}}
        section = bf16.path[:-2] + ("fp16",)
        if view.doc.get(section) is None:
            return (Edit(path=section, old=None, new={"enabled": True}, insert=True,
                         after=bf16.path[:-1]),)
        return (Edit(path=section + ("enabled",), old=None, new=True, insert=True),)
    return (Edit(path=bf16.path[:-1] + ("fp16",), old=None, new=True, insert=True,
                 after=bf16.path),)


def _fix_for(feature, f, gpu, view):
    if feature == "tf32":
        return Fix(tier="changes-training", summary=f"{f.key}: true -> false (no TF32 below 8.0)",
                   edits=(Edit(path=f.path, old=f.written, new=False),))
    if feature == "bf16" and f.name == "precision.bf16":
        extra = _fp16_edit(view, f)
        also = "".join(f", {dotted(e.path)}: " + ("added as " if e.insert else "-> ")
                       + ("true" if e.new is True else "{enabled: true}") for e in extra)
        return Fix(tier="changes-training",
                   summary=f"{f.key}: true -> false{also} (use fp16 on {gpu.name})",
                   edits=(Edit(path=f.path, old=f.written, new=False),) + extra)
    if feature == "bf16" and isinstance(f.written, str):
        new = "float16" if f.written.strip().lower() == "bfloat16" else "fp16"
        if f.name == "model.dtype" and view.method == "full":
            # every weight trains: fp16 loss scaling needs fp32 master weights, and the scaler
            # refuses fp16 ones (PyTorch GradScaler: "Attempting to unscale FP16 gradients.")
            new = "float32" if new == "float16" else "fp32"
        return Fix(tier="changes-training", summary=f"{f.key}: {f.written} -> {new}",
                   edits=(Edit(path=f.path, old=f.written, new=new),))
    return None


@check("precision-unsupported-on-gpu")
def precision_vs_gpu(ctx) -> None:
    wanted = _wanted(ctx.view)
    if not wanted:
        return
    gpu = ctx.gpu
    if gpu is None:
        ctx.cannot_judge("no GPU named (--gpu NAME); "
                         + ", ".join(sorted({w for w, _ in wanted})) + " support not checked")
        return
    for feature, f in wanted:
        if gpu.supports(feature):
            continue
        need, source = FEATURE_MIN_CAPABILITY[feature]
        if feature == "fp8":
            suits = "bf16" if gpu.supports("bf16") else "fp16"
        elif feature == "bf16":
            suits = "fp16 (with loss scaling)"
        elif feature == "tf32":
            suits = "plain fp32 matmuls (tf32: false)"
        else:
            suits = "attn_implementation: sdpa"
        ctx.report(f, feature, fix=_fix_for(feature, f, gpu, ctx.view), key=f.key, feature=feature,
                   gpu=gpu.label, capability=gpu.capability_text,
                   needed=f"{need[0]}.{need[1]}", suits=suits, source=source)


@check("bf16-and-fp16-both-on")
def bf16_and_fp16(ctx) -> None:
    bf, fp = ctx.view.get("precision.bf16"), ctx.view.get("precision.fp16")
    if bf is None or fp is None or bf.value is not True or fp.value is not True:
        return
    ctx.report(fp, bf16_key=bf.key, fp16_key=fp.key)


def _fp16_on(view):
    f = view.get("precision.fp16")
    if f is not None and f.value is True:
        return f
    f = view.get("precision.mixed")
    if f is not None and isinstance(f.value, str) and f.value.strip().lower() == "fp16":
        return f
    return None


@check("fp16-training-of-bf16-model")
def fp16_on_bf16_model(ctx) -> None:
    f = _fp16_on(ctx.view)
    if f is None:
        return
    layout = ctx.view.layout
    if layout is None or "model.ref" not in layout.fields:
        return  # a DeepSpeed or launcher file never names the model: nothing to look up
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's stored dtype is not known offline")
        return
    stored = (arch.torch_dtype or "").lower()
    if stored not in _BF16_WORDS:
        return
    gpu = ctx.gpu
    if gpu is not None and not gpu.supports("bf16"):
        # fp16 is the only half precision this card has: say so, do not warn against the only choice
        ctx.report(f, "no-bf16-card", key=f.key, family=arch.family, stored=arch.torch_dtype,
                   source=arch.source or "model config", gpu=gpu.label,
                   capability=gpu.capability_text)
        return
    ctx.report(f, key=f.key, family=arch.family, stored=arch.torch_dtype,
               source=arch.source or "model config")
