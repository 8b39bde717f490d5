"""The opened run: launch files, launch scripts, runner defaults and the certainty of findings.

Configs here are invented (the Larkspur support-bot team and friends); the model shapes are the
bundled catalogue's (Llama 3 8B: Llama Team 2024, Table 3; Llama 2 7B: Touvron et al. 2023).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity
from cfgcheck.plan import derive_plan, model_of
from cfgcheck.run import open_path, read_launch
from cfgcheck.scripts import parse_script

HERE = Path(__file__).resolve().parents[1] / "fixtures" / "launch"


def _plan(path, **options):
    res = api.derive([str(path)], project=None, **options)
    assert not res.problems, res.problems
    return res.runs[0][1]


def _memory(report):
    return [f for f in report.findings if f.rule == "memory-exceeds-gpu" and "total_bytes" in f.data]


# --------------------------------------------------------------------------- one open path

def test_plan_reads_the_linked_deepspeed_file_and_gpu_count_like_lint():
    # ZeRO-3 over 8 GPUs (ZeRO paper, Rajbhandari et al. 2020, Fig. 1: stage 3 partitions
    # weights, gradients and optimizer states): plan and lint must see the same sharded run
    cfg = HERE / "full_8b_ds3.yaml"
    plan = _plan(cfg, gpu="a100-80gb", gpus=8)
    assert plan.memory_inputs.sharding == "zero3"
    assert plan.memory_inputs.num_gpus == 8
    report = api.lint([str(cfg)], project=None, gpu="a100-80gb", gpus=8,
                      thresholds={"memory-exceeds-gpu": {"warn_fraction": 0.0}})
    (finding,) = _memory(report)
    assert finding.data["total_bytes"] == plan.memory.total_bytes
    assert finding.data["sharding"] == "zero3"
    unsharded = _plan(HERE / "full_8b.yaml", gpu="a100-80gb", gpus=8)
    assert unsharded.memory.total_bytes > 2 * plan.memory.total_bytes


def test_launch_file_gives_gpus_sharding_and_precision():
    plan = _plan(HERE / "full_8b.yaml", gpu="a100-80gb", launch=[str(HERE / "zero3_8gpu.yaml")])
    assert plan.schedule.gpus == 8  # num_processes: 8 (accelerate counts processes over all machines)
    assert plan.memory_inputs.sharding == "zero3"
    assert "zero3_8gpu.yaml" in plan.context
    linked = _plan(HERE / "full_8b_ds3.yaml", gpu="a100-80gb", gpus=8)
    assert plan.memory.total_bytes == linked.memory.total_bytes


def test_memory_message_names_the_launch_context():
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, gpu="a100-40gb",
                      launch=[str(HERE / "zero3_8gpu.yaml")],
                      thresholds={"memory-exceeds-gpu": {"warn_fraction": 0.0}})
    (finding,) = _memory(report)
    assert "8 GPUs" in finding.message and "ZeRO-3" in finding.message
    assert "zero3_8gpu.yaml" in finding.message


def test_fsdp_launch_file_shards_and_checkpoints():
    ctx = read_launch([str(HERE / "fsdp_4gpu.yaml")])
    assert (ctx.processes, ctx.fsdp, ctx.activation_checkpointing, ctx.mixed_precision) == \
        (4, "full_shard", True, "fp16")
    (run,) = open_path(HERE / "full_8b.yaml", api.make_options(launch=[str(HERE / "fsdp_4gpu.yaml")]))
    assert run.sharding == "fsdp_full"
    assert run.view.effective("runtime.gradient_checkpointing").origin in ("written", "launch")


def test_explicit_gpus_win_over_the_launch_file_and_the_disagreement_is_reported():
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, gpus=4,
                      launch=[str(HERE / "zero3_8gpu.yaml")])
    found = [f for f in report.findings if f.rule == "launch-context-disagrees"]
    assert found and found[0].data["flag"] == 4 and found[0].data["launch"] == 8
    plan = _plan(HERE / "full_8b.yaml", gpus=4, launch=[str(HERE / "zero3_8gpu.yaml")])
    assert plan.schedule.gpus == 4


def test_mixed_precision_of_the_launch_file_against_the_config():
    # fsdp_4gpu.yaml launches with fp16; the config asks for bf16
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(HERE / "fsdp_4gpu.yaml")])
    found = [f for f in report.findings if f.rule == "launch-context-disagrees"]
    assert [f.data["launch"] for f in found] == ["fp16"]
    assert found[0].key == "bf16"
    clean = api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(HERE / "zero3_8gpu.yaml")])
    assert not [f for f in clean.findings if f.rule == "launch-context-disagrees"]


def test_missing_launch_file_is_an_input_error():
    with pytest.raises(ValueError, match="launch file"):
        api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(HERE / "nope.yaml")])


def test_a_launch_file_that_is_not_a_launch_config_is_said_once(tmp_path):
    bad = tmp_path / "notes.yaml"
    bad.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\n")
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(bad)])
    notes = [f for f in report.findings if f.rule == "launch-context-disagrees"]
    assert len(notes) == 1 and notes[0].severity == Severity.INFO


def test_project_profile_pairs_configs_with_launch_files(tmp_path):
    (tmp_path / ".git").mkdir()
    for name in ("full_8b.yaml", "zero3_8gpu.yaml"):
        (tmp_path / name).write_text((HERE / name).read_text())
    (tmp_path / "cfgcheck.yaml").write_text(
        "profiles:\n  - paths: 'full_*.yaml'\n    gpu: a100-80gb\n    launch: zero3_8gpu.yaml\n")
    res = api.derive([str(tmp_path / "full_8b.yaml")], project="auto")
    plan = res.runs[0][1]
    assert plan.schedule.gpus == 8 and plan.memory_inputs.sharding == "zero3"


def test_project_profile_with_a_missing_launch_file_is_refused(tmp_path):
    from cfgcheck.project import ProjectError, load

    (tmp_path / "cfgcheck.yaml").write_text("profiles:\n  - paths: '*.yaml'\n    launch: gone.yaml\n")
    with pytest.raises(ProjectError, match="gone.yaml"):
        load(tmp_path / "cfgcheck.yaml")


# --------------------------------------------------------------------------- certainty

def test_memory_resting_on_an_assumed_sequence_length_is_a_warning_that_says_so():
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nlearning_rate: 1.0e-5\n"
            "per_device_train_batch_size: 8\nbf16: true\n")
    fr = api.lint_text(text, "larkspur.yaml", gpu="rtx-4090")
    (f,) = [f for f in fr.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.WARNING
    assert "assuming sequence length 2048 because the file names none" in f.message
    written = api.lint_text(text + "max_length: 2048\n", "larkspur.yaml", gpu="rtx-4090", gpus=1)
    (g,) = [f for f in written.findings if f.rule == "memory-exceeds-gpu"]
    assert g.severity == Severity.ERROR and "assuming" not in g.message


def test_memory_without_any_launch_context_assumes_no_sharding_and_stays_a_warning():
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nlearning_rate: 1.0e-5\n"
            "per_device_train_batch_size: 8\nbf16: true\nmax_length: 2048\n")
    fr = api.lint_text(text, "larkspur.yaml", gpu="rtx-4090", gpus=8)
    (f,) = [f for f in fr.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.WARNING
    assert "assuming no ZeRO/FSDP sharding because no launch context names it" in f.message


def test_sharded_run_without_a_gpu_count_is_at_most_a_warning():
    fr = api.lint([str(HERE / "full_8b_ds3.yaml")], project=None, gpu="rtx-4090")
    (f,) = [f for f in fr.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.WARNING and "1 GPU because nothing names the GPU count" in f.message


def test_estimate_above_the_warning_fraction_but_on_the_card_is_a_warning():
    fr = api.lint_text("model_name_or_path: NousResearch/Llama-3.2-1B\nlearning_rate: 1.0e-5\n"
                       "per_device_train_batch_size: 1\nbf16: true\nmax_length: 1024\n", "x.yaml",
                       gpu="a100-80gb", thresholds={"memory-exceeds-gpu": {"warn_fraction": 0.01}})
    (f,) = [f for f in fr.findings if f.rule == "memory-exceeds-gpu"]
    assert f.data["total_bytes"] <= f.data["capacity_bytes"]
    assert f.severity == Severity.WARNING


def test_engine_caps_any_rule_resting_on_an_assumed_value():
    from cfgcheck.catalogue import load_catalogue
    from cfgcheck.engine import Options, make_finding
    from cfgcheck.load import load_text

    rule = load_catalogue()["global-batch-mismatch"]
    doc = load_text('{"train_batch_size": 8}', "x.json", "json")[0]
    data = dict(key="train_batch_size", declared=8, per_device=4, accumulation=1, gpus=8,
                expected=32, gpus_from="--gpus")
    sure = make_finding(rule, Options(), doc, "x.json", ("train_batch_size",), "default", "value", data, None)
    guess = make_finding(rule, Options(), doc, "x.json", ("train_batch_size",), "default", "value", data,
                         None, assumptions=("8 GPUs because nothing else names them",))
    assert sure.severity == Severity.ERROR
    assert guess.severity == Severity.WARNING
    assert guess.message.endswith("(assuming 8 GPUs because nothing else names them)")


# --------------------------------------------------------------------------- runner defaults

def test_axolotl_bf16_auto_loads_16_bit_weights():
    # 8B full fine-tune: 16-bit weights + 16-bit grads (2 + 2 bytes per parameter) instead of fp32
    text = ("base_model: meta-llama/Meta-Llama-3-8B\nmicro_batch_size: 1\nnum_epochs: 1\n"
            "sequence_len: 4096\nbf16: auto\nlearning_rate: 2.0e-5\ngradient_checkpointing: true\n"
            "datasets:\n  - path: larkspur/tickets\n")
    fr = api.lint_text(text, "x.yaml")
    view = fr.views[0]
    dtype = view.effective("model.dtype")
    assert dtype.value == "bfloat16" and dtype.origin == "default" and "axolotl" in dtype.note
    arch = model_of(view, "x.yaml", None)
    plan = derive_plan(view, arch, gpu=None, gpus=None, rows=None)
    assert plan.memory_inputs.base_storage == "bf16"
    assert plan.memory.weights_bytes == pytest.approx(2 * 8_030_261_248, rel=1e-6)  # Llama 3 8B total


def test_axolotl_qlora_means_nf4_with_double_quant_and_target_linear_means_every_linear():
    text = ("base_model: meta-llama/Meta-Llama-3-8B\nadapter: qlora\nload_in_4bit: true\nlora_r: 16\n"
            "lora_alpha: 32\nlora_target_linear: true\nmicro_batch_size: 1\nnum_epochs: 1\n"
            "sequence_len: 2048\nbf16: true\nlearning_rate: 2.0e-4\ndatasets:\n  - path: larkspur/tickets\n")
    view = api.lint_text(text, "x.yaml").views[0]
    plan = derive_plan(view, model_of(view, "x.yaml", None), gpu=None, gpus=None, rows=None)
    assert plan.memory_inputs.base_storage == "nf4" and plan.memory_inputs.double_quant
    # every linear layer of Llama 3 8B at r=16: 32 layers x 16 x sum(in + out) over q,k,v,o,gate,up,down
    # q 4096+4096, k 4096+1024, v 4096+1024, o 4096+4096, gate/up 4096+14336, down 14336+4096
    per_layer = 16 * ((8192) + (5120) + (5120) + (8192) + 2 * (18432) + (18432))
    assert plan.trainable_parameters == 32 * per_layer  # 41,943,040: the PEFT LoRA count


def test_llama_factory_lora_recipe_gets_its_default_targets_alpha_and_checkpointing():
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nstage: sft\ndo_train: true\n"
            "finetuning_type: lora\nlora_rank: 8\ndataset: larkspur_tickets\ntemplate: llama3\n"
            "cutoff_len: 2048\nper_device_train_batch_size: 1\ngradient_accumulation_steps: 8\n"
            "learning_rate: 1.0e-4\nnum_train_epochs: 3.0\nbf16: true\n")
    view = api.lint_text(text, "x.yaml").views[0]
    plan = derive_plan(view, model_of(view, "x.yaml", None), gpu=None, gpus=None, rows=None)
    assert plan.trainable_parameters == 32 * 8 * (8192 + 5120 + 5120 + 8192 + 3 * 18432)  # all linear, r=8
    assert plan.adapter_scale == 2.0  # lora_alpha defaults to 2 x rank (LLaMA-Factory LoraArguments)
    assert plan.memory_inputs.gradient_checkpointing is True
    assert any("lora_rank * 2" in d for d in plan.defaults)


def test_llama_factory_max_samples_caps_the_rows():
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nfinetuning_type: lora\nstage: sft\n"
            "dataset: a,b\nmax_samples: 500\ncutoff_len: 1024\nper_device_train_batch_size: 2\n"
            "gradient_accumulation_steps: 4\nnum_train_epochs: 1.0\n")
    view = api.lint_text(text, "x.yaml").views[0]
    plan = derive_plan(view, None, gpu=None, gpus=1, rows=100_000)
    assert plan.schedule.steps_per_epoch == 125  # 2 datasets x 500 rows / (2 x 4)


def test_grpo_steps_count_each_prompt_num_generations_times():
    # TRL GRPO: the per-device batch counts completions; each prompt is sampled num_generations times
    text = ("model_name_or_path: Qwen/Qwen2.5-1.5B-Instruct\nlearning_rate: 1.0e-6\nnum_generations: 16\n"
            "per_device_train_batch_size: 16\ngradient_accumulation_steps: 4\nnum_train_epochs: 1\n"
            "max_prompt_length: 512\nmax_completion_length: 1024\n")
    view = api.lint_text(text, "x.yaml").views[0]
    plan = derive_plan(view, None, gpu=None, gpus=8, rows=1000)
    # 1000 prompts x 16 completions / 8 GPUs = 2000 per process / 16 per device = 125 batches / 4
    assert plan.schedule.steps_per_epoch == 32
    assert plan.seq_len == 512 + 1024


def test_trl_sft_default_max_length():
    text = "model_name_or_path: meta-llama/Meta-Llama-3-8B\nlearning_rate: 2.0e-5\npacking: true\n"
    view = api.lint_text(text, "x.yaml").views[0]
    f = view.effective("data.seq_len")
    assert f.value == 1024 and f.origin == "default" and "SFTConfig" in f.note


# --------------------------------------------------------------------------- DeepSpeed batch

def _ds(obj, **options):
    return api.lint_text(json.dumps(obj), "ds.json", fmt="json", **options)


def test_deepspeed_omitted_accumulation_is_derived_when_it_divides():
    # 256 = 8 micro x 4 derived accumulation x 8 GPUs (DeepSpeed derives the accumulation)
    fr = _ds({"train_batch_size": 256, "train_micro_batch_size_per_gpu": 8,
              "zero_optimization": {"stage": 1}}, gpus=8)
    assert not [f for f in fr.findings if f.rule == "global-batch-mismatch"]


def test_deepspeed_derived_accumulation_below_one_is_an_error():
    fr = _ds({"train_batch_size": 8, "train_micro_batch_size_per_gpu": 4,
              "zero_optimization": {"stage": 1}}, gpus=8)
    (f,) = [f for f in fr.findings if f.rule == "global-batch-mismatch"]
    assert f.severity == Severity.ERROR and f.data["variant"] == "accumulation-below-one"


def test_linked_deepspeed_train_batch_size_against_the_trainer(tmp_path):
    (tmp_path / "ds.json").write_text(json.dumps({"train_batch_size": 64, "train_micro_batch_size_per_gpu": "auto",
                                                  "gradient_accumulation_steps": "auto",
                                                  "zero_optimization": {"stage": 2}}))
    cfg = tmp_path / "run.yaml"
    cfg.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\ngradient_accumulation_steps: 8\n"
                   "deepspeed: ds.json\n")
    bad = api.lint([str(cfg)], project=None, gpus=4)
    (f,) = [f for f in bad.findings if f.rule == "deepspeed-file-contradicts-config"]
    assert f.data["expected"] == 128 and f.key == "deepspeed"
    good = api.lint([str(cfg)], project=None, gpus=2)
    assert not [f for f in good.findings if f.rule == "deepspeed-file-contradicts-config"]


# --------------------------------------------------------------------------- cadence

def test_save_interval_longer_than_the_run_is_not_reported():
    # transformers DefaultFlowCallback saves at the last step with a save strategy (4.46, 4.57, 5.24)
    text = ("learning_rate: 2.0e-5\nper_device_train_batch_size: 8\nnum_train_epochs: 1\n"
            "save_strategy: steps\nsave_steps: 1000\n")
    fr = api.lint_text(text, "x.yaml", rows=800)
    assert not [f for f in fr.findings if f.rule == "cadence-longer-than-run"]
    fr = api.lint_text(text + "eval_strategy: steps\neval_steps: 1000\n", "x.yaml", rows=800)
    assert [f.key for f in fr.findings if f.rule == "cadence-longer-than-run"] == ["eval_steps"]


def test_trainer_saves_at_the_last_step_in_the_installed_transformers():
    import inspect

    pytest.importorskip("transformers", reason="reference library")
    from transformers.trainer_callback import DefaultFlowCallback

    src = inspect.getsource(DefaultFlowCallback.on_step_end)
    end = src[src.index("state.global_step >= state.max_steps"):]
    assert "should_save = True" in end


# --------------------------------------------------------------------------- launch scripts

SCRIPT = """#!/bin/bash
# invented launch script of the Larkspur team
set -e
LR=2e-4
export MODEL="meta-llama/Llama-2-7b-hf"
accelerate launch --config_file zero3_8gpu.yaml --num_processes 8 train.py full_8b.yaml \\
    --learning_rate $LR \\
    --model_name_or_path ${MODEL} --bf16 \\
    --per_device_train_batch_size 4
