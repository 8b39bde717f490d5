"""Model shapes, parameter counts, name parsing and offline resolution (no torch needed)."""

from __future__ import annotations

import json
import math
from cfgcheck._records import replaced as replace  # the records are plain classes
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cfgcheck.knowledge.models import (
    PEFT_DEFAULT_TARGETS,
    SUPPORTED_FAMILIES,
    Architecture,
    NoDefaultTargets,
    UnsupportedFamily,
    architecture_from_config,
    catalogue,
    linear_modules,
    lora_scale,
    lora_trainable_parameters,
    resolve_model,
    resolve_targets,
    size_from_name,
    target_leaf_names,
    total_parameters,
    trainable_fraction,
    unsupported_target_matches,
)

CAT = catalogue()


def arch(family="llama", h=64, inter=96, layers=2, heads=4, kv=2, vocab=100, tied=False, **kw):
    return Architecture(
        family=family, hidden_size=h, intermediate_size=inter, num_layers=layers, num_heads=heads,
        num_kv_heads=kv, head_dim=kw.pop("head_dim", h // heads), vocab_size=vocab, max_position_embeddings=128,
        tie_word_embeddings=tied, torch_dtype="bfloat16", **kw,
    )


# ---------------------------------------------------------------------------------------------
# Parameter totals
# ---------------------------------------------------------------------------------------------

# Published totals, model.num_parameters() (shared REFERENCES sec. 13, [V2] values, formula [C]).
PUBLISHED_TOTALS = [
    ("meta-llama/Llama-2-7b-hf", 6_738_415_616),  # REFERENCES sec. 13 [V2]
    ("mistralai/Mistral-7B-v0.1", 7_241_732_096),  # REFERENCES sec. 13 [V2], GGUF parameter_count
    ("TinyLlama/TinyLlama-1.1B-Chat-v1.0", 1_100_048_384),  # REFERENCES sec. 13 [C]+[V2]
    ("meta-llama/Meta-Llama-3-8B", 8_030_261_248),  # REFERENCES sec. 13 [V2]
    ("Qwen/Qwen2.5-0.5B", 494_032_768),  # REFERENCES sec. 13 [V2]
    ("Qwen/Qwen2.5-1.5B", 1_543_714_304),  # REFERENCES sec. 13 [V2]
    ("Qwen/Qwen2.5-7B", 7_615_616_512),  # REFERENCES sec. 13 [V2]
    ("meta-llama/Llama-2-13b-hf", 13_015_864_320),  # REFERENCES sec. 13 [V2], num_parameters()
    ("meta-llama/Llama-3.1-8B", 8_030_261_248),  # REFERENCES sec. 13 [V2], same total as Llama-3-8B (HF API)
]

# Totals we remember but have not verified (from memory).
REMEMBERED_TOTALS = [
    ("mistralai/Mixtral-8x7B-v0.1", 46_702_792_704),  # from memory
    ("google/gemma-7b", 8_537_680_896),  # from memory
    ("google/gemma-2b", 2_506_172_416),  # from memory
    ("microsoft/Phi-3-mini-4k-instruct", 3_821_079_552),  # from memory
    ("meta-llama/Llama-3.2-1B", 1_235_814_400),  # from memory
    ("HuggingFaceTB/SmolLM2-1.7B", 1_711_376_384),  # from memory
]


@pytest.mark.parametrize("ref,expected", PUBLISHED_TOTALS, ids=[r for r, _ in PUBLISHED_TOTALS])
def test_published_totals_exact(ref, expected):
    assert total_parameters(CAT[ref]) == expected


@pytest.mark.parametrize("ref,expected", REMEMBERED_TOTALS, ids=[r for r, _ in REMEMBERED_TOTALS])
def test_remembered_totals(ref, expected):
    assert total_parameters(CAT[ref]) == expected


def test_sec13_table_rows_reproduce_totals_from_shapes_alone():
    # REFERENCES sec. 13 table: V, h, I, L, heads, KV, tied -> total (built here, not from the catalogue)
    rows = [
        ("llama", 32000, 4096, 11008, 32, 32, 32, False, 6_738_415_616),
        ("mistral", 32000, 4096, 14336, 32, 32, 8, False, 7_241_732_096),
        ("llama", 32000, 2048, 5632, 22, 32, 4, False, 1_100_048_384),
        ("llama", 128256, 4096, 14336, 32, 32, 8, False, 8_030_261_248),
        ("qwen2", 151936, 896, 4864, 24, 14, 2, True, 494_032_768),
        ("qwen2", 151936, 1536, 8960, 28, 12, 2, True, 1_543_714_304),
        ("qwen2", 152064, 3584, 18944, 28, 28, 4, False, 7_615_616_512),
    ]
    for fam, V, h, inter, L, H, KV, tied, expected in rows:
        a = arch(fam, h=h, inter=inter, layers=L, heads=H, kv=KV, vocab=V, tied=tied)
        assert total_parameters(a) == expected, (fam, h)


def test_llama3_table3_shapes_in_catalogue():
    # Llama Team 2024, Table 3: 8B has 32 layers, dim 4096, FFN 14,336, 32 heads, 8 KV heads
    a = CAT["meta-llama/Meta-Llama-3-8B"]
    assert (a.num_layers, a.hidden_size, a.intermediate_size, a.num_heads, a.num_kv_heads) == (32, 4096, 14336, 32, 8)


def test_gemma_embedding_is_tied_and_head_dim_256():
    # gemma-7b: head_dim 256 with 16 heads, so q_proj is 3072 -> 4096, not square (from memory)
    a = CAT["google/gemma-7b"]
    assert a.tie_word_embeddings and a.head_dim == 256
    assert linear_modules(a)["q_proj"] == (3072, 4096)
    # tied: lm_head shares the embedding, counted once
    assert total_parameters(a) == total_parameters(replace(a, tie_word_embeddings=False)) - a.vocab_size * a.hidden_size


def test_phi3_fused_projections():
    # Phi-3: qkv_proj out = (heads + 2 kv) * head_dim, gate_up_proj out = 2 * intermediate (transformers Phi3 layout)
    mods = linear_modules(CAT["microsoft/Phi-3-mini-4k-instruct"])
    assert mods == {"o_proj": (3072, 3072), "qkv_proj": (3072, 9216), "gate_up_proj": (3072, 16384), "down_proj": (8192, 3072)}


def test_unsupported_family_raises_clearly():
    with pytest.raises(UnsupportedFamily, match="bloom"):
        total_parameters(replace(arch(), family="bloom"))


@settings(max_examples=60, deadline=None, derandomize=True)
@given(
    fam=st.sampled_from(["llama", "mistral", "qwen2"]),
    heads=st.sampled_from([1, 2, 4, 8]),
    kv_div=st.sampled_from([1, 2, 4]),
    d=st.integers(1, 16),
    inter=st.integers(1, 300),
    layers=st.integers(1, 6),
    vocab=st.integers(1, 5000),
    tied=st.booleans(),
)
def test_total_matches_sec13_closed_formula(fam, heads, kv_div, d, inter, layers, vocab, tied):
    # REFERENCES sec. 13 [C] parameter formula for Llama, Mistral and Qwen2-style models
    kv = max(heads // kv_div, 1)
    h = heads * d
    a = arch(fam, h=h, inter=inter, layers=layers, heads=heads, kv=kv, vocab=vocab, tied=tied)
    bias = (heads * d + 2 * kv * d) if fam == "qwen2" else 0
    per_layer = h * (heads * d) + 2 * h * (kv * d) + (heads * d) * h + bias + 3 * h * inter + 2 * h
    expected = vocab * h * (1 if tied else 2) + layers * per_layer + h
    assert total_parameters(a) == expected


# ---------------------------------------------------------------------------------------------
# LoRA counts, targets and scale
# ---------------------------------------------------------------------------------------------


def test_lora_paper_count_for_square_q_v():
    # LoRA paper sec. 5.1: |Theta| = 2 * L_lora * d_model * r for d_model x d_model matrices
    a = CAT["meta-llama/Llama-2-7b-hf"]
    n = lora_trainable_parameters(a, rank=8, targets=["q_proj", "v_proj"])
    assert n == 2 * (32 * 2) * 4096 * 8 == 4_194_304
    # PEFT's "all params" adds the adapters to num_parameters() (PEFT get_nb_trainable_parameters)
    assert trainable_fraction(a, rank=8, targets=["q_proj", "v_proj"]) == pytest.approx(4_194_304 / 6_742_609_920)


def test_default_targets_are_peft_q_v():
    # PEFT TRANSFORMERS_MODELS_TO_LORA_TARGET_MODULES_MAPPING: llama, mistral, qwen2 -> q_proj, v_proj (REFERENCES sec. 5)
    for fam in ("llama", "mistral", "qwen2"):
        assert PEFT_DEFAULT_TARGETS[fam] == ("q_proj", "v_proj")
        assert target_leaf_names(arch(fam), None) == ["q_proj", "v_proj"]


def test_phi3_has_no_peft_default():
    # PEFT mapping has "phi" but not "phi3": get_peft_model raises without target_modules
    with pytest.raises(NoDefaultTargets):
        resolve_targets(arch("phi3"), None)


def test_all_linear_excludes_output_head():
    # PEFT docs: all linear modules, "the output layer excluded"
    names = resolve_targets(arch("llama", layers=1), "ALL-LINEAR")  # PEFT lower-cases the shorthand
    assert "lm_head" not in names
    assert [n.rsplit(".", 1)[-1] for n in names] == ["q_proj", "k_proj", "v_proj", "o_proj", "gate_proj", "up_proj", "down_proj"]


def test_string_target_is_a_fullmatch_regex():
    # PEFT: a string target_modules is matched with re.fullmatch on the full module name
    a = arch(layers=3)
    assert resolve_targets(a, "q_proj") == []
    assert resolve_targets(a, r".*\.1\.self_attn\.q_proj") == ["model.layers.1.self_attn.q_proj"]


def test_list_target_is_suffix_match_and_unsupported_matches_are_reported():
    # PEFT: list entries match the full name or a ".suffix"; a norm cannot take LoRA ("not supported")
    a = arch(layers=1)
    assert resolve_targets(a, ["self_attn.q_proj"]) == ["model.layers.0.self_attn.q_proj"]
    assert unsupported_target_matches(a, ["input_layernorm"]) == ["model.layers.0.input_layernorm"]


def test_plain_names_match_as_a_set_and_as_suffixes_alike():
    # PEFT check_target_module_exists: a list entry matches a module whose full name equals it or
    # ends in "." + entry, so the order and repeats of plain names change nothing; the same names
    # written with a dotted suffix (matched row by row) select the same modules
    a = CAT["meta-llama/Llama-2-7b-hf"]
    plain = resolve_targets(a, ["v_proj", "q_proj", "down_proj"])
    assert plain == resolve_targets(a, ["down_proj", "q_proj", "v_proj", "q_proj"])
    assert plain == resolve_targets(a, ["self_attn.q_proj", "self_attn.v_proj", "mlp.down_proj"])
    assert plain == [n for n in resolve_targets(a, "all-linear") if n.rsplit(".", 1)[-1] in ("q_proj", "v_proj", "down_proj")]
    # LoRA paper sec. 4: r x in + out x r per adapted matrix; Llama-2-7b q/v 4096 x 4096, down_proj 11008 -> 4096
    count = 32 * 8 * ((4096 + 4096) * 2 + (11008 + 4096))
    for targets in (["v_proj", "q_proj", "down_proj"], ["down_proj", "q_proj", "v_proj", "v_proj"],
                    ("q_proj", "v_proj", "down_proj"), ["self_attn.q_proj", "self_attn.v_proj", "mlp.down_proj"]):
        assert lora_trainable_parameters(a, rank=8, targets=targets) == count, targets
    # the rank scales the same adapters; DoRA adds one magnitude entry per output row (PEFT DoRA)
    assert lora_trainable_parameters(a, rank=16, targets=["q_proj", "v_proj", "down_proj"]) == 2 * count
    assert lora_trainable_parameters(a, rank=8, targets=["q_proj", "v_proj", "down_proj"], use_dora=True) \
        == count + 32 * (4096 * 2 + 4096)


def test_modules_to_save_copy_counts_full_module():
    # PEFT ModulesToSaveWrapper trains a deep copy: lm_head adds V*h; a tied lm_head's copy is untied
    a = arch(tied=True)
    base = lora_trainable_parameters(a, rank=4, targets=["q_proj"])
    with_head = lora_trainable_parameters(a, rank=4, targets=["q_proj"], modules_to_save=["lm_head"])
    assert with_head - base == a.vocab_size * a.hidden_size


def test_qwen2_attention_projections_have_bias_but_lora_ignores_it_by_default():
    # Qwen2Attention: q/k/v bias=True; PEFT LoraConfig bias="none" by default
    a = arch("qwen2", layers=1)
    assert lora_trainable_parameters(a, rank=2, targets=["q_proj"]) == 2 * (64 + 64)
    assert lora_trainable_parameters(a, rank=2, targets=["q_proj"], bias="lora_only") == 2 * (64 + 64) + 64


def test_mixtral_v4_expert_names_and_fused_rank():
    # PEFT transformers_weight_conversion: w1+w3 -> gate_up_proj with doubled rank; w1 alone is an error
    a = CAT["mistralai/Mixtral-8x7B-v0.1"]
    E, h, inter = 8, 4096, 14336
    n = lora_trainable_parameters(a, rank=8, targets=["w1", "w3"])
    assert n == 32 * (2 * 8) * E * (h + 2 * inter)
    with pytest.raises(ValueError, match="w3"):
        lora_trainable_parameters(a, rank=8, targets=["w1"])


def test_rank_must_be_positive():
    # PEFT update_layer: "`r` should be a positive integer value"
    with pytest.raises(ValueError, match="positive integer"):
        lora_trainable_parameters(arch(), rank=0, targets=["q_proj"])


@pytest.mark.parametrize(
    "alpha,rank,rslora,expected",
    [
        (16, 64, False, 0.25),  # REFERENCES sec. 2 [C]: r=64, alpha=16 -> LoRA 0.25
        (16, 64, True, 2.0),  # REFERENCES sec. 2 [C]: rsLoRA 2.0
        (8, 8, False, 1.0),  # PEFT default r=8, lora_alpha=8 -> scaling 1.0 (REFERENCES sec. 5)
        (8, 8, True, 8 / math.sqrt(8)),  # REFERENCES sec. 2 [C]: about 2.83
    ],
)
def test_lora_scale(alpha, rank, rslora, expected):
    assert lora_scale(alpha, rank, rslora) == pytest.approx(expected)


# ---------------------------------------------------------------------------------------------
# Names
# ---------------------------------------------------------------------------------------------

# Expected sizes are what the names say (common practice, no source); None where the name does not say.
SIZE_CASES = [
    ("meta-llama/Llama-2-7b-hf", 7.0),
    ("TinyLlama-1.1B-Chat", 1.1),
    ("TinyLlama/TinyLlama-1.1B-Chat-v1.0", 1.1),
    ("HuggingFaceTB/SmolLM-360M", 0.36),
    ("Qwen2.5-0.5B", 0.5),
    ("Qwen/Qwen2.5-7B-Instruct", 7.0),
    ("meta-llama/Llama-3.1-8B", 8.0),
    ("meta-llama/Meta-Llama-3-70B-Instruct", 70.0),
    ("mistralai/Mistral-7B-v0.1", 7.0),
    ("google/gemma-2-9b-it", 9.0),
    ("Qwen/Qwen3-30B-A3B", 30.0),
    ("Qwen/Qwen1.5-MoE-A2.7B", None),
    ("mistralai/Mixtral-8x7B-v0.1", None),
    ("microsoft/Phi-3-mini-4k-instruct", None),
    ("microsoft/Phi-3-mini-128k-instruct", None),
    ("gpt2", None),
    ("mistralai/Mistral-Nemo-Instruct-2407", None),
    ("/data/ckpt/Llama-2-13b-hf/checkpoint-500", 13.0),
    ("bigscience/bloom-560m", 0.56),
    ("Qwen/Qwen2.5-7B-Instruct-1M", 7.0),
    ("EleutherAI/pythia-1.4b-deduped", 1.4),
    ("allenai/OLMo-7B-0724-hf", 7.0),
    ("llama_2_7b", None),
    ("model-7B-distilled-from-70B", None),
    ("", None),
]


@pytest.mark.parametrize("ref,expected", SIZE_CASES, ids=[c[0] or "empty" for c in SIZE_CASES])
def test_size_from_name(ref, expected):
    got = size_from_name(ref)
    if expected is None:
        assert got is None
    else:
        assert got == pytest.approx(expected)


# ---------------------------------------------------------------------------------------------
# Resolution
# ---------------------------------------------------------------------------------------------

# A copy of TinyLlama-1.1B-Chat-v1.0's config.json fields (REFERENCES sec. 13 [V2]).
TINYLLAMA_CONFIG = {
    "architectures": ["LlamaForCausalLM"], "model_type": "llama", "hidden_size": 2048,
    "intermediate_size": 5632, "num_hidden_layers": 22, "num_attention_heads": 32,
    "num_key_value_heads": 4, "vocab_size": 32000, "max_position_embeddings": 2048,
    "tie_word_embeddings": False, "torch_dtype": "bfloat16", "rms_norm_eps": 1e-05, "rope_theta": 10000.0,
}


def write_model(folder: Path, data) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "config.json").write_text(data if isinstance(data, str) else json.dumps(data), encoding="utf-8")
    return folder


def test_local_folder_relative_to_cwd_first(tmp_path):
    cwd, cfg_dir = tmp_path / "work", tmp_path / "configs"
    write_model(cwd / "models" / "tiny", TINYLLAMA_CONFIG)
    write_model(cfg_dir / "models" / "tiny", {**TINYLLAMA_CONFIG, "num_hidden_layers": 2})
    a = resolve_model("models/tiny", cwd=cwd, config_dir=cfg_dir, hub_cache=tmp_path / "nohub")
    assert a is not None and a.num_layers == 22 and str(cwd) in a.source
    assert total_parameters(a) == 1_100_048_384  # REFERENCES sec. 13


def test_local_folder_relative_to_config_dir(tmp_path):
    cfg_dir = tmp_path / "configs"
    write_model(cfg_dir / "base", TINYLLAMA_CONFIG)
    a = resolve_model("./base", cwd=tmp_path / "elsewhere", config_dir=cfg_dir, hub_cache=tmp_path / "nohub")
    assert a is not None and a.head_dim == 64 and a.source.startswith("config.json at")


def test_garbage_config_gives_none(tmp_path):
    garbage = ["{not json", "[1, 2]", json.dumps({"model_type": "llama"}), "\xff\xfe", "[" * 100_000 + "]" * 100_000]
    for i, text in enumerate(garbage):
        write_model(tmp_path / f"m{i}", text)
        assert resolve_model(str(tmp_path / f"m{i}")) is None
    (tmp_path / "bin").mkdir()
    (tmp_path / "bin" / "config.json").write_bytes(b"\xff\xfe\x00garbage")
    assert resolve_model(str(tmp_path / "bin")) is None


def test_hub_cache_layout(tmp_path):
    hub = tmp_path / "hub"
    repo = hub / "models--fjordline--support-7b"
    write_model(repo / "snapshots" / "abc123", {**TINYLLAMA_CONFIG, "num_hidden_layers": 3})
    write_model(repo / "snapshots" / "def456", {**TINYLLAMA_CONFIG, "num_hidden_layers": 5})
    (repo / "refs").mkdir()
    (repo / "refs" / "main").write_text("abc123\n")
    a = resolve_model("fjordline/support-7b", cwd=tmp_path, hub_cache=hub)
    assert a is not None and a.num_layers == 3 and "abc123" in a.source


def test_hub_cache_from_environment(tmp_path, monkeypatch):
    hub = tmp_path / "envhub"
    write_model(hub / "models--fjordline--faq-bot" / "snapshots" / "r1", TINYLLAMA_CONFIG)
    monkeypatch.setenv("HF_HUB_CACHE", str(hub))
    a = resolve_model("fjordline/faq-bot", cwd=tmp_path)
    assert a is not None and a.num_kv_heads == 4


def test_catalogue_lookup_case_insensitive_and_without_org(tmp_path):
    empty = tmp_path / "hub"
    a = resolve_model("META-LLAMA/llama-2-7b-HF", cwd=tmp_path, hub_cache=empty)
    b = resolve_model("Llama-2-7b-hf", cwd=tmp_path, hub_cache=empty)
    c = resolve_model("some-mirror/Qwen2.5-0.5B-Instruct", cwd=tmp_path, hub_cache=empty)
    assert a == CAT["meta-llama/Llama-2-7b-hf"] and not a.assumed
    # the name without its organisation: the same shapes, matched by name alone (an assumption, said in the source)
    assert replace(b, source=a.source) == a and b.assumed and "assumed from the name" in b.source
    assert c is not None and c.family == "qwen2" and c.source.startswith("bundled catalogue:")
    assert resolve_model("fjordline/unknown-model", cwd=tmp_path, hub_cache=empty) is None
    assert resolve_model(None) is None
    assert resolve_model("   ") is None


def test_every_catalogue_entry_cites_a_source():
    for ref, a in CAT.items():
        assert a.source.startswith("bundled catalogue: ") and len(a.source) > len("bundled catalogue: "), ref
        assert a.family in SUPPORTED_FAMILIES
        assert a.num_heads % a.num_kv_heads == 0


def test_config_defaults_and_text_config_nesting():
    # transformers config classes: head_dim = hidden // heads when absent (LlamaConfig), GemmaConfig
    # head_dim 256 and tie_word_embeddings True, num_key_value_heads defaults to the head count
    base = {"model_type": "llama", "hidden_size": 512, "intermediate_size": 1024, "num_hidden_layers": 2,
            "num_attention_heads": 8, "vocab_size": 1000}
    a = architecture_from_config(base, "test")
    assert (a.head_dim, a.num_kv_heads, a.tie_word_embeddings) == (64, 8, False)
    g = architecture_from_config({**base, "model_type": "gemma"}, "test")
    assert (g.head_dim, g.tie_word_embeddings) == (256, True)
    nested = architecture_from_config({"model_type": "llava", "text_config": base, "dtype": "bfloat16"}, "test")
    assert nested is not None and nested.family == "llama" and nested.torch_dtype == "bfloat16"
    assert architecture_from_config({**base, "num_key_value_heads": 3}, "test") is None  # 8 heads not divisible
    assert architecture_from_config({**base, "hidden_size": "512"}, "test") is None


def test_adapter_folder_resolves_to_its_base(tmp_path):
    # PEFT adapter folders carry adapter_config.json with base_model_name_or_path (PEFT PeftConfig)
    run = tmp_path / "runs" / "faq-adapter"
    run.mkdir(parents=True)
    (run / "adapter_config.json").write_text(json.dumps({"peft_type": "LORA", "base_model_name_or_path": "Qwen/Qwen2.5-0.5B"}))
    a = resolve_model("runs/faq-adapter", cwd=tmp_path, hub_cache=tmp_path / "nohub")
    assert a is not None and total_parameters(a) == 494_032_768  # REFERENCES sec. 13
    assert "base of the adapter" in a.source
    # a local folder without any config is not looked up anywhere else
    (tmp_path / "Llama-2-7b-hf").mkdir()
    assert resolve_model("Llama-2-7b-hf", cwd=tmp_path, hub_cache=tmp_path / "nohub") is None


def test_hub_cache_snapshot_files_are_symlinks_to_blobs(tmp_path):
    # huggingface_hub cache layout: snapshots/<rev>/config.json links to ../../blobs/<hash>
    repo = tmp_path / "hub" / "models--fjordline--ticket-router"
    (repo / "blobs").mkdir(parents=True)
    (repo / "blobs" / "0a1b2c").write_text(json.dumps(TINYLLAMA_CONFIG))
    snap = repo / "snapshots" / "r9"
    snap.mkdir(parents=True)
    (snap / "config.json").symlink_to(Path("../../blobs/0a1b2c"))
    a = resolve_model("fjordline/ticket-router", cwd=tmp_path, hub_cache=tmp_path / "hub")
    assert a is not None and a.vocab_size == 32000


_json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10, 10**6) | st.floats(allow_nan=False) | st.text(max_size=8),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(st.text(max_size=8), children, max_size=3),
    max_leaves=8,
)
_config_keys = st.sampled_from([
    "model_type", "hidden_size", "intermediate_size", "num_hidden_layers", "num_attention_heads",
    "num_key_value_heads", "head_dim", "vocab_size", "max_position_embeddings", "tie_word_embeddings",
    "torch_dtype", "dtype", "num_local_experts", "num_experts_per_tok", "text_config", "attention_bias",
])


