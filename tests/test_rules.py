"""Behaviour of the core rules, with the numbers they must state and where those numbers come from."""

from __future__ import annotations

import math

import pytest

from cfgcheck.checks.adapter import adapter_scale, target_alpha
from cfgcheck.checks.loader import dotted_exponent
from cfgcheck.findings import Severity

from .helpers import found, lint


def findings(text, rule, name="c.yaml", fmt=None, **opts):
    rep = lint(text, name, fmt, **opts)
    assert rep.problem is None and not rep.internal
    return [f for f in rep.findings if f.rule == rule]


# --- adapter scale ---------------------------------------------------------------------------

def test_scale_formulas_match_the_papers():
    # LoRA paper sec. 4.1: scale alpha/r. rsLoRA paper: alpha/sqrt(r).
    # REFERENCES.md sec. 2 worked values: r=64, alpha=16 -> LoRA 0.25, rsLoRA 2.0; r=8, alpha=8 -> 1.0 vs 2.83
    assert adapter_scale(16, 64, False) == 0.25
    assert adapter_scale(16, 64, True) == 2.0
    assert adapter_scale(8, 8, False) == 1.0
    assert math.isclose(adapter_scale(8, 8, True), 2.828, rel_tol=1e-3)


def test_alpha_below_rank_message_states_the_scale():
    (f,) = findings("use_peft: true\nlora_r: 16\nlora_alpha: 8\n", "lora-scale-below-one")
    assert f.severity == Severity.WARNING and f.key == "lora_alpha" and (f.line, f.column) == (3, 13)
    assert "lora_alpha 8 < r 16" in f.message and "scale 0.5" in f.message
    assert f.data["scale"] == 0.5 and f.data["new_alpha"] == 16  # alpha = r: scale 1 (LoRA paper App. D)
    assert "16" in f.hint and "no learning rate is written" in f.message


def test_guanaco_recipe_scale_is_flagged_with_its_numbers():
    # QLoRA official scripts (REFERENCES.md sec. 3): --lora_r 64 --lora_alpha 16 -> scale 0.25
    (f,) = findings("use_peft: true\nload_in_4bit: true\nlora_r: 64\nlora_alpha: 16\n", "lora-scale-below-one")
    assert f.data["scale"] == 0.25 and f.data["slowdown"] == 4.0


def test_rslora_uses_square_root():
    # r=64, alpha=16 is scale 2.0 under rsLoRA (REFERENCES.md sec. 2): no finding
    assert findings("use_peft: true\nlora_r: 64\nlora_alpha: 16\nuse_rslora: true\n", "lora-scale-below-one") == []
    (f,) = findings("use_peft: true\nlora_r: 64\nlora_alpha: 4\nuse_rslora: true\n", "lora-scale-below-one")
    assert f.data["scale"] == 0.5 and f.data["sqrt_rank"] == 8.0
    assert target_alpha(64, True, 2.0) == 16  # 2 * sqrt(64)


def test_full_finetune_is_not_checked_for_adapter_scale():
    assert findings("use_peft: false\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-5\n", "lora-scale-below-one") == []


def test_alpha_unset_cannot_be_judged():
    (f,) = findings("use_peft: true\nlora_r: 16\n", "lora-scale-below-one")
    assert f.severity == Severity.INFO and f.data["judged"] is False


# --- full fine-tuning learning rate -------------------------------------------------------------

@pytest.mark.parametrize("model,lr,fires", [
    # a 7B fully tuned at 1e-4 diverges; 1e-5..2e-5 is usual (Llama 2 paper sec. 3.1: SFT at 2e-5)
    ("acme/Llama-2-7b-hf", 1e-4, True),
    ("acme/Llama-2-7b-hf", 2e-5, False),
    ("acme/Llama-2-70b-hf", 5e-5, True),
    ("acme/TinyLlama-1.1B", 2e-4, False),   # 1-3B band ceiling 3e-4 (common practice, no source)
    ("acme/SmolLM-360M", 1e-3, False),      # under 1B ceiling 1e-3 (common practice, no source)
])
def test_full_lr_ceiling_by_size(model, lr, fires):
    text = f"model_name_or_path: {model}\nlearning_rate: {lr!r}\nnum_train_epochs: 1\n"
    hits = [f for f in findings(text, "full-finetune-lr-too-high") if f.severity >= Severity.WARNING]
    assert bool(hits) == fires


def test_full_lr_unknown_model_says_it_could_not_judge():
    (f,) = findings("model_name_or_path: acme/mystery\nlearning_rate: 1.0e-4\n", "full-finetune-lr-too-high")
    assert f.severity == Severity.INFO and "unknown" in f.message


def test_adapter_rate_on_adapter_run_is_fine():
    assert findings("model_name_or_path: acme/Llama-2-7b-hf\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\nlearning_rate: 2.0e-4\n",
                    "full-finetune-lr-too-high") == []


