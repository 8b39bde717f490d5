"""Model shapes, parameter counts and LoRA target resolution, without torch.

Everything here is pure arithmetic on an :class:`Architecture`. The module tree
that :func:`module_table` builds mirrors the layout of the transformers 5.x
``*ForCausalLM`` classes for the supported families (checked against
transformers in ``tests/reference``), so that parameter totals equal
``model.num_parameters()`` and LoRA counts equal what PEFT's
``print_trainable_parameters`` reports.

Layout notes (transformers >= 5):

* ``mixtral`` stores its experts as two 3-D parameters per layer
  (``mlp.experts.gate_up_proj`` and ``mlp.experts.down_proj``) and its router
  ``mlp.gate`` is not an ``nn.Linear``. So ``"all-linear"`` reaches only the
  attention projections. transformers 4.x used ``block_sparse_moe.experts.N.w1``,
  ``w2`` and ``w3`` instead; configs written for 4.x name modules that no longer
  exist.
* ``phi3`` fuses the projections: ``self_attn.qkv_proj`` and ``mlp.gate_up_proj``.
  PEFT has no default ``target_modules`` for ``phi3``.

How to get the trainable fraction: ``lora_trainable_parameters(...) /
total_parameters(arch)`` is the fraction of the *base* model; PEFT's
``print_trainable_parameters`` divides by the total of the wrapped model, which
is ``total_parameters(arch) + lora_trainable_parameters(...)`` (the adapters and
the trainable copies of ``modules_to_save`` are added to the frozen originals).
:func:`trainable_fraction` returns that PEFT-style ratio.
"""

from __future__ import annotations

import math
import os
import re
from functools import lru_cache
from pathlib import Path
from types import MappingProxyType
from typing import Iterable

from .._patterns import later
from .._records import _frozen_delattr, _frozen_setattr, _setattr, replaced, guarded_repr
from .. import reads

__all__ = (
    "Architecture",
    "SUPPORTED_FAMILIES",
    "UnsupportedFamily",
    "NoDefaultTargets",
    "size_from_name",
    "resolve_model",
    "architecture_from_config",
    "catalogue",
    "module_table",
    "total_parameters",
    "active_parameters",
    "expert_parameters",
    "match_catalogue",
    "catalogue_entries",
    "CatalogueEntry",
    "FUSED_QKV",
    "linear_modules",
    "target_names",
    "resolve_targets",
    "target_leaf_names",
    "unsupported_target_matches",
    "modules_to_save_matches",
    "lora_trainable_parameters",
    "trainable_fraction",
    "lora_scale",
    "PEFT_DEFAULT_TARGETS",
)


class Architecture:
    """Shapes of a decoder-only language model (names follow transformers' config.json keys).

    The last three fields say how a reference was matched to these shapes (see :func:`match_model`);
    they take no part in equality or hashing, so two matches of the same shapes are equal.
    """

    family: str  # transformers model_type: "llama", "mistral", "qwen2", ...
    hidden_size: int
    intermediate_size: int  # dense FFN width (gpt_oss: each expert's width)
    num_layers: int
    num_heads: int
    num_kv_heads: int
    head_dim: int  # deepseek_v2: the query/key head width, qk_nope_head_dim + qk_rope_head_dim
    vocab_size: int
    max_position_embeddings: int | None  # the context window the config states
    tie_word_embeddings: bool
    torch_dtype: str | None  # stored dtype, e.g. "bfloat16"
    num_experts: int  # mixture of experts: routed experts per MoE layer; 0 = dense
    experts_per_token: int  # routed experts active per token
    source: str  # where the numbers came from
    attention_bias: bool  # bias on q/k/v/o (llama/qwen3 `attention_bias`); qwen2 has q/k/v bias always
    mlp_bias: bool  # llama `mlp_bias`
    sliding_window: int | None  # local-attention window where the config sets one
    expert_intermediate_size: int  # moe_intermediate_size (0: the experts use intermediate_size)
    shared_expert_intermediate_size: int  # always-active shared expert(s) FFN width, 0 = none
    first_dense_layers: int  # deepseek first_k_dense_replace: leading layers with a dense MLP
    kv_lora_rank: int  # deepseek_v2 latent attention
    q_lora_rank: int
    qk_rope_head_dim: int
    v_head_dim: int
    parallel_norms: int  # falcon new_decoder_architecture: 2 layer norms (ln_attn, ln_mlp), else 1
    entry: str  # catalogue entry (canonical id) the shapes came from
    how: str  # how the reference was matched, in words
    assumed: bool  # True when the match rests on the name alone
    match: str  # exact | mirror | variant | derived | tokens | config | declared
    quantised: str  # what a quantised export stores ("GPTQ", "GGUF Q4_K_M")


    # the fields in order: the result cache keys the record by them, ``replaced`` copies them
    _record_fields = ('family', 'hidden_size', 'intermediate_size', 'num_layers', 'num_heads', 'num_kv_heads', 'head_dim', 'vocab_size', 'max_position_embeddings', 'tie_word_embeddings', 'torch_dtype', 'num_experts', 'experts_per_token', 'source', 'attention_bias', 'mlp_bias', 'sliding_window', 'expert_intermediate_size', 'shared_expert_intermediate_size', 'first_dense_layers', 'kv_lora_rank', 'q_lora_rank', 'qk_rope_head_dim', 'v_head_dim', 'parallel_norms', 'entry', 'how', 'assumed', 'match', 'quantised')

    def __init__(self, family, hidden_size, intermediate_size, num_layers, num_heads, num_kv_heads, head_dim, vocab_size, max_position_embeddings, tie_word_embeddings, torch_dtype, num_experts=0, experts_per_token=0, source="", attention_bias=False, mlp_bias=False, sliding_window=None, expert_intermediate_size=0, shared_expert_intermediate_size=0, first_dense_layers=0, kv_lora_rank=0, q_lora_rank=0, qk_rope_head_dim=0, v_head_dim=0, parallel_norms=0, entry="", how="", assumed=False, match="", quantised=""):
        _setattr(self, 'family', family)
        _setattr(self, 'hidden_size', hidden_size)
        _setattr(self, 'intermediate_size', intermediate_size)
        _setattr(self, 'num_layers', num_layers)
        _setattr(self, 'num_heads', num_heads)
        _setattr(self, 'num_kv_heads', num_kv_heads)
        _setattr(self, 'head_dim', head_dim)
        _setattr(self, 'vocab_size', vocab_size)
        _setattr(self, 'max_position_embeddings', max_position_embeddings)
        _setattr(self, 'tie_word_embeddings', tie_word_embeddings)
        _setattr(self, 'torch_dtype', torch_dtype)
        _setattr(self, 'num_experts', num_experts)
        _setattr(self, 'experts_per_token', experts_per_token)
        _setattr(self, 'source', source)
        _setattr(self, 'attention_bias', attention_bias)
        _setattr(self, 'mlp_bias', mlp_bias)
        _setattr(self, 'sliding_window', sliding_window)
        _setattr(self, 'expert_intermediate_size', expert_intermediate_size)
        _setattr(self, 'shared_expert_intermediate_size', shared_expert_intermediate_size)
        _setattr(self, 'first_dense_layers', first_dense_layers)
        _setattr(self, 'kv_lora_rank', kv_lora_rank)
        _setattr(self, 'q_lora_rank', q_lora_rank)
        _setattr(self, 'qk_rope_head_dim', qk_rope_head_dim)
        _setattr(self, 'v_head_dim', v_head_dim)
        _setattr(self, 'parallel_norms', parallel_norms)
        _setattr(self, 'entry', entry)
        _setattr(self, 'how', how)
        _setattr(self, 'assumed', assumed)
        _setattr(self, 'match', match)
        _setattr(self, 'quantised', quantised)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(family={self.family!r}, hidden_size={self.hidden_size!r}, intermediate_size={self.intermediate_size!r}, num_layers={self.num_layers!r}, num_heads={self.num_heads!r}, num_kv_heads={self.num_kv_heads!r}, head_dim={self.head_dim!r}, vocab_size={self.vocab_size!r}, max_position_embeddings={self.max_position_embeddings!r}, tie_word_embeddings={self.tie_word_embeddings!r}, torch_dtype={self.torch_dtype!r}, num_experts={self.num_experts!r}, experts_per_token={self.experts_per_token!r}, source={self.source!r}, attention_bias={self.attention_bias!r}, mlp_bias={self.mlp_bias!r}, sliding_window={self.sliding_window!r}, expert_intermediate_size={self.expert_intermediate_size!r}, shared_expert_intermediate_size={self.shared_expert_intermediate_size!r}, first_dense_layers={self.first_dense_layers!r}, kv_lora_rank={self.kv_lora_rank!r}, q_lora_rank={self.q_lora_rank!r}, qk_rope_head_dim={self.qk_rope_head_dim!r}, v_head_dim={self.v_head_dim!r}, parallel_norms={self.parallel_norms!r}, entry={self.entry!r}, how={self.how!r}, assumed={self.assumed!r}, match={self.match!r}, quantised={self.quantised!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.family, self.hidden_size, self.intermediate_size, self.num_layers, self.num_heads, self.num_kv_heads, self.head_dim, self.vocab_size, self.max_position_embeddings, self.tie_word_embeddings, self.torch_dtype, self.num_experts, self.experts_per_token, self.source, self.attention_bias, self.mlp_bias, self.sliding_window, self.expert_intermediate_size, self.shared_expert_intermediate_size, self.first_dense_layers, self.kv_lora_rank, self.q_lora_rank, self.qk_rope_head_dim, self.v_head_dim, self.parallel_norms) == (other.family, other.hidden_size, other.intermediate_size, other.num_layers, other.num_heads, other.num_kv_heads, other.head_dim, other.vocab_size, other.max_position_embeddings, other.tie_word_embeddings, other.torch_dtype, other.num_experts, other.experts_per_token, other.source, other.attention_bias, other.mlp_bias, other.sliding_window, other.expert_intermediate_size, other.shared_expert_intermediate_size, other.first_dense_layers, other.kv_lora_rank, other.q_lora_rank, other.qk_rope_head_dim, other.v_head_dim, other.parallel_norms)
        return NotImplemented

    def __hash__(self):
        # worked out once: the estimate and the adapter counts key their memos by the shapes many
        # times per config; the hash is not part of the record (never pickled, see __getstate__)
        got = self.__dict__.get("_hash")
        if got is None:
            got = hash((self.family, self.hidden_size, self.intermediate_size, self.num_layers, self.num_heads, self.num_kv_heads, self.head_dim, self.vocab_size, self.max_position_embeddings, self.tie_word_embeddings, self.torch_dtype, self.num_experts, self.experts_per_token, self.source, self.attention_bias, self.mlp_bias, self.sliding_window, self.expert_intermediate_size, self.shared_expert_intermediate_size, self.first_dense_layers, self.kv_lora_rank, self.q_lora_rank, self.qk_rope_head_dim, self.v_head_dim, self.parallel_norms))
            _setattr(self, "_hash", got)
        return got

    def __getstate__(self):
        state = dict(self.__dict__)
        state.pop("_hash", None)  # str hashes differ between processes
        return state

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr


    @property
    def is_moe(self) -> bool:
        return self.num_experts > 0


class UnsupportedFamily(ValueError):
    """The architecture's family has no module layout here, so counts would be guesses."""


class NoDefaultTargets(ValueError):
    """``target_modules`` is unset and PEFT has no default for this family (PEFT raises too)."""


# Families whose module layout is modelled (transformers 5.x layouts, checked in tests/reference).
SUPPORTED_FAMILIES = frozenset({
    "llama", "mistral", "qwen2", "qwen3", "gemma", "gemma2", "gemma3_text", "phi3", "mixtral", "granite",
    "smollm3", "olmo", "olmo2", "starcoder2", "phi", "gpt2", "gpt_neox", "falcon", "qwen2_moe", "qwen3_moe",
    "deepseek_v2", "gpt_oss",
})

# Families whose q, k and v come out of one fused projection (LoRA on it adapts all three together).
FUSED_QKV = MappingProxyType({"gpt2": "c_attn", "gpt_neox": "query_key_value", "falcon": "query_key_value", "phi3": "qkv_proj"})

# PEFT @5d602fdb / 0.21 `TRANSFORMERS_MODELS_TO_LORA_TARGET_MODULES_MAPPING` (utils/constants.py),
# restricted to the families above. The others are absent there: PEFT raises when target_modules is unset.
PEFT_DEFAULT_TARGETS: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    "llama": ("q_proj", "v_proj"),
    "mistral": ("q_proj", "v_proj"),
    "mixtral": ("q_proj", "v_proj"),
    "gemma": ("q_proj", "v_proj"),
    "gemma2": ("q_proj", "v_proj"),
    "gemma3_text": ("q_proj", "v_proj"),
    "qwen2": ("q_proj", "v_proj"),
    "qwen3": ("q_proj", "v_proj"),
    "phi": ("q_proj", "v_proj", "fc1", "fc2"),
    "gpt2": ("c_attn",),
    "gpt_neox": ("query_key_value",),
    "falcon": ("query_key_value",),
})

