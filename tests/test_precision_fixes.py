"""Leaving bf16 on a card without it: one finding per cause, and fixes whose result trains."""

from __future__ import annotations

import itertools
import json

import pytest
import yaml

from cfgcheck import api, fix
from cfgcheck.render import render

from .helpers import lint

# T4: compute capability 7.5 < 8.0 needed for bf16 (NVIDIA CUDA GPU compute capability table)
GPU = "t4"
RULE = "precision-unsupported-on-gpu"


def _fixed(text: str, name: str = "run.yaml") -> dict:
    result = fix.fix_text(text, name, api.make_options(gpu=GPU), training=True)
    assert result.error is None and result.problem is None, result.error
    assert RULE in [a.rule for a in result.applied]
    after = lint(result.new_text, name, gpu=GPU)
    assert [f for f in after.findings if f.rule == RULE] == []  # the fix cures what it fixes
    return yaml.safe_load(result.new_text)


def test_bf16_asked_twice_is_one_finding_with_both_places():
    text = "model_name_or_path: acme/base-1b\ntorch_dtype: bfloat16\nlearning_rate: 2.0e-5\nbf16: true\n"
    report = lint(text, "run.yaml", gpu=GPU)
    hits = [f for f in report.findings if f.rule == RULE]
    assert len(hits) == 1
    (f,) = hits
    assert (f.key, f.line, f.column) == ("bf16", 4, 7)
    assert [(r.key, r.line, r.column) for r in f.related] == [("torch_dtype", 2, 14)]
    assert "asked for by bf16 and torch_dtype" in f.message and f.data["also_keys"] == ["torch_dtype"]
    assert f.as_dict()["related"] == [{"key": "torch_dtype", "line": 2, "column": 14}]
    rep = api.Report(files=[report])
    text_out = render("text", rep, hits)
    assert "    also: run.yaml:2:14: torch_dtype" in text_out
    sarif = json.loads(render("sarif", rep, hits))
    (res,) = sarif["runs"][0]["results"]
    (rel,) = res["relatedLocations"]
    assert rel["physicalLocation"]["region"] == {"startLine": 2, "startColumn": 14}


def test_related_places_do_not_enter_the_finding_identity():
    a = "torch_dtype: bfloat16\nlearning_rate: 2.0e-5\nbf16: true\n"
    b = "# moved\n\nlearning_rate: 2.0e-5\ntorch_dtype: bfloat16\nbf16: true\n"
    fa = [f for f in lint(a, "r.yaml", gpu=GPU).findings if f.rule == RULE]
    fb = [f for f in lint(b, "r.yaml", gpu=GPU).findings if f.rule == RULE]
    assert [f.identity() for f in fa] == [f.identity() for f in fb]


def test_full_finetune_gets_fp32_weights_under_fp16_mixed_precision():
    data = _fixed("model_name_or_path: acme/base-1b\ntorch_dtype: bfloat16\nlearning_rate: 2.0e-5\nbf16: true\n")
    # fp16 weights that train cannot be unscaled (torch GradScaler: "Attempting to unscale FP16
    # gradients"): fp32 weights, fp16 autocast
    assert (data["torch_dtype"], data["bf16"], data["fp16"]) == ("float32", False, True)


def test_full_finetune_with_float16_weights_written_elsewhere_gets_fp32():
    data = _fixed("torch_dtype: float16\nlearning_rate: 2.0e-5\nbf16: true\n")
    assert (data["torch_dtype"], data["bf16"], data["fp16"]) == ("float32", False, True)


def test_adapter_base_stays_half_precision():
    # a frozen base in float16 under fp16 autocast is the usual QLoRA-on-T4 set-up; only the
    # adapter trains (PEFT casts adapter weights to fp32: autocast_adapter_dtype)
    data = _fixed("torch_dtype: bfloat16\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
                  "learning_rate: 2.0e-4\nbf16: true\n")
    assert (data["torch_dtype"], data["bf16"], data["fp16"]) == ("float16", False, True)


