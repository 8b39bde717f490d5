"""Memory estimate: published formulas and check values, and the behaviour of the estimate (no torch)."""

from __future__ import annotations

from cfgcheck._records import replaced as replace  # the records are plain classes

import pytest

from cfgcheck.knowledge.memory import (
    DEFAULT_OVERHEAD_BYTES,
    MemoryInputs,
    NotEstimated,
    normalise_optimizer,
    changes_that_fit,
    estimate_memory,
    full_recompute_layer_bytes,
    korthikanti_layer_bytes,
    layer_activation_bytes,
    quantised_bits_per_param,
    zero_model_states_bytes,
)
from cfgcheck.knowledge.models import catalogue, lora_trainable_parameters, total_parameters

CAT = catalogue()
LLAMA7 = CAT["meta-llama/Llama-2-7b-hf"]
N7 = 6_738_415_616  # REFERENCES sec. 13, num_parameters()


def model_states(b):
    return b.weights_bytes + b.gradients_bytes + b.optimizer_bytes + b.master_weights_bytes


# ---------------------------------------------------------------------------------------------
# Published formulas
# ---------------------------------------------------------------------------------------------


def test_zero_mixed_precision_adam_16_bytes_per_param():
    # ZeRO paper sec. 3.1: 2 + 2 + 12 = 16 bytes/param; GPT-2 1.5B needs at least 24 GB
    assert zero_model_states_bytes(1.0, stage=0, num_gpus=1) == 16
    assert zero_model_states_bytes(1.5e9, stage=0, num_gpus=1) == pytest.approx(24e9)


@pytest.mark.parametrize(
    "stage,expected_gb",
    [(0, 120.0), (1, 31.4), (2, 16.6), (3, 1.9)],  # ZeRO paper Fig. 1, psi = 7.5B, N_d = 64, K = 12
)
def test_zero_fig1_per_stage(stage, expected_gb):
    got = zero_model_states_bytes(7.5e9, stage=stage, num_gpus=64)
    assert round(got / 1e9, 1) == expected_gb


def test_korthikanti_check_values():
    # REFERENCES sec. 7 [C] from Korthikanti et al. Eq. 1 and Table 2
    assert korthikanti_layer_bytes(s=2048, b=1, h=12288, a=96) == 2_868_903_936  # GPT-3 175B layer
    assert korthikanti_layer_bytes(s=4096, b=1, h=4096, a=32) == 3_254_779_904  # llama-style layer
    assert full_recompute_layer_bytes(s=4096, b=1, h=4096) == 33_554_432  # 2sbh, 32 MiB


def test_quantised_storage_bits():
    # QLoRA paper sec. 3: 0.5 bit/param block constants, 0.127 with double quantisation
    assert quantised_bits_per_param("nf4", double_quant=True) == pytest.approx(4.127, abs=1e-3)
    assert quantised_bits_per_param("nf4", double_quant=False) == pytest.approx(4.5)
    assert quantised_bits_per_param("nf4", True) - quantised_bits_per_param("nf4", False) == pytest.approx(-0.373, abs=1e-3)
    # REFERENCES sec. 3 [C]: a 65B model's NF4+DQ weights are about 33.5 GB
    assert 65e9 * quantised_bits_per_param("fp4", True) / 8 / 1e9 == pytest.approx(33.5, abs=0.05)


# ---------------------------------------------------------------------------------------------
# The estimate
# ---------------------------------------------------------------------------------------------


def test_7b_full_finetune_needs_more_than_100gb():
    # ZeRO sec. 3.1: 16 B/param x 6.74e9 params = 107.8 GB of model states alone, before activations
    est = estimate_memory(MemoryInputs(arch=LLAMA7, method="full", optimizer="adamw_torch", mixed_precision="bf16"))
    assert model_states(est) == 16 * N7
    assert est.total_bytes > 100e9
    assert est.total_bytes == sum(v for _, v in est.components())
    assert any("ZeRO paper sec. 3.1" in n for n in est.notes)


def test_fp32_full_finetune_is_also_16_bytes_per_param():
    # fp32 weights 4 + gradients 4 + Adam states 8 (ZeRO paper sec. 3.1, K counts 4 + 4 + 4 with the master copy)
    est = estimate_memory(MemoryInputs(arch=LLAMA7, method="full", base_storage="fp32", mixed_precision=None))
    assert model_states(est) == 16 * N7 and est.master_weights_bytes == 0


