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
    """A transformers config built from our Architecture values (no download)."""
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
    if arch.family == "mixtral":
        kwargs["num_local_experts"] = arch.num_experts
        kwargs["num_experts_per_tok"] = arch.experts_per_token
    if arch.attention_bias:
        kwargs["attention_bias"] = True
    if arch.mlp_bias:
        kwargs["mlp_bias"] = True
    kwargs.update(overrides)
    return transformers.AutoConfig.for_model(arch.family, **kwargs)