@settings(max_examples=100, deadline=None, derandomize=True)
@given(st.dictionaries(_config_keys, _json_values | st.sampled_from(["llama", "qwen2", "mixtral", 0, 8, 64])))
def test_architecture_from_config_never_raises(data):
    a = architecture_from_config(data, "property test")
    assert a is None or (a.hidden_size > 0 and a.num_heads % a.num_kv_heads == 0)


# ---------------------------------------------------------------------------------------------
# The bundled catalogue: breadth, published totals, mixture-of-experts counts
# ---------------------------------------------------------------------------------------------

from cfgcheck.knowledge.models import (  # noqa: E402
    active_parameters,
    catalogue_entries,
    expert_parameters,
    match_catalogue,
)

ENTRIES = catalogue_entries()


def test_catalogue_covers_the_families_people_fine_tune():
    assert len(ENTRIES) >= 120
    # distinct parameter shapes: entries that differ only in context window, dtype or source count once
    assert len({replace(e.arch, source="", max_position_embeddings=None, torch_dtype=None) for e in ENTRIES}) >= 120
    ids = {e.id.lower() for e in ENTRIES}
    for wanted in ("meta-llama/llama-3.1-405b", "meta-llama/llama-2-70b-hf", "mistralai/mixtral-8x22b-v0.1",
                   "qwen/qwen3-30b-a3b", "google/gemma-3-1b-pt", "microsoft/phi-2", "tiiuae/falcon-7b",
                   "bigcode/starcoder2-15b", "deepseek-ai/deepseek-v2-lite", "openai/gpt-oss-20b",
                   "huggingfacetb/smollm3-3b", "allenai/olmo-2-1124-7b", "ibm-granite/granite-3.1-8b-base",
                   "eleutherai/pythia-1b", "openai-community/gpt2"):
        assert wanted in ids, wanted