def test_lora_states_only_for_trainable_parameters():
    # REFERENCES sec. 6 [C]: 16 B/param only for trainable params; frozen bf16 weights cost 2 B/param
    inp = MemoryInputs(arch=LLAMA7, method="lora", lora_rank=8, lora_targets=["q_proj", "v_proj"])
    est = estimate_memory(inp)
    trainable = 4_194_304  # LoRA paper sec. 5.1: 2 x 64 x 4096 x 8
    assert est.trainable_parameters == trainable
    assert model_states(est) == 2 * N7 + 16 * trainable


def test_qlora_weights_nf4_double_quant():
    # QLoRA: NF4 + DQ at 4.127 bits for decoder linear weights; embeddings, lm_head and norms 16-bit
    a = LLAMA7
    emb_and_head = 2 * a.vocab_size * a.hidden_size
    norms = (2 * a.num_layers + 1) * a.hidden_size
    quantised = N7 - emb_and_head - norms
    inp = MemoryInputs(arch=a, method="qlora", base_storage="nf4", double_quant=True, lora_rank=64,
                       lora_targets="all-linear")
    est = estimate_memory(inp)
    trainable = lora_trainable_parameters(a, rank=64, targets="all-linear")
    expected = quantised * (4 + 8 / 64 + 32 / (64 * 256)) / 8 + (emb_and_head + norms) * 2 + trainable * 4
    assert est.weights_bytes == pytest.approx(expected, abs=1)
    # QLoRA paper: 7B base in 4-bit fits easily on one 24 GB card with checkpointing at 512 tokens
    small = estimate_memory(replace(inp, gradient_checkpointing=True, seq_len=512, optimizer="paged_adamw_32bit"))
    assert small.total_bytes < 24e9


@pytest.mark.parametrize(
    "sharding,stage", [("zero1", 1), ("zero2", 2), ("zero3", 3), ("fsdp_full", 3), ("fsdp_grad_op", 2)]
)
def test_sharding_reproduces_zero_formulas(sharding, stage):
    # ZeRO paper Fig. 1 formulas, K = 12; FSDP full shard ~ ZeRO-3, shard-grad-op ~ ZeRO-2 (from memory)
    est = estimate_memory(MemoryInputs(arch=LLAMA7, method="full", num_gpus=8, sharding=sharding))
    assert model_states(est) == pytest.approx(zero_model_states_bytes(N7, stage=stage, num_gpus=8), abs=4)


def test_sharding_on_one_gpu_changes_nothing():
    one = estimate_memory(MemoryInputs(arch=LLAMA7, method="full", sharding="zero3"))
    plain = estimate_memory(MemoryInputs(arch=LLAMA7, method="full"))
    assert one.total_bytes == plain.total_bytes
    assert any("partitions nothing" in n for n in one.notes)


def test_checkpointing_keeps_the_layer_input_per_layer_plus_one_layer():
    # Korthikanti et al. Table 2: full recompute keeps 2sbh per layer (16-bit residual stream)
    inp = MemoryInputs(arch=LLAMA7, method="full", micro_batch=2, seq_len=1024, gradient_checkpointing=True)
    est = estimate_memory(inp)
    s, b, h = 1024, 2, 4096
    sbh = s * b * h
    assert est.recomputed_layer_bytes == layer_activation_bytes(LLAMA7, micro_batch=2, seq_len=1024)
    # kept: 2sbh per layer, the int64 position ids (8s), then the final norm (fp32 input 4sbh + rsqrt
    # 4sb, normalised 2sbh), the lm_head input 2sbh, rotary cos/sin 2*s*head_dim*2, token ids 2 x 8sb
    final = 4 * sbh + 4 * s * b + 2 * sbh + 2 * sbh + 2 * s * 128 * 2 + 16 * s * b
    assert est.activations_bytes == 32 * 2 * sbh + 8 * s + est.recomputed_layer_bytes + final
    no_ckpt = estimate_memory(replace(inp, gradient_checkpointing=False))
    assert no_ckpt.activations_bytes > 10 * est.activations_bytes and no_ckpt.recomputed_layer_bytes == 0


