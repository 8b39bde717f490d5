"""Against PEFT and torch: LoRA trainable counts, target resolution and scale, and model-state bytes
(weights, gradients, optimizer states) on tiny random models (CPU)."""

import math
import warnings

import peft
import pytest
import torch
import transformers

from cfgcheck.knowledge.memory import MemoryInputs, estimate_memory
from cfgcheck.knowledge.models import (
    PEFT_DEFAULT_TARGETS,
    Architecture,
    NoDefaultTargets,
    lora_scale,
    lora_trainable_parameters,
    module_table,
    resolve_targets,
    total_parameters,
    unsupported_target_matches,
)

from .conftest import hf_config

FAMILIES = ["llama", "mistral", "qwen2", "qwen3", "gemma", "gemma2", "phi3", "mixtral"]
# Families added later, including the fused-attention ones (GPT-2 c_attn, GPT-NeoX / Falcon query_key_value)
# and the mixture-of-experts layouts with shared experts, a router bias or dense leading layers.
MORE_FAMILIES = ["gemma3_text", "granite", "smollm3", "olmo", "olmo2", "starcoder2", "phi", "gpt2", "gpt_neox",
                 "falcon", "falcon_new", "qwen2_moe", "qwen3_moe", "deepseek_v2", "gpt_oss"]

_MOE = dict(num_experts=4, experts_per_token=2, expert_intermediate_size=16)
_SHAPES = {
    "phi": dict(num_kv_heads=4), "gpt2": dict(num_kv_heads=4), "gpt_neox": dict(num_kv_heads=4),
    "falcon": dict(num_kv_heads=1, parallel_norms=1), "falcon_new": dict(num_kv_heads=2, parallel_norms=2),
    "mixtral": dict(num_experts=4, experts_per_token=2),
    "gpt_oss": dict(num_experts=4, experts_per_token=2, attention_bias=True),
    "qwen2_moe": dict(_MOE, shared_expert_intermediate_size=40), "qwen3_moe": dict(_MOE),
    "deepseek_v2": dict(_MOE, num_layers=3, num_kv_heads=4, head_dim=12, qk_rope_head_dim=4, v_head_dim=8,
                        kv_lora_rank=16, shared_expert_intermediate_size=32, first_dense_layers=1),
}


def tiny(family: str, tied: bool) -> Architecture:
    base = dict(
        family=family, hidden_size=32, intermediate_size=48, num_layers=2, num_heads=4, num_kv_heads=2,
        head_dim=8, vocab_size=64, max_position_embeddings=128, tie_word_embeddings=tied, torch_dtype=None,
    )
    base.update(_SHAPES.get(family, {}))
    if family == "falcon_new":
        base["family"] = "falcon"
    return Architecture(**base)


def build(arch: Architecture):
    torch.manual_seed(0)
    return transformers.AutoModelForCausalLM.from_config(hf_config(arch))


_MLP = {"phi3": ["gate_up_proj", "down_proj"], "gpt2": ["c_fc", "c_proj"], "starcoder2": ["c_fc", "c_proj"],
        "phi": ["fc1", "fc2"], "gpt_neox": ["dense_h_to_4h", "dense_4h_to_h"],
        "falcon": ["dense_h_to_4h", "dense_4h_to_h"], "falcon_new": ["dense_h_to_4h", "dense_4h_to_h"],
        "gpt_oss": ["experts"]}


def mlp_targets(family):
    return _MLP.get(family, ["gate_proj", "up_proj", "down_proj"])


TARGET_SETS = {
    "q_v": lambda fam: ["q_proj", "v_proj"],
    "all_linear": lambda fam: "all-linear",
    "regex_attn_o": lambda fam: r".*\.(self_attn|attn|attention|self_attention)\.(q_proj|o_proj|qkv_proj|c_attn|query_key_value|dense)",
    "mlp_only": mlp_targets,
    "default": lambda fam: None,
}
SAVE_SETS = {"none": None, "lm_head": ["lm_head"], "embed_and_head": ["embed_tokens", "lm_head"]}

CASES = []
for fam in FAMILIES:
    for tied in (False, True):
        for tname in TARGET_SETS:
            for sname in SAVE_SETS:
                rank = 4 if (len(CASES) % 2) else 8
                CASES.append((fam, tied, tname, sname, rank))
for fam in MORE_FAMILIES:
    for tname in TARGET_SETS:
        for sname in ("none", "lm_head"):
            rank = 4 if (len(CASES) % 2) else 8
            CASES.append((fam, fam in ("gpt2", "smollm3"), tname, sname, rank))