# transformers 5.x config-class defaults used when config.json omits a key.
_DEFAULT_TIE = MappingProxyType({  # tie_word_embeddings=True in these config classes
    "gemma": True, "gemma2": True, "gemma3_text": True, "smollm3": True, "starcoder2": True, "gpt2": True,
    "falcon": True,
})
_DEFAULT_HEAD_DIM = MappingProxyType({"gemma": 256, "gemma2": 256, "gemma3_text": 256, "qwen3": 128})  # fixed, not hidden/heads
# model_type of a multimodal or wrapper config -> the text family whose layout it uses
_TEXT_FAMILY = MappingProxyType({"gemma3": "gemma3_text", "qwen3_vl_text": "qwen3"})


# ---------------------------------------------------------------------------------------------
# Sizes written in names
# ---------------------------------------------------------------------------------------------

# A size token: digits (optionally one decimal part) directly followed by B or M, not glued to a
# letter, digit or dot on the left ("Qwen2.5", "v0.1", "A3B" are not sizes) and not followed by a
# letter or digit ("8k" context lengths carry no B/M; "7bhf" is rejected).
_SIZE_RE = re.compile(r"(?<![A-Za-z0-9.])(\d+(?:\.\d+)?)([bBmM])(?![A-Za-z0-9])")


def size_from_name(ref: str) -> float | None:
    """Billions of parameters written in a model reference, or None.

    "meta-llama/Llama-2-7b-hf" -> 7.0, "TinyLlama-1.1B-Chat" -> 1.1, "SmolLM-360M" -> 0.36.
    Versions ("Llama-3.1-8B" -> 8.0), "v0.1", context suffixes ("4k") and active-parameter
    suffixes ("Qwen3-30B-A3B" -> 30.0) are not read as sizes; an M-suffixed number beside a
    B-suffixed one is a context length ("Qwen2.5-7B-Instruct-1M" -> 7.0). Mixture-of-experts names of the
    form "8x7B" give None: the total is not 8 x 7 because attention and embeddings are shared
    (Mixtral-8x7B has 46.7e9 parameters); use the catalogue for those. Two different sizes in one
    name component give None. Path components are read from the last to the first, so
    "/ckpt/Llama-2-7b-hf/checkpoint-500" -> 7.0.
    """
    if not isinstance(ref, str) or not ref.strip():
        return None
    parts = [p for p in re.split(r"[\\/]", ref.strip()) if p]
    for part in reversed(parts):
        if re.search(r"\d+x\d+(?:\.\d+)?[bB](?![A-Za-z0-9])", part):
            return None
        billions, millions = set(), set()
        for m in _SIZE_RE.finditer(part):
            start = m.start()
            # "1_6b": an underscore between digits may be a decimal mark; refuse to guess.
            if start >= 2 and part[start - 1] == "_" and part[start - 2].isdigit():
                return None
            value = float(m.group(1))
            if m.group(2) in "mM":
                millions.add(round(value / 1000.0, 6))
            else:
                billions.add(round(value, 6))
        # "Qwen2.5-7B-Instruct-1M": an M beside a B size is a context length, not a size
        sizes = billions or millions
        if len(sizes) == 1:
            return sizes.pop()
        if len(sizes) > 1:
            return None
    return None


# ---------------------------------------------------------------------------------------------
# config.json -> Architecture
# ---------------------------------------------------------------------------------------------


def _pos_int(value) -> int | None:
    if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
        return None
    return value


def _nonneg_int(value, default: int = 0) -> int | None:
    if value is None:
        return default
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        return None
    return value


# config.json key spellings of other families -> the llama-style names read below
_KEY_ALIASES = MappingProxyType({
    "gpt2": {"hidden_size": "n_embd", "num_hidden_layers": "n_layer", "num_attention_heads": "n_head",
             "intermediate_size": "n_inner", "max_position_embeddings": "n_positions"},
    "falcon": {"num_hidden_layers": "n_layer", "num_attention_heads": "n_head"},  # FalconConfig.attribute_map
})
_FAMILY_ALIASES = MappingProxyType({"RefinedWeb": "falcon", "RefinedWebModel": "falcon"})  # falcon's original model_type names