@pytest.mark.parametrize("entry", [e for e in ENTRIES if e.published_total], ids=lambda e: e.id)
def test_total_within_half_a_percent_of_the_published_count(entry):
    # reference: each entry's published_source (model cards, Hub pages, papers; most "from memory")
    assert entry.published_source
    # published_extra: stored tensors the published figure counts and num_parameters() does not (said in the source)
    ours = total_parameters(entry.arch) + entry.published_extra
    assert abs(ours - entry.published_total) <= 0.005 * entry.published_total, (ours, entry.published_source)


def test_exact_published_counts_are_matched_exactly():
    # where the publisher gives every digit (keras-hub preset tables, Hub API totals, GGUF metadata), the
    # computed total must equal it, not merely come within 0.5 %
    exact = [e for e in ENTRIES if e.published_total and e.published_total % 1_000_000]
    assert len(exact) >= 100
    off = [(e.id, total_parameters(e.arch) + e.published_extra - e.published_total) for e in exact
           if total_parameters(e.arch) + e.published_extra != e.published_total]
    assert len(off) <= 3, off  # keras-hub's text-only Gemma 3 presets use a 64-row smaller vocabulary


def test_entries_without_a_comparable_published_count_say_why():
    missing = [e for e in ENTRIES if not e.published_total]
    assert len(missing) <= 6
    for e in missing:
        assert e.published_source and ("vision" in e.source or "rounded" in e.published_source), e.id


