"""Checks on what the adapter trains: target modules, rank against matrix sizes, extra trainable modules."""

from __future__ import annotations

import math
from types import MappingProxyType

from ..knowledge.models import UnsupportedFamily, linear_modules, target_names as model_target_names
from .._patterns import later
from . import ADAPTER, check

_ALL_WORDS = frozenset({"all-linear", "all"})  # PEFT's "all-linear"; LLaMA-Factory's lora_target: all
_ATTENTION = frozenset({"q_proj", "k_proj", "v_proj", "o_proj", "qkv_proj", "query_key_value", "c_attn",
              "out_proj", "query", "key", "value", "wq", "wk", "wv", "wo", "wqkv", "output_proj"})
_EMBEDDINGS = frozenset({"embed_tokens", "lm_head", "wte", "embed_out", "word_embeddings", "tok_embeddings",
               "output", "embeddings"})
# names other libraries give the Llama-family projections (torchtune / Meta reference code)
_OTHER_LIBRARY_NAMES = MappingProxyType({"output_proj": "o_proj", "w1": "gate_proj", "w3": "up_proj", "w2": "down_proj",
                        "wq": "q_proj", "wk": "k_proj", "wv": "v_proj", "wo": "o_proj"})
_REGEX_CHARS = later(r"[\\^$*+?()\[\]{}|]")


def listed_targets(view, ctx=None) -> tuple[list[str] | None, object]:
    """(names, field) when an adapter run lists its target modules by name, else (None, None)."""
    if not view.is_adapter:
        return None, None
    names, how, f = targets_of(ctx) if ctx is not None else target_names(view)
    return (names, f) if how == "list" and names else (None, None)


def targets_of(ctx) -> tuple[list[str] | None, str, object]:
    """``target_names`` of the context's view, worked out once for the rules of the view (they
    only read it)."""
    view = ctx.view
    return ctx.once("lora-target-names", lambda: target_names(view))


def target_names(view) -> tuple[list[str] | None, str, object]:
    """(leaf names the config targets, how: "list" | "all" | "regex" | "none", field)."""
    f = view.get("adapter.targets")
    all_f = view.get("adapter.target_all_linear")
    if all_f is not None and all_f.value is True:
        return None, "all", all_f
    if f is None or f.value is None:
        return None, "none", None
    value = f.value
    text = view.layout.targets_text if view.layout is not None else "regex"
    if isinstance(value, str):
        word = value.strip()
        if word.lower() in _ALL_WORDS:
            return None, "all", f
        if text == "comma-list" or (text == "comma-list-or-regex" and "," in word):
            return [t.strip() for t in word.split(",") if t.strip()], "list", f
        return None, "regex", f  # PEFT matches a string target as a regex on full module names
    names = [str(t).strip() for t in value]
    if any(n.lower() in _ALL_WORDS for n in names):
        return None, "all", f
    return names, "list", f


def _arch_or_judge(ctx):
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's architecture is not known offline "
                         "(name a local folder with config.json, or a model in the local hub cache)")
        return None
    # the model's linear layers (only read), or why it has none known: worked out once for the
    # rules of the view that ask, for this very architecture object
    got = ctx.once(("linear-modules", id(arch)), lambda: (arch, _linear_or_reason(arch)))
    linear = got[1] if got[0] is arch else _linear_or_reason(arch)
    if isinstance(linear, str):
        ctx.cannot_judge(linear)
        return None
    return arch, linear


def _linear_or_reason(arch):
    """``linear_modules(arch)``, or the reason its family has none known (a text)."""
    try:
        return linear_modules(arch)
    except UnsupportedFamily as exc:
        return str(exc)


@check("lora-target-not-in-model", when=("adapter.targets",), methods=ADAPTER)
def target_not_in_model(ctx) -> None:
    view = ctx.view
    names, f = listed_targets(view, ctx)
    if not names:
        return
    layout = view.layout
    if layout is not None and layout.module_names is not None:
        known = set(layout.module_names)
        where = f"{layout.name} names"
    else:
        got = _arch_or_judge(ctx)
        if got is None:
            return
        arch, _linear = got
        known = set(model_target_names(arch))
        where = f"{arch.family} ({arch.source or 'model config'})"
    missing = [n for n in names if n.rsplit(".", 1)[-1] not in known and not _REGEX_CHARS.search(n)]
    if not missing:
        return
    variant = "none-match" if len(missing) == len(names) else "some-missing"
    import difflib

    if layout is not None and layout.module_names is not None:
        renames = {hf: own for own, hf in layout.module_names.items()}
    else:
        renames = dict(_OTHER_LIBRARY_NAMES)
    near = {m: ([renames[m]] if renames.get(m) in known else
                difflib.get_close_matches(m, sorted(known), n=1, cutoff=0.5)) for m in missing}
    suggestion = ", ".join(f"{m} -> {n[0]}" for m, n in near.items() if n) or "none close"
    ctx.report(f, variant, key=f.leaf, missing=", ".join(missing), where=where,
               known=", ".join(sorted(known)), suggestion=suggestion,
               found=len(names) - len(missing), total=len(names))


