"""Against transformers itself: total_parameters and the module tree (models on the meta device), and
per-layer activation bytes (tiny bf16 models on CPU)."""

import warnings

import pytest
import torch
import transformers

from cfgcheck.knowledge.memory import layer_activation_bytes
from cfgcheck.knowledge.models import Architecture, catalogue, module_table, total_parameters

from .conftest import hf_config

# One representative per distinct shape in the bundled catalogue.
_DISTINCT = {}
for _ref, _arch in catalogue().items():
    _DISTINCT.setdefault(_arch, _ref)
CASES = sorted(((ref, arch) for arch, ref in _DISTINCT.items()), key=lambda x: x[0])


def _meta_model(arch):
    with torch.device("meta"):
        return transformers.AutoModelForCausalLM.from_config(hf_config(arch))


@pytest.mark.parametrize("ref,arch", CASES, ids=[c[0] for c in CASES])
def test_total_equals_transformers_num_parameters(ref, arch):
    # reference: transformers' PreTrainedModel.num_parameters() on a model built from the same shapes
    model = _meta_model(arch)
    assert total_parameters(arch) == model.num_parameters()


@pytest.mark.parametrize("ref,arch", CASES, ids=[c[0] for c in CASES])
def test_module_tree_matches_named_modules(ref, arch):
    # reference: transformers' named_modules() names and parameter shapes; PEFT matches targets on these names
    from cfgcheck._records import replaced

    small = replaced(arch, num_layers=2)
    model = _meta_model(small)
    theirs = [(n, {p: tuple(t.shape) for p, t in m.named_parameters(recurse=False)}) for n, m in model.named_modules() if n]
    ours = [(n, {p: tuple(s) for p, s in params.items()}) for n, _kind, params in module_table(small)]
    assert ours == theirs


# ---------------------------------------------------------------------------------------------
# Per-layer activation bytes against the tensors torch saves for backward. Our per-layer
# coefficients are our own derivation; this checks them on tiny bf16 transformers models by
# walking the autograd graph of one decoder layer and summing the distinct storages it keeps
# (parameters excluded). Reference: torch 2.13 autograd saved tensors, transformers 5.x layers.
# ---------------------------------------------------------------------------------------------


def tiny_act(family):
    return Architecture(
        family=family, hidden_size=128, intermediate_size=192, num_layers=1, num_heads=4, num_kv_heads=2,
        head_dim=32, vocab_size=96, max_position_embeddings=256, tie_word_embeddings=False, torch_dtype=None,
        num_experts=4 if family == "mixtral" else 0, experts_per_token=2 if family == "mixtral" else 0,
    )


def saved_bytes(model, layer, hidden):
    seq = hidden.shape[1]
    pos = torch.arange(seq)[None]
    pe = model.model.rotary_emb(hidden, pos)
    out = layer(hidden, position_embeddings=pe, attention_mask=None, position_ids=pos)
    out = out[0] if isinstance(out, tuple) else out
    skip = {p.untyped_storage().data_ptr() for p in model.parameters()}
    skip |= {t.untyped_storage().data_ptr() for t in pe}  # rotary tables are shared by all layers
    seen, stack, visited = {}, [out.grad_fn], set()
    while stack:
        fn = stack.pop()
        if fn is None or fn in visited:
            continue
        visited.add(fn)
        for attr in dir(fn):
            if not attr.startswith("_saved_"):
                continue
            try:
                t = getattr(fn, attr)
            except Exception:
                continue
            if isinstance(t, torch.Tensor) and t.dim() > 0:
                st = t.untyped_storage()
                if st.data_ptr() not in skip:
                    seen[st.data_ptr()] = st.nbytes()
        stack.extend(nf for nf, _ in fn.next_functions)
    return sum(seen.values())


@pytest.mark.parametrize("fused", [True, False], ids=["sdpa", "eager"])
@pytest.mark.parametrize("family", ["llama", "qwen2", "qwen3", "gemma2", "phi3", "mixtral"])
def test_full_finetune_layer_bytes_match_torch(family, fused):
    if family == "gemma2" and fused:
        pytest.skip("transformers 5 has no sdpa path for gemma2 (soft-capping); flash-attn needs a GPU")
    arch = tiny_act(family)
    cfg = hf_config(arch, attn_implementation="sdpa" if fused else "eager")
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(cfg).to(torch.bfloat16)
    model.train()
    b, s = 2, 48
    hidden = torch.randn(b, s, arch.hidden_size, dtype=torch.bfloat16, requires_grad=True)
    theirs = saved_bytes(model, model.model.layers[0], hidden)
    ours = layer_activation_bytes(arch, micro_batch=b, seq_len=s, fused_attention=fused, act_bytes=2)
    assert ours == pytest.approx(theirs, rel=0.01)


@pytest.mark.parametrize("autocast", [False, True], ids=["no-autocast", "bf16-autocast"])
@pytest.mark.parametrize("targets", [["q_proj", "v_proj"], "all-linear", ["down_proj"]], ids=["q_v", "all", "down"])
@pytest.mark.parametrize("family", ["llama", "gemma"])
def test_frozen_base_layer_bytes_match_torch(family, targets, autocast):
    import peft

    from cfgcheck.knowledge.models import target_leaf_names

    arch = tiny_act(family)
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(hf_config(arch, attn_implementation="sdpa"))
    model = model.to(torch.bfloat16)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pm = peft.get_peft_model(model, peft.LoraConfig(r=4, target_modules=targets))
    pm.train()
    b, s = 2, 48
    hidden = torch.randn(b, s, arch.hidden_size, dtype=torch.bfloat16, requires_grad=True)
    inner = pm.base_model.model
    with torch.autocast("cpu", dtype=torch.bfloat16, enabled=autocast):
        theirs = saved_bytes(inner, inner.model.layers[0], hidden)
    # PEFT casts the input to the fp32 adapter weights; under autocast the matmul recasts it to bf16
    ours = layer_activation_bytes(
        arch, micro_batch=b, seq_len=s, fused_attention=True, act_bytes=2, frozen=True,
        lora_leaves=frozenset(target_leaf_names(arch, targets)), lora_rank=4, adapter_act_bytes=2 if autocast else 4,
    )
    assert ours == pytest.approx(theirs, rel=0.04 if autocast else 0.01)


@pytest.mark.parametrize("ref,arch", CASES, ids=[c[0] for c in CASES])
def test_config_json_round_trip(ref, arch):
    # reference: the config.json transformers writes for these shapes (PretrainedConfig.to_dict) reads back to the
    # same Architecture, whatever the family's key names (GPT-2 n_embd/n_layer, Falcon num_kv_heads and
    # new_decoder_architecture, Qwen-MoE num_experts, DeepSeek n_routed_experts and latent-attention ranks)
    from cfgcheck._records import replaced
    from cfgcheck.knowledge.models import architecture_from_config

    data = hf_config(arch).to_dict()
    data["dtype"] = arch.torch_dtype  # transformers 5 writes the stored dtype as "dtype"
    back = architecture_from_config(data, "round trip")
    assert back is not None
    want = replaced(arch, source="round trip")
    assert replaced(back, sliding_window=want.sliding_window) == want
    assert total_parameters(back) == total_parameters(arch)