def test_every_entry_names_its_sources_and_a_known_layout():
    for e in ENTRIES:
        assert e.source and e.arch.family in SUPPORTED_FAMILIES, e.id
        assert e.arch.num_heads % e.arch.num_kv_heads == 0, e.id
        assert e.arch.max_position_embeddings and e.arch.torch_dtype, e.id
        if e.arch.is_moe:
            assert 0 < e.arch.experts_per_token <= e.arch.num_experts, e.id


# Published activated-parameter counts (rounded to 2-3 figures by their publishers, from memory). Conventions
# differ: Mistral counts every active weight; DeepSeek and OpenAI leave the input embedding out. Checked to 3 %
# (2.45B is published as 2.4B).
ACTIVE = [
    ("mistralai/Mixtral-8x7B-v0.1", 12.9e9, True),  # Mistral AI announcement: 12.9B active
    ("mistralai/Mixtral-8x22B-v0.1", 39e9, True),  # Mistral AI announcement: 39B active
    ("Qwen/Qwen1.5-MoE-A2.7B", 2.7e9, True),  # Qwen blog: 2.7B activated
    ("Qwen/Qwen3-30B-A3B", 3.3e9, True),  # Qwen3 model card: 3.3B activated
    ("Qwen/Qwen3-235B-A22B", 22e9, True),  # Qwen3 model card: 22B activated
    ("deepseek-ai/DeepSeek-V2-Lite", 2.4e9, False),  # DeepSeek-V2 paper: 2.4B activated (without the input embedding)
    ("openai/gpt-oss-20b", 3.6e9, False),  # gpt-oss model card: 3.6B active (without the input embedding)
    ("openai/gpt-oss-120b", 5.1e9, False),  # gpt-oss model card: 5.1B active
]


