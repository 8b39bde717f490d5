"""Which chat formats need tokens of their own, and which base vocabularies already hold them.

A chat template's role markers come in two kinds. Text markers (``<|user|>`` in the zephyr
format, ``[INST]`` in the Llama 2 chat format) are ordinary text: the base tokenizer splits them
into pieces it already has, and no embedding row is new. Special-token markers (ChatML's
``<|im_start|>``) are single tokens in the tokenizers that define the format; a base vocabulary
without them either gains them as new tokens, whose embedding and output rows start untrained,
or splits them into text, so that the end-of-turn marker is no longer one token the model can
emit. Only the second kind can ask for trained embeddings.

Both tables are data with their sources; a family or format not listed is unknown, never guessed.
"""

from __future__ import annotations

import re
from types import MappingProxyType

from .._patterns import later
from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr


class ChatFormat:
    name: str
    recognised_by: frozenset[str]  # a template holding any of these uses the format
    special: frozenset[str]  # its markers that are single special tokens where it is defined
    source: str

    __slots__ = ('name', 'recognised_by', 'special', 'source')

    def __init__(self, name, recognised_by, special, source):
        _setattr(self, 'name', name)
        _setattr(self, 'recognised_by', recognised_by)
        _setattr(self, 'special', special)
        _setattr(self, 'source', source)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, recognised_by={self.recognised_by!r}, special={self.special!r}, source={self.source!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.recognised_by, self.special, self.source) == (other.name, other.recognised_by, other.special, other.source)
        return NotImplemented

    def __hash__(self):
        return hash((self.name, self.recognised_by, self.special, self.source))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.name, self.recognised_by, self.special, self.source)

    __setstate__ = _frozen_setstate


FORMATS: tuple[ChatFormat, ...] = (
    ChatFormat("ChatML", frozenset({"<|im_start|>", "<|im_end|>"}),
               frozenset({"<|im_start|>", "<|im_end|>"}),
               "Qwen2.5 tokenizer.json added_tokens: <|im_start|> 151644 and <|im_end|> 151645, "
               "special: true (public copies found by search; ids from memory)"),
    ChatFormat("Llama 3", frozenset({"<|start_header_id|>", "<|end_header_id|>", "<|eot_id|>"}),
               frozenset({"<|start_header_id|>", "<|end_header_id|>", "<|eot_id|>"}),
               "Llama 3 tokenizer_config.json added_tokens_decoder: 128006 <|start_header_id|> "
               "(public copies found by search); 128007 and 128009 from memory"),
    ChatFormat("Gemma", frozenset({"<start_of_turn>", "<end_of_turn>"}),
               frozenset({"<start_of_turn>", "<end_of_turn>"}),
               "Gemma tokenizer_config.json added_tokens_decoder: 106 <start_of_turn>, "
               "107 <end_of_turn>, special: true (public copies found by search)"),
    # Phi-3 writes the zephyr-looking role markers as special tokens and ends turns with <|end|>;
    # a template is Phi-3's only when <|end|> is there (zephyr ends turns with the EOS token)
    ChatFormat("Phi-3", frozenset({"<|end|>"}),
               frozenset({"<|end|>", "<|user|>", "<|assistant|>", "<|system|>"}),
               "Phi-3 tokenizer.json added_tokens: <|assistant|> 32001, <|system|> 32006, "
               "<|end|> 32007, <|user|> 32010, special: true (public copies found by search)"),
)

# every special-token marker of the formats above: the tokens a chat format adds to a base
CHAT_MARKERS: frozenset[str] = frozenset().union(*(f.special for f in FORMATS)) | {"<|eom_id|>"}

# Text-marker formats, for the record: their markers are plain text in the base vocabulary.
TEXT_FORMATS = MappingProxyType({
    "zephyr": "<|system|>, <|user|>, <|assistant|> as text and the base EOS </s> to end a turn: "
              "zephyr-7b-beta's tokenizer adds no tokens to Mistral's 32000 (from memory); the "
              "alignment-handbook sets the template string only (get_tokenizer)",
    "Llama 2 chat": "[INST] ... [/INST] as text: Llama 2's vocabulary has no such token (from memory)",
})


class Vocabulary:
    family: str  # transformers model_type
    vocab_size: int | None  # None: every size of the family
    special: frozenset[str]
    source: str
    # the list holds every special and added token of the tokenizer (a marker-shaped token it
    # lacks is not in the vocabulary); False: the list holds the chat markers only
    complete: bool

    __slots__ = ('family', 'vocab_size', 'special', 'source', 'complete')

    def __init__(self, family, vocab_size, special, source, complete=False):
        _setattr(self, 'family', family)
        _setattr(self, 'vocab_size', vocab_size)
        _setattr(self, 'special', special)
        _setattr(self, 'source', source)
        _setattr(self, 'complete', complete)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(family={self.family!r}, vocab_size={self.vocab_size!r}, special={self.special!r}, source={self.source!r}, complete={self.complete!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.family, self.vocab_size, self.special, self.source, self.complete) == (other.family, other.vocab_size, other.special, other.source, other.complete)
        return NotImplemented

    def __hash__(self):
        return hash((self.family, self.vocab_size, self.special, self.source, self.complete))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.family, self.vocab_size, self.special, self.source, self.complete)

    __setstate__ = _frozen_setstate