def test_checkpointing_with_fp32_weights_keeps_4sbh_per_layer():
    # fp32 weights under bf16 autocast keep an fp32 residual stream, so the kept layer input is 4sbh
    # (measured with saved-tensor hooks, torch 2.13 on CPU, tests/reference/test_memory_measured.py)
    base = MemoryInputs(arch=LLAMA7, method="full", base_storage="fp32", mixed_precision="bf16", micro_batch=1,
                        seq_len=2048, gradient_checkpointing=True)
    b16 = replace(base, base_storage="bf16", mixed_precision=None)
    kept = lambda e: e.activations_bytes - e.recomputed_layer_bytes  # noqa: E731
    sbh = 2048 * 4096
    # 32 layers x 2sbh more with fp32 weights, plus the final norm's output (4 vs 2), rotary (4 vs 2)
    assert kept(estimate_memory(base)) - kept(estimate_memory(b16)) == 32 * 2 * sbh + 2 * sbh + 2 * 2048 * 128 * 2


def test_autocast_over_fp32_weights_counts_the_16bit_weight_copies():
    # torch.autocast's bf16 copy of every matmul weight is saved for backward: 2 B per decoder linear
    # and lm_head parameter (embeddings and norms are not cast; measured, torch 2.13 on CPU)
    a = LLAMA7
    linear = N7 - a.vocab_size * a.hidden_size - (2 * a.num_layers + 1) * a.hidden_size
    est = estimate_memory(MemoryInputs(arch=a, method="full", base_storage="fp32", mixed_precision="bf16"))
    assert est.weight_copies_bytes == 2 * linear
    assert est.total_bytes == sum(v for _, v in est.components())
    # with checkpointing only lm_head's copy is alive at the end of forward (it runs outside the checkpoints)
    ck = estimate_memory(MemoryInputs(arch=a, method="full", base_storage="fp32", mixed_precision="bf16",
                                      gradient_checkpointing=True))
    assert ck.weight_copies_bytes == 2 * a.vocab_size * a.hidden_size
    # 16-bit weights have nothing to cast
    assert estimate_memory(MemoryInputs(arch=a, method="full", base_storage="bf16", mixed_precision=None,
                                        autocast=True)).weight_copies_bytes == 0


def test_lora_adapter_inputs_are_16bit_under_autocast():
    # PEFT casts a layer's input to the fp32 adapter dtype, and autocast recasts it to bf16 for lora_A:
    # 2 bytes per adapter input under autocast, 4 without (measured, torch 2.13 on CPU)
    inp = MemoryInputs(arch=LLAMA7, method="lora", base_storage="bf16", mixed_precision=None,
                       lora_targets=["q_proj"], lora_rank=8, seq_len=1024)
    off = estimate_memory(replace(inp, autocast=False))
    on = estimate_memory(replace(inp, autocast=True))
    per_layer_input = 1024 * (4096 + 8)  # q_proj input width h plus the rank-wide lora_A output
    assert off.activations_bytes - on.activations_bytes == 32 * 2 * per_layer_input
    assert on.weight_copies_bytes == 2 * (on.trainable_parameters - 8 * 4096)  # less layer 0's lora_A


def test_eager_attention_adds_the_score_matrices():
    # Korthikanti et al. Eq. 1: the 5as/h term is the s x s attention scores; fused kernels avoid it
    fused = layer_activation_bytes(LLAMA7, micro_batch=1, seq_len=4096, fused_attention=True)
    eager = layer_activation_bytes(LLAMA7, micro_batch=1, seq_len=4096, fused_attention=False)
    assert eager - fused >= 5 * 32 * 4096 * 4096  # at least Korthikanti's 5as^2b
    # our llama layer without the score term stays near Korthikanti's 34sbh (gated MLP, fp32 norms)
    assert 30 < fused / (4096 * 4096) < 50