@pytest.mark.parametrize("ref,published,with_embedding", ACTIVE, ids=[a[0] for a in ACTIVE])
def test_active_parameters_match_published_activated_counts(ref, published, with_embedding):
    a = CAT[ref]
    ours = active_parameters(a) - (0 if with_embedding else a.vocab_size * a.hidden_size)
    assert abs(ours - published) <= 0.03 * published, ours
    assert total_parameters(a) > active_parameters(a)  # every expert stays resident


def test_active_parameters_formula_on_a_small_moe():
    # per MoE layer, (experts - active) experts of 3 * h * I' each are idle; router and shared expert always run
    a = arch("qwen2_moe", layers=2, num_experts=6, experts_per_token=2, expert_intermediate_size=16,
             shared_expert_intermediate_size=40)
    per_expert = 3 * a.hidden_size * 16
    assert expert_parameters(a) == 2 * 6 * per_expert
    assert active_parameters(a) == total_parameters(a) - 2 * 4 * per_expert
    dense = arch("llama")
    assert active_parameters(dense) == total_parameters(dense) and expert_parameters(dense) == 0


def test_fused_attention_families_count_lora_on_the_fused_projection():
    # LoRA on a fused q/k/v projection: r * (h + 3h) per layer for GPT-2 c_attn (Conv1D, weight in x out);
    # GPT-NeoX query_key_value the same; Falcon-7B multi-query: out = h + 2 * head_dim (PEFT default targets)
    gpt2 = CAT["openai-community/gpt2"]
    assert lora_trainable_parameters(gpt2, rank=8, targets=None) == 12 * 8 * (768 + 3 * 768)
    neox = CAT["EleutherAI/pythia-1b"]
    assert lora_trainable_parameters(neox, rank=4, targets=None) == 16 * 4 * (2048 + 3 * 2048)
    falcon = CAT["tiiuae/falcon-7b"]
    assert linear_modules(falcon)["query_key_value"] == (4544, 4544 + 2 * 64)
    assert lora_trainable_parameters(falcon, rank=16, targets=None) == 32 * 16 * (4544 + 4672)
    phi2 = CAT["microsoft/phi-2"]  # PEFT default for phi: q_proj, v_proj, fc1, fc2
    assert target_leaf_names(phi2, None) == ["q_proj", "v_proj", "fc1", "fc2"]


