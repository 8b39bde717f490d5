"""A fix whose consequence is a new finding (here: memory) is left out with a note, not forced."""

from __future__ import annotations

from cfgcheck import api, fix

# QLoRA on a 7B base (Llama-2-7b shapes from the bundled catalogue) for a 16 GB T4 (NVIDIA spec):
# training embed_tokens and lm_head in full adds 2 x 32000 x 4096 trainable weights, which pushes
# the memory estimate past 90% of the card.
TEXT = """model_name_or_path: meta-llama/Llama-2-7b-hf
use_peft: true
load_in_4bit: true
bnb_4bit_quant_type: nf4
bnb_4bit_use_double_quant: true
lora_r: 16
lora_alpha: 32
lora_target_modules: [q_proj, v_proj]
chat_template: "<|im_start|>{{ m }}"
per_device_train_batch_size: 5
gradient_checkpointing: true
max_seq_length: 2048
learning_rate: 2e-4
"""


def test_memory_consequence_withholds_only_that_fix():
    opts = api.make_options(gpu="t4")
    before = api.lint_text(TEXT, "q.yaml", gpu="t4")
    assert not [f for f in before.findings if f.rule == "memory-exceeds-gpu" and f.severity.word != "info"]
    result = fix.fix_text(TEXT, "q.yaml", opts, training=True)
    assert result.error is None
    assert any("chat-format-untrained-embeddings" in n and "memory-exceeds-gpu" in n for n in result.notes)
    assert [a.rule for a in result.applied] == ["yaml-version-dependent-value"]
    assert "learning_rate: 2.0e-4" in result.new_text and "modules_to_save" not in result.new_text
