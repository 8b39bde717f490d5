"""A chat format added to an adapter run whose embeddings and output head stay frozen.

What adds tokens, by what the layout's fields and attributes say:

* an explicit token list (``added_tokens``, axolotl ``tokens``, LLaMA-Factory ``add_tokens`` /
  ``add_special_tokens``): every token the base vocabulary does not already list is new;
* special tokens set by role (axolotl ``special_tokens``: bos/eos/unk and
  ``additional_special_tokens``; a pad token is never predicted, so it is left out, as axolotl's
  own check leaves it out): a marker-shaped token the base vocabulary lacks is new;
* a runner's registered chat template that adds its stop words as special tokens
  (``layout.template_stop_words``): the same;
* a chat template text (the trainer layout): its special-token markers the base lacks.

Whether the base vocabulary holds a token is the table of ``knowledge/chat_tokens.py``. A table
entry that lists every added token settles it; otherwise a marker-shaped token it does not list,
or a base the table does not know, is new only by assumption (at most a warning, saying so).

Satisfied when the embedding and head train: a full fine-tune, the trainable-module list (or the
LoRA targets) naming them, parameters left unfrozen by a pattern that matches them, trainable
token rows of the embedding (the head too when tied), or a runner that adds them itself when it
resizes the vocabulary and no trainable-module list is written (``layout.vocab_resize_key``).
"""

from __future__ import annotations

import re
from functools import cache

from ..findings import Edit, Fix
from ..load import dotted
from . import check


@cache  # looked up once: an import inside a function costs a package lookup per call
def _chat_tokens():
    from ..knowledge import chat_tokens  # the token tables load on first use only

    return chat_tokens

EMBEDDING_NAMES = frozenset({"embed_tokens", "wte", "tok_embeddings", "word_embeddings", "embeddings",
                   "embed_in", "tok_embed"})
HEAD_NAMES = frozenset({"lm_head", "output", "embed_out", "head"})
# parameter names an unfreezing pattern is tried on (transformers' causal-LM naming)
_EMBED_PARAMS = tuple(f"model.{n}.weight" for n in sorted(EMBEDDING_NAMES)) + ("transformer.wte.weight",)
_HEAD_PARAMS = tuple(f"{n}.weight" for n in sorted(HEAD_NAMES))
_ROLES = ("bos_token", "eos_token", "unk_token")  # pad_token: never predicted, masked from the loss


def _names(value, comma: bool = False) -> list[str]:
    if isinstance(value, str):
        parts = value.split(",") if comma else [value]
        return [p.strip() for p in parts if p.strip()]
    if isinstance(value, list):
        return [str(v) for v in value]
    return []


def _leaves(names) -> set[str]:
    return {n.rsplit(".", 1)[-1] for n in names}


def _unfrozen(patterns: list[str], names: tuple[str, ...]) -> bool:
    for p in patterns:
        try:
            rx = re.compile(p.split("$[")[0] if "$[" in p else p)  # axolotl's "name$[:32000]" ranges
        except (re.error, RecursionError):
            continue
        if any(rx.search(n) for n in names):
            return True
    return False


def _role_tokens(field) -> list[tuple[tuple, str]]:
    """(key path, token) for the special tokens a role mapping sets, pad left out."""
    if field is None or not isinstance(field.value, dict):
        return []
    out = []
    for role in _ROLES:
        tok = field.value.get(role)
        if isinstance(tok, str) and tok.strip():
            out.append((field.path + (role,), tok.strip()))
    extra = field.value.get("additional_special_tokens")
    if isinstance(extra, list):
        out += [(field.path + ("additional_special_tokens", i), t.strip())
                for i, t in enumerate(extra) if isinstance(t, str) and t.strip()]
    return out


