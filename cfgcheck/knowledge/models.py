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

import json
import math
import os
import re
from dataclasses import dataclass, replace
from functools import lru_cache
from pathlib import Path
from typing import Iterable

__all__ = [
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
    "linear_modules",
    "resolve_targets",
    "target_leaf_names",
    "unsupported_target_matches",
    "modules_to_save_matches",
    "lora_trainable_parameters",
    "trainable_fraction",
    "lora_scale",
    "PEFT_DEFAULT_TARGETS",
]


@dataclass(frozen=True)
class Architecture:
    """Shapes of a decoder-only language model (names follow transformers' config.json keys)."""

    family: str  # transformers model_type: "llama", "mistral", "qwen2", ...
    hidden_size: int
    intermediate_size: int
    num_layers: int
    num_heads: int
    num_kv_heads: int
    head_dim: int
    vocab_size: int
    max_position_embeddings: int | None
    tie_word_embeddings: bool
    torch_dtype: str | None  # stored dtype, e.g. "bfloat16"
    num_experts: int = 0  # mixture of experts (mixtral: num_local_experts); 0 = dense
    experts_per_token: int = 0
    source: str = ""  # where the numbers came from
    attention_bias: bool = False  # bias on q/k/v/o (llama/qwen3 `attention_bias`); qwen2 has q/k/v bias always
    mlp_bias: bool = False  # llama `mlp_bias`

    @property
    def is_moe(self) -> bool:
        return self.num_experts > 0


class UnsupportedFamily(ValueError):
    """The architecture's family has no module layout here, so counts would be guesses."""


class NoDefaultTargets(ValueError):
    """``target_modules`` is unset and PEFT has no default for this family (PEFT raises too)."""


# Families whose module layout is modelled (transformers 5.x layouts).
SUPPORTED_FAMILIES = frozenset({"llama", "mistral", "qwen2", "qwen3", "gemma", "gemma2", "phi3", "mixtral"})

# PEFT @5d602fdb / 0.21 `TRANSFORMERS_MODELS_TO_LORA_TARGET_MODULES_MAPPING` (utils/constants.py),
# restricted to the families above. phi3 is absent there: PEFT raises when target_modules is unset.
PEFT_DEFAULT_TARGETS: dict[str, tuple[str, ...]] = {
    "llama": ("q_proj", "v_proj"),
    "mistral": ("q_proj", "v_proj"),
    "mixtral": ("q_proj", "v_proj"),
    "gemma": ("q_proj", "v_proj"),
    "gemma2": ("q_proj", "v_proj"),
    "qwen2": ("q_proj", "v_proj"),
    "qwen3": ("q_proj", "v_proj"),
}

# transformers 5.x config-class defaults used when config.json omits a key.
_DEFAULT_TIE = {"gemma": True, "gemma2": True}  # GemmaConfig / Gemma2Config default tie_word_embeddings=True
_DEFAULT_HEAD_DIM = {"gemma": 256, "gemma2": 256, "qwen3": 128}  # fixed defaults, not hidden/heads


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


def architecture_from_config(data: dict, source: str) -> Architecture | None:
    """An Architecture from a transformers config.json mapping, or None when the keys are missing.

    head_dim absent -> family default (gemma 256, qwen3 128) else hidden_size // num_attention_heads;
    num_key_value_heads absent -> num_attention_heads; tie_word_embeddings absent -> the family's
    config-class default; multimodal configs with a ``text_config`` are read from it.
    """
    if not isinstance(data, dict):
        return None
    if "hidden_size" not in data and isinstance(data.get("text_config"), dict):
        inner = dict(data["text_config"])
        for key in ("tie_word_embeddings", "torch_dtype", "dtype"):
            if key not in inner and key in data:
                inner[key] = data[key]
        data = inner
    family = data.get("model_type")
    if not isinstance(family, str) or not family:
        return None
    hidden = _pos_int(data.get("hidden_size"))
    inter = _pos_int(data.get("intermediate_size"))
    layers = _pos_int(data.get("num_hidden_layers"))
    heads = _pos_int(data.get("num_attention_heads"))
    vocab = _pos_int(data.get("vocab_size"))
    if None in (hidden, inter, layers, heads, vocab):
        return None
    kv = data.get("num_key_value_heads")
    kv = heads if kv is None else _pos_int(kv)
    if kv is None or heads % kv != 0:
        return None
    head_dim = data.get("head_dim")
    if head_dim is None:
        head_dim = _DEFAULT_HEAD_DIM.get(family, hidden // heads)
    head_dim = _pos_int(head_dim)
    if head_dim is None:
        return None
    max_pos = data.get("max_position_embeddings")
    max_pos = _pos_int(max_pos) if max_pos is not None else None
    tie = data.get("tie_word_embeddings", _DEFAULT_TIE.get(family, False))
    dtype = data.get("dtype", data.get("torch_dtype"))
    experts = data.get("num_local_experts", 0) or 0
    per_tok = data.get("num_experts_per_tok", 0) or 0
    if not isinstance(experts, int) or not isinstance(per_tok, int) or experts < 0 or per_tok < 0:
        return None
    if family != "mixtral":
        experts, per_tok = 0, 0
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
        attention_bias=bool(data.get("attention_bias", False)),
        mlp_bias=bool(data.get("mlp_bias", False)),
    )