# ---------------------------------------------------------------------------------------------
# Name matching: every match says how it was made; name-only matches are assumptions
# ---------------------------------------------------------------------------------------------

MATCHES = [
    # (reference, expected entry, expected kind, assumed, what a quantised export stores)
    ("meta-llama/Llama-2-7b-hf", "meta-llama/Llama-2-7b-hf", "exact", False, ""),
    ("QWEN/qwen3-4b-instruct-2507", "Qwen/Qwen3-4B-Instruct-2507", "exact", False, ""),
    ("NousResearch/Llama-2-7b-hf", "meta-llama/Llama-2-7b-hf", "mirror", True, ""),
    ("TechxGenus/Meta-Llama-3-8B-Instruct-GPTQ", "meta-llama/Meta-Llama-3-8B", "variant", True, "GPTQ"),
    ("TheBloke/Mistral-7B-Instruct-v0.2-AWQ", "mistralai/Mistral-7B-Instruct-v0.2", "variant", True, "AWQ"),
    ("unsloth/Qwen2.5-7B-Instruct-bnb-4bit", "Qwen/Qwen2.5-7B-Instruct", "variant", True, "bitsandbytes 4-bit"),
    ("unsloth/llama-3-8b-bnb-4bit", "meta-llama/Meta-Llama-3-8B", "tokens", True, "bitsandbytes 4-bit"),
    ("bartowski/Qwen2.5-7B-Instruct-GGUF", "Qwen/Qwen2.5-7B-Instruct", "variant", True, "GGUF"),
    ("qwen2.5-7b-instruct-q4_k_m.gguf", "Qwen/Qwen2.5-7B-Instruct", "variant", True, "GGUF Q4_K_M"),
    ("Qwen/Qwen3-4B-Base", "Qwen/Qwen3-4B", "exact", False, ""),
    ("Qwen/Qwen3-4B-Chat", "Qwen/Qwen3-4B", "variant", True, ""),
    ("google/gemma-2-9b-it", "google/gemma-2-9b", "exact", False, ""),
    ("HuggingFaceTB/SmolLM3-3B-checkpoints", "HuggingFaceTB/SmolLM3-3B", "tokens", True, ""),
    ("alignment-handbook/zephyr-7b-sft-full", "mistralai/Mistral-7B-v0.1", "derived", True, ""),
    ("HuggingFaceH4/zephyr-7b-gemma-sft-v0.1", "google/gemma-7b", "derived", True, ""),
    ("gpt2", "openai-community/gpt2", "exact", False, ""),
]


@pytest.mark.parametrize("ref,entry,kind,assumed,stored", MATCHES, ids=[m[0] for m in MATCHES])
def test_name_matching_says_how(ref, entry, kind, assumed, stored):
    # common practice, no source: hub naming conventions for variants and exports
    a = match_catalogue(ref)
    assert a is not None, ref
    assert (a.entry, a.match, a.assumed, a.quantised) == (entry, kind, assumed, stored)
    assert ref in a.how and (entry in a.how)


def test_fp16_export_notes_the_stored_dtype():
    a = match_catalogue("casperhansen/llama-3-70b-fp16")
    assert a.entry == "meta-llama/Meta-Llama-3-70B" and a.torch_dtype == "float16" and a.assumed
    assert "float16" in a.how


@pytest.mark.parametrize("ref", ["fjordline/support-bot", "llama-7b", "qwen-chat", "Qwen/Qwen9-4B", "gpt3-7b", "7b"])
def test_unknown_or_ambiguous_names_are_not_guessed(ref):
    assert match_catalogue(ref) is None


def test_ids_recipe_builders_map_to_resolve(tmp_path):
    # torchtune-style builder names are mapped to these hub ids by the recipe reader
    for ref in ("meta-llama/Llama-2-7b-hf", "meta-llama/Meta-Llama-3.1-8B-Instruct", "Qwen/Qwen2.5-7B-Instruct",
                "microsoft/Phi-3-mini-4k-instruct", "google/gemma-2b", "mistralai/Mistral-7B-v0.1",
                "meta-llama/Llama-3.2-1B-Instruct", "codellama/CodeLlama-7b-hf"):
        a = resolve_model(ref, cwd=tmp_path, hub_cache=tmp_path / "empty")
        assert a is not None and not a.assumed, ref


def test_catalogue_is_read_only_on_lookup():
    # lint start-up must not pay for the catalogue: importing the models module and linting a file that
    # names no model leave it unread (lazy load)
    import subprocess
    import sys

    code = (
        "import cfgcheck.knowledge.models as m, cfgcheck.engine as e\n"
        "e.lint_text('lr: 0.1\\n', 'x.yaml', e.Options()) if hasattr(e, 'lint_text') else None\n"
        "print(m._bundle.cache_info().currsize)\n"  # the catalogue and its name index, read together
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=Path(__file__).parents[1])
    assert out.stdout.strip().splitlines()[-1] == "0", out.stderr


def test_public_corpus_model_ids_resolve_offline(shared_dir, tmp_path, monkeypatch):
    # At least 95 % of the distinct model ids named in the public corpus resolve with an empty hub cache.
    from cfgcheck.load import load_path
    from cfgcheck.view import build_view

    root = shared_dir / "corpus" / "public"
    if not root.is_dir():
        pytest.skip("no public corpus")
    monkeypatch.setenv("HF_HOME", str(tmp_path / "hf"))
    monkeypatch.delenv("HF_HUB_CACHE", raising=False)
    refs = set()
    for p in sorted(root.iterdir()):
        if p.suffix not in (".yaml", ".yml", ".json"):
            continue
        try:
            _src, docs = load_path(p)
        except Exception:  # the corpus holds one deliberately invalid file
            continue
        for d in docs:
            ref = build_view(d).value("model.ref")
            if isinstance(ref, str) and ref.strip():
                refs.add(ref.strip())
    assert len(refs) >= 20
    unresolved = sorted(r for r in refs if resolve_model(r, cwd=tmp_path) is None)
    share = 1 - len(unresolved) / len(refs)
    print(f"corpus model ids resolved offline: {len(refs) - len(unresolved)}/{len(refs)} ({share:.0%})")
    assert share >= 0.95, unresolved


