"""Checks on quantised training: bitsandbytes settings, LoftQ, merging adapters for export."""

from __future__ import annotations

from ..findings import Edit, Fix
from . import ADAPTER, check

# sections whose keys are BitsAndBytesConfig arguments, so its defaults apply to what is missing
_BNB_SECTIONS = ("quantization_config", "bnb", "quantization", "bnb_config_kwargs")


def _quantised(view):
    """The field that loads the base quantised (4-bit, 8-bit or a bit width), or None."""
    for name in ("quant.load_4bit", "quant.load_8bit"):
        f = view.get(name)
        if f is not None and f.value is True:
            return f
    f = view.get("quant.bits")
    if f is not None and isinstance(f.value, int) and f.value in (2, 3, 4, 5, 6, 8):
        return f
    return None


def _bnb_defaults_apply(view) -> bool:
    f = view.get("quant.load_4bit")
    return f is not None and f.value is True and len(f.path) > 1 and f.path[0] in _BNB_SECTIONS


def _loftq(view):
    f = view.get("adapter.init")
    if f is not None and isinstance(f.value, str) and f.value.strip().lower() == "loftq":
        return f
    f = view.get("adapter.loftq")
    if f is not None and f.value not in (None, False, {}, 0):
        return f
    return None


@check("loftq-with-quantised-base", when=(("adapter.init", "adapter.loftq"), ("quant.load_4bit", "quant.load_8bit", "quant.bits")))
def loftq_with_quantised_base(ctx) -> None:
    view = ctx.view
    lq, q = _loftq(view), _quantised(view)
    if lq is None or q is None:
        return
    fix = None
    if q.name in ("quant.load_4bit", "quant.load_8bit"):
        edits = [Edit(path=q.path, old=q.written, new=False)]
        also = ""
        m = view.method_field
        lay = view.layout
        # a runner that refuses the "qlora" word without load_in_4bit: the run becomes a plain LoRA
        lora_word = next((w for w, meaning in lay.method_values.items() if meaning == "lora"),
                         None) if lay is not None else None
        if lay is not None and lay.qlora_word_needs_4bit and lora_word and m is not None \
                and m.name == "method" and isinstance(m.written, str) \
                and lay.method_values.get(m.written.strip().lower()) == "qlora":
            edits.append(Edit(path=m.path, old=m.written, new=lora_word))
            also = f", {m.key}: {m.written} -> {lora_word}"
        fix = Fix(tier="changes-training",
                  summary=f"{q.key}: true -> false{also} (LoftQ quantises itself)",
                  edits=tuple(edits))
    ctx.report(q, fix=fix, key=q.key, loftq_key=lq.key)


@check("quant-4bit-and-8bit-both-on", when=("quant.load_4bit", "quant.load_8bit"))
def both_bits(ctx) -> None:
    view = ctx.view
    a, b = view.get("quant.load_4bit"), view.get("quant.load_8bit")
    if a is None or b is None or a.value is not True or b.value is not True:
        return
    ctx.report(b, key4=a.key, key8=b.key)


@check("quant-fp4-where-nf4-is-better", when=(("quant.load_4bit", "quant.bits"),))
def fp4(ctx) -> None:
    view = ctx.view
    # the 4-bit quant type is read only when the base loads in 4 bits (8-bit ignores it)
    if not (view.is_on("quant.load_4bit") or view.value("quant.bits") == 4):
        return
    f = view.get("quant.type_4bit")
    if f is not None and isinstance(f.value, str) and f.value.strip().lower() == "fp4":
        fix = Fix(tier="changes-training", summary=f"{f.key}: {f.value} -> nf4",
                  edits=(Edit(path=f.path, old=f.written, new="nf4"),))
        ctx.report(f, "written", fix=fix, key=f.key)
    elif f is None and _bnb_defaults_apply(view):
        q = view.get("quant.load_4bit")
        ctx.report(q, "default", key=q.key, section=q.path[0])


_FP32 = frozenset({"float32", "fp32", "torch.float32", "float"})


def _half_dtype(ctx, written: str) -> tuple[str, str]:
    """The 16-bit compute dtype to write, spelled like ``written``, and why when not bfloat16.

    bfloat16 (QLoRA's choice) unless the named GPU has no bf16 (compute capability below 8.0)
    or the config trains in fp16 without bf16 (a run set up for such a card): then float16.
    """
    gpu = ctx.gpu
    view = ctx.view
    why = ""
    if gpu is not None and not gpu.supports("bf16"):
        why = f" (no bf16 on {gpu.name})"
    elif view.is_on("precision.fp16") and not view.is_on("precision.bf16"):
        why = " (the run trains in fp16)"
    half = "float16" if why else "bfloat16"
    low = written.lower()
    if low.startswith("torch."):
        return "torch." + half, why
    if low == "fp32":
        return ("fp16" if why else "bf16"), why
    return half, why


@check("quant-compute-dtype-fp32", when=("quant.load_4bit",))
def compute_fp32(ctx) -> None:
    view = ctx.view
    q = view.get("quant.load_4bit")
    if q is None or q.value is not True:
        return
    f = view.get("quant.compute_dtype")
    if f is not None and isinstance(f.value, str) and f.value.strip().lower() in _FP32:
        new, why = _half_dtype(ctx, f.value.strip())
        fix = Fix(tier="changes-training", summary=f"{f.key}: {f.value} -> {new}{why}",
                  edits=(Edit(path=f.path, old=f.written, new=new),))
        ctx.report(f, "written", fix=fix, key=f.key, value=f.value)
    elif f is None and _bnb_defaults_apply(view):
        ctx.report(q, "default", key=q.key, section=q.path[0])


@check("merge-into-quantised-base", when=("export.merge", ("quant.load_4bit", "quant.load_8bit", "quant.bits")),
       methods=ADAPTER)
def merge_into_quantised(ctx) -> None:
    view = ctx.view
    m = view.get("export.merge")
    if m is None or m.value in (None, False, "", 0):
        return
    if isinstance(m.value, str) and m.value.strip().lower() in ("false", "no", "none"):
        return
    q = _quantised(view)
    if q is None or not view.is_adapter:
        return
    refusal = view.layout.refuses_quantised_merge if view.layout is not None else ""
    stated = view.method_field
    if refusal and stated is not None and stated.name == "method" and isinstance(stated.written, str) \
            and stated.written.strip().lower() == "qlora":
        # the runner's own validator stops on this pair before anything is merged
        ctx.report(m, "refused", key=m.key, quant_key=q.key, method_key=stated.key,
                   method=stated.written, refusal=refusal.format(bits=4 if q.name != "quant.load_8bit" else 8))
        return
    ctx.report(m, key=m.key, quant_key=q.key)