def _read_config(path: Path) -> Architecture | None:
    try:
        text = path.read_text(encoding="utf-8")
        data = json.loads(text)
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None
    if not isinstance(data, dict):
        return None
    return architecture_from_config(data, f"config.json at {path}")


# ---------------------------------------------------------------------------------------------
# Bundled catalogue
# ---------------------------------------------------------------------------------------------

_CATALOGUE_FILE = Path(__file__).with_name("base_models.json")


@lru_cache(maxsize=1)
def _catalogue_entries() -> tuple[tuple[tuple[str, ...], Architecture], ...]:
    raw = json.loads(_CATALOGUE_FILE.read_text(encoding="utf-8"))
    out = []
    for entry in raw["models"]:
        ids = tuple(entry["ids"])
        fields = {k: v for k, v in entry.items() if k not in ("ids", "source", "num_layers")}
        arch = Architecture(
            num_layers=entry["num_layers"],
            source=f"bundled catalogue: {entry['source']}",
            **fields,
        )
        out.append((ids, arch))
    return tuple(out)


def catalogue() -> dict[str, Architecture]:
    """Every hub id in the bundled catalogue -> its Architecture."""
    return {ref: arch for ids, arch in _catalogue_entries() for ref in ids}


def _from_catalogue(ref: str) -> Architecture | None:
    want = ref.strip().strip("/").lower()
    entries = _catalogue_entries()
    for ids, arch in entries:
        if any(want == i.lower() for i in ids):
            return arch
    name = want.rsplit("/", 1)[-1]
    for ids, arch in entries:
        if any(name == i.lower().rsplit("/", 1)[-1] for i in ids):
            return arch
    return None


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
        if not cache.is_dir():
            return None
        repo = cache / folder_name
        if not repo.is_dir():
            lowered = folder_name.lower()
            matches = [p for p in cache.iterdir() if p.is_dir() and p.name.lower() == lowered]
            if not matches:
                return None
            repo = matches[0]
        snapshots = repo / "snapshots"
        candidates: list[Path] = []
        main = repo / "refs" / "main"
        if main.is_file():
            commit = main.read_text(encoding="utf-8").strip()
            if commit and "/" not in commit and "\\" not in commit:
                candidates.append(snapshots / commit / "config.json")
        if snapshots.is_dir():
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


def resolve_model(
    ref: str | None,
    *,
    config_dir: Path | None = None,
    cwd: Path | None = None,
    hub_cache: Path | None = None,
) -> Architecture | None:
    """Find the architecture behind a model reference, offline. Never raises on user input.

    Order: a local folder holding config.json (an absolute path; a relative one against ``cwd``
    first, then against ``config_dir``, the folder of the file being linted); then the local hub
    cache (``hub_cache``, else HF_HUB_CACHE, HF_HOME/hub or ~/.cache/huggingface/hub, layout
    ``models--ORG--NAME/snapshots/<rev>/config.json``, preferring ``refs/main``); then the bundled
    catalogue (case-insensitive, also by the name without the organisation). A local PEFT adapter
    folder (adapter_config.json) resolves to its ``base_model_name_or_path``. A local folder whose
    config.json is unreadable or not a model config gives None.
    """
    return _resolve(ref, config_dir=config_dir, cwd=cwd, hub_cache=hub_cache, depth=0)


def _adapter_base(folder: Path) -> str | None:
    """base_model_name_or_path of a PEFT adapter folder (adapter_config.json), if any."""
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
                        return replace(arch, source=f"{arch.source} (base of the adapter at {base})")
        if local_dir:
            return None  # a local folder that holds no model config is not a hub id either
    except (OSError, ValueError):
        return None
    if not _HUB_ID_RE.match(ref):
        return None
    cache = Path(hub_cache) if hub_cache is not None else _default_hub_cache()
    arch = _from_hub_cache(ref, cache)
    if arch is not None:
        return arch
    return _from_catalogue(ref)


# ---------------------------------------------------------------------------------------------
# Module tree (transformers 5.x layout)
# ---------------------------------------------------------------------------------------------

# kinds: "container", "linear", "embedding", "norm", "router", "experts", "other"
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


