"""Checks on distributed runs: ZeRO-3 saving, DeepSpeed files that replace trainer settings,
checkpointing under data parallel, FSDP with adapters or quantisation, device placement."""

from __future__ import annotations

from types import MappingProxyType


from ..findings import Edit, Fix
from . import check

# transformers TrainingArguments defaults the DeepSpeed integration compares with (4.57 and 5.x,
# training_args.py): max_grad_norm 1.0, learning_rate 5e-5, weight_decay 0.0, fp16/bf16 False
HF_DEFAULTS = MappingProxyType({"optim.grad_clip": 1.0, "optim.lr": 5e-5, "optim.weight_decay": 0.0,
               "precision.fp16": False, "precision.bf16": False})


def trainer_defaults_apply(view) -> bool:
    """Whether the keys this layout leaves out take the transformers TrainingArguments defaults."""
    return view.layout is not None and view.layout.trainer_defaults


def deepspeed_views(view):
    """(DeepSpeed view, label) for every DeepSpeed config the run uses: linked or inline."""
    out = []
    for ds in view.attached:
        if ds.layout is None:
            continue
        inline = ds.doc is view.doc or ds.doc.name == view.doc.name
        out.append((ds, "the inline deepspeed block" if inline else ds.doc.name))
    return out


def main_path(view, ds, f):
    """The key path of a DeepSpeed field in this document (an inline block), or None (a linked
    file: the finding is placed on the key that names the file)."""
    if f is None or not (ds.doc is view.doc or ds.doc.name == view.doc.name):
        return None
    link = view.get("runtime.deepspeed")
    prefix = link.path if link is not None and isinstance(link.value, dict) else ("deepspeed",)
    return tuple(prefix) + tuple(f.path)


def link_path(view, ds) -> tuple:
    """The key that brings a DeepSpeed config in: the inline block, or the key naming the file."""
    link = view.get("runtime.deepspeed")
    if link is not None:
        return tuple(link.path)
    return ("deepspeed",) if ds.doc is view.doc or ds.doc.name == view.doc.name else ()


def _at(view, ds, f):
    """Where to report a DeepSpeed field: itself (inline), else the key naming the file."""
    path = main_path(view, ds, f)
    return path if path is not None else link_path(view, ds)


def zero_stage(view):
    """(stage, field, DeepSpeed view or None, label): ZeRO stage of the run when some file says it."""
    own = view.get("runtime.zero_stage")
    if own is not None and isinstance(own.value, int):
        return own.value, own, None, "this file"
    for ds, label in deepspeed_views(view):
        f = ds.get("runtime.zero_stage")
        if f is not None and isinstance(f.value, int):
            return f.value, f, ds, label
    return None, None, None, ""


def _truthy_text(value) -> bool:
    if isinstance(value, str):
        return value.strip().lower() not in ("", "false", "no", "none", "null", "0")
    if isinstance(value, (list, dict)):
        return bool(value)
    return value is True


def fsdp_on(view):
    """The field that turns FSDP on, or None."""
    for name in ("runtime.fsdp", "runtime.fsdp_sharding"):
        f = view.get(name)
        if f is not None and _truthy_text(f.value):
            return f
    f = view.get("runtime.distributed")
    if f is not None and isinstance(f.value, str) and f.value.strip().upper() == "FSDP":
        return f
    return None


def fsdp_version(view) -> int:
    f = view.get("runtime.fsdp_version")
    return f.value if f is not None and isinstance(f.value, int) else 1


def quantised_field(view, bits=(4, 8)):
    for name, b in (("quant.load_4bit", 4), ("quant.load_8bit", 8)):
        f = view.get(name)
        if b in bits and f is not None and f.value is True:
            return f, b
    f = view.get("quant.bits")
    if f is not None and isinstance(f.value, int) and f.value in bits:
        return f, f.value
    return None, None


# --------------------------------------------------------------------------- ZeRO-3 saving