# --- chat format -----------------------------------------------------------------------------

def test_new_tokens_are_an_error_and_template_a_warning():
    # Llama 2's 32000-token vocabulary holds <unk>, <s>, </s> only (tokenizer files, from memory)
    base = "model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
    (w,) = findings(base + "chat_template: '<|im_start|>{{ m }}<|im_end|>'\n", "chat-format-untrained-embeddings")
    assert w.severity == Severity.WARNING and w.data["format"] == "ChatML"
    assert w.data["markers"] == "<|im_end|>, <|im_start|>" and "32000 tokens" in w.message
    (e,) = findings(base + "added_tokens: ['<|turn|>']\n", "chat-format-untrained-embeddings")
    assert e.severity == Severity.ERROR and e.key == "added_tokens"


def test_text_role_markers_need_no_new_embeddings():
    # the zephyr format: <|user|> and friends as text, turns ended by the base EOS
    zephyr = ("{% for m in messages %}{{ '<|' + m.role + '|>\\n' + m.content + eos_token }}"
              "{% endfor %}{{ '<|assistant|>' }}")
    text = ("model_name_or_path: mistralai/Mistral-7B-v0.1\nuse_peft: true\nlora_r: 16\nlora_alpha: 16\n"
            f"chat_template: \"{zephyr}\"\n")
    assert findings(text, "chat-format-untrained-embeddings") == []
    # an unknown base with text markers: nothing to judge, so not even a note
    text = "model_name_or_path: acme/base-3b\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\nchat_template: '<|turn|>'\n"
    assert findings(text, "chat-format-untrained-embeddings") == []


def test_a_base_whose_vocabulary_holds_the_markers_is_fine():
    # Qwen2.5 base tokenizers carry <|im_start|> 151644 and <|im_end|> 151645
    text = ("model_name_or_path: Qwen/Qwen2.5-7B\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "chat_template: '<|im_start|>{{ m }}<|im_end|>'\n")
    assert findings(text, "chat-format-untrained-embeddings") == []
    # Phi-3's format (it ends turns with <|end|>) on a Llama 2 base: its markers are absent
    text = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "chat_template: '<|user|>{{ m }}<|end|>'\n")
    (f,) = findings(text, "chat-format-untrained-embeddings")
    assert f.data["format"] == "Phi-3" and f.data["markers"] == "<|end|>, <|user|>"


def test_special_markers_on_an_unknown_base_are_a_note():
    text = ("model_name_or_path: acme/base-3b\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "chat_template: '<|im_start|>{{ m }}'\n")
    (f,) = findings(text, "chat-format-untrained-embeddings")
    assert f.severity == Severity.INFO and f.data["judged"] is False


def test_lora_on_embeddings_counts_as_trained():
    text = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "lora_target_modules: [q_proj, v_proj, embed_tokens, lm_head]\nchat_template: '<|im_start|>'\n")
    assert findings(text, "chat-format-untrained-embeddings") == []


# --- precision ---------------------------------------------------------------------------------

@pytest.mark.parametrize("gpu,text,feature,fires", [
    ("t4", "bf16: true\nlearning_rate: 2.0e-5\n", "bf16", True),          # T4 CC 7.5 < 8.0
    ("v100-32gb", "tf32: true\nlearning_rate: 2.0e-5\n", "tf32", True),   # V100 CC 7.0 < 8.0
    ("a100-80gb", "bf16: true\ntf32: true\nlearning_rate: 2.0e-5\n", "bf16", False),
    ("t4", "load_in_4bit: true\nbnb_4bit_compute_dtype: bfloat16\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n", "bf16", True),
    ("t4", "torch_dtype: bfloat16\nlearning_rate: 2.0e-5\n", "bf16", True),
    ("rtx-3090", "attn_implementation: flash_attention_2\nlearning_rate: 2.0e-5\n", "flash_attention_2", False),
    ("v100-16gb", "attn_implementation: flash_attention_2\nlearning_rate: 2.0e-5\n", "flash_attention_2", True),
])
def test_precision_against_the_card(gpu, text, feature, fires):
    hits = findings(text, "precision-unsupported-on-gpu", gpu=gpu)
    hits = [f for f in hits if f.data.get("feature") == feature]
    assert bool(hits) == fires
    for f in hits:
        assert f.severity == Severity.ERROR and f.data["capability"] in f.message


def test_precision_without_gpu_is_info_once():
    hits = findings("bf16: true\ntf32: true\nlearning_rate: 2.0e-5\n", "precision-unsupported-on-gpu")
    assert len(hits) == 1 and hits[0].severity == Severity.INFO


def test_both_half_precisions():
    assert found("bf16: true\nfp16: true\nlearning_rate: 2.0e-5\n") == [("bf16-and-fp16-both-on", "fp16")]