def _layer_modules(arch: Architecture, prefix: str) -> list[Module]:
    h, d, H, KV, inter = arch.hidden_size, arch.head_dim, arch.num_heads, arch.num_kv_heads, arch.intermediate_size
    fam = arch.family
    qkv_bias = arch.attention_bias or fam == "qwen2"  # Qwen2Attention: q/k/v bias=True, o bias=False
    o_bias = arch.attention_bias and fam != "qwen2"
    mods: list[Module] = [(prefix, "container", {}), (f"{prefix}.self_attn", "container", {})]
    a = f"{prefix}.self_attn"
    if fam == "phi3":
        mods.append(_linear(f"{a}.o_proj", H * d, h, False))
        mods.append(_linear(f"{a}.qkv_proj", h, H * d + 2 * KV * d, False))
    else:
        mods.append(_linear(f"{a}.q_proj", h, H * d, qkv_bias))
        mods.append(_linear(f"{a}.k_proj", h, KV * d, qkv_bias))
        mods.append(_linear(f"{a}.v_proj", h, KV * d, qkv_bias))
        mods.append(_linear(f"{a}.o_proj", H * d, h, o_bias))
    if fam == "qwen3":
        mods.append((f"{a}.q_norm", "norm", {"weight": (d,)}))
        mods.append((f"{a}.k_norm", "norm", {"weight": (d,)}))
    m = f"{prefix}.mlp"
    mods.append((m, "container", {}))
    if fam == "phi3":
        mods.append(_linear(f"{m}.gate_up_proj", h, 2 * inter, False))
        mods.append(_linear(f"{m}.down_proj", inter, h, False))
        mods.append((f"{m}.activation_fn", "other", {}))
    elif fam == "mixtral":
        E = arch.num_experts
        mods.append((f"{m}.gate", "router", {"weight": (E, h)}))
        mods.append(
            (f"{m}.experts", "experts", {"gate_up_proj": (E, 2 * inter, h), "down_proj": (E, h, inter)})
        )
        mods.append((f"{m}.experts.act_fn", "other", {}))
    else:
        mods.append(_linear(f"{m}.gate_proj", h, inter, arch.mlp_bias))
        mods.append(_linear(f"{m}.up_proj", h, inter, arch.mlp_bias))
        mods.append(_linear(f"{m}.down_proj", inter, h, arch.mlp_bias))
        mods.append((f"{m}.act_fn", "other", {}))
    mods.append((f"{prefix}.input_layernorm", "norm", {"weight": (h,)}))
    mods.append((f"{prefix}.post_attention_layernorm", "norm", {"weight": (h,)}))
    if fam == "gemma2":
        mods.append((f"{prefix}.pre_feedforward_layernorm", "norm", {"weight": (h,)}))
        mods.append((f"{prefix}.post_feedforward_layernorm", "norm", {"weight": (h,)}))
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
    h, V = arch.hidden_size, arch.vocab_size
    mods: list[Module] = [
        ("model", "container", {}),
        ("model.embed_tokens", "embedding", {"weight": (V, h)}),
        ("model.layers", "container", {}),
    ]
    for i in range(arch.num_layers):
        mods.extend(_layer_modules(arch, f"model.layers.{i}"))
    mods.append(("model.norm", "norm", {"weight": (h,)}))
    mods.append(("model.rotary_emb", "other", {}))
    mods.append(("lm_head", "linear", {"weight": (V, h)}))
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


def linear_modules(arch: Architecture) -> dict[str, tuple[int, int]]:
    """Per decoder layer: leaf module name -> (in_features, out_features) of each nn.Linear."""
    _require_supported(arch)
    out: dict[str, tuple[int, int]] = {}
    for name, kind, params in _layer_modules(arch, "L"):
        if kind == "linear":
            fout, fin = params["weight"]
            out[name.rsplit(".", 1)[-1]] = (fin, fout)
    return out


# ---------------------------------------------------------------------------------------------
# PEFT target resolution and counts (PEFT 0.21 semantics, tuners_utils.check_target_module_exists)
# ---------------------------------------------------------------------------------------------

_LORA_KINDS = ("linear", "embedding")  # module types LoRA can wrap among those modelled here


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


_MATCHED: dict = {}


def _matched(arch: Architecture, targets, modules_to_save) -> list[Module]:
    """Memoised per (architecture, targets, modules_to_save): the same few occur across a corpus."""
    try:
        key = (arch, _frozen(targets), _frozen(modules_to_save))
        hit = _MATCHED.get(key)
    except TypeError:  # something unhashable inside: work it out each time
        return _match_rows(arch, targets, modules_to_save)
    if hit is None:
        hit = tuple(_match_rows(arch, targets, modules_to_save))
        if len(_MATCHED) >= 4096:
            _MATCHED.clear()
        _MATCHED[key] = hit
    return list(hit)