@check("zero3-save-without-gathered-weights")
def zero3_save(ctx) -> None:
    view = ctx.view
    if view.is_adapter:
        return  # transformers gathers the trainable adapter weights itself under ZeRO-3
    strategy = view.get("cadence.save_strategy")
    if strategy is not None and isinstance(strategy.value, str) and strategy.value.strip().lower() == "no":
        return
    own = view.get("runtime.zero3_save_16bit")
    stage = view.get("runtime.zero_stage")
    if stage is not None and stage.value == 3 and own is not None:
        # a launcher file (accelerate's zero3_save_16bit_model); the trainer is not known here
        if own.value is False:
            ctx.report(own, "launcher", key=own.key, stage_key=stage.key)
        return
    launched = view.effective("runtime.zero3_save_16bit")
    launched_stage = view.effective("runtime.zero_stage")
    if own is None and launched is not None and launched.origin == "launch" and launched.value is False \
            and launched_stage is not None and launched_stage.value == 3 and view.method is not None:
        # the launch file this run starts with: its ZeRO-3 saves this config's model ungathered
        key, _, where = launched.note.partition(" in ")
        ctx.report(launched, "written", ds_file=where, ds_key=key,
                   method="full fine-tune" if view.method == "full" else "run")
        return
    launcher = view.get("runtime.distributed")
    if stage is not None and stage.value == 3 and own is None and view.get("runtime.deepspeed") is None \
            and launcher is not None and isinstance(launcher.value, str) \
            and launcher.value.strip().upper() == "DEEPSPEED":
        # accelerate builds the DeepSpeed config from its own fields: zero3_save_16bit_model
        # defaults to false (accelerate DeepSpeedPlugin)
        ctx.report(stage, "launcher-missing", stage_key=stage.key)
        return
    for ds, label in deepspeed_views(view):
        st = ds.get("runtime.zero_stage")
        if st is None or st.value != 3:
            continue
        g = ds.get("runtime.zero3_save_16bit")
        if g is not None and (g.auto or g.value is not False):
            continue
        if view.method is None:
            # a launcher's DeepSpeed file: whether a full model is saved is not known here
            if g is not None:
                ctx.report(_at(view, ds, g), "launcher", key=f"{g.key} in {label}",
                           stage_key=st.key)
            else:
                ctx.report(_at(view, ds, st), "launcher-missing", stage_key=f"{st.key} in {label}")
            continue
        method = "full fine-tune" if view.method == "full" else "run"
        if g is not None:
            fix = None
            path = main_path(view, ds, g)
            if path is not None:
                fix = Fix(tier="changes-training",
                          summary=f"{'.'.join(map(str, path))}: false -> true (save a loadable model; "
                                  "the weights are gathered at each save)",
                          edits=(Edit(path=path, old=g.written, new=True),))
            ctx.report(_at(view, ds, g), "written", fix=fix, ds_file=label, ds_key=g.key,
                       method=method)
        else:
            ctx.report(_at(view, ds, st), "missing", ds_file=label, stage_key=st.key, method=method)


# --------------------------------------------------------------------------- DeepSpeed replacing settings

_SHAPES = MappingProxyType({  # trainer lr_scheduler_type -> the DeepSpeed scheduler of the same shape
    "linear": "warmupdecaylr", "cosine": "warmupcosinelr", "constant_with_warmup": "warmuplr",
})
_ADAM = frozenset({"adam", "adamw"})


@check("deepspeed-file-replaces-trainer-setting")
def deepspeed_replaces(ctx) -> None:
    view = ctx.view
    defaults = trainer_defaults_apply(view)
    for ds, label in deepspeed_views(view):
        clip_ds = ds.get("optim.grad_clip")
        clip = view.get("optim.grad_clip")
        if clip_ds is None and "gradient_clipping" not in (ds.doc.data or {}):
            value, where = None, None
            if clip is not None and isinstance(clip.value, (int, float)) and not isinstance(clip.value, bool):
                value, where = clip.value, "written"
            elif clip is None and defaults:
                value, where = HF_DEFAULTS["optim.grad_clip"], "the transformers default"
            if value is not None and value > 0:
                ctx.report(clip if clip is not None else link_path(view, ds), "no-clipping",
                           key=clip.leaf if clip is not None else "max_grad_norm", value=value,
                           where=where, ds_file=label)
        sched_ds, sched = ds.get("optim.scheduler"), view.get("optim.scheduler")
        if sched_ds is not None and isinstance(sched_ds.value, str) and sched is not None \
                and isinstance(sched.value, str):
            ours = sched.value.strip().lower()
            theirs = sched_ds.value.strip().lower()
            if _SHAPES.get(ours) != theirs:
                ctx.report(sched, "scheduler", key=sched.leaf, value=sched.value, ds_file=label,
                           ds_key=sched_ds.key, ds_value=sched_ds.value)
        opt_ds, opt = ds.get("optim.name"), view.get("optim.name")
        if opt_ds is not None and isinstance(opt_ds.value, str) and opt is not None \
                and isinstance(opt.value, str):
            ours = opt.value.strip().lower()
            theirs = opt_ds.value.strip().lower()
            same = theirs in _ADAM and ours.startswith("adam")
            if not same:
                ctx.report(opt, "optimizer", key=opt.leaf, value=opt.value, ds_file=label,
                           ds_key=opt_ds.key, ds_value=opt_ds.value)