class _Vocab:
    """What the base vocabulary is known to hold."""

    def __init__(self, arch):
        self.arch = arch
        self.table = _chat_tokens().vocabulary(arch.family, arch.vocab_size) if arch is not None else None

    @property
    def words(self) -> str:
        if self.table is None:
            return "base model's"
        return f"{self.arch.family} ({self.arch.vocab_size} tokens)"

    def lacks(self, tokens: list[str]) -> tuple[list[str], list[str]]:
        """(tokens it surely lacks, tokens it lacks only by assumption) of marker-shaped tokens.

        Without a complete list, only a chat format's own markers (ChatML's, Llama 3's...) are
        taken as missing, by assumption: a base's own special tokens (``<|endoftext|>``, ``</s>``)
        are in many vocabularies and are not judged."""
        chat_tokens = _chat_tokens()
        sure, assumed = [], []
        for t in dict.fromkeys(tokens):
            if not chat_tokens.marker_shaped(t):
                continue  # ordinary text may be a piece the vocabulary has: not judged
            if self.table is not None and t in self.table.special:
                continue
            if self.table is not None and self.table.complete:
                sure.append(t)
            elif t in chat_tokens.CHAT_MARKERS:
                assumed.append(t)
        return sure, assumed

    def assumption(self, tokens: list[str]) -> str:
        shown = ", ".join(tokens[:4])
        if self.table is None:
            return f"the base vocabulary lacks {shown}: its tokenizer is not known offline"
        return f"the {self.arch.family} vocabulary lacks {shown}: its list of added tokens is not known in full"


def _shown(tokens: list[str]) -> str:
    return ", ".join(tokens[:4]) + (" ..." if len(tokens) > 4 else "")


@check("chat-format-untrained-embeddings", when=(("data.chat_template", "data.new_tokens", "data.special_tokens",
                                                    "data.template_name"),))
def chat_format(ctx) -> None:
    view = ctx.view
    layout = view.layout
    comma = layout.comma_token_lists
    template = view.get("data.chat_template")
    tokens = view.get("data.new_tokens")
    role_field = view.get("data.special_tokens")
    roles = _role_tokens(role_field)
    named = view.get("data.template_name")
    stop = (list(layout.template_stop_words.get(named.value.strip().lower(), ()))
            if named is not None and isinstance(named.value, str) else [])
    explicit = _names(tokens.value, comma) if tokens is not None else []
    fmt, special = (_chat_tokens().special_markers(template.value) if template is not None
                    else (None, set()))
    if not (special or explicit or roles or stop):
        return  # text role markers are made of tokens the base already has: nothing is new
    resize_key = layout.vocab_resize_key
    if not view.is_adapter and not (resize_key and stop):
        return  # a full fine-tune trains every embedding row
    arch = ctx.model()
    vocab = _Vocab(arch)
    # explicit token lists: every token not listed by the base is new (they are asked for by name)
    new_explicit = [t for t in explicit if vocab.table is None or t not in vocab.table.special]
    sure_roles, assumed_roles = vocab.lacks([t for _p, t in roles])
    sure_stop, assumed_stop = vocab.lacks(stop)
    if resize_key:
        resized = view.value("model.resize_vocab") is True or bool(new_explicit)
        if not resized and (sure_stop or assumed_stop):
            _not_resized(ctx, named, resize_key, sure_stop + assumed_stop, assumed_stop, vocab)
            return
        if view.get("adapter.save_modules") is None:
            return  # the runner adds the input and output embeddings to the trainable modules
        if not view.is_adapter:
            return
    causes = []  # (field or path, variant, new tokens, tokens assumed new)
    if new_explicit:
        causes.append((tokens, "new-tokens", new_explicit, []))
    if sure_roles or assumed_roles:
        found = sure_roles + assumed_roles
        first = next(p for p, t in roles if t in found)
        causes.append((first, "special-tokens", found, assumed_roles))
    if sure_stop or assumed_stop:
        causes.append((named, "template-tokens", sure_stop + assumed_stop, assumed_stop))
    if not causes and special:
        if vocab.table is None:
            ctx.cannot_judge("the base model's vocabulary is not known offline, so whether it holds "
                             "the template's special tokens is not known",
                             markers=", ".join(sorted(special)))
            return
        special = special - vocab.table.special
        if special:
            causes.append((template, "default", sorted(special), []))
    if not causes:
        return  # the base vocabulary holds them all
    missing, save, key, tied = _frozen(view, arch, comma)
    if not missing:
        return
    fix = _fix(view, save, key, missing, tied, comma)
    at, variant, new, assumed = causes[0]
    related = [c[0] for c in causes[1:]] + [p for p, t in roles if p != at and t in new]
    data = dict(missing=" and ".join(missing), save_key=key)
    if variant == "default":
        ref = view.value("model.ref")
        ctx.report(at, fix=fix, related=related, model=ref if isinstance(ref, str) else "the base model",
                   format=fmt.name, markers=", ".join(new), vocab=vocab.words,
                   vocab_source=vocab.table.source, **data)
        return
    every = list(dict.fromkeys(t for c in causes for t in c[2]))
    unsure = list(dict.fromkeys(t for c in causes for t in c[3]))
    # resting only on tokens assumed new: at most a warning that says so
    words = [vocab.assumption(unsure)] if unsure and set(unsure) >= set(every) else []
    extra = {"key": dotted(role_field.path)} if variant == "special-tokens" else {}
    if variant == "template-tokens":
        extra = {"template": named.value}
    ctx.report(at, variant, fix=fix, related=related, assumed=words, count=len(every),
               tokens=_shown(every), vocab=vocab.words, **extra, **data)