def _match_rows(arch: Architecture, targets, modules_to_save) -> list[Module]:
    rows = _module_rows(arch)
    if _is_all_linear(targets):
        # all nn.Linear except the output embedding (PEFT _maybe_include_all_linear_layers)
        return [
            r
            for r in rows
            if r[1] == "linear" and r[0] != "lm_head" and not _excluded_by_modules_to_save(r[0], modules_to_save)
        ]
    norm = _normalise_targets(arch, targets)
    return [r for r in rows if _matches(norm, r[0]) and not _excluded_by_modules_to_save(r[0], modules_to_save)]


# PEFT 0.21 utils/transformers_weight_conversion.py: with transformers >= 5, mixtral targets written for the
# 4.x layout are rewritten before injection: "gate" -> the router parameter "gate.weight", "w1" + "w3" -> the fused
# expert parameter "gate_up_proj" (rank and alpha doubled; naming only one of them is an error), "w2" -> "down_proj".
# A string target ("all-linear" or a regex) is first turned into a set of leaf names.
_MOE_MAPPING = {"gate": "gate.weight", "w1": "gate_up_proj", "w3": "gate_up_proj", "w2": "down_proj"}
_MOE_FUSED = {"gate_up_proj": ("w1", "w3")}


def _moe_convert(arch: Architecture, targets, modules_to_save):
    """(module targets, {parameter target: rank multiplier}) after PEFT's mixtral conversion."""
    rows = module_table(arch)
    if isinstance(targets, str):
        if _is_all_linear(targets):
            resolved = {r[0].rsplit(".", 1)[-1] for r in rows if r[1] == "linear" and r[0] != "lm_head"}
            resolved |= set(_MOE_MAPPING)
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
            for old, new in _MOE_MAPPING.items():
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
            "target_modules is unset: for mixtral, PEFT's conversion to the transformers 5 layout leaves no "
            "targets and get_peft_model raises; set target_modules"
        )
    params: dict[str, int] = {}
    remaining: list[str] = []
    present: dict[str, set[str]] = {}
    for t in targets:
        hit = next((old for old in _MOE_MAPPING if t == old or t.endswith(f".{old}")), None)
        if hit is None:
            remaining.append(t)
            continue
        params.setdefault(_MOE_MAPPING[hit], 1)
        present.setdefault(_MOE_MAPPING[hit], set()).add(hit)
    for new, olds in _MOE_FUSED.items():
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


def _plan(arch: Architecture, targets, modules_to_save):
    """(wrapped module rows, [(parameter full name, shape, rank multiplier)]) as PEFT would inject them."""
    if arch.family != "mixtral":
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


def lora_trainable_parameters(
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
    rows = {r[0]: r for r in module_table(arch)}
    saved = modules_to_save_matches(arch, modules_to_save)
    saved_set = set(saved)
    total = 0
    mods, param_targets = _plan(arch, targets, modules_to_save)
    wrapped = [r[0] for r in mods if r[1] in _LORA_KINDS]
    if param_targets and use_dora:
        raise ValueError("lora.ParamWrapper does not work with LoRA variants like DoRA.")
    for _key, shape, mult in param_targets:
        # PEFT lora.ParamWrapper: 3-D (experts, out, in) -> lora_A in -> r*E, lora_B r*E -> out; 2-D: E = 1
        experts, fout, fin = shape if len(shape) == 3 else (1, shape[0], shape[1])
        total += rank * mult * experts * (fin + fout)
    for name in wrapped:
        _, kind, params = rows[name]
        rows_out, cols_in = params["weight"]
        if kind == "embedding":  # weight (V, h): A is r x V, B is h x r
            total += rank * rows_out + cols_in * rank + (cols_in if use_dora else 0)
        else:  # weight (out, in)
            total += rank * cols_in + rows_out * rank + (rows_out if use_dora else 0)
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


def trainable_fraction(arch: Architecture, **lora_kwargs) -> float:
    """PEFT-style ratio trainable / all, where "all" includes the adapters and the trainable copies."""
    trainable = lora_trainable_parameters(arch, **lora_kwargs)
    return trainable / (total_parameters(arch) + trainable)


def lora_scale(alpha: float, rank: int, rslora: bool) -> float:
    """LoRA update scale: alpha / r (Hu et al. 2021, sec. 4.1), alpha / sqrt(r) with rsLoRA (PEFT layer.py)."""
    if rank <= 0:
        raise ValueError(f"`r` should be a positive integer value but the value passed is {rank}")
    return alpha / math.sqrt(rank) if rslora else alpha / rank
