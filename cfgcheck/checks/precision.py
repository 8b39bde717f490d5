"""Precision settings against what the GPU can run."""

from __future__ import annotations

from ..findings import Edit, Fix
from ..knowledge.hardware import FEATURE_MIN_CAPABILITY
from ..load import dotted
from . import check

_BF16_WORDS = frozenset({"bfloat16", "bf16"})


def _wanted(view):
    """(feature, field) pairs for every precision feature the config turns on."""
    out = []
    for name in ("precision.bf16",):
        f = view.get(name)
        if f is None:  # not written: the runner's own default, where it turns bf16 on
            d = view.effective(name)
            f = d if d is not None and d.origin == "default" else None
        if f is not None and f.value is True:
            out.append(("bf16", f))
    for name in ("model.dtype", "quant.compute_dtype"):
        f = view.get(name)
        if f is not None and isinstance(f.value, str) and f.value.strip().lower() in _BF16_WORDS:
            out.append(("bf16", f))
    # the launcher's mixed precision: written here (an accelerate file), or from the launch
    # context the run is started with (a launch file or script)
    f = view.get("precision.mixed")
    if f is None or f.value is None:
        f = view.effective("precision.mixed")
        f = f if f is not None and f.origin == "launch" else None
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


_FP16_WORDS = frozenset({"float16", "fp16", "half"})
# bf16 asked for in several places is one cause: one finding at the first of these, the others
# listed with it
_BF16_ORDER = ("precision.bf16", "precision.mixed", "model.dtype", "quant.compute_dtype")


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


def _dtype_word(written: str, bits: int) -> str:
    """float16/float32 in the spelling the file uses (bfloat16 -> float*, bf16 -> fp*)."""
    short = written.strip().lower() in ("bf16",)
    return ("fp16" if short else "float16") if bits == 16 else ("fp32" if short else "float32")


def _half_plan(view):
    """How this run leaves bf16 on a card without it: "fp16" (fp16 mixed precision over
    weights that are fp32 where they train) or "fp32" (the runner refuses fp16, or its fp16 flag
    would load the trained weights in fp16), and why in words."""
    lay = view.layout
    mode = lay.fp16_mode if lay is not None else "autocast"
    if mode == "refused":
        return "fp32", "this runner refuses fp16 training and takes bf16 or fp32 only"
    if mode == "loads-weights" and _trains_weights(view):
        return "fp32", ("this runner's fp16 flag also loads the weights in fp16, which a full "
                        "fine-tune cannot train (\"Attempting to unscale FP16 gradients\")")
    return "fp16", ""


def _trains_weights(view) -> bool:
    """Whether the run trains the base weights themselves (a full or partial fine-tune of a
    training recipe; not an adapter, and not a DeepSpeed or launcher file, which load no weights)."""
    return not view.is_adapter and view.layout is not None and view.layout.role == "run"


def _trains_full_modules(view) -> bool:
    """An adapter run that also trains whole modules (modules_to_save): PEFT copies them in the
    base's dtype, so with fp16 weights their gradients are fp16 and cannot be unscaled (axolotl
    bug report #1031: the crash appeared once lora_modules_to_save listed embed_tokens and lm_head)."""
    f = view.get("adapter.save_modules")
    return view.is_adapter and f is not None and bool(f.value)


def _bf16_fix(view, fields, gpu):
    """One fix for every place that asks for bf16: a config the runner then trains."""
    plan, _why = _half_plan(view)
    full = _trains_weights(view) or _trains_full_modules(view)
    edits: list[Edit] = []
    words: list[str] = []
    turned_fp16 = False
    if any(not f.path for f in fields):
        return None  # a default or a launch file's value: nothing written here to change
    for f in fields:
        if f.name == "precision.bf16":
            edits.append(Edit(path=f.path, old=f.written, new=False))
            words.append(f"{f.key}: true -> false")
            fp = view.get("precision.fp16")
            if plan == "fp16":
                for e in _fp16_edit(view, f):
                    edits.append(e)
                    words.append(f"{dotted(e.path)}: " + ("added as " if e.insert else "-> ")
                                 + ("true" if e.new is True else "{enabled: true}"))
                turned_fp16 = True
            elif fp is not None and fp.value is True:
                edits.append(Edit(path=fp.path, old=fp.written, new=False))
                words.append(f"{fp.key}: true -> false")
        elif f.name == "precision.mixed":
            if plan != "fp16" or f.origin != "written":  # fp32 is "no", which we do not guess;
                return None  # a launch file's value is fixed in that file, not here
                return None  # a launcher's mixed precision: fp32 is "no", which we do not guess
            edits.append(Edit(path=f.path, old=f.written, new="fp16"))
            words.append(f"{f.key}: {f.written} -> fp16")
            turned_fp16 = True
        elif isinstance(f.written, str):
            # the weights: fp32 where a full fine-tune trains them (fp16 master weights cannot be
            # unscaled), or where the runner refuses fp16; fp16 for frozen adapter bases
            # (the 4-bit compute dtype stays 16-bit: fp32 compute is what quant-compute-dtype-fp32 flags)
            bits = 32 if f.name == "model.dtype" and (plan == "fp32" or full) else 16
            new = _dtype_word(f.written, bits)
            edits.append(Edit(path=f.path, old=f.written, new=new))
            words.append(f"{f.key}: {f.written} -> {new}")
        else:
            return None
    # a full fine-tune whose weights are written as float16 elsewhere must not meet fp16 mixed
    # precision: those weights train, and fp16 gradients cannot be unscaled
    dt = view.get("model.dtype")
    if turned_fp16 and full and dt is not None and dt not in fields and isinstance(dt.value, str) \
            and dt.value.strip().lower() in _FP16_WORDS:
        new = _dtype_word(dt.written if isinstance(dt.written, str) else "", 32)
        edits.append(Edit(path=dt.path, old=dt.written, new=new))
        words.append(f"{dt.key}: {dt.written} -> {new}")
    what = ("fp16 mixed precision" + (" over fp32 weights" if full else "")) if turned_fp16 \
        else "fp32"
    return Fix(tier="changes-training", summary=f"{', '.join(words)} ({what} on the {gpu.name})",
               edits=tuple(edits))