# ---------------------------------------------------------------------------------------------
# Models and GPUs declared in the project file
# ---------------------------------------------------------------------------------------------


def _repo(tmp_path, text):
    import textwrap

    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text(textwrap.dedent(text))
    (tmp_path / "runs").mkdir()
    return tmp_path


def test_project_declares_a_model_by_shape_and_by_config_path(tmp_path):
    from cfgcheck import api

    write_model(tmp_path / "models" / "tiny", TINYLLAMA_CONFIG)
    repo = _repo(tmp_path, """\
        models:
          - id: fjordline/support-1b
            config: models/tiny
          - id: fjordline/router-small
            family: qwen2
            hidden_size: 896
            intermediate_size: 4864
            num_layers: 24
            num_attention_heads: 14
            num_key_value_heads: 2
            vocab_size: 151936
            tie_word_embeddings: true
            max_position_embeddings: 32768
        gpu_types:
          - name: lab-card
            label: Lab card 24GB
            memory_gb: 24
            capability: "8.6"
        profiles:
          - paths: runs/**
            gpu: lab-card
        """)
    (repo / "runs" / "a.yaml").write_text("model_name_or_path: fjordline/support-1b\nlearning_rate: 2.0e-5\n")
    (repo / "runs" / "b.yaml").write_text("model_name_or_path: fjordline/router-small\nlearning_rate: 2.0e-5\n")
    result = api.derive([repo / "runs" / "a.yaml", repo / "runs" / "b.yaml"])
    plans = {Path(f).name: p for f, p in result.runs}
    a, b = plans["a.yaml"].arch, plans["b.yaml"].arch
    # REFERENCES sec. 13: TinyLlama 1,100,048,384 and Qwen2.5-0.5B 494,032,768 parameters
    assert total_parameters(a) == 1_100_048_384 and a.match == "declared" and not a.assumed
    assert total_parameters(b) == 494_032_768 and "cfgcheck.yaml" in b.source
    assert plans["a.yaml"].gpu.name == "lab-card" and plans["a.yaml"].gpu.capability == (8, 6)


def test_bad_model_declaration_is_reported_at_its_line(tmp_path):
    from cfgcheck import api
    from cfgcheck.project import ProjectError

    repo = _repo(tmp_path, "models:\n  - id: fjordline/x\n    family: llama\n    hidden_size: 64\n")
    (repo / "runs" / "a.yaml").write_text("learning_rate: 2.0e-5\n")
    with pytest.raises(ProjectError) as err:
        api.lint([repo / "runs"])
    (_f, line, col, reason), = err.value.problems
    assert (line, col) == (2, 5) and "not a model shape" in reason


def test_models_and_gpus_listings_show_sources(tmp_path, monkeypatch):
    from typer.testing import CliRunner

    from cfgcheck.cli import app

    repo = _repo(tmp_path, "gpu_types:\n  - {name: lab-card, memory_gb: 24, capability: '8.6'}\n")
    monkeypatch.chdir(repo)
    out = CliRunner().invoke(app, ["models", "--family", "gpt_oss"])
    assert out.exit_code == 0
    lines = out.output.strip().splitlines()
    assert len(lines) == 2 and all("shapes:" in line and "published" in line for line in lines)
    mods = CliRunner().invoke(app, ["models", "--family", "gpt2", "--modules"])
    assert mods.exit_code == 0 and "modules: c_attn, c_proj, c_fc" in mods.output  # transformers GPT2 module names
    gpus = CliRunner().invoke(app, ["gpus"])
    assert gpus.exit_code == 0 and "declared in" in gpus.output.splitlines()[0]


def test_adapter_in_the_hub_cache_resolves_to_its_base(tmp_path):
    # PEFT adapter repositories hold adapter_config.json (base_model_name_or_path) and no config.json
    snap = tmp_path / "hub" / "models--fjordline--faq-lora" / "snapshots" / "r1"
    snap.mkdir(parents=True)
    (snap / "adapter_config.json").write_text(json.dumps({"peft_type": "LORA", "base_model_name_or_path": "Qwen/Qwen2.5-0.5B"}))
    a = resolve_model("fjordline/faq-lora", cwd=tmp_path, hub_cache=tmp_path / "hub")
    assert a is not None and total_parameters(a) == 494_032_768  # REFERENCES sec. 13
    assert "base_model_name_or_path is Qwen/Qwen2.5-0.5B" in a.how and not a.assumed


def test_target_names_follow_each_layout():
    # transformers 5 module names: GPT-2 wte/c_attn, GPT-NeoX embed_in/query_key_value, Falcon word_embeddings;
    # PEFT 0.21 rewrites mixtral w1/w2/w3 and qwen3_moe gate_proj/up_proj/down_proj onto the fused experts
    from cfgcheck.knowledge.models import target_names

    assert {"wte", "c_attn", "c_proj", "c_fc", "lm_head"} <= target_names(CAT["openai-community/gpt2"])
    assert {"embed_in", "query_key_value", "dense", "dense_4h_to_h"} <= target_names(CAT["EleutherAI/pythia-1b"])
    assert "word_embeddings" in target_names(CAT["tiiuae/falcon-7b"])
    assert {"w1", "w2", "w3", "gate"} <= target_names(CAT["mistralai/Mixtral-8x7B-v0.1"])
    assert {"gate_proj", "up_proj", "down_proj"} <= target_names(CAT["Qwen/Qwen3-30B-A3B"])
    assert "router" not in target_names(CAT["openai/gpt-oss-20b"])  # a router module LoRA cannot wrap