@check("lora-rank-above-matrix-dim", when=("adapter.rank",), methods=ADAPTER)
def rank_above_dim(ctx) -> None:
    view = ctx.view
    if not view.is_adapter:
        return
    rank_f = view.get("adapter.rank")
    if rank_f is None or not isinstance(rank_f.value, int) or rank_f.value <= 0:
        return
    names, how, _ = targets_of(ctx)
    got = _arch_or_judge(ctx)
    if got is None:
        return
    arch, linear = got
    aliases = view.layout.module_names if view.layout is not None and view.layout.module_names else {}
    if how == "all":
        leaves = list(linear)
    elif how == "list":
        leaves = [aliases.get(n, n).rsplit(".", 1)[-1] for n in names]
        if view.is_on("adapter.mlp"):  # component-style recipes: the MLP projections too
            leaves += [n for n in ("gate_proj", "up_proj", "down_proj") if n in linear]
    else:
        return
    dims = {n: linear[n] for n in leaves if n in linear}
    if not dims:
        return
    name, (fin, fout) = min(dims.items(), key=lambda kv: min(kv[1]))
    smallest = min(fin, fout)
    if rank_f.value <= smallest:
        return
    ctx.report(rank_f, key=rank_f.leaf, rank=rank_f.value, module=name, fin=fin, fout=fout,
               smallest=smallest, family=arch.family)


@check("lora-attention-only-targets", when=("adapter.targets",), methods=ADAPTER)
def attention_only(ctx) -> None:
    view = ctx.view
    names, f = listed_targets(view, ctx)
    if not names:
        return
    if view.is_on("adapter.mlp"):
        return
    leaves = {n.rsplit(".", 1)[-1] for n in names}
    if not leaves <= _ATTENTION:
        return
    ctx.report(f, key=f.leaf, targets=", ".join(names))


@check("lora-high-rank-standard-scaling", when=("adapter.rank",), methods=ADAPTER)
def high_rank_standard(ctx) -> None:
    view = ctx.view
    if not view.is_adapter or view.layout is None or "adapter.rslora" not in view.layout.fields:
        return
    rank_f = view.get("adapter.rank")
    if rank_f is None or not isinstance(rank_f.value, int):
        return
    if view.is_on("adapter.rslora") or rank_f.value < ctx.thresholds["min_rank"]:
        return
    alpha = view.value("adapter.alpha")
    detail = ""
    if isinstance(alpha, (int, float)) and not isinstance(alpha, bool):
        detail = (f"; with alpha {alpha:g} the scale is {alpha / rank_f.value:.3g} (alpha/r) against"
                  f" {alpha / math.sqrt(rank_f.value):.3g} under rsLoRA (alpha/sqrt(r))")
    ctx.report(rank_f, key=rank_f.leaf, rank=rank_f.value, detail=detail)


def _full_modules(view):
    f = view.get("adapter.save_modules")
    if f is None or f.value is None:
        return None, []
    value = f.value
    names = [value] if isinstance(value, str) else list(value)
    if isinstance(value, str) and "," in value:
        names = [n.strip() for n in value.split(",")]
    return f, [n for n in names if str(n).rsplit(".", 1)[-1] in _EMBEDDINGS]


@check("full-modules-at-adapter-lr", when=("adapter.save_modules", "optim.lr"), methods=ADAPTER)
def full_modules_at_adapter_lr(ctx) -> None:
    view = ctx.view
    if not view.is_adapter:
        return
    f, emb = _full_modules(view)
    if not emb:
        return
    lr_f = view.get("optim.lr")
    if lr_f is None or not isinstance(lr_f.value, (int, float)) or isinstance(lr_f.value, bool):
        return
    if view.has("optim.embedding_lr"):
        return
    limit = ctx.thresholds["max_full_module_lr"]
    if lr_f.value <= limit:
        return
    # where the layout has a key for a separate rate the fix is one line: a warning; elsewhere
    # (transformers arguments have none) it takes a custom optimizer: an info
    has_key = view.layout is not None and "optim.embedding_lr" in view.layout.fields
    ctx.report(f, "default" if has_key else "no-separate-rate-key", key=f.leaf,
               modules=", ".join(emb), lr=lr_f.value, lr_key=lr_f.leaf, limit=limit,
               suggestion=f"{lr_f.value / 10:.1e}")


@check("tied-embeddings-trained-separately", when=("adapter.save_modules",), methods=ADAPTER)
def tied_trained_separately(ctx) -> None:
    view = ctx.view
    if not view.is_adapter:
        return
    f, emb = _full_modules(view)
    leaves = {str(n).rsplit(".", 1)[-1] for n in emb}
    if not {"embed_tokens", "lm_head"} <= leaves:
        return
    if view.is_on("adapter.tie"):
        return
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model is not known offline, so whether it ties its embeddings is unknown")
        return
    if not arch.tie_word_embeddings:
        return
    ctx.report(f, key=f.leaf, family=arch.family, vocab=arch.vocab_size, hidden=arch.hidden_size,
               extra_m=round(arch.vocab_size * arch.hidden_size / 1e6, 1))


_KERNELS = ("adapter.kernel_mlp", "adapter.kernel_qkv", "adapter.kernel_o")


@check("lora-kernel-with-dropout-or-bias", when=(("adapter.kernel_mlp", "adapter.kernel_qkv", "adapter.kernel_o"),))
def kernel_dropout_bias(ctx) -> None:
    view = ctx.view
    kernels = [view.get(n) for n in _KERNELS if view.is_on(n)]
    if not kernels:
        return
    dropout = view.get("adapter.dropout")
    bias = view.get("adapter.bias")
    bad = []
    if dropout is not None and isinstance(dropout.value, (int, float)) and dropout.value > 0:
        bad.append((dropout, f"{dropout.leaf} {dropout.value:g}", f"{dropout.leaf}: 0"))
    if bias is not None and isinstance(bias.value, str) and bias.value.strip().lower() != "none":
        bad.append((bias, f"{bias.leaf} {bias.value}", f"{bias.leaf}: none"))
    for f, what, change in bad:
        ctx.report(f, key=f.leaf, what=what, kernels=", ".join(k.leaf for k in kernels), change=change)