def test_component_recipe_gets_fp32_and_a_hint_in_its_own_words():
    text = ("model:\n  _component_: torchtune.models.llama3_2.llama3_2_1b\ndtype: bf16\n"
            "batch_size: 4\nepochs: 1\noptimizer:\n  _component_: torch.optim.AdamW\n  lr: 2.0e-5\n")
    (f,) = [f for f in lint(text, "tune.yaml", gpu=GPU).findings if f.rule == RULE]
    # torchtune recipes: "full fp16 training is not supported ... use bf16 or fp32 instead"
    assert "dtype: fp32" in f.hint and "refuses fp16" in f.hint and "fp16 mixed" not in f.hint
    data = _fixed(text, "tune.yaml")
    assert data["dtype"] == "fp32"


@pytest.mark.parametrize("adapter,fp16", list(itertools.product(("", "adapter: lora\nlora_r: 8\nlora_alpha: 16\n"),
                                                               ("", "fp16: false\n"))))
def test_recipe_runner_whose_fp16_flag_loads_fp16_weights(adapter, fp16):
    # axolotl resolve_dtype: fp16 -> torch_dtype float16; neither flag -> float32
    text = ("base_model: acme/base-1b\nmicro_batch_size: 2\nnum_epochs: 1\nsequence_len: 1024\n"
            "learning_rate: 0.00002\nbf16: true\n" + fp16 + adapter)
    data = _fixed(text, "recipe.yaml")
    assert data["bf16"] is False
    if adapter:
        assert data["fp16"] is True  # a frozen base: fp16 mixed precision is fine
    else:
        assert not data.get("fp16")  # a full fine-tune: fp32, never fp16 weights under fp16


@pytest.mark.parametrize("dtype,method,fp16", list(itertools.product(
    (None, "bfloat16", "float16"), ("full", "lora"), (None, False))))
def test_no_fix_writes_fp16_weights_with_fp16_mixed_precision_for_trained_weights(dtype, method, fp16):
    lines = ["model_name_or_path: acme/base-1b", "learning_rate: 2.0e-5", "bf16: true"]
    if dtype:
        lines.append(f"torch_dtype: {dtype}")
    if fp16 is not None:
        lines.append("fp16: false")
    if method == "lora":
        lines += ["use_peft: true", "lora_r: 8", "lora_alpha: 16"]
    data = _fixed("\n".join(lines) + "\n")
    if method == "full" and data.get("fp16") is True:
        assert data.get("torch_dtype") in (None, "float32")


def test_fixed_trainer_file_is_accepted_by_training_arguments(tmp_path):
    transformers = pytest.importorskip("transformers")
    data = _fixed("torch_dtype: bfloat16\nlearning_rate: 2.0e-5\nbf16: true\n")
    data.pop("torch_dtype")  # a model argument, not a TrainingArguments field
    args = transformers.TrainingArguments(output_dir=str(tmp_path), **data)
    assert args.fp16 is True and args.bf16 is False


def test_adapter_that_trains_whole_modules_gets_fp32_weights():
    # modules_to_save copies train in the base's dtype: fp16 copies cannot be unscaled
    data = _fixed("torch_dtype: bfloat16\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
                  "lora_modules_to_save: [embed_tokens, lm_head]\nlearning_rate: 2.0e-4\nbf16: true\n")
    assert (data["torch_dtype"], data["bf16"], data["fp16"]) == ("float32", False, True)


def test_leaving_bf16_for_fp16_brings_no_new_finding_and_carries_the_overflow_caveat():
    # Mistral-7B-v0.1 is stored in bfloat16 (bundled catalogue); a T4 has no bf16
    text = ("model_name_or_path: mistralai/Mistral-7B-v0.1\nuse_peft: true\nload_in_4bit: true\n"
            "bnb_4bit_quant_type: nf4\nlora_r: 16\nlora_alpha: 16\nlearning_rate: 2.0e-4\nbf16: true\n")
    (f,) = [f for f in lint(text, "run.yaml", gpu=GPU).findings if f.rule == RULE]
    assert "stored in bfloat16" in f.hint and "65504" in f.hint  # IEEE 754 binary16 largest finite value
    before = {(x.rule, x.key) for x in lint(text, "run.yaml", gpu=GPU).findings}
    result = fix.fix_text(text, "run.yaml", api.make_options(gpu=GPU), training=True)
    after = {(x.rule, x.key) for x in lint(result.new_text, "run.yaml", gpu=GPU).findings}
    assert after - before == set()  # fp16 on a card without bf16 is not reported as a new problem
