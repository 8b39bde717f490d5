"""Checks on the runtime: activation checkpointing, and linked DeepSpeed files against the config."""

from __future__ import annotations

from ..schedule import TRAINER_DEFAULTS
from . import check


@check("checkpointing-with-kv-cache")
def checkpointing_with_cache(ctx) -> None:
    view = ctx.view
    gc, cache = view.get("runtime.gradient_checkpointing"), view.get("runtime.use_cache")
    if gc is None or cache is None or gc.value is not True or cache.value is not True:
        return
    ctx.report(cache, key=cache.key, gc_key=gc.key)


# (our field, DeepSpeed field, the trainer argument HF compares it with)
_PAIRS = (
    ("batch.per_device", "batch.per_device", "per_device_train_batch_size"),
    ("batch.accumulation", "batch.accumulation", "gradient_accumulation_steps"),
)
_HF_TRAINER = ("trainer", "llama-factory", "axolotl")


@check("deepspeed-file-contradicts-config")
def deepspeed_contradicts(ctx) -> None:
    view = ctx.view
    for link in view.cache.get("links", []):
        if link.problem and link.field == "runtime.deepspeed":
            ctx.cannot_judge(f"the DeepSpeed file {link.problem}", linked=link.target)
    defaults = view.layout is not None and view.layout.trainer_defaults
    launcher = view.layout is not None and view.layout.role == "launch"
    for ds in view.attached:
        if ds.layout is None or ds.layout.role != "engine":
            continue
        name = "the inline deepspeed block" if ds.doc is view.doc or ds.doc.name == view.doc.name \
            else ds.doc.name
        for ours, theirs, hf_key in _PAIRS:
            d = ds.get(theirs)
            if d is None or d.auto or not isinstance(d.value, int):
                continue
            f = view.get(ours)
            value, where = None, None
            if f is not None and isinstance(f.value, int) and not f.auto:
                value, where = f.value, "written"
            elif f is None and defaults and ours in TRAINER_DEFAULTS:
                value, where = TRAINER_DEFAULTS[ours], "the default"
            if value is None or value == d.value:
                continue
            at = f if f is not None else view.get("runtime.deepspeed")
            ctx.report(at, "accelerate" if launcher else "default",
                       key=f.leaf if f is not None else hf_key, value=value, where=where,
                       ds_file=name, ds_key=d.key, ds_value=d.value)
        for ours, theirs in (("precision.bf16", "precision.bf16"), ("precision.fp16", "precision.fp16")):
            d, f = ds.get(theirs), view.get(ours)
            if d is None or d.auto or not isinstance(d.value, bool):
                continue
            if f is None or f.auto or not isinstance(f.value, bool) or f.value == d.value:
                continue
            ctx.report(f, "precision", key=f.leaf, value=f.value, ds_file=name, ds_key=d.key,
                       ds_value=d.value)
