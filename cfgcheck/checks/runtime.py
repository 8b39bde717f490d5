"""Checks on the runtime: activation checkpointing, and linked DeepSpeed files against the config."""

from __future__ import annotations

from ..schedule import TRAINER_DEFAULTS
from . import check
from .distributed import HF_DEFAULTS, link_path, main_path, trainer_defaults_apply


@check("checkpointing-with-kv-cache", when=("runtime.gradient_checkpointing", "runtime.use_cache"))
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


@check("deepspeed-file-contradicts-config")
def deepspeed_contradicts(ctx) -> None:
    view = ctx.view
    for link in view.links:
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
        _global_batch(ctx, view, ds, name, defaults)
        for ours, theirs in (("precision.bf16", "precision.bf16"), ("precision.fp16", "precision.fp16")):
            d, f = ds.get(theirs), view.get(ours)
            if d is None or d.auto or not isinstance(d.value, bool):
                continue
            value, key, at = None, ours.split(".")[1], f
            if f is not None and not f.auto and isinstance(f.value, bool):
                value, key = f.value, f.leaf
            elif f is None and defaults:
                # unset: the trainer's own default (TrainingArguments False; TRL SFTConfig's bf16
                # default comes through the opened run), which the integration compares too
                eff = view.effective(ours)
                value = eff.value if eff is not None and isinstance(eff.value, bool) else False
                # no key of its own here: the DeepSpeed key (inline block) or the key naming the file
                at = main_path(view, ds, d) or link_path(view, ds) or view.get("model.ref")
            if value is None or value == d.value:
                continue
            # a flag left out at its default false gets its own wording
            variant = "precision-default" if f is None and value is False else "precision"
            ctx.report(at, variant, key=key, value=value, ds_file=name, ds_key=d.key,
                       ds_value=d.value)
        mixed = view.get("precision.mixed")
        if mixed is not None and isinstance(mixed.value, str):
            # accelerate DeepSpeedPlugin.set_mixed_precision refuses the other half precision
            word = mixed.value.strip().lower()
            other = {"fp16": "precision.bf16", "bf16": "precision.fp16", "fp8": "precision.fp16"}.get(word)
            d = ds.get(other) if other else None
            if d is not None and d.value is True and not d.auto:
                ctx.report(mixed, "launcher-precision", key=mixed.key, value=mixed.value, ds_file=name,
                           ds_key=d.key)
        if not trainer_defaults_apply(view):
            continue
        # numbers the integration also compares: the DeepSpeed optimizer's lr and weight decay,
        # and gradient_clipping, against the arguments (written or their defaults)
        for ours, hf_key in (("optim.lr", "learning_rate"), ("optim.weight_decay", "weight_decay"),
                             ("optim.grad_clip", "max_grad_norm")):
            d, f = ds.get(ours), view.get(ours)
            if d is None or d.auto or not _number(d.value):
                continue
            if f is not None and _number(f.value) and not f.auto:
                value, where = f.value, "written"
            elif f is None:
                value, where = HF_DEFAULTS[ours], "the default"
            else:
                continue
            if float(value) == float(d.value):
                continue
            ctx.report(f if f is not None else (main_path(view, ds, d) or link_path(view, ds)),
                       "default", key=hf_key, value=value, where=where, ds_file=name, ds_key=d.key,
                       ds_value=d.value)


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _global_batch(ctx, view, ds, name: str, defaults: bool) -> None:
    """The DeepSpeed file's train_batch_size against the config's micro-batch x accumulation x
    GPUs: the integration fills "auto" from that product and DeepSpeed asserts they are equal."""
    d = ds.get("batch.global")
    if d is None or d.auto or not isinstance(d.value, int) or isinstance(d.value, bool) or d.value <= 0:
        return
    values, froms = [], []
    for ours, hf_key in (("batch.per_device", "per_device_train_batch_size"),
                         ("batch.accumulation", "gradient_accumulation_steps")):
        f = view.get(ours)
        if f is not None and isinstance(f.value, int) and not f.auto and f.value > 0:
            values.append(f.value)
            froms.append(f.key)  # which key, where train and eval batches are both written
        elif f is None and defaults and ours in TRAINER_DEFAULTS:
            values.append(TRAINER_DEFAULTS[ours])
            froms.append(f"{hf_key} default")
        else:
            return
    pd, ga = values
    sources = dict(per_device_from=froms[0], accumulation_from=froms[1])
    gpus, gpus_f = ctx.num_gpus
    at = view.get("runtime.deepspeed") or view.get("batch.per_device")
    if ds.doc.name == view.doc.name and isinstance(view.doc.data, dict) \
            and isinstance(view.doc.data.get("deepspeed"), dict):
        at = ("deepspeed",) + tuple(d.path)  # an inline block: its own key
    if gpus:
        expected = pd * ga * gpus
        if expected != d.value:
            run = ctx.run
            ctx.report(at, "global-batch", ds_file=name, ds_key=d.key, ds_value=d.value, per_device=pd,
                       accumulation=ga, gpus=gpus, expected=expected, **sources,
                       gpus_from=gpus_f.key if gpus_f is not None else (run.gpus_from if run else "--gpus"))
    elif d.value % (pd * ga) != 0:
        ctx.report(at, "global-batch-no-gpus", ds_file=name, ds_key=d.key, ds_value=d.value,
                   per_device=pd, accumulation=ga, product=pd * ga, **sources)