def test_optimizer_variants():
    base = MemoryInputs(arch=LLAMA7, method="full")
    adam = estimate_memory(base).optimizer_bytes
    assert adam == 8 * N7  # two fp32 states (ZeRO paper sec. 3.1)
    eight = estimate_memory(replace(base, optimizer="adamw_bnb_8bit")).optimizer_bytes
    assert eight == pytest.approx(2 * N7, rel=0.01)  # two 1-byte states (bitsandbytes, from memory)
    assert estimate_memory(replace(base, optimizer="sgd")).optimizer_bytes == 0
    assert estimate_memory(replace(base, optimizer="sgd", sgd_momentum=0.9)).optimizer_bytes == 4 * N7
    assert estimate_memory(replace(base, optimizer="adafactor")).optimizer_bytes < 0.01 * adam


def test_logits_count_the_transient_peak_of_vocabulary_wide_tensors():
    # at the start of backward: the logits (2 B in bf16), the saved fp32 log-softmax, the fp32 gradient
    # from the loss and the fp32 log-softmax gradient = 14 B per token and vocabulary entry; 16 in fp32
    # (measured peak of b*s*V tensors, torch 2.13 on CPU); cross_entropy alone saves only 4
    a = LLAMA7
    b16 = estimate_memory(MemoryInputs(arch=a, method="lora", micro_batch=2, seq_len=512))
    assert b16.logits_bytes == 2 * 512 * a.vocab_size * 14
    f32 = estimate_memory(MemoryInputs(arch=a, method="full", base_storage="fp32", mixed_precision=None, seq_len=512))
    assert f32.logits_bytes == 512 * a.vocab_size * 16
    assert any("transient peak" in n for n in b16.notes)


def test_logits_dominate_for_large_vocabularies():
    # REFERENCES sec. 7 caveat (common practice): b*s*V logits are often the peak for large vocabularies
    a = CAT["meta-llama/Meta-Llama-3-8B"]
    est = estimate_memory(MemoryInputs(arch=a, method="lora", seq_len=8192, gradient_checkpointing=True))
    assert est.logits_bytes > est.activations_bytes
    assert est.logits_bytes >= 8 * 8192 * 128256  # at least b*s*V in fp32 plus one fp32 copy


def test_invalid_inputs_are_rejected_with_a_reason():
    with pytest.raises(ValueError, match="cannot train nf4"):
        estimate_memory(MemoryInputs(arch=LLAMA7, method="full", base_storage="nf4"))
    with pytest.raises(ValueError, match="micro_batch"):
        estimate_memory(MemoryInputs(arch=LLAMA7, method="full", micro_batch=0))
    with pytest.raises(ValueError, match="sharding"):
        estimate_memory(MemoryInputs(arch=LLAMA7, method="full", sharding="zero4"))


def test_phi3_without_targets_falls_back_with_a_note():
    a = CAT["microsoft/Phi-3-mini-4k-instruct"]
    est = estimate_memory(MemoryInputs(arch=a, method="lora"))
    assert any("no default" in n for n in est.notes) and est.trainable_parameters > 0


def test_overhead_is_the_documented_constant():
    # common practice, no source: 1 GiB for CUDA context and workspaces
    assert DEFAULT_OVERHEAD_BYTES == 2**30
    assert estimate_memory(MemoryInputs(arch=LLAMA7, method="lora")).overhead_bytes == 2**30


# ---------------------------------------------------------------------------------------------
# Changes that fit
# ---------------------------------------------------------------------------------------------

GB80 = 80 * 10**9  # A100/H100 80 GB (REFERENCES sec. 8)


def test_changes_that_fit_for_7b_full_finetune_on_80gb():
    inp = MemoryInputs(arch=LLAMA7, method="full", micro_batch=4, seq_len=2048)
    assert estimate_memory(inp).total_bytes > GB80
    fits = changes_that_fit(inp, GB80)
    assert fits, "adapters or a 4-bit base must fit a 7B model in 80 GB"
    for label, new, est in fits:
        assert est.total_bytes <= GB80 and est == estimate_memory(new) and label
    assert [new.method for _l, new, _e in fits] == ["lora", "qlora"]