_LLAMA2 = frozenset({"<unk>", "<s>", "</s>"})
_QWEN = frozenset({"<|endoftext|>", "<|im_start|>", "<|im_end|>"})
_GEMMA = frozenset({"<pad>", "<eos>", "<bos>", "<unk>", "<start_of_turn>", "<end_of_turn>"})

VOCABULARIES: tuple[Vocabulary, ...] = (
    Vocabulary("llama", 32000, _LLAMA2,
               "Llama 2 / TinyLlama sentencepiece tokenizer: <unk> 0, <s> 1, </s> 2 and no added "
               "tokens (from memory); vocab 32000 in base_models.json", complete=True),
    Vocabulary("mistral", 32000, _LLAMA2,
               "Mistral-7B-v0.1 tokenizer: <unk>, <s>, </s> (from memory); vocab 32000", complete=True),
    Vocabulary("mixtral", 32000, _LLAMA2, "Mixtral-8x7B-v0.1: the Mistral v0.1 tokenizer (from memory)",
               complete=True),
    Vocabulary("llama", 128256,
               frozenset({"<|begin_of_text|>", "<|end_of_text|>", "<|start_header_id|>",
                          "<|end_header_id|>", "<|eot_id|>", "<|eom_id|>", "<|python_tag|>"}),
               "Llama 3 tokenizer_config.json added_tokens_decoder 128000-128255, base and "
               "Instruct alike (128006 <|start_header_id|> in public copies found by search)"),
    Vocabulary("llama", 49152, _QWEN,
               "SmolLM2 tokenizer: <|endoftext|> 0, <|im_start|> 1, <|im_end|> 2 (public copies "
               "found by search; the family assignment from memory)"),
    Vocabulary("qwen2", None, _QWEN,
               "Qwen2.5 tokenizer.json added_tokens 151643-151645, base and Instruct alike"),
    Vocabulary("qwen3", None, _QWEN | {"<think>", "</think>"},
               "Qwen3 tokenizer added_tokens_decoder: <|im_start|> 151644, <|im_end|> 151645, "
               "<think> 151667, </think> 151668 (public copies found by search)"),
    Vocabulary("gemma", None, _GEMMA, "Gemma tokenizer_config.json added_tokens_decoder 0-3, 106, 107"),
    Vocabulary("gemma2", None, _GEMMA, "Gemma 2: the Gemma tokenizer (from memory)"),
    Vocabulary("gemma3", None, _GEMMA, "Gemma 3 tokenizer.json added_tokens: <start_of_turn> 105, "
               "<end_of_turn> 106 (public copies found by search)"),
    Vocabulary("phi3", 32064,
               frozenset({"<|endoftext|>", "<|assistant|>", "<|system|>", "<|end|>", "<|user|>"}) | _LLAMA2,
               "Phi-3 tokenizer.json added_tokens 32000-32010 (public copies found by search)"),
)

_MARKER = re.compile(r"<\|[A-Za-z0-9_]+\|>|<[a-z_]+_of_turn>")


_MARKER_TOKEN = later(r"^<\|?/?[A-Za-z0-9_.:-]+\|?>$")


def marker_shaped(token: str) -> bool:
    """A token written like a special token (``<|im_end|>``, ``<end_of_turn>``, ``</s>``): never a
    piece of ordinary text in a tokenizer that does not list it as added."""
    return isinstance(token, str) and bool(_MARKER_TOKEN.match(token.strip()))


def markers(template: str) -> set[str]:
    """Marker-shaped pieces of a template text (``<|...|>`` and Gemma's ``<..._of_turn>``)."""
    return set(_MARKER.findall(template)) if isinstance(template, str) else set()


def special_markers(template: str) -> tuple[ChatFormat | None, set[str]]:
    """(the special-token format the template uses, its special markers found), or (None, set())."""
    found = markers(template)
    for fmt in FORMATS:
        if found & fmt.recognised_by:
            return fmt, found & fmt.special
    return None, set()


def vocabulary(family: str | None, vocab_size: int | None) -> Vocabulary | None:
    """The special tokens a base vocabulary holds, when the table knows it."""
    if not family:
        return None
    for v in VOCABULARIES:
        if v.family == family and (v.vocab_size is None or v.vocab_size == vocab_size):
            return v
    return None
