"""A chat format added to an adapter run whose embeddings and output head stay frozen."""

from __future__ import annotations

from ..findings import Edit, Fix
from ..knowledge import chat_tokens
from ..load import dotted
from . import check

EMBEDDING_NAMES = frozenset({"embed_tokens", "wte", "tok_embeddings", "word_embeddings", "embeddings",
                   "embed_in", "tok_embed"})
HEAD_NAMES = frozenset({"lm_head", "output", "embed_out", "head"})


def _names(value) -> set[str]:
    if isinstance(value, str):
        return {value}
    if isinstance(value, list):
        return {str(v) for v in value}
    return set()


def _leaves(names: set[str]) -> set[str]:
    return {n.rsplit(".", 1)[-1] for n in names}


@check("chat-format-untrained-embeddings")
def chat_format(ctx) -> None:
    view = ctx.view
    if not view.is_adapter:
        return
    template = view.get("data.chat_template")
    tokens = view.get("data.new_tokens")
    new_tokens = sorted(_names(tokens.value)) if tokens is not None else []
    fmt, special = (chat_tokens.special_markers(template.value) if template is not None
                    else (None, set()))
    if not special and not new_tokens:
        return  # text role markers are made of tokens the base already has: nothing is new
    arch = ctx.model()
    vocab = chat_tokens.vocabulary(arch.family, arch.vocab_size) if arch is not None else None
    if vocab is not None:
        new_tokens = [t for t in new_tokens if t not in vocab.special]
        special = special - vocab.special
    elif not new_tokens:
        ctx.cannot_judge("the base model's vocabulary is not known offline, so whether it holds "
                         "the template's special tokens is not known",
                         markers=", ".join(sorted(special)))
        return
    if not special and not new_tokens:
        return  # the base vocabulary holds them all
    trained = _leaves(_names(view.value("adapter.save_modules")) | _names(view.value("adapter.targets")))
    tied = bool(arch and arch.tie_word_embeddings)
    has_embed = bool(trained & EMBEDDING_NAMES)
    has_head = bool(trained & HEAD_NAMES) or (tied and has_embed)
    if has_embed and has_head:
        return
    missing = [n for n, ok in (("embed_tokens", has_embed), ("lm_head", has_head)) if not ok]
    if tied:
        missing = [m for m in missing if m != "lm_head"] or missing
    save = view.get("adapter.save_modules")
    if save is not None:
        key = save.key
    else:
        rank = view.get("adapter.rank")
        key = "lora_modules_to_save" if rank is not None and rank.leaf == "lora_r" else "modules_to_save"
    fix = _fix(view, save, key, missing, tied)
    if new_tokens:
        ctx.report(tokens, "new-tokens", fix=fix, count=len(new_tokens),
                   tokens=", ".join(new_tokens[:4]) + (" ..." if len(new_tokens) > 4 else ""),
                   missing=" and ".join(missing), save_key=key)
        return
    ref = view.value("model.ref")
    ctx.report(template, fix=fix, missing=" and ".join(missing), save_key=key,
               model=ref if isinstance(ref, str) else "the base model",
               format=fmt.name, markers=", ".join(sorted(special)),
               vocab=f"{arch.family} ({arch.vocab_size} tokens)", vocab_source=vocab.source)


def _fix(view, save, key: str, missing: list[str], tied: bool) -> Fix | None:
    """Add the missing module names to the trainable list, or insert the list beside the adapter keys."""
    why = " (tied embeddings: one shared matrix)" if tied else ""
    if save is not None:
        written = save.written
        if written is None:
            new = list(missing)
        elif isinstance(written, str):
            new = [written] + [m for m in missing if m != written]
        elif isinstance(written, list) and all(isinstance(x, str) for x in written):
            new = list(written) + [m for m in missing if m not in written]
        else:
            return None
        edit = Edit(path=save.path, old=written, new=new)
        return Fix(tier="changes-training", summary=f"{save.key}: add {', '.join(missing)}{why}",
                   edits=(edit,))
    anchor = next((f for f in (view.get("adapter.targets"), view.get("adapter.rank"),
                               view.get("adapter.alpha")) if f is not None), None)
    parent = anchor.path[:-1] if anchor is not None else ()
    if view.doc.get(parent + (key,)) is not None:
        return None
    edit = Edit(path=parent + (key,), old=None, new=list(missing), insert=True,
                after=anchor.path if anchor is not None else None)
    where = dotted(parent + (key,))
    return Fix(tier="changes-training", summary=f"{where}: added as [{', '.join(missing)}]{why}",
               edits=(edit,))