# config.json as the hub holds them (key names of each family's config class; values from memory, checked by
# reproducing the catalogue's published totals)
HUB_CONFIGS = [
    ({"model_type": "gpt2", "n_embd": 768, "n_head": 12, "n_layer": 12, "n_positions": 1024, "n_ctx": 1024,
      "n_inner": None, "vocab_size": 50257}, "openai-community/gpt2"),
    ({"model_type": "RefinedWebModel", "hidden_size": 4544, "n_head": 71, "n_layer": 32, "multi_query": True,
      "parallel_attn": True, "bias": False, "vocab_size": 65024}, "tiiuae/falcon-7b"),
    ({"model_type": "falcon", "hidden_size": 8192, "num_attention_heads": 128, "num_hidden_layers": 60,
      "num_kv_heads": 8, "new_decoder_architecture": True, "parallel_attn": True, "bias": False,
      "vocab_size": 65024}, "tiiuae/falcon-40b"),
    ({"model_type": "qwen3_moe", "hidden_size": 2048, "intermediate_size": 6144, "num_hidden_layers": 48,
      "num_attention_heads": 32, "num_key_value_heads": 4, "head_dim": 128, "num_experts": 128,
      "num_experts_per_tok": 8, "moe_intermediate_size": 768, "decoder_sparse_step": 1, "mlp_only_layers": [],
      "vocab_size": 151936, "tie_word_embeddings": False}, "Qwen/Qwen3-30B-A3B"),
    ({"model_type": "deepseek_v2", "hidden_size": 2048, "intermediate_size": 10944, "num_hidden_layers": 27,
      "num_attention_heads": 16, "num_key_value_heads": 16, "n_routed_experts": 64, "n_shared_experts": 2,
      "num_experts_per_tok": 6, "moe_intermediate_size": 1408, "first_k_dense_replace": 1, "moe_layer_freq": 1,
      "kv_lora_rank": 512, "q_lora_rank": None, "qk_rope_head_dim": 64, "qk_nope_head_dim": 128, "v_head_dim": 128,
      "vocab_size": 102400}, "deepseek-ai/DeepSeek-V2-Lite"),
    ({"model_type": "gpt_oss", "hidden_size": 2880, "intermediate_size": 2880, "num_hidden_layers": 24,
      "num_attention_heads": 64, "num_key_value_heads": 8, "head_dim": 64, "num_local_experts": 32,
      "num_experts_per_tok": 4, "vocab_size": 201088, "sliding_window": 128, "attention_bias": True,
      "tie_word_embeddings": False}, "openai/gpt-oss-20b"),
]


@pytest.mark.parametrize("data,ref", HUB_CONFIGS, ids=[r for _d, r in HUB_CONFIGS])
def test_hub_config_files_of_other_families_read_to_the_catalogue_shape(data, ref):
    a = architecture_from_config(data, "test")
    assert a is not None and total_parameters(a) == total_parameters(CAT[ref])


@pytest.mark.parametrize("ref,entry,stored,dtype", [
    ("hugging-quants/Meta-Llama-3.1-8B-Instruct-AWQ-INT4", "meta-llama/Llama-3.1-8B", "AWQ INT4", "bfloat16"),
    ("unsloth/gpt-oss-20b-BF16", "openai/gpt-oss-20b", "", "bfloat16"),
    ("llama-2-7b-chat.F16.gguf", "meta-llama/Llama-2-7b-hf", "GGUF float16", "float16"),
    ("Qwen/Qwen3-30B-A3B-GPTQ-Int4", "Qwen/Qwen3-30B-A3B", "GPTQ", "bfloat16"),
])
def test_exports_name_their_format_and_bits(ref, entry, stored, dtype):
    # common practice, no source: how exporters name quantised and re-typed copies
    a = match_catalogue(ref)
    assert (a.entry, a.quantised, a.torch_dtype, a.assumed) == (entry, stored, dtype, True)


def test_derived_run_and_findings_say_which_entry_and_match(tmp_path):
    # the derived run names the entry and the match; a finding built on the model quotes it, assumption included
    from cfgcheck import api

    cfg = tmp_path / "run.yaml"
    cfg.write_text("model_name_or_path: NousResearch/Llama-2-7b-hf\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
                   "lora_target_modules: [c_attn]\nlearning_rate: 2.0e-4\n")
    (file, run), = api.derive([cfg], project=None).runs
    d = run.as_dict()
    assert d["model_entry"] == "meta-llama/Llama-2-7b-hf" and d["model_assumed"] is True
    assert "matched by name" in d["model_match"] and "NousResearch/Llama-2-7b-hf" in d["model_match"]
    report = api.lint([cfg], project=None)
    msgs = [f.message for f in report.findings if f.rule == "lora-target-not-in-model"]
    assert msgs and "meta-llama/Llama-2-7b-hf" in msgs[0] and "assumed from the name" in msgs[0]


def test_gpt2_conv1d_weights_count_as_quantised_matmul_weights():
    # transformers integrations/bitsandbytes.py quantises Conv1D layers (transposing them) like nn.Linear;
    # per GPT-2 block: c_attn h x 3h, attn.c_proj h x h, c_fc h x 4h, mlp.c_proj 4h x h = 12 h^2
    from cfgcheck.knowledge.memory import _quantised_rows

    a = CAT["openai-community/gpt2"]
    quant, rows, rest = _quantised_rows(a)
    assert quant == 12 * 12 * 768 * 768
    assert rows == 12 * (3 * 768 + 768 + 4 * 768 + 768)
    assert quant + rest == total_parameters(a)


def test_a_checkpoint_folder_of_another_machine_is_matched_by_its_name(tmp_path):
    # torchtune-style checkpoint_dir paths name the downloaded model; the folder is absent here
    a = resolve_model("/nonexistent-folder/ckpt/Qwen3-8B/", cwd=tmp_path, hub_cache=tmp_path / "empty")
    assert a is not None and a.entry == "Qwen/Qwen3-8B" and a.assumed and a.match == "folder name"
    assert "no such folder here" in a.how and "assumed from the name" in a.source
    assert resolve_model("/nonexistent-folder/ckpt/", cwd=tmp_path, hub_cache=tmp_path / "empty") is None
    # an existing local folder without a config is still not looked up by name
    (tmp_path / "Qwen3-8B").mkdir()
    assert resolve_model(str(tmp_path / "Qwen3-8B"), cwd=tmp_path, hub_cache=tmp_path / "empty") is None


def test_an_architecture_keeps_its_hash_out_of_its_pickle():
    # the hash is worked out once and kept on the record; str hashes differ between processes,
    # so a pickled copy must work it out again rather than carry this process's number
    import pickle

    arch = Architecture("llama", 4096, 11008, 32, 32, 32, 128, 32000, 4096, False, "float16")
    first = hash(arch)
    copy = pickle.loads(pickle.dumps(arch))
    assert "_hash" not in copy.__dict__ and copy == arch and hash(copy) == first == hash(arch)
    assert {arch: 1}[copy] == 1