def test_combinations_only_when_no_single_change_fits():
    # a QLoRA run whose activations are the problem: only checkpointing together with a smaller
    # micro-batch reaches the capacity chosen here
    inp = MemoryInputs(arch=LLAMA7, method="qlora", base_storage="nf4", double_quant=True, micro_batch=8,
                       seq_len=4096, lora_targets="all-linear", lora_rank=16)
    cap = estimate_memory(replace(inp, gradient_checkpointing=True, micro_batch=4)).total_bytes
    for change in ({"gradient_checkpointing": True}, {"micro_batch": 4}, {"optimizer": "adamw_8bit"}):
        assert estimate_memory(replace(inp, **change)).total_bytes > cap, change
    fits = changes_that_fit(inp, cap)
    assert fits and all(";" in label for label, _n, _e in fits)
    label, new, est = fits[0]
    assert "checkpointing" in label and "8 -> 4" in label
    assert new.gradient_checkpointing and new.micro_batch == 4 and est.total_bytes <= cap


def test_halving_micro_batch_says_to_double_accumulation():
    inp = MemoryInputs(arch=CAT["Qwen/Qwen2.5-0.5B"], method="full", micro_batch=16, seq_len=4096)
    cap = estimate_memory(replace(inp, micro_batch=8)).total_bytes
    fits = changes_that_fit(inp, cap)
    labels = [label for label, _n, _e in fits]
    assert any("16 -> 8" in label and "gradient accumulation" in label for label in labels)


def test_nothing_fits_gives_empty_list():
    inp = MemoryInputs(arch=CAT["mistralai/Mixtral-8x7B-v0.1"], method="full")
    assert changes_that_fit(inp, 10**9) == []


def test_total_parameters_used_in_estimate():
    est = estimate_memory(MemoryInputs(arch=LLAMA7, method="full"))
    assert est.total_parameters == total_parameters(LLAMA7) == N7


def test_modules_to_save_copies_train_in_base_dtype():
    # PEFT keeps the trainable copy in the base dtype (bf16; checked in tests/reference), so each copied
    # parameter costs 2 B weight + 2 B gradient + 2 x 2 B AdamW states, plus the frozen original's 2 B
    a = CAT["meta-llama/Meta-Llama-3-8B"]
    inp = MemoryInputs(arch=a, method="lora", lora_targets="all-linear", lora_rank=16)
    plain = estimate_memory(inp)
    saved = estimate_memory(replace(inp, modules_to_save=("lm_head",)))
    copy = a.vocab_size * a.hidden_size  # 525,336,576 parameters
    assert saved.trainable_parameters - plain.trainable_parameters == copy
    assert saved.weights_bytes - plain.weights_bytes == 2 * copy
    assert saved.gradients_bytes - plain.gradients_bytes == 2 * copy
    assert saved.optimizer_bytes - plain.optimizer_bytes == 4 * copy


def test_optimizer_offload_leaves_weights_and_gradients_on_the_gpu():
    # DeepSpeed ZeRO-Offload keeps optimizer states and the fp32 master copy in CPU memory (from memory)
    inp = MemoryInputs(arch=LLAMA7, method="full", num_gpus=2, sharding="zero2")
    on_gpu = estimate_memory(inp)
    off = estimate_memory(replace(inp, offload_optimizer=True))
    assert off.optimizer_bytes == off.master_weights_bytes == 0
    assert (off.weights_bytes, off.gradients_bytes) == (on_gpu.weights_bytes, on_gpu.gradients_bytes)


# ---------------------------------------------------------------------------------------------
# Precision x sharding against the ZeRO paper's per-stage formula
# ---------------------------------------------------------------------------------------------

# A llama-shaped stand-in with 7,500,115,968 parameters (within 0.002 % of the paper's 7.5B):
# 36 layers of h = 4096, I = 11008 and untied embeddings of V = 26,161 (invented shapes)
from cfgcheck.knowledge.models import Architecture  # noqa: E402

ARCH_7B5 = Architecture(family="llama", hidden_size=4096, intermediate_size=11008, num_layers=36, num_heads=32,
                        num_kv_heads=32, head_dim=128, vocab_size=26161, max_position_embeddings=4096,
                        tie_word_embeddings=False, torch_dtype="bfloat16")
PSI = total_parameters(ARCH_7B5)


def test_stand_in_has_the_papers_parameter_count():
    assert abs(PSI - 7.5e9) < 1e6