# --- batch -------------------------------------------------------------------------------------

DS = '{{"train_batch_size": {tb}, "train_micro_batch_size_per_gpu": {mb}, "gradient_accumulation_steps": {ga}, "zero_optimization": {{"stage": 2}}}}'


def test_deepspeed_check_value():
    # REFERENCES.md sec. 10 check value: micro 4 x GA 8 x 2 GPUs = train_batch_size 64
    assert findings(DS.format(tb=64, mb=4, ga=8), "global-batch-mismatch", "ds.json", gpus=2) == []
    (f,) = findings(DS.format(tb=64, mb=4, ga=8), "global-batch-mismatch", "ds.json", gpus=4)
    assert f.data["expected"] == 128 and "128" in f.message and f.key == "train_batch_size"


def test_global_batch_without_gpu_count():
    # 64 = 32 x 2: some whole number of GPUs gives it, so nothing to report without --gpus
    assert findings(DS.format(tb=64, mb=4, ga=8), "global-batch-mismatch", "ds.json") == []
    (f,) = findings(DS.format(tb=60, mb=4, ga=8), "global-batch-mismatch", "ds.json")
    assert f.data["product"] == 32 and (f.data["lower"], f.data["upper"]) == (32, 64)


def test_auto_is_never_a_finding():
    text = DS.format(tb='"auto"', mb='"auto"', ga='"auto"')
    assert found(text, "ds.json", gpus=8) == []


def test_cadence_against_the_worked_example():
    # 1,000 rows, 8 x 4 on one GPU, 1 epoch -> 32 steps (worked example, common practice)
    text = ("per_device_train_batch_size: 8\ngradient_accumulation_steps: 4\nnum_train_epochs: 1\n"
            "eval_strategy: steps\neval_steps: 40\nsave_steps: 32\nlogging_steps: 100\nlearning_rate: 2.0e-5\n")
    hits = findings(text, "cadence-longer-than-run", rows=1000)
    assert sorted(f.key for f in hits) == ["eval_steps", "logging_steps"]
    assert all(f.data["total"] == 32 for f in hits)


def test_cadence_eval_strategy_no_is_ignored():
    text = "per_device_train_batch_size: 8\nnum_train_epochs: 1\neval_steps: 500\nlearning_rate: 2.0e-5\n"
    assert [f for f in findings(text, "cadence-longer-than-run", rows=100) if f.severity > Severity.INFO] == []


# --- loader rules ----------------------------------------------------------------------------

@pytest.mark.parametrize("raw,fixed", [("1e-4", "1.0e-4"), ("5e-5", "5.0e-5"), ("1e4", "1.0e+4"),
                                       ("-2E-3", "-2.0E-3"), ("1.5e6", "1.5e+6")])
def test_exponent_rewrite_is_a_float_in_both_yaml_versions(raw, fixed):
    import io

    import yaml
    from ruamel.yaml import YAML

    assert dotted_exponent(raw) == fixed
    text = f"v: {fixed}\n"
    assert isinstance(yaml.safe_load(text)["v"], float)  # PyYAML (YAML 1.1)
    assert yaml.safe_load(text)["v"] == YAML(typ="safe", pure=True).load(io.StringIO(text))["v"] == float(raw)  # ruamel (1.2)


def test_version_dependent_value_not_reported_in_json():
    assert found('{"learning_rate": 1e-4, "per_device_train_batch_size": 4}', "a.json") == []


def test_added_tokens_the_base_already_holds_need_no_new_rows():
    # Qwen2.5's tokenizer already holds <|im_start|> and <|im_end|> (added_tokens 151644/151645)
    text = ("model_name_or_path: Qwen/Qwen2.5-7B\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "additional_special_tokens: ['<|im_start|>', '<|im_end|>']\n")
    assert findings(text, "chat-format-untrained-embeddings") == []
    (f,) = findings(text.replace("'<|im_end|>'", "'<|tool|>'"), "chat-format-untrained-embeddings")
    assert f.data["count"] == 1 and f.data["tokens"] == "<|tool|>"


def test_public_zephyr_qlora_recipe_brings_no_new_tokens():
    from pathlib import Path

    path = (Path(__file__).resolve().parents[2] / "shared" / "corpus" / "public"
            / "alignment-handbook__recipes__zephyr-7b-beta__sft__config_qlora.yaml")
    if not path.is_file():
        pytest.skip("../shared/corpus/public is not present")
    # the zephyr format writes <|user|>, <|system|>, <|assistant|> as text and ends turns with the
    # Mistral EOS </s>: nothing for the frozen embeddings to learn
    rep = lint(path.read_text(), path.name)
    assert [f for f in rep.findings if f.rule == "chat-format-untrained-embeddings"] == []
