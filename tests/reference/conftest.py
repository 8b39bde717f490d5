"""Reference tests compare our arithmetic with torch, transformers and PEFT themselves.

They need the optional `reference` extras (torch==2.13.0, transformers, peft); without them the
whole folder is skipped with the reason below.
"""

import pytest

torch = pytest.importorskip("torch", reason="reference tests need torch (pip install '.[reference]')")
transformers = pytest.importorskip(
    "transformers", reason="reference tests need transformers (pip install '.[reference]')"
)
peft = pytest.importorskip("peft", reason="reference tests need peft (pip install '.[reference]')")

from cfgcheck.knowledge.models import Architecture


def hf_config(arch: Architecture, **overrides):
    """A transformers config built from our Architecture values (no download), in each family's key names."""
    fam = arch.family
    kwargs = dict(
        hidden_size=arch.hidden_size,
        intermediate_size=arch.intermediate_size,
        num_hidden_layers=arch.num_layers,
        num_attention_heads=arch.num_heads,
        num_key_value_heads=arch.num_kv_heads,
        head_dim=arch.head_dim,
        vocab_size=arch.vocab_size,
        tie_word_embeddings=arch.tie_word_embeddings,
        pad_token_id=0,
        bos_token_id=1,
        eos_token_id=2,
    )
    if arch.max_position_embeddings:
        kwargs["max_position_embeddings"] = arch.max_position_embeddings
    if fam in ("mixtral", "gpt_oss"):
        kwargs["num_local_experts"] = arch.num_experts
        kwargs["num_experts_per_tok"] = arch.experts_per_token
    if fam in ("qwen2_moe", "qwen3_moe"):
        kwargs.update(num_experts=arch.num_experts, num_experts_per_tok=arch.experts_per_token,
                      moe_intermediate_size=arch.expert_intermediate_size)
        if fam == "qwen2_moe":
            kwargs["shared_expert_intermediate_size"] = arch.shared_expert_intermediate_size
    if fam == "gpt_oss":
        kwargs["layer_types"] = ["sliding_attention" if i % 2 == 0 else "full_attention" for i in range(arch.num_layers)]
    if fam == "deepseek_v2":
        per = arch.expert_intermediate_size
        kwargs.update(
            n_routed_experts=arch.num_experts, num_experts_per_tok=arch.experts_per_token, moe_intermediate_size=per,
            n_shared_experts=arch.shared_expert_intermediate_size // per if per else 0,
            first_k_dense_replace=arch.first_dense_layers, kv_lora_rank=arch.kv_lora_rank,
            q_lora_rank=arch.q_lora_rank or None, qk_rope_head_dim=arch.qk_rope_head_dim,
            qk_nope_head_dim=arch.head_dim - arch.qk_rope_head_dim, v_head_dim=arch.v_head_dim,
            head_dim=arch.qk_rope_head_dim, n_group=1, topk_group=1,
        )
    if fam == "gpt2":
        kwargs = dict(n_embd=arch.hidden_size, n_layer=arch.num_layers, n_head=arch.num_heads,
                      n_inner=arch.intermediate_size, vocab_size=arch.vocab_size,
                      n_positions=arch.max_position_embeddings or 1024, tie_word_embeddings=arch.tie_word_embeddings,
                      bos_token_id=1, eos_token_id=2)
    if fam == "falcon":
        for key in ("num_key_value_heads", "intermediate_size", "head_dim"):  # FalconConfig: head_dim is derived
            kwargs.pop(key)
        kwargs.update(ffn_hidden_size=arch.intermediate_size, bias=arch.attention_bias, parallel_attn=True)
        if arch.parallel_norms == 2 or arch.num_kv_heads not in (1, arch.num_heads):
            kwargs.update(new_decoder_architecture=True, num_kv_heads=arch.num_kv_heads,
                          num_ln_in_parallel_attn=arch.parallel_norms)
        else:
            kwargs.update(new_decoder_architecture=False, multi_query=arch.num_kv_heads == 1)
    if arch.attention_bias and fam not in ("falcon", "gpt2"):
        kwargs["attention_bias"] = True
    if fam == "gpt_neox":
        kwargs["attention_bias"] = True  # GPTNeoXConfig default: the fused projection has a bias
    if arch.mlp_bias:
        kwargs["mlp_bias"] = True
    if arch.sliding_window and fam not in ("gpt2", "falcon"):
        kwargs["sliding_window"] = arch.sliding_window
    kwargs.update(overrides)
    return transformers.AutoConfig.for_model(fam, **kwargs)