@pytest.mark.parametrize("stage,expected_gb", [(0, 120.0), (1, 31.4), (2, 16.6), (3, 1.9)])
@pytest.mark.parametrize("loaded", ["bf16", "fp32"])
def test_deepspeed_bf16_reproduces_the_papers_7b5_on_64_gpus(stage, expected_gb, loaded):
    # ZeRO paper Fig. 1 (psi = 7.5B, N_d = 64, K = 12): 120 / 31.4 / 16.6 / 1.9 GB for stages 0-3.
    # DeepSpeed's bf16 engine casts the module to 16-bit whatever it was loaded in and keeps fp32
    # master weights and states: stage 0 is 16 bytes/param, not the 8 of pure bf16.
    est = estimate_memory(MemoryInputs(arch=ARCH_7B5, method="full", base_storage=loaded, mixed_precision="bf16",
                                       num_gpus=64, sharding=f"zero{stage}"))
    assert round(model_states(est) / 1e9, 1) == expected_gb
    assert model_states(est) == pytest.approx(zero_model_states_bytes(PSI, stage=stage, num_gpus=64), abs=8)


# bytes per parameter (weights, gradients, optimizer states incl. any fp32 master copy) of each
# precision recipe with AdamW: fp32 (4, 4, 8); fp32 weights under autocast (4, 4, 8: the fp32 weights
# are the master copy); pure bf16 (2, 2, 4: torch keeps states in the parameters' dtype); DeepSpeed bf16
# (2, 2, 12: ZeRO paper sec. 3.1)
RECIPES = {
    "fp32": (dict(base_storage="fp32", mixed_precision=None, autocast=False), (4, 4, 8)),
    "fp32+autocast": (dict(base_storage="fp32", mixed_precision=None, autocast=True), (4, 4, 8)),
    "pure-bf16": (dict(base_storage="bf16", mixed_precision=None, autocast=True), (2, 2, 4)),
    "deepspeed-bf16": (dict(base_storage="bf16", mixed_precision="bf16"), (2, 2, 12)),
}
# which of (weights, gradients, optimizer) each scheme divides by N_d (ZeRO paper Fig. 1; FSDP full
# shard like stage 3, shard-grad-op like stage 2, from memory)
SCHEMES = {"none": (0, 0, 0), "zero0": (0, 0, 0), "zero1": (0, 0, 1), "zero2": (0, 1, 1), "zero3": (1, 1, 1),
           "fsdp_grad_op": (0, 1, 1), "fsdp_full": (1, 1, 1)}


# DeepSpeed schemes run DeepSpeed's precision recipe; the others run the trainer's
COMBOS = [(r, sc) for r in RECIPES for sc in SCHEMES if sc.startswith("zero") == (r == "deepspeed-bf16")]


@pytest.mark.parametrize("recipe,scheme", COMBOS)
def test_every_precision_and_sharding_follows_the_per_stage_formula(recipe, scheme):
    fields, (w, g, k) = RECIPES[recipe]
    n = 8
    est = estimate_memory(MemoryInputs(arch=ARCH_7B5, method="full", num_gpus=n, sharding=scheme, **fields))
    dw, dg, dk = SCHEMES[scheme]
    expected = PSI * (w / (n if dw else 1) + g / (n if dg else 1) + k / (n if dk else 1))
    assert model_states(est) == pytest.approx(expected, abs=16)


def test_zero3_hint_is_estimated_like_a_zero3_config():
    # 7.5B full fine-tune in bf16 on 2 x 40 GB: sharded with ZeRO-3 the run keeps fp32 master weights
    # and states, (2 + 2 + 12) x 7.5e9 / 2 = 60 GB of model states per GPU (ZeRO paper): no hint may
    # offer ZeRO-3 as fitting with the pure-bf16 8 bytes/param halved (30 GB)
    inp = MemoryInputs(arch=ARCH_7B5, method="full", base_storage="bf16", mixed_precision=None, autocast=True,
                       num_gpus=2, seq_len=1024, gradient_checkpointing=True)
    as_zero3 = estimate_memory(replace(inp, sharding="zero3", mixed_precision="bf16"))
    assert model_states(as_zero3) == pytest.approx(16 * PSI / 2, abs=16)
    fits = changes_that_fit(inp, 40 * 10**9)
    for label, new, est in fits:
        assert est == estimate_memory(new) and est.total_bytes <= 40e9
        if "ZeRO-3" in label:
            assert new.mixed_precision == "bf16" and model_states(est) <= model_states(as_zero3)
    # on 8 GPUs the ZeRO-3 hint is offered, with the figure of the ZeRO-3 config itself
    inp8 = replace(inp, num_gpus=8)
    (label, new, est), *_ = [f for f in changes_that_fit(inp8, 40 * 10**9) if "ZeRO-3" in f[0]]
    assert est == estimate_memory(replace(inp8, sharding="zero3", mixed_precision="bf16"))
    assert model_states(est) == pytest.approx(16 * PSI / 8, abs=16)