# --------------------------------------------------------------------------- checkpointing under DDP

def _reentrant(ctx, view):
    """(True | False | None, field or pin): whether checkpointing is reentrant, and what says so."""
    written = view.get("runtime.gc_reentrant")
    if written is not None and isinstance(written.value, bool):
        return written.value, written
    from ..knowledge.pins import version_key
    from .releases import installed

    pinned = installed(ctx).get("transformers")
    if pinned is not None:
        release = version_key(pinned[0])[:2]
        if release >= (5, 0):
            return False, pinned  # 5.x checkpoints without reentrancy by default (modeling_utils.py)
        if release >= (4, 35):
            return True, pinned
    return None, None


@check("checkpointing-with-ddp-unused-parameters", when=("runtime.gradient_checkpointing",))
def checkpointing_ddp(ctx) -> None:
    view = ctx.view
    gc = view.get("runtime.gradient_checkpointing")
    if gc is None or gc.value is not True:
        return
    unused = view.get("runtime.ddp_find_unused")
    gpus, _ = ctx.num_gpus
    if unused is None:
        # the Trainer turns the search off with checkpointing only for a PreTrainedModel; an
        # adapter-wrapped model (PeftModel) keeps find_unused_parameters=True
        if not view.is_adapter or not trainer_defaults_apply(view) or gpus is None or gpus < 2:
            return
        at, adapter, key = gc, "", "ddp_find_unused_parameters"
        search = ("ddp_find_unused_parameters is not set, so the adapter-wrapped model keeps DDP's "
                  "unused-parameter search on")
    elif unused.value is True:
        if gpus == 1:
            return  # one process: no DistributedDataParallel wrapper
        at, adapter, key = unused, " with adapters" if view.is_adapter else "", unused.key
        search = f"{unused.key} is true"
    else:
        return
    reentrant, why = _reentrant(ctx, view)
    if reentrant is False:
        return  # non-reentrant checkpointing works with the search (it only costs a graph walk)
    if reentrant is True and not isinstance(why, tuple):
        ctx.report(at, "reentrant", key=key, search=search, gc_key=gc.key, reentrant_key=why.key,
                   adapter=adapter)
    elif reentrant is True:
        ctx.report(at, "reentrant-default", key=key, search=search, gc_key=gc.key, version=why[0],
                   where=why[1], adapter=adapter)
    else:
        ctx.report(at, "default", key=key, search=search, gc_key=gc.key, adapter=adapter)


# --------------------------------------------------------------------------- FSDP with adapters / quantisation

_DTYPE_WORDS = MappingProxyType({"bfloat16": "bfloat16", "bf16": "bfloat16", "float16": "float16", "fp16": "float16",
                "half": "float16", "float32": "float32", "fp32": "float32", "float": "float32",
                "uint8": "uint8"})


def _dtype(value):
    if not isinstance(value, str):
        return None
    word = value.strip().lower().removeprefix("torch.")
    return _DTYPE_WORDS.get(word)


@check("quant-storage-differs-from-model-dtype", when=(("quant.load_4bit", "quant.bits"),))
def quant_storage(ctx) -> None:
    view = ctx.view
    q, bits = quantised_field(view, bits=(4,))
    if q is None:
        return
    shard = fsdp_on(view)
    stage, stage_f, _ds, _label = zero_stage(view)
    if shard is None and stage != 3:
        return
    by = shard.key if shard is not None else (stage_f.key or "zero_optimization.stage")
    dtype_f = view.get("model.dtype")
    model_dtype = _dtype(dtype_f.value) if dtype_f is not None else None
    if model_dtype is None and view.is_on("precision.bf16"):
        model_dtype = None  # the weights' dtype is not written: bf16 mixed precision keeps fp32 or not
    storage = view.get("quant.storage")
    store = _dtype(storage.value) if storage is not None else None
    if storage is None and trainer_defaults_apply(view):
        # the file is parsed into the trainer's arguments, so the bitsandbytes default applies
        # (recipe runners may set the storage themselves)
        ctx.report(q, "missing", key=q.key, sharding=by,
                   dtype=model_dtype or "the model dtype")
        return
    if storage is None or store is None or model_dtype is None or store == model_dtype:
        return
    new = dtype_f.written if isinstance(dtype_f.written, str) else model_dtype
    fix = Fix(tier="changes-training", summary=f"{storage.key}: {storage.written} -> {new}",
              edits=(Edit(path=storage.path, old=storage.written, new=new),))
    ctx.report(storage, "differs", fix=fix, key=storage.key, storage=storage.value,
               dtype_key=dtype_f.key, dtype=dtype_f.value, sharding=by)