def architecture_from_config(data: dict, source: str) -> Architecture | None:
    """An Architecture from a transformers config.json mapping, or None when the keys are missing.

    head_dim absent -> family default (gemma 256, qwen3 128) else hidden_size // num_attention_heads;
    num_key_value_heads absent -> num_attention_heads; tie_word_embeddings absent -> the family's
    config-class default; multimodal configs with a ``text_config`` are read from it. Family
    spellings follow the config classes: GPT-2's ``n_embd``/``n_layer``/``n_head``/``n_inner``
    (absent: 4 x hidden), Falcon's ``num_kv_heads``/``multi_query``/``new_decoder_architecture``/
    ``ffn_hidden_size``, Qwen-MoE's ``num_experts``/``moe_intermediate_size``, DeepSeek-V2's
    ``n_routed_experts``/``n_shared_experts``/``first_k_dense_replace`` and latent-attention ranks.
    """
    if not isinstance(data, dict):
        return None
    if "hidden_size" not in data and isinstance(data.get("text_config"), dict):
        inner = dict(data["text_config"])
        for key in ("tie_word_embeddings", "torch_dtype", "dtype"):
            if key not in inner and key in data:
                inner[key] = data[key]
        if "model_type" not in inner and isinstance(data.get("model_type"), str):
            inner["model_type"] = _TEXT_FAMILY.get(data["model_type"], data["model_type"])
        data = inner
    family = data.get("model_type")
    if not isinstance(family, str) or not family:
        return None
    family = _FAMILY_ALIASES.get(family, _TEXT_FAMILY.get(family, family))
    names = _KEY_ALIASES.get(family, {})

    def get(key, default=None):
        alias = names.get(key)
        if alias is not None and alias in data:
            return data[alias]
        return data.get(key, default)

    hidden = _pos_int(get("hidden_size"))
    layers = _pos_int(get("num_hidden_layers"))
    heads = _pos_int(get("num_attention_heads"))
    vocab = _pos_int(get("vocab_size"))
    inter_raw = get("ffn_hidden_size") if family == "falcon" else get("intermediate_size")
    if inter_raw is None and family in ("gpt2", "falcon") and hidden is not None:
        inter_raw = 4 * hidden  # GPT2Config n_inner=None and FalconConfig ffn_hidden_size=None mean 4 x hidden
    inter = _pos_int(inter_raw)
    if None in (hidden, inter, layers, heads, vocab):
        return None
    parallel_norms = 0
    if family == "falcon":
        if data.get("new_decoder_architecture"):
            kv = data.get("num_kv_heads", heads)
            norms = data.get("num_ln_in_parallel_attn")
            parallel_norms = 2 if norms is None else norms
        else:
            kv = 1 if data.get("multi_query", True) else heads
            parallel_norms = 1
        if data.get("parallel_attn", True) is not True or parallel_norms not in (1, 2):
            return None  # the sequential falcon-rw layout is not modelled
    elif family in ("gpt2",):
        kv = heads
    else:
        kv = data.get("num_key_value_heads")
    kv = heads if kv is None else _pos_int(kv)
    if kv is None or heads % kv != 0:
        return None
    head_dim = data.get("head_dim")
    rope = nope = v_head = kv_rank = q_rank = 0
    if family == "deepseek_v2":
        rope, nope = _nonneg_int(data.get("qk_rope_head_dim"), 64), _nonneg_int(data.get("qk_nope_head_dim"), 128)
        v_head, kv_rank = _nonneg_int(data.get("v_head_dim"), 128), _nonneg_int(data.get("kv_lora_rank"), 512)
        q_rank = _nonneg_int(data.get("q_lora_rank"), 0)
        if None in (rope, nope, v_head, kv_rank, q_rank):
            return None
        head_dim = rope + nope
    if head_dim is None:
        head_dim = _DEFAULT_HEAD_DIM.get(family, hidden // heads)
    head_dim = _pos_int(head_dim)
    if head_dim is None:
        return None
    max_pos = get("max_position_embeddings")
    max_pos = _pos_int(max_pos) if max_pos is not None else None
    tie = data.get("tie_word_embeddings", _DEFAULT_TIE.get(family, False))
    dtype = data.get("dtype") or data.get("torch_dtype")
    experts = per_tok = expert_inter = shared = first_dense = 0
    if family in ("mixtral", "gpt_oss"):
        experts, per_tok = data.get("num_local_experts", 0), data.get("num_experts_per_tok", 0)
    elif family in ("qwen2_moe", "qwen3_moe"):
        # hub config.json files say num_experts; transformers 5 writes it back as num_local_experts
        experts = data.get("num_experts", data.get("num_local_experts", 0))
        per_tok = data.get("num_experts_per_tok", 0)
        expert_inter = data.get("moe_intermediate_size", 0)
        shared = data.get("shared_expert_intermediate_size", 0) if family == "qwen2_moe" else 0
        if data.get("decoder_sparse_step", 1) != 1 or data.get("mlp_only_layers"):
            return None  # dense layers between sparse ones are not modelled
    elif family == "deepseek_v2":
        experts, per_tok = data.get("n_routed_experts", 0), data.get("num_experts_per_tok", 0)
        expert_inter = data.get("moe_intermediate_size", 0)
        n_shared = _nonneg_int(data.get("n_shared_experts"), 0)
        first_dense = data.get("first_k_dense_replace", 0)
        if n_shared is None or not isinstance(expert_inter, int) or data.get("moe_layer_freq", 1) != 1:
            return None
        shared = expert_inter * n_shared
    checked = [_nonneg_int(v) for v in (experts, per_tok, expert_inter, shared, first_dense)]
    if None in checked:
        return None
    experts, per_tok, expert_inter, shared, first_dense = checked
    window = data.get("sliding_window")
    if data.get("use_sliding_window") is False:
        window = None
    window = _pos_int(window) if window is not None else None
    bias_default = family == "falcon" and bool(data.get("bias", False))
    return Architecture(
        family=family,
        hidden_size=hidden,
        intermediate_size=inter,
        num_layers=layers,
        num_heads=heads,
        num_kv_heads=kv,
        head_dim=head_dim,
        vocab_size=vocab,
        max_position_embeddings=max_pos,
        tie_word_embeddings=bool(tie),
        torch_dtype=dtype if isinstance(dtype, str) else None,
        num_experts=experts,
        experts_per_token=per_tok,
        source=source,
        # gpt_neox: the bias of query_key_value is part of the layout, whatever attention_bias says
        attention_bias=bias_default or (family != "gpt_neox" and bool(data.get("attention_bias", family == "gpt_oss"))),
        mlp_bias=bool(data.get("mlp_bias", False)),
        sliding_window=window,
        expert_intermediate_size=expert_inter,
        shared_expert_intermediate_size=shared,
        first_dense_layers=first_dense if experts else 0,
        kv_lora_rank=kv_rank,
        q_lora_rank=q_rank,
        qk_rope_head_dim=rope,
        v_head_dim=v_head,
        parallel_norms=parallel_norms,
    )


def _read_config(path: Path) -> Architecture | None:
    import json

    reads.note_file(path)
    try:
        text = path.read_text(encoding="utf-8")
        data = json.loads(text)
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None
    if not isinstance(data, dict):
        return None
    arch = architecture_from_config(data, f"config.json at {path}")
    return replaced(arch, how=f"config.json at {path}", match="config") if arch is not None else None


# ---------------------------------------------------------------------------------------------
# Bundled catalogue
# ---------------------------------------------------------------------------------------------

_CATALOGUE_FILE = Path(__file__).with_name("base_models.json")


@lru_cache(maxsize=1)
def _arch_fields() -> frozenset[str]:
    """The Architecture fields a catalogue entry fills (the rest say how the model was matched)."""
    return frozenset(f for f in Architecture._record_fields
                     if f not in ("source", "entry", "how", "assumed", "match", "quantised"))


class CatalogueEntry:
    """One bundled shape: its canonical id, other ids of the same shape, and where the numbers come from."""

    id: str
    aliases: tuple[str, ...]
    arch: Architecture
    source: str  # where the shapes come from ("from memory" = unverified)
    published_total: int | None  # the published total parameter count, None where none is comparable
    published_source: str | None
    published_extra: int  # parameters the published count holds beyond num_parameters() (stored extras)


    def __init__(self, id, aliases, arch, source, published_total, published_source, published_extra=0):
        _setattr(self, 'id', id)
        _setattr(self, 'aliases', aliases)
        _setattr(self, 'arch', arch)
        _setattr(self, 'source', source)
        _setattr(self, 'published_total', published_total)
        _setattr(self, 'published_source', published_source)
        _setattr(self, 'published_extra', published_extra)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(id={self.id!r}, aliases={self.aliases!r}, arch={self.arch!r}, source={self.source!r}, published_total={self.published_total!r}, published_source={self.published_source!r}, published_extra={self.published_extra!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.id, self.aliases, self.arch, self.source, self.published_total, self.published_source, self.published_extra) == (other.id, other.aliases, other.arch, other.source, other.published_total, other.published_source, other.published_extra)
        return NotImplemented

    def __hash__(self):
        return hash((self.id, self.aliases, self.arch, self.source, self.published_total, self.published_source, self.published_extra))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr


    @property
    def ids(self) -> tuple[str, ...]:
        return (self.id, *self.aliases)


@lru_cache(maxsize=1)
def _catalogue_raw() -> dict:
    import json

    return json.loads(_CATALOGUE_FILE.read_text(encoding="utf-8"))


def catalogue_entries() -> tuple[CatalogueEntry, ...]:
    """The bundled catalogue, read once on the first lookup (lint start-up never reads it)."""
    return _bundle()[0]


def _build_entries() -> tuple[CatalogueEntry, ...]:
    arch_fields = _arch_fields()
    raw = _catalogue_raw()
    out = []
    for item in raw["models"]:
        fields = {k: v for k, v in item.items() if k in arch_fields}
        arch = Architecture(source=f"bundled catalogue: {item['id']} ({item['source']})", entry=item["id"], **fields)
        out.append(CatalogueEntry(
            id=item["id"], aliases=tuple(item.get("aliases", ())), arch=arch, source=item["source"],
            published_total=item.get("published_total"), published_source=item.get("published_source"),
            published_extra=item.get("published_extra", 0),
        ))
    return tuple(out)


def _catalogue_entries() -> tuple[tuple[tuple[str, ...], Architecture], ...]:
    return tuple((e.ids, e.arch) for e in catalogue_entries())


def catalogue() -> dict[str, Architecture]:
    """Every hub id in the bundled catalogue -> its Architecture."""
    return {ref: e.arch for e in catalogue_entries() for ref in e.ids}


# --- name matching -----------------------------------------------------------------------------

# Suffixes that name a variant of the same weights' shape (chat / instruction tuning, exports, dated releases).
_VARIANT_SUFFIX = re.compile(
    r"[-_.](instruct|it|chat|base|hf|pt|sft|dpo|rlhf|thinking|\d{4}|v\d+(?:\.\d+)?-hf)$", re.IGNORECASE
)
# Quantised or re-typed exports: (pattern, what is stored)
_QUANT_SUFFIXES = (
    (re.compile(r"[-_.]gguf$", re.I), "GGUF"),
    (re.compile(r"[-_.](fp16|f16|float16)$", re.I), "float16"),
    (re.compile(r"[-_.](bf16|bfloat16)$", re.I), "bfloat16"),
    (re.compile(r"[-_.](fp32|f32|float32)$", re.I), "float32"),
    (re.compile(r"[-_.](i?q\d(?:_[a-z0-9]+)*)$", re.I), "GGUF {0}"),
    (re.compile(r"[-_.]gptq(?:[-_.]int[48])?$", re.I), "GPTQ"),
    (re.compile(r"[-_.]awq$", re.I), "AWQ"),
    (re.compile(r"[-_.]bnb[-_.]?([48])bit$", re.I), "bitsandbytes {0}-bit"),
    (re.compile(r"[-_.](?:unsloth[-_.])?bnb$", re.I), "bitsandbytes"),
    (re.compile(r"[-_.]([48])[-_.]?bits?$", re.I), "{0}-bit"),
    (re.compile(r"[-_.](int[48]|fp8|nf4|exl2|mlx|mxfp4)$", re.I), "{0}"),
)
_DTYPE_EXPORT = frozenset({"float16", "bfloat16", "float32"})
# Tokens that say nothing about the shape (an organisation-like prefix, file or checkpoint words)
_VERSION_TOKEN = later(r"v\d+(?:\.\d+)*")
_NEUTRAL_TOKENS = frozenset({"meta", "hf", "base", "pt", "model", "checkpoints", "checkpoint", "final", "latest", "main"})


def _strip_exports(name: str) -> tuple[str, list[str], str | None]:
    """(the name without export suffixes, the suffixes dropped, what a quantised export stores)."""
    gguf = name.strip().lower().endswith(".gguf")
    name = re.sub(r"\.gguf$", "", name.strip(), flags=re.I)
    dropped: list[str] = []
    stored: list[str] = []  # outermost suffix first
    for _ in range(6):
        for pattern, what in _QUANT_SUFFIXES:  # (no union of them all first: its compile costs more than it saves)
            m = pattern.search(name)
            if m and m.start() > 0:
                stored.append(what.format(*(g.upper() if not g.isdigit() else g for g in m.groups())))
                dropped.append(name[m.start():])
                name = name[: m.start()]
                break
        else:
            break
    if gguf and not any(s.startswith("GGUF") for s in stored):
        stored.append("GGUF")
    dtypes = [s for s in stored if s in _DTYPE_EXPORT]
    formats = [s for s in stored if s not in _DTYPE_EXPORT]
    if formats:  # a quantised export: name its format and bits in reading order ("AWQ INT4", "GGUF Q4_K_M")
        return name, dropped, " ".join(reversed(formats)) + (f" {dtypes[0]}" if dtypes else "")
    return name, dropped, dtypes[0] if dtypes else None


def _strip_name(name: str) -> tuple[str, list[str], str | None]:
    """(the name without variant and export suffixes, the suffixes dropped, what a quantised export stores)."""
    name, dropped, stored = _strip_exports(name)
    for _ in range(8):
        m = _VARIANT_SUFFIX.search(name)
        if not m or m.start() == 0:
            more, extra, what = _strip_exports(name)  # an export tag before a variant tag
            if not extra:
                break
            name, stored = more, stored or what
            dropped.extend(extra)
            continue
        dropped.append(name[m.start():])
        name = name[: m.start()]
    return name.lower(), dropped, stored


def _tokens(stripped: str) -> frozenset[str]:
    return frozenset(t for t in re.split(r"[-_\s]+", stripped) if t)


@lru_cache(maxsize=1)
def _bundle():
    """(catalogue entries, name index), built together so the index holds the very entries
    ``catalogue_entries`` returns; kept ready to use between runs (knowledge.tables)."""
    from .tables import ready_table

    here = Path(__file__).resolve()

    def build():
        entries = _build_entries()
        return entries, _build_name_index(entries)

    return ready_table("model_names", [here, _CATALOGUE_FILE], build)


def _name_index():
    return _bundle()[1]


def _build_name_index(entries: tuple[CatalogueEntry, ...]):
    by_id: dict[str, CatalogueEntry] = {}
    by_name: dict[str, CatalogueEntry] = {}
    by_stripped: dict[str, CatalogueEntry] = {}
    token_rows: list[tuple[frozenset[str], CatalogueEntry]] = []
    for e in entries:  # canonical ids first: they win a tie among same-name variants
        by_stripped.setdefault(_strip_name(e.id.rsplit("/", 1)[-1])[0], e)
    for e in entries:
        for ref in e.ids:
            by_id.setdefault(ref.lower(), e)
            name = ref.rsplit("/", 1)[-1]
            by_name.setdefault(name.lower(), e)
            stripped = _strip_name(name)[0]
            by_stripped.setdefault(stripped, e)
            # release tags (v0.1, v1.0) are not required: a fine-tune's name rarely repeats them
            token_rows.append((frozenset(t for t in _tokens(stripped) - _NEUTRAL_TOKENS if not _VERSION_TOKEN.fullmatch(t)), e))
    derived = _catalogue_raw().get("derived", [])
    ids = {e.id: e for e in entries}
    derived_rows = [(frozenset(d["tokens"]), ids[d["base"]], d["source"]) for d in derived if d["base"] in ids]
    return by_id, by_name, by_stripped, token_rows, derived_rows


def _catalogue_match(entry: CatalogueEntry, kind: str, how: str, assumed: bool, stored: str | None = None) -> Architecture:
    arch = entry.arch
    changes = {"how": how, "assumed": assumed, "match": kind}
    if assumed:  # messages quote the source: a name-only match says so there
        changes["source"] = f"{arch.source}; assumed from the name: {how}"
    if stored in _DTYPE_EXPORT:
        changes["torch_dtype"] = stored
    elif stored:
        changes["quantised"] = stored
    return replaced(arch, **changes)


def match_catalogue(ref: str) -> Architecture | None:
    """:func:`_match_catalogue`, once per process for the same text (the catalogue is bundled)."""
    if not isinstance(ref, str) or not ref.strip():
        return None
    return _match_catalogue_text(ref)


@lru_cache(maxsize=1024)
def _match_catalogue_text(ref: str) -> Architecture | None:
    return _match_catalogue(ref)


def _match_catalogue(ref: str) -> Architecture | None:
    """The bundled shape a hub id names, with ``how`` (in words), ``match`` and ``assumed`` set; None if unknown.

    In order: the exact id or a listed alias (case-insensitive) -> "exact"; the same name under another
    organisation (a mirror) -> "mirror"; the name without variant suffixes (-Instruct, -it, -chat, -Base,
    -hf, dated -2507) and export suffixes (-GPTQ, -AWQ, -bnb-4bit, -fp16, GGUF quant tags) -> "variant";
    a known fine-tune family named with its base's size (zephyr-7b -> Mistral-7B) -> "derived"; the
    family and size tokens of one entry all present in the name -> "tokens". Everything but "exact"
    rests on the name alone and is marked ``assumed``.
    """
    if not isinstance(ref, str) or not ref.strip():
        return None
    ref = ref.strip().strip("/")
    by_id, by_name, by_stripped, token_rows, derived_rows = _name_index()
    e = by_id.get(ref.lower())
    if e is not None:
        return _catalogue_match(e, "exact", f"{ref}: catalogue entry {e.id}", False)
    name = ref.rsplit("/", 1)[-1]
    e = by_name.get(name.lower())
    if e is not None:
        return _catalogue_match(e, "mirror", f"{ref} -> the {e.id} shape, matched by name (same name, other organisation)", True)
    stripped, dropped, stored = _strip_name(name)
    export = f"; a {stored} export" if stored and stored not in _DTYPE_EXPORT else (f"; stored as {stored}" if stored else "")
    plain, export_tags, _what = _strip_exports(name)
    e = by_name.get(plain.lower()) if export_tags else None
    if e is not None:  # the export of a listed id: only the export suffixes differ
        suffixes = ", ".join(reversed(export_tags))
        return _catalogue_match(e, "variant", f"{ref} -> the {e.id} shape, matched by name without {suffixes}{export}", True, stored)
    e = by_stripped.get(stripped)
    if e is not None and dropped:
        suffixes = ", ".join(reversed(dropped))
        return _catalogue_match(e, "variant", f"{ref} -> the {e.id} shape, matched by name without {suffixes}{export}", True, stored)
    toks = _tokens(stripped)
    best = [(len(t), base, src) for t, base, src in derived_rows if t <= toks]
    if best:
        n, base, src = max(best, key=lambda x: x[0])
        if sum(1 for b in best if b[0] == n and b[1].arch != base.arch) == 0:
            return _catalogue_match(base, "derived", f"{ref} -> the {base.id} shape, matched by name as a fine-tune of it ({src}){export}", True, stored)
    hits = [(len(t), e) for t, e in token_rows if t and t <= toks and any(_SIZE_TOKEN.fullmatch(x) for x in t)]
    if hits:
        n = max(h[0] for h in hits)
        top = {h[1].id: h[1] for h in hits if h[0] == n}
        # entries that differ only in context window or stored dtype are one parameter shape
        shapes = {replaced(e.arch, max_position_embeddings=None, torch_dtype=None, source="") for e in top.values()}
        if len(shapes) == 1:
            e = next(iter(top.values()))
            shared = sorted(max((t for t, x in token_rows if x is e and t <= toks), key=len))
            return _catalogue_match(e, "tokens", f"{ref} -> the {e.id} shape, matched by the name tokens {', '.join(shared)}{export}", True, stored)
    return None


_SIZE_TOKEN = later(r"\d+(?:\.\d+)?[bm]|\d+x\d+b|a\d+(?:\.\d+)?b|small|medium|large|xl|mini|gpt2")


# ---------------------------------------------------------------------------------------------
# Resolution
# ---------------------------------------------------------------------------------------------

_HUB_ID_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*(/[A-Za-z0-9][A-Za-z0-9._-]*)?$")


def _default_hub_cache() -> Path:
    env = os.environ.get("HF_HUB_CACHE")
    if env:
        return Path(env).expanduser()
    home = os.environ.get("HF_HOME")
    if home:
        return Path(home).expanduser() / "hub"
    return Path.home() / ".cache" / "huggingface" / "hub"


def _from_hub_cache(ref: str, cache: Path) -> Architecture | None:
    folder_name = "models--" + ref.replace("/", "--")
    try:
        reads.note_kind(cache)
        if not cache.is_dir():
            return None
        repo = cache / folder_name
        reads.note_kind(repo)
        if not repo.is_dir():
            lowered = folder_name.lower()
            reads.note_names(cache, "(?i)" + re.escape(folder_name))
            matches = [p for p in cache.iterdir() if p.is_dir() and p.name.lower() == lowered]
            if not matches:
                return None
            repo = matches[0]
        snapshots = repo / "snapshots"
        candidates: list[Path] = []
        main = repo / "refs" / "main"
        reads.note_file(main)
        reads.note_kind(snapshots)
        if main.is_file():
            commit = main.read_text(encoding="utf-8").strip()
            if commit and "/" not in commit and "\\" not in commit:
                candidates.append(snapshots / commit / "config.json")
        if snapshots.is_dir():
            reads.note_folders(snapshots)
            for p in snapshots.iterdir():
                reads.note_kind(p / "config.json")
            others = sorted(
                (p / "config.json" for p in snapshots.iterdir() if (p / "config.json").is_file()),
                key=lambda p: p.stat().st_mtime,
                reverse=True,
            )
            candidates.extend(others)
    except OSError:
        return None
    for cfg in candidates:
        if cfg.is_file():
            arch = _read_config(cfg)
            if arch is not None:
                return arch
    return None


def _hub_cache_adapter_base(ref: str, cache: Path) -> str | None:
    """base_model_name_or_path of an adapter repository in the hub cache (adapter_config.json, no config.json)."""
    folder_name = ("models--" + ref.replace("/", "--")).lower()
    try:
        reads.note_kind(cache)
        if not cache.is_dir():
            return None
        reads.note_names(cache, "(?i)" + re.escape(folder_name))
        for r in cache.iterdir():
            if r.name.lower() == folder_name:
                reads.note_kind(r / "snapshots")
                reads.note_folders(r / "snapshots")
        repos = [p for p in cache.iterdir() if p.is_dir() and p.name.lower() == folder_name]
        snapshots = [s for r in repos if (r / "snapshots").is_dir() for s in (r / "snapshots").iterdir()]
    except OSError:
        return None
    for snap in snapshots:
        base = _adapter_base(snap)
        if base is not None:
            return base
    return None


def declared_model(ref: str, data: dict, project_dir: Path, project_file: str) -> Architecture | str:
    """A model the project file declares: ``config`` (a config.json path, relative to the project file)
    or the shape itself in config.json key names (``model_type`` or ``family``, ``hidden_size``, ...).
    Returns the Architecture, or a sentence saying what is wrong."""
    import json

    if "config" in data:
        path = Path(str(data["config"])).expanduser()
        if not path.is_absolute():
            path = project_dir / path
        if path.is_dir():
            path = path / "config.json"
        try:
            raw = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
            return f"cannot read {path}: {exc.__class__.__name__}"
        where = f"config.json at {path}, declared in {project_file}"
    else:
        raw = {k: v for k, v in data.items() if k != "id"}
        if "family" in raw and "model_type" not in raw:
            raw["model_type"] = raw.pop("family")
        if "num_layers" in raw and "num_hidden_layers" not in raw:
            raw["num_hidden_layers"] = raw.pop("num_layers")
        where = f"declared in {project_file}"
    arch = architecture_from_config(raw, where) if isinstance(raw, dict) else None
    if arch is None:
        return ("not a model shape: needs model_type, hidden_size, intermediate_size, num_hidden_layers, "
                "num_attention_heads and vocab_size")
    if arch.family not in SUPPORTED_FAMILIES:
        return f"model family {arch.family!r} has no module layout here (supported: {', '.join(sorted(SUPPORTED_FAMILIES))})"
    return replaced(arch, entry=ref, how=f"{ref}: {where}", match="declared", assumed=False)


def resolve_model(
    ref: str | None,
    *,
    config_dir: Path | None = None,
    cwd: Path | None = None,
    hub_cache: Path | None = None,
    declared=None,
) -> Architecture | None:
    """Find the architecture behind a model reference, offline. Never raises on user input.

    Order: a local folder holding config.json (an absolute path; a relative one against ``cwd``
    first, then against ``config_dir``, the folder of the file being linted); then the local hub
    cache (``hub_cache``, else HF_HUB_CACHE, HF_HOME/hub or ~/.cache/huggingface/hub, layout
    ``models--ORG--NAME/snapshots/<rev>/config.json``, preferring ``refs/main``); then the bundled
    catalogue (:func:`match_catalogue`: exact ids, mirrors, variants and exports, fine-tunes, name
    tokens; every match sets ``how``, ``match`` and ``assumed``). Models the project file declares
    (``declared``: pairs of id and Architecture) come before everything else. A local PEFT adapter
    folder (adapter_config.json) resolves to its ``base_model_name_or_path``. A local folder whose
    config.json is unreadable or not a model config gives None.
    """
    if declared and isinstance(ref, str):
        hit = dict((k.lower(), v) for k, v in declared).get(ref.strip().lower())
        if hit is not None:
            return hit
    return _resolve(ref, config_dir=config_dir, cwd=cwd, hub_cache=hub_cache, depth=0)


def _by_folder_name(ref: str) -> Architecture | None:
    """A path that is not on this machine (a checkpoint folder of the training host, such as torchtune's
    ``/tmp/Qwen3-8B``): matched by its last component's name, as an assumption."""
    parts = [p for p in re.split(r"[\\/]", ref) if p and p not in (".", "..")]
    if not parts or not _HUB_ID_RE.match(parts[-1]):
        return None
    arch = match_catalogue(parts[-1])
    if arch is None:
        return None
    how = f"{ref}: no such folder here; its name {parts[-1]!r} -> the {arch.entry} shape ({arch.match} match)"
    return replaced(arch, how=how, assumed=True, match="folder name",
                    source=f"{arch.source.split('; assumed from the name:')[0]}; assumed from the name: {how}")


def _adapter_base(folder: Path) -> str | None:
    """base_model_name_or_path of a PEFT adapter folder (adapter_config.json), if any."""
    import json

    reads.note_file(folder / "adapter_config.json")
    try:
        data = json.loads((folder / "adapter_config.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None
    base = data.get("base_model_name_or_path") if isinstance(data, dict) else None
    return base if isinstance(base, str) and base.strip() else None


def _resolve(ref, *, config_dir, cwd, hub_cache, depth) -> Architecture | None:
    if not isinstance(ref, str) or not ref.strip():
        return None
    ref = ref.strip()
    try:
        given = Path(ref).expanduser()
        if given.is_absolute():
            bases = [given]
        else:
            bases = [(Path(b) / given) for b in (cwd if cwd is not None else Path.cwd(), config_dir) if b is not None]
        local_dir = False
        for base in bases:
            reads.note_kind(base)
            reads.note_kind(base / "config.json")
            if base.is_file() and base.suffix == ".json":
                return _read_config(base)
            if (base / "config.json").is_file():
                return _read_config(base / "config.json")
            if base.is_dir():
                local_dir = True
                adapter_base = _adapter_base(base) if depth == 0 else None
                if adapter_base is not None:
                    arch = _resolve(adapter_base, config_dir=config_dir, cwd=cwd, hub_cache=hub_cache, depth=1)
                    if arch is not None:
                        return replaced(arch, source=f"{arch.source} (base of the adapter at {base})")
        if local_dir:
            return None  # a local folder that holds no model config is not a hub id either
    except (OSError, ValueError):
        return None
    if not _HUB_ID_RE.match(ref):
        return _by_folder_name(ref)
    cache = Path(hub_cache) if hub_cache is not None else _default_hub_cache()
    from ..memo import remembered  # the same id in the same hub cache: looked once per run

    arch = remembered("hub_cache_model", (ref, str(cache)), lambda: _from_hub_cache(ref, cache))
    if arch is not None:
        return arch
    base = remembered("hub_cache_adapter", (ref, str(cache)),
                      lambda: _hub_cache_adapter_base(ref, cache)) if depth == 0 else None
    if base is not None and base.strip().lower() != ref.lower():
        arch = _resolve(base, config_dir=config_dir, cwd=cwd, hub_cache=hub_cache, depth=1)
        if arch is not None:
            how = f"{ref}: an adapter in the hub cache whose base_model_name_or_path is {base}; {arch.how or arch.source}"
            return replaced(arch, source=f"{arch.source} (base of the adapter {ref})", how=how)
    return match_catalogue(ref)


# ---------------------------------------------------------------------------------------------
# Module tree (transformers 5.x layout)
# ---------------------------------------------------------------------------------------------

# kinds: "container", "linear", "conv1d" (GPT-2's transposed Linear), "embedding", "norm", "router", "experts",
# "other"
Module = tuple[str, str, dict]  # (full name, kind, {param name: shape})


def _require_supported(arch: Architecture) -> None:
    if arch.family not in SUPPORTED_FAMILIES:
        raise UnsupportedFamily(
            f"model family {arch.family!r} has no module layout here "
            f"(supported: {', '.join(sorted(SUPPORTED_FAMILIES))})"
        )


def _linear(name: str, fin: int, fout: int, bias: bool) -> Module:
    params = {"weight": (fout, fin)}
    if bias:
        params["bias"] = (fout,)
    return (name, "linear", params)


def _conv1d(name: str, fin: int, fout: int) -> Module:
    # transformers' GPT-2 Conv1D: weight stored (in, out), always with a bias; PEFT wraps it like a Linear
    return (name, "conv1d", {"weight": (fin, fout), "bias": (fout,)})


def _layer_norm(name: str, width: int) -> Module:
    return (name, "norm", {"weight": (width,), "bias": (width,)})


def _rms(name: str, width: int) -> Module:
    return (name, "norm", {"weight": (width,)})


def _gated_mlp(m: str, h: int, inter: int, bias: bool) -> list[Module]:
    return [
        (m, "container", {}),
        _linear(f"{m}.gate_proj", h, inter, bias),
        _linear(f"{m}.up_proj", h, inter, bias),
        _linear(f"{m}.down_proj", inter, h, bias),
        (f"{m}.act_fn", "other", {}),
    ]


def _is_moe_layer(arch: Architecture, index: int) -> bool:
    return arch.num_experts > 0 and index >= arch.first_dense_layers


def _layer_modules(arch: Architecture, prefix: str, index: int = 0) -> list[Module]:
    h, d, H, KV, inter = arch.hidden_size, arch.head_dim, arch.num_heads, arch.num_kv_heads, arch.intermediate_size
    fam = arch.family
    if fam == "gpt2":
        return [
            (prefix, "container", {}),
            _layer_norm(f"{prefix}.ln_1", h),
            (f"{prefix}.attn", "container", {}),
            _conv1d(f"{prefix}.attn.c_attn", h, 3 * h),
            _conv1d(f"{prefix}.attn.c_proj", h, h),
            (f"{prefix}.attn.attn_dropout", "other", {}),
            (f"{prefix}.attn.resid_dropout", "other", {}),
            _layer_norm(f"{prefix}.ln_2", h),
            (f"{prefix}.mlp", "container", {}),
            _conv1d(f"{prefix}.mlp.c_fc", h, inter),
            _conv1d(f"{prefix}.mlp.c_proj", inter, h),
            (f"{prefix}.mlp.act", "other", {}),
            (f"{prefix}.mlp.dropout", "other", {}),
        ]
    if fam == "gpt_neox":
        return [
            (prefix, "container", {}),
            _layer_norm(f"{prefix}.input_layernorm", h),
            _layer_norm(f"{prefix}.post_attention_layernorm", h),
            (f"{prefix}.post_attention_dropout", "other", {}),
            (f"{prefix}.post_mlp_dropout", "other", {}),
            (f"{prefix}.attention", "container", {}),
            _linear(f"{prefix}.attention.query_key_value", h, 3 * H * d, True),
            _linear(f"{prefix}.attention.dense", H * d, h, True),
            (f"{prefix}.mlp", "container", {}),
            _linear(f"{prefix}.mlp.dense_h_to_4h", h, inter, True),
            _linear(f"{prefix}.mlp.dense_4h_to_h", inter, h, True),
            (f"{prefix}.mlp.act", "other", {}),
        ]
    if fam == "falcon":
        # FalconAttention: fused q/k/v; new_decoder_architecture (40B, 180B) has grouped K/V heads and two
        # parallel layer norms; multi_query (7B) one K/V head; bias=False for the released models
        a, m, b = f"{prefix}.self_attention", f"{prefix}.mlp", arch.attention_bias
        mods = [
            (prefix, "container", {}),
            (a, "container", {}),
            _linear(f"{a}.query_key_value", h, (H + 2 * KV) * d, b),
            _linear(f"{a}.dense", H * d, h, b),
            (f"{a}.attention_dropout", "other", {}),
            (m, "container", {}),
            _linear(f"{m}.dense_h_to_4h", h, inter, b),
            (f"{m}.act", "other", {}),
            _linear(f"{m}.dense_4h_to_h", inter, h, b),
        ]
        if arch.parallel_norms == 2:
            mods += [_layer_norm(f"{prefix}.ln_attn", h), _layer_norm(f"{prefix}.ln_mlp", h)]
        else:
            mods.append(_layer_norm(f"{prefix}.input_layernorm", h))
        return mods
    if fam == "phi":
        a, m = f"{prefix}.self_attn", f"{prefix}.mlp"
        return [
            (prefix, "container", {}),
            (a, "container", {}),
            _linear(f"{a}.q_proj", h, H * d, True),
            _linear(f"{a}.k_proj", h, KV * d, True),
            _linear(f"{a}.v_proj", h, KV * d, True),
            _linear(f"{a}.dense", H * d, h, True),
            (m, "container", {}),
            (f"{m}.activation_fn", "other", {}),
            _linear(f"{m}.fc1", h, inter, True),
            _linear(f"{m}.fc2", inter, h, True),
            _layer_norm(f"{prefix}.input_layernorm", h),
            (f"{prefix}.resid_dropout", "other", {}),
        ]

    qkv_bias = arch.attention_bias or fam in ("qwen2", "qwen2_moe", "starcoder2", "gpt_oss")
    o_bias = (arch.attention_bias and fam not in ("qwen2", "qwen2_moe")) or fam in ("starcoder2", "gpt_oss")
    a = f"{prefix}.self_attn"
    mods: list[Module] = [(prefix, "container", {})]
    mods.append((a, "container", {"sinks": (H,)} if fam == "gpt_oss" else {}))
    if fam == "phi3":
        mods.append(_linear(f"{a}.o_proj", H * d, h, False))
        mods.append(_linear(f"{a}.qkv_proj", h, H * d + 2 * KV * d, False))
    elif fam == "deepseek_v2":
        # multi-head latent attention (DeepSeek-V2 paper sec. 2.1; transformers DeepseekV2Attention)
        rope, nope, v = arch.qk_rope_head_dim, d - arch.qk_rope_head_dim, arch.v_head_dim
        if arch.q_lora_rank:
            mods.append(_linear(f"{a}.q_a_proj", h, arch.q_lora_rank, False))
            mods.append(_rms(f"{a}.q_a_layernorm", arch.q_lora_rank))
            mods.append(_linear(f"{a}.q_b_proj", arch.q_lora_rank, H * d, False))
        else:
            mods.append(_linear(f"{a}.q_proj", h, H * d, False))
        mods.append(_linear(f"{a}.kv_a_proj_with_mqa", h, arch.kv_lora_rank + rope, False))
        mods.append(_rms(f"{a}.kv_a_layernorm", arch.kv_lora_rank))
        mods.append(_linear(f"{a}.kv_b_proj", arch.kv_lora_rank, H * (nope + v), False))
        mods.append(_linear(f"{a}.o_proj", H * v, h, False))
    else:
        mods.append(_linear(f"{a}.q_proj", h, H * d, qkv_bias))
        mods.append(_linear(f"{a}.k_proj", h, KV * d, qkv_bias))
        mods.append(_linear(f"{a}.v_proj", h, KV * d, qkv_bias))
        mods.append(_linear(f"{a}.o_proj", H * d, h, o_bias))
    if fam in ("qwen3", "qwen3_moe", "gemma3_text"):
        mods.append(_rms(f"{a}.q_norm", d))
        mods.append(_rms(f"{a}.k_norm", d))
    elif fam == "olmo2":  # Olmo2Attention normalises the whole q and k projections
        mods.append(_rms(f"{a}.q_norm", H * d))
        mods.append(_rms(f"{a}.k_norm", KV * d))
    m = f"{prefix}.mlp"
    E, ei = arch.num_experts, arch.expert_intermediate_size or inter
    if fam == "phi3":
        mods.append((m, "container", {}))
        mods.append(_linear(f"{m}.gate_up_proj", h, 2 * inter, False))
        mods.append(_linear(f"{m}.down_proj", inter, h, False))
        mods.append((f"{m}.activation_fn", "other", {}))
    elif fam == "starcoder2":
        mods.append((m, "container", {}))
        mods.append(_linear(f"{m}.c_fc", h, inter, True))
        mods.append(_linear(f"{m}.c_proj", inter, h, True))
        mods.append((f"{m}.act", "other", {}))
    elif fam == "mixtral":
        mods.append((m, "container", {}))
        mods.append((f"{m}.gate", "router", {"weight": (E, h)}))
        mods.append((f"{m}.experts", "experts", {"gate_up_proj": (E, 2 * inter, h), "down_proj": (E, h, inter)}))
        mods.append((f"{m}.experts.act_fn", "other", {}))
    elif fam == "gpt_oss":
        mods.append((m, "container", {}))
        mods.append((f"{m}.router", "router", {"weight": (E, h), "bias": (E,)}))
        mods.append((f"{m}.experts", "experts", {
            "gate_up_proj": (E, h, 2 * ei), "gate_up_proj_bias": (E, 2 * ei),
            "down_proj": (E, ei, h), "down_proj_bias": (E, h),
        }))
    elif fam in ("qwen2_moe", "qwen3_moe", "deepseek_v2") and _is_moe_layer(arch, index):
        experts = [
            (f"{m}.experts", "experts", {"gate_up_proj": (E, 2 * ei, h), "down_proj": (E, h, ei)}),
            (f"{m}.experts.act_fn", "other", {}),
        ]
        router = (f"{m}.gate", "router", {"weight": (E, h)})
        mods.append((m, "container", {}))
        if fam == "qwen2_moe":
            mods.append(router)
            mods.extend(experts)
            mods.extend(_gated_mlp(f"{m}.shared_expert", h, arch.shared_expert_intermediate_size, False))
            mods.append(_linear(f"{m}.shared_expert_gate", h, 1, False))
        else:
            mods.extend(experts)
            mods.append(router)
            if fam == "deepseek_v2":
                mods.extend(_gated_mlp(f"{m}.shared_experts", h, arch.shared_expert_intermediate_size, False))
    else:
        mods.extend(_gated_mlp(m, h, inter, arch.mlp_bias))
    if fam == "olmo":  # OlmoLayerNorm: layer norm without learnable parameters
        mods.append((f"{prefix}.input_layernorm", "norm", {}))
        mods.append((f"{prefix}.post_attention_layernorm", "norm", {}))
    elif fam == "olmo2":
        mods.append(_rms(f"{prefix}.post_attention_layernorm", h))
        mods.append(_rms(f"{prefix}.post_feedforward_layernorm", h))
    elif fam == "starcoder2":
        mods.append(_layer_norm(f"{prefix}.input_layernorm", h))
        mods.append(_layer_norm(f"{prefix}.post_attention_layernorm", h))
    else:
        mods.append(_rms(f"{prefix}.input_layernorm", h))
        mods.append(_rms(f"{prefix}.post_attention_layernorm", h))
    if fam in ("gemma2", "gemma3_text"):
        mods.append(_rms(f"{prefix}.pre_feedforward_layernorm", h))
        mods.append(_rms(f"{prefix}.post_feedforward_layernorm", h))
    if fam == "phi3":
        mods.append((f"{prefix}.resid_attn_dropout", "other", {}))
        mods.append((f"{prefix}.resid_mlp_dropout", "other", {}))
    return mods


def module_table(arch: Architecture) -> list[Module]:
    """Every module of the ``*ForCausalLM`` model in ``named_modules()`` order (root excluded).

    Each row is (full name, kind, {parameter name: shape}). A tied ``lm_head`` lists its weight
    too; :func:`total_parameters` counts it once, as transformers does.
    """
    return list(_module_rows(arch))


# A lint run asks the same few models again and again (one corpus, many configs): the tables
# depend on the architecture alone, so they are built once per architecture.
@lru_cache(maxsize=64)
def _module_rows(arch: Architecture) -> tuple[Module, ...]:
    return tuple(_build_module_table(arch))


def _build_module_table(arch: Architecture) -> list[Module]:
    _require_supported(arch)
    h, V, fam = arch.hidden_size, arch.vocab_size, arch.family
    layers = range(arch.num_layers)
    if fam == "gpt2":
        mods: list[Module] = [
            ("transformer", "container", {}),
            ("transformer.wte", "embedding", {"weight": (V, h)}),
            ("transformer.wpe", "embedding", {"weight": (arch.max_position_embeddings or 1024, h)}),
            ("transformer.drop", "other", {}),
            ("transformer.h", "container", {}),
        ]
        for i in layers:
            mods.extend(_layer_modules(arch, f"transformer.h.{i}", i))
        mods.append(_layer_norm("transformer.ln_f", h))
    elif fam == "gpt_neox":
        mods = [
            ("gpt_neox", "container", {}),
            ("gpt_neox.embed_in", "embedding", {"weight": (V, h)}),
            ("gpt_neox.emb_dropout", "other", {}),
            ("gpt_neox.layers", "container", {}),
        ]
        for i in layers:
            mods.extend(_layer_modules(arch, f"gpt_neox.layers.{i}", i))
        mods.append(_layer_norm("gpt_neox.final_layer_norm", h))
        mods.append(("gpt_neox.rotary_emb", "other", {}))
    elif fam == "falcon":
        mods = [
            ("transformer", "container", {}),
            ("transformer.word_embeddings", "embedding", {"weight": (V, h)}),
            ("transformer.h", "container", {}),
        ]
        for i in layers:
            mods.extend(_layer_modules(arch, f"transformer.h.{i}", i))
        mods.append(_layer_norm("transformer.ln_f", h))
        mods.append(("transformer.rotary_emb", "other", {}))
    else:
        mods = [
            ("model", "container", {}),
            ("model.embed_tokens", "embedding", {"weight": (V, h)}),
            ("model.layers", "container", {}),
        ]
        for i in layers:
            mods.extend(_layer_modules(arch, f"model.layers.{i}", i))
        if fam == "phi":
            mods.append(("model.rotary_emb", "other", {}))
            mods.append(("model.embed_dropout", "other", {}))
            mods.append(_layer_norm("model.final_layernorm", h))
        else:
            if fam == "olmo":
                mods.append(("model.norm", "norm", {}))
            elif fam == "starcoder2":
                mods.append(_layer_norm("model.norm", h))
            else:
                mods.append(_rms("model.norm", h))
            mods.append(("model.rotary_emb", "other", {}))
    head = {"weight": (V, h)}
    if fam == "phi":
        head["bias"] = (V,)  # PhiForCausalLM: lm_head = nn.Linear(..., bias=True)
    mods.append(("lm_head", "linear", head))
    return mods


def _numel(shape: Iterable[int]) -> int:
    return math.prod(shape)


@lru_cache(maxsize=64)
def total_parameters(arch: Architecture) -> int:
    """Exactly what transformers' ``model.num_parameters()`` reports (tied weights counted once)."""
    total = 0
    for name, _kind, params in module_table(arch):
        if name == "lm_head" and arch.tie_word_embeddings:
            continue
        total += sum(_numel(s) for s in params.values())
    return total


def expert_parameters(arch: Architecture) -> int:
    """Parameters of the routed experts over all layers (0 for a dense model); router and shared experts excluded."""
    return sum(
        _numel(shape) for _name, kind, params in module_table(arch) if kind == "experts" for shape in params.values()
    )


def active_parameters(arch: Architecture) -> int:
    """Parameters one token passes through: the total less the routed experts it is not sent to.

    Every expert stays resident in memory (weights, and gradients and optimizer states when trained), so the
    memory estimate uses :func:`total_parameters`; only compute per token scales with this figure. The router,
    the shared experts and attention are always active. Equals the total for a dense model.
    """
    if not arch.is_moe:
        return total_parameters(arch)
    idle = arch.num_experts - min(arch.experts_per_token, arch.num_experts)
    return total_parameters(arch) - expert_parameters(arch) * idle // arch.num_experts


def linear_modules(arch: Architecture) -> dict[str, tuple[int, int]]:
    """Per decoder layer: leaf module name -> (in_features, out_features) of each nn.Linear (or Conv1D).

    Where the first layers are dense and the rest mixture-of-experts (DeepSeek), both kinds are merged.
    """
    return dict(_linear_table(arch))


@lru_cache(maxsize=64)
def _linear_table(arch: Architecture) -> tuple[tuple[str, tuple[int, int]], ...]:
    _require_supported(arch)
    out: dict[str, tuple[int, int]] = {}
    indices = sorted({0, min(arch.first_dense_layers, max(arch.num_layers - 1, 0))})
    for index in indices:
        for name, kind, params in _layer_modules(arch, "L", index):
            if kind in _LINEAR_KINDS:
                fin, fout = _in_out(kind, params["weight"])
                out.setdefault(name.rsplit(".", 1)[-1], (fin, fout))
    return tuple(out.items())


@lru_cache(maxsize=64)
def rows_by_name(arch: Architecture) -> MappingProxyType:
    """The rows of :func:`module_table` by full name (read-only; built once per architecture)."""
    return MappingProxyType({r[0]: r for r in _module_rows(arch)})


@lru_cache(maxsize=64)
def _rows_by_leaf(arch: Architecture) -> MappingProxyType:
    """Leaf name -> positions in :func:`module_table` of the rows whose name ends in it."""
    out: dict[str, list[int]] = {}
    for i, r in enumerate(_module_rows(arch)):
        out.setdefault(r[0].rsplit(".", 1)[-1], []).append(i)
    return MappingProxyType({k: tuple(v) for k, v in out.items()})


@lru_cache(maxsize=64)
def target_names(arch: Architecture) -> frozenset[str]:
    """Last name components a LoRA ``target_modules`` list may name for this model and PEFT accept.

    Every Linear, Conv1D and embedding (``embed_tokens``, GPT-2 ``wte``, GPT-NeoX ``embed_in``,
    Falcon ``word_embeddings``, ``lm_head``), plus the transformers 4.x expert and router names that
    PEFT rewrites for the fused transformers 5 layout (mixtral ``w1``/``w2``/``w3``/``gate``; qwen3_moe
    and deepseek_v2 ``gate_proj``/``up_proj``/``down_proj``/``gate``).
    """
    names = {r[0].rsplit(".", 1)[-1] for r in _module_rows(arch) if r[1] in _LORA_KINDS}
    if arch.family in _MOE_PATTERN:
        names |= set(_MOE_CONVERSIONS[_MOE_PATTERN[arch.family]][0])
    return frozenset(names)


def _in_out(kind: str, weight: tuple[int, ...]) -> tuple[int, int]:
    """(in_features, out_features) of a Linear (weight out x in) or a GPT-2 Conv1D (weight in x out)."""
    if kind == "conv1d":
        return weight[0], weight[1]
    return weight[1], weight[0]


# ---------------------------------------------------------------------------------------------
# PEFT target resolution and counts (PEFT 0.21 semantics, tuners_utils.check_target_module_exists)
# ---------------------------------------------------------------------------------------------

_LINEAR_KINDS = ("linear", "conv1d")  # what PEFT's "all-linear" collects (nn.Linear and transformers' Conv1D)
_LORA_KINDS = ("linear", "conv1d", "embedding")  # module types LoRA can wrap among those modelled here


def _is_all_linear(targets) -> bool:
    return isinstance(targets, str) and targets.lower() == "all-linear"


def _excluded_by_modules_to_save(key: str, modules_to_save) -> bool:
    # PEFT: adapters never match modules_to_save modules: re.match(rf"(^|.*\.){m}($|\..*)", key)
    if not modules_to_save:
        return False
    try:
        return any(re.match(rf"(^|.*\.){m}($|\..*)", key) for m in modules_to_save)
    except re.error:  # a name that is not a valid pattern (PEFT would fail on it too): no match
        return False


def _matches(targets, key: str) -> bool:
    if isinstance(targets, str):
        try:
            return re.fullmatch(targets, key) is not None
        except re.error:
            return False
    return key in targets or any(key.endswith(f".{t}") for t in targets)


def _normalise_targets(arch: Architecture, targets):
    if targets is None:
        try:
            return list(PEFT_DEFAULT_TARGETS[arch.family])
        except KeyError:
            raise NoDefaultTargets(
                f"PEFT has no default target_modules for model family {arch.family!r}; set target_modules"
            ) from None
    if isinstance(targets, str):
        return targets
    return [str(t) for t in targets]


def _frozen(value):
    if isinstance(value, (list, tuple)):
        return ("seq", tuple(_frozen(v) for v in value))
    if isinstance(value, (set, frozenset)):
        return ("set", frozenset(_frozen(v) for v in value))
    if isinstance(value, dict):
        return ("map", tuple((_frozen(k), _frozen(v)) for k, v in value.items()))
    return (type(value).__name__, value)


def _targets_key(arch: Architecture, targets):
    """What the answers for ``targets`` depend on, as a hashable key: for a list of names without a
    dot (outside the MoE conversions) the set of their texts -- PEFT matches each module against
    every name, so order and repeats change nothing; anything else as written."""
    if isinstance(targets, (list, tuple)) and arch.family not in _MOE_PATTERN:
        names = [str(t) for t in targets]  # as _normalise_targets reads them
        if not any("." in n for n in names):
            return ("names", frozenset(names))
    return _frozen(targets)


_MATCHED_CACHE: dict = {}  # memo of _matched (a cache, bounded below)


def _matched(arch: Architecture, targets, modules_to_save) -> list[Module]:
    """Memoised per (architecture, targets, modules_to_save): the same few occur across a corpus."""
    try:
        key = (arch, _targets_key(arch, targets), _frozen(modules_to_save))
        hit = _MATCHED_CACHE.get(key)
    except TypeError:  # something unhashable inside: work it out each time
        return _match_rows(arch, targets, modules_to_save)
    if hit is None:
        hit = tuple(_match_rows(arch, targets, modules_to_save))
        if len(_MATCHED_CACHE) >= 4096:
            _MATCHED_CACHE.clear()
        _MATCHED_CACHE[key] = hit
    return list(hit)


def _match_rows(arch: Architecture, targets, modules_to_save) -> list[Module]:
    rows = _module_rows(arch)
    if _is_all_linear(targets):
        # all nn.Linear except the output embedding (PEFT _maybe_include_all_linear_layers)
        return [
            r
            for r in rows
            if r[1] in _LINEAR_KINDS and r[0] != "lm_head" and not _excluded_by_modules_to_save(r[0], modules_to_save)
        ]
    norm = _normalise_targets(arch, targets)
    if not isinstance(norm, str) and not any("." in t for t in norm):
        # names without a dot: `key in targets or key.endswith("." + t)` is "the last name
        # component is one of them", so the rows come from the per-leaf index (same order)
        by_leaf = _rows_by_leaf(arch)
        found = sorted(i for t in set(norm) for i in by_leaf.get(t, ()))
        return [rows[i] for i in found if not _excluded_by_modules_to_save(rows[i][0], modules_to_save)]
    return [r for r in rows if _matches(norm, r[0]) and not _excluded_by_modules_to_save(r[0], modules_to_save)]


# PEFT 0.21 utils/transformers_weight_conversion.py: with transformers >= 5, mixtral targets written for the
# 4.x layout are rewritten before injection: "gate" -> the router parameter "gate.weight", "w1" + "w3" -> the fused
# expert parameter "gate_up_proj" (rank and alpha doubled; naming only one of them is an error), "w2" -> "down_proj".
# The families transformers maps to the "qwen2_moe" conversion pattern (qwen3_moe, deepseek_v2, ...) get the same
# treatment with gate_proj + up_proj -> gate_up_proj: the shared experts' gate_proj/up_proj/down_proj, real
# nn.Linear modules, are then no longer targeted as modules. A string target ("all-linear" or a regex) is first
# turned into a set of leaf names.
_MOE_CONVERSIONS = MappingProxyType({
    "mixtral": (
        {"gate": "gate.weight", "w1": "gate_up_proj", "w3": "gate_up_proj", "w2": "down_proj"},
        {"gate_up_proj": ("w1", "w3")},
    ),
    "qwen2_moe": (
        {"gate": "gate.weight", "gate_proj": "gate_up_proj", "up_proj": "gate_up_proj", "down_proj": "down_proj"},
        {"gate_up_proj": ("gate_proj", "up_proj")},
    ),
})
# transformers 5.24 conversion_mapping._MODEL_TO_CONVERSION_PATTERN (+ PEFT's own "mixtral" entry), restricted
# to the families modelled here; qwen2_moe itself has no entry there, so its targets are not rewritten.
_MOE_PATTERN = MappingProxyType({"mixtral": "mixtral", "qwen3_moe": "qwen2_moe", "deepseek_v2": "qwen2_moe"})


def _moe_convert(arch: Architecture, targets, modules_to_save):
    """(module targets, {parameter target: rank multiplier}) after PEFT's MoE target conversion."""
    mapping, fused = _MOE_CONVERSIONS[_MOE_PATTERN[arch.family]]
    rows = module_table(arch)
    if isinstance(targets, str):
        if _is_all_linear(targets):
            resolved = {r[0].rsplit(".", 1)[-1] for r in rows if r[1] in _LINEAR_KINDS and r[0] != "lm_head"}
            resolved |= set(mapping)
        else:
            keys = [r[0] for r in rows] + [f"{r[0]}.{p}" for r in rows for p in r[2]]
            resolved = {
                k.rsplit(".", 1)[-1]
                for k in keys
                if _matches(targets, k) and not _excluded_by_modules_to_save(k, modules_to_save)
            }
            containers: dict[str, list[str]] = {}
            for r in rows:
                for p in r[2]:
                    containers.setdefault(p, []).append(r[0])
            for old, new in mapping.items():
                if old in resolved:
                    continue
                if any(_matches(targets, f"{c}.{old}") for c in containers.get(new, ())):
                    resolved.add(old)
        if not resolved:
            return targets, {}
        targets = sorted(resolved)
    if targets is None:
        # PEFT 0.21 with transformers >= 5 turns an unset target_modules into an empty set here, so the
        # family default (q_proj, v_proj) is never applied and injection fails.
        raise NoDefaultTargets(
            f"target_modules is unset: for {arch.family}, PEFT's conversion to the transformers 5 layout leaves no "
            "targets and get_peft_model raises; set target_modules"
        )
    params: dict[str, int] = {}
    remaining: list[str] = []
    present: dict[str, set[str]] = {}
    for t in targets:
        hit = next((old for old in mapping if t == old or t.endswith(f".{old}")), None)
        if hit is None:
            remaining.append(t)
            continue
        params.setdefault(mapping[hit], 1)
        present.setdefault(mapping[hit], set()).add(hit)
    for new, olds in fused.items():
        got = present.get(new, set())
        if 0 < len(got) < len(olds):
            missing = ", ".join(sorted(set(olds) - got))
            raise ValueError(
                f"Cannot convert PEFT target(s) {', '.join(sorted(got))} without also targeting {missing} "
                f"because they are fused into {new}."
            )
        if len(got) == len(olds):
            params[new] = len(olds)
    return remaining, params


_PLAN_CACHE: dict = {}  # memo of _plan (a cache, bounded below)


def _plan(arch: Architecture, targets, modules_to_save):
    """(wrapped module rows, [(parameter full name, shape, rank multiplier)]) as PEFT would inject them.

    Memoised per (architecture, targets, modules_to_save), as :func:`_matched`; an error is not kept."""
    try:
        key = (arch, _targets_key(arch, targets), _frozen(modules_to_save))
        hit = _PLAN_CACHE.get(key)
    except TypeError:  # something unhashable inside: work it out each time
        return _work_out_plan(arch, targets, modules_to_save)
    if hit is None:
        mods, params = _work_out_plan(arch, targets, modules_to_save)
        hit = (tuple(mods), tuple(params))
        if len(_PLAN_CACHE) >= 4096:
            _PLAN_CACHE.clear()
        _PLAN_CACHE[key] = hit
    return list(hit[0]), list(hit[1])


def _work_out_plan(arch: Architecture, targets, modules_to_save):
    if arch.family not in _MOE_PATTERN:
        return [r for r in _matched(arch, targets, modules_to_save)], []
    module_targets, param_targets = _moe_convert(arch, targets, modules_to_save)
    if isinstance(module_targets, list) and not module_targets:
        matched: list[Module] = []
    else:
        matched = _matched(arch, module_targets, modules_to_save)
    params = []
    for name, _kind, shapes in module_table(arch):
        for pname, shape in shapes.items():
            key = f"{name}.{pname}"
            mult = next((m for t, m in param_targets.items() if key == t or key.endswith(f".{t}")), None)
            if mult is not None:
                params.append((key, shape, mult))
    return matched, params


def resolve_targets(arch: Architecture, targets, modules_to_save=None) -> list[str]:
    """Full names of the modules (and, for mixtral, parameters) PEFT would adapt with LoRA, in model order.

    ``"all-linear"`` (any case): every nn.Linear except ``lm_head``; ``None``: PEFT's default for
    the family (raises :class:`NoDefaultTargets` where PEFT has none); a list: exact full name or
    ``.suffix`` match; any other string: ``re.fullmatch`` on full module names. Modules matched
    by ``modules_to_save`` are left out, as PEFT does. Matches that LoRA cannot wrap (norms, the
    mixtral router module and experts module, containers) are left out; see
    :func:`unsupported_target_matches`. For mixtral the 4.x names ``gate``, ``w1``+``w3`` and
    ``w2`` (and ``"all-linear"``) become the parameters ``...mlp.gate.weight``,
    ``...mlp.experts.gate_up_proj`` and ``...mlp.experts.down_proj`` as PEFT rewrites them.
    An empty result means PEFT would raise "Target modules ... not found".
    """
    mods, params = _plan(arch, targets, modules_to_save)
    return [r[0] for r in mods if r[1] in _LORA_KINDS] + [p[0] for p in params]


def unsupported_target_matches(arch: Architecture, targets, modules_to_save=None) -> list[str]:
    """Matched modules that LoRA cannot wrap (PEFT raises "Target module ... is not supported")."""
    mods, _params = _plan(arch, targets, modules_to_save)
    return [r[0] for r in mods if r[1] not in _LORA_KINDS]


def target_leaf_names(arch: Architecture, targets, modules_to_save=None) -> list[str]:
    """The distinct last name components of :func:`resolve_targets`, in model order."""
    seen: dict[str, None] = {}
    for name in resolve_targets(arch, targets, modules_to_save):
        seen.setdefault(name.rsplit(".", 1)[-1], None)
    return list(seen)


def modules_to_save_matches(arch: Architecture, modules_to_save) -> list[str]:
    """Modules PEFT wraps in a trainable copy: plain ``key.endswith(name)`` (PEFT other._set_trainable)."""
    if not modules_to_save:
        return []
    names = [str(m) for m in modules_to_save]
    return [r[0] for r in module_table(arch) if any(r[0].endswith(m) for m in names)]


def _hashable(value):
    return tuple(value) if isinstance(value, list) else value


def lora_trainable_parameters(
    arch: Architecture,
    *,
    rank: int,
    targets,
    modules_to_save=None,
    use_dora: bool = False,
    bias: str = "none",
) -> int:
    """:func:`_lora_trainable_parameters`, once for the same model and adapter (a pure count of
    the shapes: configs of one recipe share them; a list of target names in another order is the
    same adapter, ``_targets_key``)."""
    try:
        key = (arch, type(rank), rank, _targets_key(arch, targets), type(modules_to_save),
               _hashable(modules_to_save), type(use_dora), use_dora, bias)
        hit = _TRAINABLE_CACHE.get(key)
    except TypeError:  # something unhashable inside: work it out each time
        hit = key = None
    if hit is None:
        hit = _lora_trainable_parameters(arch, rank=rank, targets=targets, modules_to_save=modules_to_save,
                                         use_dora=use_dora, bias=bias)
        if key is not None:
            if len(_TRAINABLE_CACHE) >= 4096:
                _TRAINABLE_CACHE.clear()
            _TRAINABLE_CACHE[key] = hit
    return hit


_TRAINABLE_CACHE: dict = {}  # memo of lora_trainable_parameters (a cache, bounded above)


def _lora_trainable_parameters(
    arch: Architecture,
    *,
    rank: int,
    targets,
    modules_to_save=None,
    use_dora: bool = False,
    bias: str = "none",
) -> int:
    """Trainable parameters as PEFT's print_trainable_parameters counts them.

    * each wrapped nn.Linear (in, out): lora_A r x in + lora_B out x r; DoRA adds a magnitude
      vector of out entries;
    * each wrapped embedding (V, h): lora_embedding_A r x V + lora_embedding_B h x r (DoRA: + h);
    * each ``modules_to_save`` match: a full trainable copy of the module (a tied lm_head's copy is
      an untied V x h matrix);
    * ``bias="all"``: every bias of the model; ``"lora_only"``: biases of the wrapped layers.
    """
    if isinstance(rank, bool) or not isinstance(rank, int) or rank <= 0:
        raise ValueError(f"`r` should be a positive integer value but the value passed is {rank}")
    if bias not in ("none", "all", "lora_only"):
        raise ValueError(f"bias must be 'none', 'all' or 'lora_only', got {bias!r}")
    rows = rows_by_name(arch)
    saved = modules_to_save_matches(arch, modules_to_save)
    saved_set = set(saved)
    total = 0
    per_rank, dora_extra, has_params, wrapped = _adapter_sums(arch, targets, modules_to_save)
    if has_params and use_dora:
        raise ValueError("lora.ParamWrapper does not work with LoRA variants like DoRA.")
    total += rank * per_rank + (dora_extra if use_dora else 0)
    for name in saved:
        # a module inside an already-wrapped module is not wrapped again
        if any(name.startswith(other + ".") for other in saved_set if other != name):
            continue
        total += sum(_numel(s) for s in rows[name][2].values())
        # the wrapped copy holds its children too
        total += sum(
            sum(_numel(s) for s in r[2].values()) for k, r in rows.items() if k.startswith(name + ".")
        )
    if bias != "none":
        chosen = set(wrapped) if bias == "lora_only" else set(rows)
        for k in chosen:
            inside_copy = any(k == s or k.startswith(s + ".") for s in saved_set)
            if "bias" in rows[k][2] and not inside_copy:
                total += _numel(rows[k][2]["bias"])
    return total


_SUMS_CACHE: dict = {}  # memo of _adapter_sums (a cache, bounded below)


def _adapter_sums(arch: Architecture, targets, modules_to_save) -> tuple[int, int, bool, tuple[str, ...]]:
    """What the adapters of one target list add, per unit of rank: (sum over wrapped modules of
    in + out widths, and of the ParamWrapper's E x (in + out) x multiplier; the DoRA magnitude
    entries; whether parameters are wrapped; the wrapped module names). Once per architecture and
    targets: the rank only scales it."""
    try:
        key = (arch, _targets_key(arch, targets), _frozen(modules_to_save))
        hit = _SUMS_CACHE.get(key)
    except TypeError:
        hit = key = None
    if hit is not None:
        return hit
    mods, param_targets = _plan(arch, targets, modules_to_save)
    rows = rows_by_name(arch)
    per_rank = dora = 0
    for _key, shape, mult in param_targets:
        # PEFT lora.ParamWrapper: 3-D (experts, out, in) -> lora_A in -> r*E, lora_B r*E -> out; 2-D: E = 1
        experts, fout, fin = shape if len(shape) == 3 else (1, shape[0], shape[1])
        per_rank += mult * experts * (fin + fout)
    wrapped = []
    for r in mods:
        if r[1] not in _LORA_KINDS:
            continue
        name = r[0]
        wrapped.append(name)
        _, kind, params = rows[name]
        # lora_A and lora_B add in + out per unit of rank whatever the layout; DoRA's magnitude
        # vector is the output width: embedding weight (V, h) -> h, Linear (out, in) -> out,
        # Conv1D (in, out) -> out (as _in_out reads them)
        weight = params["weight"]
        per_rank += weight[0] + weight[1]
        dora += weight[0] if kind != "embedding" and kind != "conv1d" else weight[1]
    hit = (per_rank, dora, bool(param_targets), tuple(wrapped))
    if key is not None:
        if len(_SUMS_CACHE) >= 4096:
            _SUMS_CACHE.clear()
        _SUMS_CACHE[key] = hit
    return hit


def trainable_fraction(arch: Architecture, **lora_kwargs) -> float:
    """PEFT-style ratio trainable / all, where "all" includes the adapters and the trainable copies."""
    trainable = lora_trainable_parameters(arch, **lora_kwargs)
    return trainable / (total_parameters(arch) + trainable)


def lora_scale(alpha: float, rank: int, rslora: bool) -> float:
    """LoRA update scale: alpha / r (Hu et al. 2021, sec. 4.1), alpha / sqrt(r) with rsLoRA (PEFT layer.py)."""
    if rank <= 0:
        raise ValueError(f"`r` should be a positive integer value but the value passed is {rank}")
    return alpha / math.sqrt(rank) if rslora else alpha / rank