torchrun --nproc_per_node=4 --nnodes 2 sft.py --deepspeed ds_z3.json --num_train_epochs 3
"""


def test_script_parser_reads_launchers_continuations_and_variables():
    (acc, tr) = parse_script(SCRIPT, str(HERE / "go.sh"))
    assert acc.launcher == "accelerate launch" and acc.program == "train.py"
    assert acc.processes == 8 and acc.configs == (str(HERE / "full_8b.yaml"),)
    assert acc.launch_files == (str(HERE / "zero3_8gpu.yaml"),)
    args = {a.key: a for a in acc.args}
    assert args["learning_rate"].value == 2e-4 and args["learning_rate"].key_span.line == 7
    assert args["model_name_or_path"].value == "meta-llama/Llama-2-7b-hf"
    assert args["bf16"].value is True
    assert tr.launcher == "torchrun" and tr.processes == 4 and tr.machines == 2
    assert tr.launch_files == (str(HERE / "ds_z3.json"),)


def test_script_arguments_are_linted_at_the_script_lines(tmp_path):
    script = tmp_path / "go.sh"
    script.write_text("LR=5e-3\npython train.py --model_name_or_path meta-llama/Llama-2-7b-hf \\\n"
                      "  --learning_rate $LR --num_train_epochs 1\n")
    report = api.lint([str(tmp_path)], project=None)
    found = [f for f in report.findings if f.rule == "full-finetune-lr-too-high"]
    assert found and found[0].file == str(script) and found[0].line == 3


def test_script_pairs_the_config_it_starts_with_its_launch_context(tmp_path):
    for name in ("full_8b.yaml", "zero3_8gpu.yaml"):
        (tmp_path / name).write_text((HERE / name).read_text())
    (tmp_path / "go.sh").write_text("accelerate launch --config_file zero3_8gpu.yaml train.py full_8b.yaml\n")
    report = api.lint([str(tmp_path)], project=None, gpu="a100-40gb",
                      thresholds={"memory-exceeds-gpu": {"warn_fraction": 0.0}})
    (f,) = [f for f in _memory(report) if f.file.endswith("full_8b.yaml")]
    assert f.data["gpus"] == 8 and f.data["sharding"] == "zero3" and "go.sh:1" in f.message


def test_unparsable_script_is_an_input_problem(tmp_path):
    (tmp_path / "bad.sh").write_text("accelerate launch train.py $(\n")
    report = api.lint([str(tmp_path / "bad.sh")], project=None)
    assert report.problems and report.problems[0].file.endswith("bad.sh")


def test_deepspeed_launch_file_is_checked_against_the_config(tmp_path):
    ds = tmp_path / "ds.json"
    ds.write_text(json.dumps({"train_micro_batch_size_per_gpu": 4, "gradient_accumulation_steps": "auto",
                              "zero_optimization": {"stage": 2}}))
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(ds)])
    (f,) = [f for f in report.findings if f.rule == "deepspeed-file-contradicts-config"]
    assert f.key == "per_device_train_batch_size" and f.data["ds_value"] == 4  # the config says 2
    (run,) = open_path(HERE / "full_8b.yaml", api.make_options(launch=[str(ds)]))
    assert run.sharding == "zero2"
    assert run.view.effective("runtime.zero_stage").origin == "launch"


def test_zero3_shards_the_frozen_base_of_an_adapter_run_too():
    # ZeRO-3 partitions every parameter, trainable or not (ZeRO paper, Fig. 1, stage 3)
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\ntorch_dtype: bfloat16\nuse_peft: true\n"
            "lora_r: 16\nlora_alpha: 32\nper_device_train_batch_size: 1\nmax_length: 2048\nbf16: true\n")
    alone = api.lint_text(text, "x.yaml", gpus=1).views[0]
    sharded = api.lint_text(text, "x.yaml", launch=[str(HERE / "zero3_8gpu.yaml")]).views[0]
    p1 = derive_plan(alone, model_of(alone, "x.yaml", None), gpu=None, gpus=1, rows=None)
    p8 = derive_plan(sharded, model_of(sharded, "x.yaml", None), gpu=None, gpus=sharded.run.gpus, rows=None)
    assert p8.memory_inputs.sharding == "zero3" and p8.memory_inputs.num_gpus == 8
    # the frozen 16-bit base (16 GB) is split 8 ways; only the adapters' own storage (about 0.5 % of
    # it: 16-bit with fp32 masters under DeepSpeed, fp32 without) differs between the two runs
    assert p8.memory.weights_bytes == pytest.approx(p1.memory.weights_bytes / 8, rel=0.01)


def test_every_supplied_value_says_where_it_came_from():
    (run,) = open_path(HERE / "full_8b.yaml", api.make_options(gpus=8, launch=[str(HERE / "zero3_8gpu.yaml")]))
    supplied = run.view.supplied
    assert supplied["hardware.num_gpus"].origin == "flag" and "--gpus" in supplied["hardware.num_gpus"].note
    assert supplied["runtime.zero_stage"].origin == "launch"
    assert "zero3_8gpu.yaml" in supplied["runtime.zero_stage"].note
    assert all(f.origin in ("linked", "launch", "default", "flag", "assumed") and f.note for f in supplied.values())
    (linked,) = open_path(HERE / "full_8b_ds3.yaml", api.make_options())
    assert linked.view.supplied["runtime.zero_stage"].origin == "linked"


def test_preference_trainer_prompt_length_is_not_taken_for_grpo():
    # DPOConfig also has max_prompt_length / max_completion_length, but samples no generations
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nlearning_rate: 5.0e-7\nbeta: 0.1\n"
            "max_length: 1024\nmax_prompt_length: 512\nper_device_train_batch_size: 2\n"
            "gradient_accumulation_steps: 8\nnum_train_epochs: 1\n")
    view = api.lint_text(text, "x.yaml").views[0]
    plan = derive_plan(view, None, gpu=None, gpus=8, rows=5000)
    assert plan.schedule.steps_per_epoch == 40 and plan.schedule.generations == 1  # ceil(5000/8/2/8)
    assert plan.seq_len == 1024


def test_a_huge_shell_script_is_skipped_not_parsed(tmp_path):
    from cfgcheck.scripts import MAX_SCRIPT_BYTES

    big = tmp_path / "big.sh"
    big.write_text("echo padding\n" * (MAX_SCRIPT_BYTES // 13 + 10))
    report = api.lint([str(tmp_path)], project=None)
    (fr,) = report.files
    assert fr.skipped and "KiB" in fr.skipped and fr.problem is None


def test_a_script_that_starts_no_training_is_skipped(tmp_path):
    (tmp_path / "tidy.sh").write_text("rm -rf out/\necho done\n")
    (fr,) = api.lint([str(tmp_path)], project=None).files
    assert fr.skipped == "a shell script that starts no training"


def test_script_paths_resolve_from_the_repository_root_too(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "configs").mkdir()
    (tmp_path / "scripts").mkdir()
    for name in ("full_8b.yaml", "zero3_8gpu.yaml"):
        (tmp_path / "configs" / name).write_text((HERE / name).read_text())
    (tmp_path / "scripts" / "train.sh").write_text(
        "accelerate launch --config_file configs/zero3_8gpu.yaml train.py configs/full_8b.yaml\n")
    (sl,) = parse_script((tmp_path / "scripts" / "train.sh").read_text(), str(tmp_path / "scripts" / "train.sh"))
    assert sl.configs == (str(tmp_path / "configs" / "full_8b.yaml"),)
    assert sl.launch_files == (str(tmp_path / "configs" / "zero3_8gpu.yaml"),)


@pytest.mark.parametrize("text", [
    "fsdp:\n  - full_shard\n  - auto_wrap\nfsdp_config:\n  fsdp_offload_params: false\n",  # axolotl
    "fsdp: full_shard auto_wrap\n",  # transformers TrainingArguments
    "fsdp_version: 2\nfsdp_config:\n  reshard_after_forward: true\n",  # FSDP2 as axolotl writes it
])
def test_the_config_s_own_fsdp_settings_shard_the_estimate(text):
    base = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\nlearning_rate: 1.0e-5\ntorch_dtype: bfloat16\n"
            "per_device_train_batch_size: 1\nmax_length: 2048\nbf16: true\n")
    view = api.lint_text(base + text, "x.yaml", gpus=8).views[0]
    assert view.run.sharding == "fsdp_full"
    plan = derive_plan(view, model_of(view, "x.yaml", None), gpu=None, gpus=8, rows=None)
    assert plan.memory_inputs.sharding == "fsdp_full" and not any("ZeRO/FSDP" in a for a in plan.assumptions)


def test_a_deepspeed_precision_contradiction_is_one_finding(tmp_path):
    ds = tmp_path / "ds.json"
    ds.write_text(json.dumps({"fp16": {"enabled": True}, "zero_optimization": {"stage": 2}}))
    report = api.lint([str(HERE / "full_8b.yaml")], project=None, launch=[str(ds)])
    # fp16.enabled true against the trainer's fp16 (unset: False, the TrainingArguments default)
    found = [(f.rule, f.data.get("key")) for f in report.findings
             if f.severity >= Severity.WARNING and f.rule == "deepspeed-file-contradicts-config"]
    assert found == [("deepspeed-file-contradicts-config", "fp16")]


def test_parameter_offload_makes_the_estimate_an_upper_bound_and_at_most_a_warning(tmp_path):
    ds = tmp_path / "ds.json"
    ds.write_text(json.dumps({"zero_optimization": {"stage": 3, "offload_param": {"device": "cpu"},
                                                    "offload_optimizer": {"device": "cpu"}}}))
    text = ("model_name_or_path: meta-llama/Meta-Llama-3-8B\ntorch_dtype: bfloat16\nbf16: true\n"
            "learning_rate: 1.0e-5\nper_device_train_batch_size: 8\nmax_length: 4096\n")
    fr = api.lint_text(text, "x.yaml", gpu="rtx-4090", gpus=2, launch=[str(ds)])
    (f,) = [f for f in fr.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.WARNING and "offloads parameters to CPU" in f.message
    view = fr.views[0]
    plan = derive_plan(view, model_of(view, "x.yaml", None), gpu=None, gpus=2, rows=None)
    assert plan.memory_inputs.offload_optimizer and plan.memory.optimizer_bytes == 0


def test_a_model_matched_by_its_name_alone_caps_model_verdicts_only():
    # "acme/...-Qwen3-4B-..." is matched to the Qwen3-4B shape by its name tokens: an assumption
    text = "model_name_or_path: acme/Qwen3-4B-Instruct-special\nlearning_rate: 1.0e-4\nbf16: true\n"
    fr = api.lint_text(text, "x.yaml", gpu="t4", gpus=1)
    by_rule = {f.rule: f for f in fr.findings}
    lr = by_rule["full-finetune-lr-too-high"]  # needs the model: rests on the name match
    assert lr.severity <= Severity.WARNING and "assuming the model is" in lr.message
    bf16 = by_rule["precision-unsupported-on-gpu"]  # bf16 written, the T4 flagged: no model involved
    assert bf16.severity == Severity.ERROR and "assuming the model" not in bf16.message