@check("fsdp-and-trainer-checkpointing-both-on", when=("runtime.gradient_checkpointing", "runtime.fsdp_checkpointing"))
def fsdp_double_checkpointing(ctx) -> None:
    view = ctx.view
    # FSDP's checkpointing: written here, or in the launch file the run starts with
    gc, ac = view.get("runtime.gradient_checkpointing"), view.effective("runtime.fsdp_checkpointing")
    if gc is None or ac is None or gc.value is not True or ac.value is not True or gc.path == ac.path:
        return
    fix = Fix(tier="changes-training", summary=f"{gc.key}: true -> false (FSDP checkpoints the layers)",
              edits=(Edit(path=gc.path, old=gc.written, new=False),))
    ctx.report(gc, fix=fix, key=gc.key, fsdp_key=ac.key or ac.note)


# The decoder layer class of each model family (transformers models/<family>/modeling_<family>.py);
# tests/reference checks these names against the installed transformers.
DECODER_LAYER = MappingProxyType({
    "llama": "LlamaDecoderLayer", "mistral": "MistralDecoderLayer", "mixtral": "MixtralDecoderLayer",
    "qwen2": "Qwen2DecoderLayer", "qwen3": "Qwen3DecoderLayer", "gemma": "GemmaDecoderLayer",
    "gemma2": "Gemma2DecoderLayer", "phi3": "Phi3DecoderLayer",
})


def _other_family(name: str, own: str) -> bool:
    """Whether NAME is the class of another family's model (it starts with that family's prefix
    and not with this one's, or with a longer prefix such as Qwen2Moe for Qwen2)."""
    others = [cls[: -len("DecoderLayer")] for cls in DECODER_LAYER.values()]
    prefixes = [p for p in others if name.startswith(p)]
    return bool(prefixes) and max(prefixes, key=len) != own


@check("fsdp-wrap-class-not-in-model", when=("runtime.fsdp_wrap",))
def fsdp_wrap_class(ctx) -> None:
    view = ctx.view
    f = view.effective("runtime.fsdp_wrap")  # written here, or in the launch file of the run
    if f is None or f.value is None:
        return
    names = [n.strip() for n in (f.value.split(",") if isinstance(f.value, str) else f.value) if n.strip()]
    if not names:
        return
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's layer classes are not known offline")
        return
    want = DECODER_LAYER.get(arch.family)
    if want is None:
        ctx.cannot_judge("the decoder layer class of this model family is not in cfgcheck's table",
                         family=arch.family)
        return
    own = want[: -len("DecoderLayer")]
    # another class of the same model (a mixture-of-experts block) is a valid choice too:
    # only names that belong to none of this family's classes are reported
    if any(n == want or (n.startswith(own) and not _other_family(n, own)) for n in names):
        return
    if not all(_other_family(n, own) for n in names):
        return
    fix = None
    if isinstance(f.written, str) and len(names) == 1 and f.origin == "written":
        fix = Fix(tier="changes-training", summary=f"{f.key}: {f.written} -> {want}",
                  edits=(Edit(path=f.path, old=f.written, new=want),))
    ctx.report(f, fix=fix, key=f.key or f.note, written=", ".join(names), family=arch.family, layer=want)


# --------------------------------------------------------------------------- device placement

@check("device-map-under-distributed-run", when=(("model.device_map", "model.low_cpu_mem"),))
def device_map_distributed(ctx) -> None:
    view = ctx.view
    dm, low = view.get("model.device_map"), view.get("model.low_cpu_mem")
    stage, stage_f, _ds, label = zero_stage(view)
    dm_set = dm is not None and (dm.auto or (dm.value is not None and dm.value is not False))
    if stage == 3:
        if dm_set:
            ctx.report(dm, "zero3", key=dm.key, value=dm.written, stage_file=label)
        elif low is not None and low.value is True:
            ctx.report(low, "zero3-low-cpu", key=low.key, stage_file=label)
        return
    if dm is None or not dm.auto and not (isinstance(dm.value, str) and dm.value.strip().lower()
                                          in ("balanced", "balanced_low_0", "sequential")):
        return
    gpus, gpus_f = ctx.num_gpus
    if gpus is None or gpus < 2:
        return
    q, bits = quantised_field(view)
    ctx.report(dm, "ddp-quantised" if q is not None else "ddp", key=dm.key, value=dm.written,
               gpus=gpus, bits=bits or "", base=f"an {bits}-bit" if bits == 8 else f"a {bits}-bit")
