"""The run plan and the memory rule, end to end through the view."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from typer.testing import CliRunner

from cfgcheck import api
from cfgcheck.cli import app
from cfgcheck.findings import Severity

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()

FULL_7B = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
           "per_device_train_batch_size: 1\ngradient_accumulation_steps: 16\nmax_seq_length: 2048\nbf16: true\n")


def test_full_7b_on_one_24gb_card_is_an_error(tmp_path):
    cfg = tmp_path / "full7b.yaml"
    cfg.write_text(FULL_7B)
    result = api.derive([cfg], gpu="rtx-4090")
    ((_, plan),) = result.runs
    # no torch_dtype: transformers 5 loads the checkpoint's dtype (from_pretrained dtype=None -> "auto";
    # Llama-2-7b-hf's config.json says float16), and torch's AdamW keeps its states in that dtype:
    # 2 + 2 + 2 x 2 = 8 bytes/param x 6,738,415,616 params = 53.9 GB (Llama-2-7b count from
    # REFERENCES.md sec. 13); activations and logits come on top
    assert plan.total_parameters == 6_738_415_616
    states = plan.memory.weights_bytes + plan.memory.gradients_bytes + plan.memory.optimizer_bytes + plan.memory.master_weights_bytes
    assert states == 8 * 6_738_415_616
    assert any("checkpoint's dtype fp16" in n and "transformers 5" in n for n in plan.memory.notes)
    assert plan.memory.total_bytes > 24e9
    rep = api.lint([cfg], gpu="rtx-4090", gpus=1)  # one card: nothing to shard across
    (f,) = [f for f in rep.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.ERROR and "does not fit" in f.message and "GeForce RTX 4090" in f.message
    assert "changes that fit" in f.hint and "->" in f.hint
    assert f.data["total_bytes"] == plan.memory.total_bytes


def test_plan_json_has_the_documented_numbers(tmp_path):
    cfg = tmp_path / "full7b.yaml"
    cfg.write_text(FULL_7B)
    r = runner.invoke(app, ["derive", str(cfg), "--gpu", "a100-80gb", "--rows", "1000", "--format", "json"])
    assert r.exit_code == 0, r.output
    (p,) = json.loads(r.output)["runs"]
    assert p["total_parameters"] == 6_738_415_616 == p["trainable_parameters"]
    # 1,000 rows, per-device 1, accumulation 16, 1 GPU -> effective batch 16, ceil(1000/16) = 63 steps
    # per epoch (transformers Trainer rounding), 3 epochs (trainer default) -> 189 steps
    assert p["effective_batch_size"] == 16 and p["steps_per_epoch"] == 63 and p["total_steps"] == 189
    m = p["memory"]
    assert set(m) >= {"weights_bytes", "gradients_bytes", "optimizer_bytes", "activations_bytes", "total_bytes", "capacity_bytes"}
    assert m["capacity_bytes"] == 80 * 10**9 and m["total_bytes"] > 53.9e9  # 8 B/param in fp16 (see above)


def test_full_7b_loaded_in_fp32_is_16_bytes_per_parameter(tmp_path):
    # fp32 weights + bf16 autocast: 4 B weights + 4 B gradients + 2 x 4 B AdamW states = 16 bytes/param,
    # 107.8 GB of model states (ZeRO paper sec. 3.1) before activations
    cfg = tmp_path / "full7b32.yaml"
    cfg.write_text(FULL_7B + "torch_dtype: float32\n")
    ((_, plan),) = api.derive([cfg], gpu="a100-80gb").runs
    m = plan.memory
    assert m.weights_bytes + m.gradients_bytes + m.optimizer_bytes + m.master_weights_bytes == 16 * 6_738_415_616
    assert m.weight_copies_bytes > 0 and m.total_bytes > 100e9


def test_plan_text_shows_bars_and_verdict():
    r = runner.invoke(app, ["derive", str(ROOT / "fixtures" / "demo" / "fjordline-full-7b.yaml"), "--gpu", "t4", "--rows", "1000"])
    assert r.exit_code == 0
    assert "DOES NOT FIT" in r.output and "#" in r.output and "config.json" in r.output


def test_qlora_7b_fits_a_24gb_card():
    text = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nload_in_4bit: true\nbnb_4bit_quant_type: nf4\n"
            "bnb_4bit_use_double_quant: true\nlora_r: 16\nlora_alpha: 32\nper_device_train_batch_size: 1\n"
            "gradient_checkpointing: true\nmax_seq_length: 1024\nbf16: true\n")
    rep = api.lint_text(text, "q.yaml", gpu="rtx-4090")
    assert [f for f in rep.findings if f.rule == "memory-exceeds-gpu"] == []


def test_unknown_model_memory_is_not_judged():
    rep = api.lint_text("model_name_or_path: acme/mystery\nlearning_rate: 2.0e-5\n", "u.yaml", gpu="t4")
    (f,) = [f for f in rep.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.INFO and "not known offline" in f.message


def test_local_model_folder_gives_the_size(tmp_path):
    folder = tmp_path / "models" / "m"
    folder.mkdir(parents=True)
    # Llama-2-7b shapes (REFERENCES.md sec. 13): 6,738,415,616 parameters
    folder.joinpath("config.json").write_text(json.dumps({
        "model_type": "llama", "hidden_size": 4096, "intermediate_size": 11008, "num_hidden_layers": 32,
        "num_attention_heads": 32, "num_key_value_heads": 32, "vocab_size": 32000, "tie_word_embeddings": False}))
    runs = tmp_path / "runs"
    runs.mkdir()
    cfg = runs / "full.yaml"
    cfg.write_text("model_name_or_path: ../models/m\nlearning_rate: 1.0e-4\n")  # relative to the config's folder
    rep = api.lint([cfg])
    (f,) = [f for f in rep.findings if f.rule == "full-finetune-lr-too-high"]
    assert f.severity == Severity.WARNING and f.data["size"] == "6.74" and "config.json" in f.data["how"]


def test_rslora_hint_uses_model_width():
    # alpha ~ sqrt(hidden_size) under rsLoRA: a rule of thumb (common practice, no source); Llama-2-7b h=4096 -> 64
    text = "model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 256\nlora_alpha: 8\nuse_rslora: true\n"
    rep = api.lint_text(text, "r.yaml")
    (f,) = [f for f in rep.findings if f.rule == "lora-scale-below-one"]
    assert "√hidden_size = 64" in f.hint


def _zero_run(tmp_path, stage):
    # a local model folder with the 7.5B llama-shaped stand-in of tests/test_memory.py (invented shapes)
    model = tmp_path / "stand-in-7b5"
    model.mkdir(exist_ok=True)
    (model / "config.json").write_text(json.dumps({
        "model_type": "llama", "hidden_size": 4096, "intermediate_size": 11008, "num_hidden_layers": 36,
        "num_attention_heads": 32, "num_key_value_heads": 32, "vocab_size": 26161,
        "max_position_embeddings": 4096, "tie_word_embeddings": False, "torch_dtype": "bfloat16"}))
    (tmp_path / f"z{stage}.json").write_text(json.dumps({
        "bf16": {"enabled": True}, "zero_optimization": {"stage": stage},
        "train_micro_batch_size_per_gpu": "auto", "gradient_accumulation_steps": "auto"}))
    cfg = tmp_path / f"run{stage}.yaml"
    cfg.write_text("model_name_or_path: ./stand-in-7b5\nlearning_rate: 1.0e-5\nper_device_train_batch_size: 1\n"
                   f"max_seq_length: 512\nbf16: true\ngradient_checkpointing: true\ndeepspeed: z{stage}.json\n")
    return cfg


ZERO_FIG1 = ((0, 120.0), (1, 31.4), (2, 16.6), (3, 1.9))  # ZeRO paper Fig. 1, psi = 7.5B, N_d = 64, K = 12


def _states(m):
    return m.weights_bytes + m.gradients_bytes + m.optimizer_bytes + m.master_weights_bytes


def test_zero_stages_of_the_papers_example_through_lint(tmp_path):
    # the memory rule's run, with the linked DeepSpeed file attached by the engine: 120 / 31.4 / 16.6 /
    # 1.9 GB of model states for stages 0-3; stage 0 with a bf16 block is 16 bytes/param too
    from cfgcheck.plan import derive_plan, model_of

    for stage, expected in ZERO_FIG1:
        cfg = _zero_run(tmp_path, stage)
        rep = api.lint([cfg], gpu="t4", gpus=64)
        (view,) = rep.files[0].views
        plan = derive_plan(view, model_of(view, str(cfg), tmp_path), gpu=None, gpus=64, rows=None)
        assert round(_states(plan.memory) / 1e9, 1) == expected, stage
        hits = [f for f in rep.findings if f.rule == "memory-exceeds-gpu"]
        if plan.memory.total_bytes > 0.9 * 16e9:  # the T4's 16 GB
            assert hits and hits[0].data["total_bytes"] == plan.memory.total_bytes, stage
        else:
            assert not hits, stage


def test_zero_stages_of_the_papers_example_through_derive(tmp_path):
    got = []
    for stage, _expected in ZERO_FIG1:
        ((_, plan),) = api.derive([_zero_run(tmp_path, stage)], gpu="t4", gpus=64).runs
        got.append(round(_states(plan.memory) / 1e9, 1))
    assert got == [e for _s, e in ZERO_FIG1]


def test_unmodelled_optimizer_is_not_estimated_rather_than_an_error(tmp_path):
    # GaLore keeps low-rank projected states (transformers OptimizerNames "galore_adamw"): AdamW's
    # arithmetic would be a made-up figure, so the memory rule says it did not judge
    cfg = tmp_path / "galore.yaml"
    cfg.write_text(FULL_7B + "optim: galore_adamw\n")
    ((_, plan),) = api.derive([cfg], gpu="rtx-4090").runs
    assert plan.memory is None and "not modelled" in plan.memory_problem
    rep = api.lint([cfg], gpu="rtx-4090")
    hits = [f for f in rep.findings if f.rule == "memory-exceeds-gpu"]
    assert hits and all(f.severity == Severity.INFO for f in hits) and "not modelled" in hits[0].message


def test_the_estimate_alone_is_the_estimate_of_the_described_plan(tmp_path):
    # the memory rule works out the estimate without the words that describe the run, and the
    # described plan only when it reports: both must rest on the same inputs and give the same bytes
    from cfgcheck.memo import scope
    from cfgcheck.plan import derive_plan, model_of
    from cfgcheck.run import open_view
    from cfgcheck.view import build_view
    from cfgcheck.load import load_text
    from cfgcheck.engine import Options

    text = FULL_7B + "lora_r: 16\nlora_target: q_proj,v_proj\nfinetuning_type: lora\nstage: sft\n"
    cfg = tmp_path / "lora.yaml"
    cfg.write_text(text)
    ((_, described),) = api.derive([cfg], gpu="a10").runs
    for kept in (False, True):  # outside and inside a run's memo scope
        (doc,) = load_text(text, str(cfg))
        view = build_view(doc)
        run = open_view(view, str(cfg), Options())
        arch = model_of(view, str(cfg), None)
        if kept:
            with scope():
                bare = derive_plan(view, arch, gpu=None, gpus=run.gpus, rows=None, describe=False)
        else:
            bare = derive_plan(view, arch, gpu=None, gpus=run.gpus, rows=None, describe=False)
        assert bare.memory is not None and bare.memory == described.memory
        assert bare.memory_inputs == described.memory_inputs
        assert bare.context == "" and bare.learning_rate is None and bare.strategies == {}
    assert described.context and described.learning_rate == 2.0e-5


@pytest.mark.parametrize("extra, words", [
    ("model_name_or_path: acme/mystery\nlearning_rate: 2.0e-5\n", "not known offline ('acme/mystery')"),
    (FULL_7B + "use_galore: true\n", "optimizer not modelled by the estimate (use_galore: true)"),
])
def test_the_rule_says_why_there_is_no_estimate_as_the_plan_does(tmp_path, extra, words):
    # the rule says it before working out any number; derive's plan says it after the schedule:
    # the same reason in the same words
    cfg = tmp_path / "run.yaml"
    cfg.write_text(extra)
    ((_, plan),) = api.derive([cfg], project=None, gpu="a10").runs
    assert plan.memory is None and words in plan.memory_problem
    rep = api.lint([cfg], project=None, gpu="a10")
    (f,) = [f for f in rep.findings if f.rule == "memory-exceeds-gpu"]
    assert f.severity == Severity.INFO and f.data["reason"] == plan.memory_problem


@pytest.mark.parametrize("extra", [
    "",  # nothing names the sharding
    "deepspeed: ds.json\n",  # ZeRO-3 with parameter offload, and no GPU count
    "fsdp: full_shard auto_wrap\n",
    "max_seq_length: 0\n",  # an assumed sequence length
])
def test_the_bare_estimate_keeps_every_number_of_the_described_plan(tmp_path, extra):
    # without describe the plan leaves out the words of what the estimate rests on (the memory
    # rule reads them only from the described plan it makes before it reports); every number
    # and the reason for no estimate stay as the described plan has them
    from cfgcheck.engine import Options
    from cfgcheck.load import load_text
    from cfgcheck.plan import derive_plan, model_of
    from cfgcheck.run import open_view
    from cfgcheck.view import build_view

    (tmp_path / "ds.json").write_text(json.dumps({"zero_optimization": {
        "stage": 3, "offload_param": {"device": "cpu"}, "offload_optimizer": {"device": "cpu"}}, "bf16": {"enabled": True}}))
    text = FULL_7B.replace("max_seq_length: 2048\n", "") + extra
    cfg = tmp_path / "run.yaml"
    cfg.write_text(text)
    (doc,) = load_text(text, str(cfg))
    view = build_view(doc)
    run = open_view(view, str(cfg), Options())
    arch = model_of(view, str(cfg), None)
    bare = derive_plan(view, arch, gpu=None, gpus=run.gpus, rows=None, describe=False)
    described = derive_plan(view, arch, gpu=None, gpus=run.gpus, rows=None)
    assert bare.memory is not None and bare.memory == described.memory
    assert (bare.memory_inputs, bare.memory_problem, bare.gpus_assumed, bare.seq_len, bare.seq_len_assumed,
            bare.total_parameters, bare.trainable_parameters) == \
        (described.memory_inputs, described.memory_problem, described.gpus_assumed, described.seq_len,
         described.seq_len_assumed, described.total_parameters, described.trainable_parameters)
    assert set(bare.assumptions) <= set(described.assumptions)
