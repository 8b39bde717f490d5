"""The changes-training fixes of the schedule, sequence, quantisation and checkpoint rules.

What each fix writes is checked against the library behaviour that makes it right; the case
files in fixtures/fix/ check the bytes.
"""

from __future__ import annotations

import pytest
import yaml

from cfgcheck import api, fix

from .helpers import lint


def _fix(text, name="run.yaml", **options):
    result = fix.fix_text(text, name, api.make_options(**options), training=True)
    assert result.error is None and result.problem is None, (result.error, result.problem)
    return result


def _rules(text, rule, **options):
    report = lint(text, **options)
    assert report.problem is None and not report.internal
    return [f for f in report.findings if f.rule == rule]


QLORA = ("model_name_or_path: Qwen/Qwen2.5-1.5B-Instruct\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
         "lora_target_modules: [q_proj, v_proj]\n"
         "quantization_config:\n  load_in_4bit: true\n  bnb_4bit_quant_type: nf4\n"
         "  bnb_4bit_compute_dtype: {dtype}\n{extra}")


@pytest.mark.parametrize("dtype,extra,options,expected", [
    # QLoRA (Dettmers et al. 2023): NF4 storage, BFloat16 compute; A100 is compute capability 8.0
    ("float32", "", {"gpu": "a100-80gb"}, "bfloat16"),
    ("float32", "", {}, "bfloat16"),
    # T4 is compute capability 7.5 < 8.0 for bf16 (NVIDIA CUDA GPU compute capability table)
    ("float32", "", {"gpu": "t4"}, "float16"),
    ("float32", "fp16: true\n", {}, "float16"),  # the run's own mixed precision is fp16
    ("float32", "bf16: true\nfp16: false\n", {}, "bfloat16"),
    # the spelling is kept: "torch.<name>" for launchers that resolve it, the short form likewise
    ("torch.float32", "", {"gpu": "t4"}, "torch.float16"),
    ("fp32", "", {}, "bf16"),
])
def test_compute_dtype_fix_picks_a_dtype_the_gpu_and_run_can_use(dtype, extra, options, expected):
    result = _fix(QLORA.format(dtype=dtype, extra=extra), **options)
    assert [a.rule for a in result.applied] == ["quant-compute-dtype-fp32"]
    assert yaml.safe_load(result.new_text)["quantization_config"]["bnb_4bit_compute_dtype"] == expected
    assert not result.notes  # nothing left out: the new dtype brings no precision finding


def test_fp4_is_judged_only_where_the_base_loads_in_4_bits():
    # transformers BitsAndBytesConfig: bnb_4bit_quant_type applies to 4-bit layers only
    base = "use_peft: true\nlora_r: 16\nlora_alpha: 32\n{load}: true\nbnb_4bit_quant_type: fp4\n"
    assert _rules(base.format(load="load_in_4bit"), "quant-fp4-where-nf4-is-better")
    assert _rules(base.format(load="load_in_8bit"), "quant-fp4-where-nf4-is-better") == []
    # LLaMA-Factory: quantization_type is read for 4-bit bitsandbytes quantisation
    lf = ("model_name_or_path: a/b\nstage: sft\nfinetuning_type: lora\ncutoff_len: 1024\ntemplate: x\n"
          "quantization_bit: {bits}\nquantization_type: fp4\n")
    assert _rules(lf.format(bits=4), "quant-fp4-where-nf4-is-better")
    assert _rules(lf.format(bits=8), "quant-fp4-where-nf4-is-better") == []


AXO = ("base_model: mistralai/Mistral-7B-v0.1\nadapter: {adapter}\nload_in_4bit: true\nlora_r: 16\n"
       "lora_alpha: 32\nlora_target_modules: [q_proj, v_proj]\npeft:\n  loftq_config:\n"
       "    loftq_bits: 4\nsequence_len: 2048\nmicro_batch_size: 2\nnum_epochs: 1\n")


def test_loftq_fix_keeps_an_axolotl_recipe_valid():
    # axolotl config validation: "Require cfg.load_in_4bit to be True for qlora"
    data = yaml.safe_load(_fix(AXO.format(adapter="qlora")).new_text)
    assert data["load_in_4bit"] is False and data["adapter"] == "lora"
    # adapter: lora is valid either way: only the loading changes
    result = _fix(AXO.format(adapter="lora"))
    assert [a.paths for a in result.applied] == [("load_in_4bit",)]
    assert yaml.safe_load(result.new_text)["adapter"] == "lora"


def test_rope_scaling_makes_a_longer_sequence_deliberate():
    # Llama-2-7b-hf config.json: max_position_embeddings 4096 (Touvron et al. 2023: context 4096);
    # LLaMA-Factory's rope_scaling sets the factor to ceil(cutoff_len / max_position_embeddings)
    lf = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nstage: sft\nfinetuning_type: lora\n"
          "lora_target: all\ntemplate: llama2\ncutoff_len: 8192\n{rope}")
    assert _rules(lf.format(rope=""), "seq-len-above-context-window")
    assert _rules(lf.format(rope="rope_scaling: linear\n"), "seq-len-above-context-window") == []
    # transformers config.rope_scaling, passed through the model's init arguments
    hf = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1.0e-5\nmax_seq_length: 8192\n"
          "model_init_kwargs:\n  rope_scaling: {rope}\n")
    assert _rules(hf.format(rope="{type: linear, factor: 2.0}"), "seq-len-above-context-window") == []
    assert _rules(hf.format(rope="null"), "seq-len-above-context-window")


def test_best_model_fix_inserts_the_matching_save_strategy():
    # transformers TrainingArguments: save_strategy defaults to "steps"; load_best_model_at_end
    # needs it equal to eval_strategy
    text = "learning_rate: 2.0e-5\neval_strategy: epoch\nload_best_model_at_end: true\n"
    result = _fix(text)
    assert result.new_text == ("learning_rate: 2.0e-5\neval_strategy: epoch\nsave_strategy: epoch\n"
                               "load_best_model_at_end: true\n")
    # with no evaluation there is nothing to match: no fix is offered
    none = "learning_rate: 2.0e-5\neval_strategy: 'no'\nsave_strategy: steps\nload_best_model_at_end: true\n"
    hits = _rules(none, "best-model-needs-matching-cadence")
    assert hits and hits[0].fix is None


def test_best_model_fix_is_left_out_when_the_steps_would_not_line_up():
    # eval every 300 steps, saves every 500 (the default): 500 is not a multiple of 300, so
    # switching save_strategy to steps alone would still be refused by the Trainer
    text = ("learning_rate: 2.0e-5\neval_strategy: steps\neval_steps: 300\nsave_strategy: epoch\n"
            "load_best_model_at_end: true\n")
    result = _fix(text)
    assert result.new_text == text and not result.applied
    assert any("best-model-needs-matching-cadence" in n and "not a round multiple" in n
               for n in result.notes)


def test_warmup_ratio_fix_writes_the_hinted_ratio_and_leaves_whole_run_warmups():
    # the rule's hint: 0.03-0.1, 5% a common choice (QLoRA scripts: --warmup_ratio 0.03)
    over = _fix("learning_rate: 2.0e-5\nnum_train_epochs: 1\nwarmup_ratio: 0.5\n")
    assert yaml.safe_load(over.new_text)["warmup_ratio"] == 0.05
    # a ratio of 1 or more has no evident intended value: reported, not rewritten
    hits = _rules("learning_rate: 2.0e-5\nnum_train_epochs: 1\nwarmup_ratio: 3\n", "warmup-longer-than-run")
    assert hits and hits[0].fix is None