# ---------------------------------------------------------------------------------------------
# Optimizers the estimate does not model
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["galore_adamw", "galore_adamw_8bit_layerwise", "apollo_adamw", "lomo", "adalomo",
                                  "schedule_free_adamw", "adamw_torch_4bit", "some_new_optimizer"])
def test_unmodelled_optimizers_are_not_estimated(name):
    # transformers OptimizerNames: low-rank projected states, updates fused into backward, other state
    # layouts; AdamW's two states per parameter would be a made-up figure
    with pytest.raises(NotEstimated, match="not modelled"):
        estimate_memory(MemoryInputs(arch=LLAMA7, method="full", optimizer=name))


def test_optimizer_class_paths_map_onto_the_modelled_names():
    # torch.optim / bitsandbytes.optim class names (from memory) as recipe runners write them
    assert normalise_optimizer("torch.optim.AdamW") == "adamw_torch"
    assert normalise_optimizer("bitsandbytes.optim.PagedAdamW8bit") == "paged_adamw_8bit"
    assert normalise_optimizer("AdamW8bit") == "adamw_8bit"
    base = MemoryInputs(arch=LLAMA7, method="full")
    assert estimate_memory(replace(base, optimizer="bitsandbytes.optim.PagedAdamW8bit")).optimizer_bytes == \
        estimate_memory(replace(base, optimizer="paged_adamw_8bit")).optimizer_bytes


def test_lora_under_deepspeed_keeps_16bit_adapters_with_fp32_masters():
    # DeepSpeed's bf16 engine casts the adapters with the module and keeps an fp32 master copy and fp32
    # Adam states for what trains: 2 + 2 + 4 + 8 = 16 bytes per adapter parameter (ZeRO paper sec. 3.1),
    # the same 16 as PEFT's fp32 adapters outside DeepSpeed (4 + 4 + 8), split differently
    inp = MemoryInputs(arch=LLAMA7, method="lora", lora_targets=["q_proj", "v_proj"], lora_rank=8,
                       base_storage="bf16", mixed_precision="bf16", num_gpus=1, sharding="zero0")
    ds = estimate_memory(inp)
    plain = estimate_memory(replace(inp, sharding="none"))
    t = 4_194_304  # LoRA paper sec. 5.1: 2 x 64 x 4096 x 8
    assert ds.master_weights_bytes == 4 * t and ds.gradients_bytes == 2 * t
    assert model_states(ds) == model_states(plain) == 2 * N7 + 16 * t


def test_estimates_are_kept_for_the_latest_inputs_only(monkeypatch):
    from cfgcheck import plan

    monkeypatch.setattr(plan, "_ESTIMATE_CACHE", {})
    monkeypatch.setattr(plan, "ESTIMATES_KEPT", 3)
    inputs = [MemoryInputs(arch=LLAMA7, method="lora", lora_rank=r, lora_targets=["q_proj", "v_proj"])
              for r in (4, 8, 16, 32)]
    first = plan._estimate(inputs[0])
    assert plan._estimate(inputs[0]) is first  # the same inputs: the kept answer
    assert first == estimate_memory(inputs[0])
    for inp in inputs[1:]:
        plan._estimate(inp)
    assert len(plan._ESTIMATE_CACHE) == 3  # at most ESTIMATES_KEPT, the oldest let go
    assert plan._estimate(inputs[0]) is not first and plan._estimate(inputs[0]) == first
    assert plan._estimate(inputs[3]) is plan._estimate(inputs[3])