def _frozen(view, arch, comma: bool):
    """(names of the frozen modules among embed_tokens and lm_head, the save-list Field, the key
    to add them under, tied)."""
    save = view.get("adapter.save_modules")
    listed = _names(save.value, comma) if save is not None else []
    trained = _leaves(listed) | _leaves(_names(view.value("adapter.targets"), comma))
    tied = bool(arch and arch.tie_word_embeddings)
    patterns = _names(view.value("adapter.unfrozen"))
    has_embed = bool(trained & EMBEDDING_NAMES) or _unfrozen(patterns, _EMBED_PARAMS) \
        or bool(view.value("adapter.trainable_tokens"))
    has_head = bool(trained & HEAD_NAMES) or _unfrozen(patterns, _HEAD_PARAMS) or (tied and has_embed)
    missing = [n for n, ok in (("embed_tokens", has_embed), ("lm_head", has_head)) if not ok]
    if tied:
        missing = [m for m in missing if m != "lm_head"] or missing
    if save is not None:
        key = save.key
    else:
        rank = view.get("adapter.rank")
        key = "lora_modules_to_save" if rank is not None and rank.leaf == "lora_r" else "modules_to_save"
    return missing, save, key, tied


def _not_resized(ctx, named, resize_key: str, new: list[str], assumed: list[str], vocab: _Vocab) -> None:
    rows = vocab.arch.vocab_size if vocab.arch is not None and vocab.arch.vocab_size else None
    unsure = assumed and set(assumed) >= set(new)
    ctx.report(named, "not-resized", assumed=[vocab.assumption(assumed)] if unsure else [],
               template=named.value, count=len(new), tokens=_shown(new), vocab=vocab.words,
               resize_key=resize_key, rows=f"{rows:,}" if rows else "its")


def _fix(view, save, key: str, missing: list[str], tied: bool, comma: bool = False) -> Fix | None:
    """Add the missing module names to the trainable list, or insert the list beside the adapter keys."""
    why = " (tied embeddings: one shared matrix)" if tied else ""
    if save is not None:
        written = save.written
        if written is None:
            new = list(missing)
        elif isinstance(written, str) and comma:
            parts = _names(written, True)
            new = ",".join(parts + [m for m in missing if m not in parts])
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