def peft_count(arch, targets, rank, modules_to_save, use_dora=False, bias="none"):
    model = build(arch)
    cfg = peft.LoraConfig(
        r=rank, lora_alpha=2 * rank, target_modules=targets, modules_to_save=modules_to_save,
        use_dora=use_dora, bias=bias, task_type="CAUSAL_LM",
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pm = peft.get_peft_model(model, cfg)
    trainable, _all = pm.get_nb_trainable_parameters()
    return pm, trainable


@pytest.mark.parametrize("fam,tied,tname,sname,rank", CASES, ids=["-".join(map(str, c)) for c in CASES])
def test_lora_trainable_equals_peft(fam, tied, tname, sname, rank):
    # reference: PEFT get_peft_model(...).get_nb_trainable_parameters(), what print_trainable_parameters prints
    arch = tiny(fam, tied)
    targets = TARGET_SETS[tname](fam)
    mts = SAVE_SETS[sname]
    if fam == "gpt2" and mts:
        mts = [m.replace("embed_tokens", "wte") for m in mts]
    try:
        ours = lora_trainable_parameters(arch, rank=rank, targets=targets, modules_to_save=mts)
        wrapped = resolve_targets(arch, targets, mts)
        bad = unsupported_target_matches(arch, targets, mts)
    except NoDefaultTargets:
        with pytest.raises(ValueError):  # PEFT: no default target_modules for this model type
            peft_count(arch, targets, rank, mts)
        return
    if not wrapped or bad:
        with pytest.raises(ValueError):  # PEFT: "Target modules ... not found" / "... is not supported"
            peft_count(arch, targets, rank, mts)
        return
    pm, theirs = peft_count(arch, targets, rank, mts)
    assert ours == theirs
    lora_names = sorted(
        n[len("base_model.model."):]
        for n, m in pm.named_modules()
        if isinstance(m, peft.tuners.lora.LoraLayer) and not isinstance(m, peft.tuners.lora.ParamWrapper)
    )
    module_names = {row[0] for row in module_table(arch)}
    assert sorted(w for w in wrapped if w in module_names) == lora_names


@pytest.mark.parametrize("fam", ["llama", "qwen2", "phi3", "gemma"])
def test_dora_and_bias_counts_equal_peft(fam):
    # reference: PEFT LoraConfig(use_dora=True) adds lora_magnitude_vector; bias="all"/"lora_only" unfreezes biases
    arch = tiny(fam, tied=fam == "gemma")
    for kwargs in ({"use_dora": True}, {"bias": "all"}, {"bias": "lora_only"}):
        _pm, theirs = peft_count(arch, "all-linear", 4, None, **kwargs)
        assert lora_trainable_parameters(arch, rank=4, targets="all-linear", **kwargs) == theirs, kwargs


def test_llama_attention_and_mlp_bias_counts_equal_transformers_and_peft():
    # reference: transformers LlamaConfig(attention_bias=True) puts biases on q/k/v/o; counted by num_parameters()
    arch = Architecture(**{**tiny("llama", False).__dict__, "attention_bias": True, "mlp_bias": True})
    assert total_parameters(arch) == build(arch).num_parameters()
    _pm, theirs = peft_count(arch, ["q_proj", "down_proj"], 4, None, bias="lora_only")
    assert lora_trainable_parameters(arch, rank=4, targets=["q_proj", "down_proj"], bias="lora_only") == theirs


@pytest.mark.parametrize("rank,alpha", [(8, 16), (16, 8), (64, 16)])
@pytest.mark.parametrize("rslora", [False, True])
def test_scale_equals_peft_scaling(rank, alpha, rslora):
    # reference: PEFT lora/layer.py update_layer: alpha/sqrt(r) with use_rslora else alpha/r
    model = build(tiny("llama", False))
    cfg = peft.LoraConfig(r=rank, lora_alpha=alpha, use_rslora=rslora, target_modules=["q_proj"])
    pm = peft.get_peft_model(model, cfg)
    layer = pm.base_model.model.model.layers[0].self_attn.q_proj
    assert math.isclose(layer.scaling["default"], lora_scale(alpha, rank, rslora), rel_tol=1e-12)


@pytest.mark.parametrize(
    "targets",
    [["w1", "w2", "w3"], ["gate", "q_proj"], ["w1"], r".*\.(w1|w3)", r".*\.(q_proj|gate)", ["experts"]],
    ids=["w123", "router-q", "w1-alone", "regex-w13", "regex-q-router", "experts-module"],
)
def test_mixtral_layout_conversion_equals_peft(targets):
    # reference: PEFT 0.21 rewrites transformers-4 mixtral names for the fused transformers-5 experts
    arch = tiny("mixtral", False)
    try:
        ours = lora_trainable_parameters(arch, rank=4, targets=targets)
        ok = bool(resolve_targets(arch, targets)) and not unsupported_target_matches(arch, targets)
    except ValueError:
        ours, ok = None, False
    if not ok:
        with pytest.raises(ValueError):
            peft_count(arch, targets, 4, None)
        return
    _pm, theirs = peft_count(arch, targets, 4, None)
    assert ours == theirs


@pytest.mark.parametrize("mts", [["norm"], ["mlp"], ["embed_tokens"]])
def test_modules_to_save_suffix_semantics_equal_peft(mts):
    # reference: PEFT other._set_trainable matches modules_to_save with a plain key.endswith(name)
    arch = tiny("llama", False)
    _pm, theirs = peft_count(arch, ["q_proj", "down_proj"], 4, mts)
    assert lora_trainable_parameters(arch, rank=4, targets=["q_proj", "down_proj"], modules_to_save=mts) == theirs


def test_adapter_and_copy_dtypes_on_a_bf16_base():
    # reference: PEFT get_peft_model(autocast_adapter_dtype=True) upcasts LoRA weights to fp32, while the
    # ModulesToSaveWrapper copy keeps the base dtype; the memory estimate relies on both
    model = build(tiny("llama", False)).to(torch.bfloat16)
    pm = peft.get_peft_model(model, peft.LoraConfig(r=4, target_modules=["q_proj"], modules_to_save=["lm_head"]))
    trainable = {n: p.dtype for n, p in pm.named_parameters() if p.requires_grad}
    assert {d for n, d in trainable.items() if ".lora_" in n} == {torch.float32}
    assert {d for n, d in trainable.items() if ".modules_to_save." in n} == {torch.bfloat16}
    assert all(".lora_" in n or ".modules_to_save." in n for n in trainable)


# ---------------------------------------------------------------------------------------------
# Model-state bytes (weights, gradients, optimizer states) against tensors torch allocates: a tiny
# random model takes one optimizer step on CPU; we sum its parameters, their gradients and the
# optimizer's state tensors. Reference: torch 2.13 optimizers, transformers' Adafactor, PEFT.
# ---------------------------------------------------------------------------------------------

STATE_ARCH = Architecture(
    family="llama", hidden_size=64, intermediate_size=96, num_layers=2, num_heads=4, num_kv_heads=2, head_dim=16,
    vocab_size=128, max_position_embeddings=64, tie_word_embeddings=False, torch_dtype=None,
)


def make_optimizer(name, params, momentum):
    if name == "adamw_torch":
        return torch.optim.AdamW(params, lr=1e-3)
    if name == "sgd":
        return torch.optim.SGD(params, lr=1e-3, momentum=momentum)
    if name == "adafactor":
        return transformers.optimization.Adafactor(params, lr=1e-3, relative_step=False, scale_parameter=False)
    raise AssertionError(name)


def measured_states(model, opt_name, momentum=0.0):
    params = [p for p in model.parameters() if p.requires_grad]
    opt = make_optimizer(opt_name, params, momentum)
    ids = torch.randint(3, STATE_ARCH.vocab_size, (1, 8))
    model(input_ids=ids, labels=ids).loss.backward()
    opt.step()
    seen = {}
    for p in model.parameters():
        seen[p.untyped_storage().data_ptr()] = p.untyped_storage().nbytes()
    weights = sum(seen.values())
    grads = sum(p.grad.nbytes for p in params if p.grad is not None)
    states = sum(
        t.nbytes for s in opt.state.values() for t in s.values() if isinstance(t, torch.Tensor) and t.dim() > 0
    )
    return weights, grads, states


@pytest.mark.parametrize(
    "dtype,opt,momentum",
    [(torch.float32, "adamw_torch", 0.0), (torch.bfloat16, "adamw_torch", 0.0), (torch.float32, "sgd", 0.9),
     (torch.float32, "sgd", 0.0), (torch.float32, "adafactor", 0.0), (torch.bfloat16, "adafactor", 0.0)],
    ids=["fp32-adamw", "bf16-adamw", "sgd-momentum", "sgd-plain", "adafactor", "bf16-adafactor"],
)
def test_full_finetune_states_equal_torch(dtype, opt, momentum):
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(hf_config(STATE_ARCH)).to(dtype)
    w, g, s = measured_states(model, opt, momentum)
    storage = "fp32" if dtype == torch.float32 else "bf16"
    # no autocast: states and gradients in the weights' dtype (mixed_precision=None)
    est = estimate_memory(MemoryInputs(arch=STATE_ARCH, method="full", base_storage=storage, mixed_precision=None,
                                       optimizer=opt, sgd_momentum=momentum))
    assert (est.weights_bytes, est.gradients_bytes, est.optimizer_bytes, est.master_weights_bytes) == (w, g, s, 0)


@pytest.mark.parametrize("mts", [None, ["lm_head"]], ids=["adapters", "adapters+lm_head-copy"])
@pytest.mark.parametrize("opt", ["adamw_torch", "sgd"])
def test_lora_states_on_bf16_base_equal_torch(mts, opt):
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(hf_config(STATE_ARCH)).to(torch.bfloat16)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pm = peft.get_peft_model(model, peft.LoraConfig(r=4, target_modules="all-linear", modules_to_save=mts))
    w, g, s = measured_states(pm, opt, momentum=0.9)
    est = estimate_memory(MemoryInputs(arch=STATE_ARCH, method="lora", lora_rank=4, lora_targets="all-linear",
                                       modules_to_save=tuple(mts or ()), optimizer=opt, sgd_momentum=0.9))
    assert (est.weights_bytes, est.gradients_bytes, est.optimizer_bytes) == (w, g, s)


@pytest.mark.parametrize(
    "fam,targets",
    [("qwen2_moe", ["gate"]), ("qwen2_moe", ["shared_expert_gate", "q_proj"]), ("qwen2_moe", ["experts"]),
     ("qwen2_moe", ["gate_proj", "up_proj", "down_proj"]),
     ("qwen3_moe", ["gate"]), ("qwen3_moe", ["gate_proj"]), ("qwen3_moe", ["gate_proj", "up_proj"]),
     ("qwen3_moe", ["down_proj", "o_proj"]), ("qwen3_moe", r".*\.mlp\.(gate_proj|up_proj)"),
     ("deepseek_v2", ["gate_proj", "up_proj", "down_proj"]), ("deepseek_v2", ["gate", "kv_b_proj"]),
     ("deepseek_v2", "all-linear"), ("gpt_oss", ["router"]), ("gpt_oss", ["q_proj", "o_proj"]),
     ("gpt_oss", "all-linear")],
    ids=lambda v: v if isinstance(v, str) else "+".join(v),
)
def test_router_shared_and_expert_targets_equal_peft(fam, targets):
    # reference: PEFT 0.21 on transformers 5.24 MoE layouts: routers are not nn.Linear (unsupported as modules,
    # the router weight becomes a target parameter where PEFT rewrites the names), shared experts are plain
    # Linear layers, fused experts are 3-D parameters
    arch = tiny(fam, False)
    try:
        ours = lora_trainable_parameters(arch, rank=4, targets=targets)
        ok = bool(resolve_targets(arch, targets)) and not unsupported_target_matches(arch, targets)
    except ValueError:
        ours, ok = None, False
    if not ok:
        with pytest.raises(ValueError):
            peft_count(arch, targets, 4, None)
        return
    _pm, theirs = peft_count(arch, targets, 4, None)
    assert ours == theirs


def _one_entry_per_family():
    from cfgcheck.knowledge.models import catalogue_entries

    seen = {}
    for e in catalogue_entries():
        seen.setdefault(e.arch.family, e)
    return [(e.id, e.arch, targets) for e in seen.values()
            for targets in (["all-linear"] + ([None] if e.arch.family in PEFT_DEFAULT_TARGETS else []))]


FULL_SIZE = _one_entry_per_family()


@pytest.mark.parametrize("ref,arch,targets", FULL_SIZE, ids=[f"{r}-{t or 'default'}" for r, _a, t in FULL_SIZE])
def test_full_size_lora_counts_equal_peft_on_the_meta_device(ref, arch, targets):
    # reference: PEFT get_peft_model on the full-size model built on the meta device (no weights allocated),
    # one catalogue entry per family, with PEFT's default targets for the family and with "all-linear"
    try:
        ours = lora_trainable_parameters(arch, rank=16, targets=targets)
    except NoDefaultTargets:  # mixtral: PEFT's rewrite for transformers 5 leaves no default targets
        ours = None
    with torch.device("meta"):
        model = transformers.AutoModelForCausalLM.from_config(hf_config(arch))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if ours is None:
                with pytest.raises(ValueError):
                    peft.get_peft_model(model, peft.LoraConfig(r=16, lora_alpha=32, target_modules=targets))
                return
            pm = peft.get_peft_model(model, peft.LoraConfig(r=16, lora_alpha=32, target_modules=targets))
    theirs, _all = pm.get_nb_trainable_parameters()
    assert ours == theirs
