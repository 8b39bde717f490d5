"""Checks on weights that cannot train as configured: a quantised base trained in full, fp16
master weights under the loss scaler, a QLoRA dtype clash, attention kernels against the dtype
and the model, and a pad token that is the end-of-text token."""

from __future__ import annotations

from ..findings import Edit, Fix
from . import check
from .distributed import quantised_field

_HALF = frozenset({"float16", "fp16", "half", "torch.float16"})
_BF16 = frozenset({"bfloat16", "bf16", "torch.bfloat16"})
_FP32 = frozenset({"float32", "fp32", "float", "torch.float32"})


def _word(f):
    return f.value.strip().lower() if f is not None and isinstance(f.value, str) else None


@check("full-finetune-of-quantised-base", when=(("quant.load_4bit", "quant.load_8bit", "quant.bits"),), methods=("full",))
def full_of_quantised(ctx) -> None:
    view = ctx.view
    if view.method != "full":
        return
    q, bits = quantised_field(view)
    if q is None:
        return
    m = view.method_field
    if m is not None:
        how = f"{m.key}: {m.written}"
    else:
        how = "no adapter is configured (the trainer's default is no adapter)"
    ctx.report(q, key=q.key, bits=bits, how=how)


@check("fp16-weights-under-fp16-loss-scaling", when=("model.dtype", "precision.fp16"), methods=("full",))
def fp16_master(ctx) -> None:
    view = ctx.view
    if view.method != "full":
        return  # adapters are created in fp32 beside a half-precision base (PEFT autocast_adapter_dtype)
    dt, fp = view.get("model.dtype"), view.get("precision.fp16")
    if _word(dt) not in _HALF or fp is None or fp.value is not True:
        return
    fix = Fix(tier="changes-training", summary=f"{dt.key}: {dt.written} -> float32 (fp16 autocast over fp32 weights)",
              edits=(Edit(path=dt.path, old=dt.written, new="float32"),))
    ctx.report(fp, fix=fix, key=fp.key, dtype_key=dt.key, dtype=dt.written)


@check("qlora-fp16-with-bf16-compute", when=(("quant.load_4bit", "quant.bits"), "quant.compute_dtype", "precision.fp16"))
def qlora_fp16_bf16(ctx) -> None:
    view = ctx.view
    q, bits = quantised_field(view, bits=(4,))
    if q is None:
        return
    cd, fp = view.get("quant.compute_dtype"), view.get("precision.fp16")
    if _word(cd) not in _BF16 or fp is None or fp.value is not True:
        return
    ctx.report(cd, key=cd.key, value=cd.written, fp16_key=fp.key)


_VARLEN = frozenset({"flash_attention_2", "flash_attention_3", "kernels-community/flash-attn",
           "kernels-community/vllm-flash-attn3", "flex_attention", "fa2", "fa3"})
_FLASH = frozenset({"flash_attention_2", "flash_attention_3", "fa2", "fa3"})


@check("attention-kernel-unsuited", when=(("model.attention", "data.padding_free"),))
def attention_kernel(ctx) -> None:
    view = ctx.view
    att = view.get("model.attention")
    word = _word(att)
    if word in _FLASH:
        dt = view.get("model.dtype")
        autocast = view.is_on("precision.bf16") or view.is_on("precision.fp16")
        if _word(dt) in _FP32 and not autocast:
            ctx.report(att, "fp32", key=att.key, value=att.written, dtype_key=dt.key, dtype=dt.written)
    if word == "sdpa":
        arch = ctx.model() if "model.ref" in (view.layout.fields if view.layout else {}) else None
        if arch is not None and arch.family in ctx.thresholds["softcap_families"]:
            ctx.report(att, "softcap", key=att.key, value=att.written, family=arch.family)
    pf = view.get("data.padding_free")
    if pf is not None and pf.value is True and not view.is_on("data.packing"):
        if word in _VARLEN or (att is not None and att.auto) or view.is_on("model.flash_attention"):
            return
        ctx.report(pf, "padding-free", key=pf.key, attention=word or "not set")


@check("pad-token-is-eos", when=("tokenizer.pad_token", "tokenizer.eos_token"))
def pad_is_eos(ctx) -> None:
    view = ctx.view
    if view.layout is None or not view.layout.trainer_defaults:
        return  # recipe runners build labels themselves and pad them by position
    pad, eos = view.get("tokenizer.pad_token"), view.get("tokenizer.eos_token")
    if pad is None or eos is None or not isinstance(pad.value, str) or not isinstance(eos.value, str):
        return
    if pad.value != eos.value or not pad.value:
        return
    ctx.report(pad, key=pad.key, eos_key=eos.key, token=pad.value)