def _fix_for(feature, f, gpu, view):
    if feature == "tf32":
        return Fix(tier="changes-training", summary=f"{f.key}: true -> false (no TF32 below 8.0)",
                   edits=(Edit(path=f.path, old=f.written, new=False),))
    return None


@check("precision-unsupported-on-gpu", when=(("precision.bf16", "model.dtype", "quant.compute_dtype", "precision.mixed",
                                                "precision.tf32", "model.attention"),))
def precision_vs_gpu(ctx) -> None:
    view = ctx.view
    wanted = _wanted(view)
    if not wanted:
        return
    gpu = ctx.gpu
    if gpu is None:
        ctx.cannot_judge("no GPU named (--gpu NAME); "
                         + ", ".join(sorted({w for w, _ in wanted})) + " support not checked")
        return
    bf16 = sorted((f for w, f in wanted if w == "bf16"), key=lambda f: _BF16_ORDER.index(f.name))
    done_bf16 = False
    for feature, f in wanted:
        if gpu.supports(feature):
            continue
        need, source = FEATURE_MIN_CAPABILITY[feature]
        extra: dict = {}
        fix = None
        if feature == "bf16":
            if done_bf16:
                continue
            done_bf16 = True
            f, others = bf16[0], bf16[1:]
            plan, why = _half_plan(view)
            if plan == "fp32":
                dt = next((o for o in bf16 if o.name == "model.dtype"), None)
                how = (f"{dt.key}: {_dtype_word(dt.written, 32)}" if dt is not None
                       and isinstance(dt.written, str) else "bf16 off, fp16 left off")
                suits = f"train in fp32 ({how}): {why}"
            elif not (_trains_weights(view) or _trains_full_modules(view)):
                suits = "use fp16 mixed precision (with loss scaling) on this card"
            else:
                suits = ("use fp16 mixed precision with the weights in fp32 on this card "
                         "(fp16 weights cannot be trained with loss scaling)")
            arch = ctx.model() if plan == "fp16" else None
            if arch is not None and (arch.torch_dtype or "").lower() in _BF16_WORDS:
                suits += (f"; the {arch.family} weights are stored in {arch.torch_dtype}, so keep "
                          "dynamic loss scaling on and watch the loss for inf/NaN (fp16 overflows "
                          "above 65504)")
            fix = _bf16_fix(view, bf16, gpu)
            extra = dict(also="".join(f" and {o.key or o.note}" for o in others),
                         also_keys=[o.key or o.note for o in others])
        elif feature == "fp8":
            suits = "bf16" if gpu.supports("bf16") else "fp16"
        elif feature == "tf32":
            suits = "plain fp32 matmuls (tf32: false)"
            fix = _fix_for(feature, f, gpu, view)
        else:
            suits = "attn_implementation: sdpa"
        ctx.report(f, feature, fix=fix, related=[o for o in bf16[1:] if o.path] if feature == "bf16" else (),
                   key=f.key or f.note, feature=feature, gpu=gpu.label, capability=gpu.capability_text,
                   needed=f"{need[0]}.{need[1]}", suits=suits, source=source, **extra)


@check("bf16-and-fp16-both-on", when=("precision.bf16", "precision.fp16"))
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


@check("fp16-training-of-bf16-model", when=(("precision.fp16", "precision.mixed"),))
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
        # fp16 is the only half precision this card has: nothing to change here (the overflow
        # caveat travels with the bf16 finding and its fix, precision-unsupported-on-gpu)
        return
    ctx.report(f, key=f.key, family=arch.family, stored=arch.torch_dtype,
               source=arch.source or "model config")
