"""Settings are found by what they are, under whatever section holds them.

The same run is written flat and under many section names and prefix styles; every spelling
must give the same findings (rule, severity and the numbers behind them), each located at the
key that spelled the value. Organisations and tasks are invented.
"""

from __future__ import annotations

import itertools

import pytest
import yaml

from cfgcheck import engine
from cfgcheck.load import load_text
from cfgcheck.view import build_view

# Llama 2 7B: 4096-token context, 6.74B parameters (Touvron et al. 2023, table 1; the bundled catalogue)
MODEL = "meta-llama/Llama-2-7b-hf"

MODEL_STYLES = [
    {"model_name_or_path": MODEL},
    {"model": {"name_or_path": MODEL}},
    {"model": {"name": MODEL}},
    {"model_args": {"model_name_or_path": MODEL}},
    {"model_arguments": {"model_id": MODEL}},
    {"model": MODEL},
    {"model": {"model_name": MODEL}},
    {"model_config": {"model_path": MODEL}},
]
SCHEDULE_STYLES = [
    {"lr_scheduler_type": "constant", "warmup_steps": 100},
    {"schedule": {"type": "constant", "warmup_steps": 100}},
    {"scheduler": {"name": "constant", "num_warmup_steps": 100}},
    {"lr_schedule": {"lr_scheduler_type": "constant", "warmup_steps": 100}},
    {"training": {"lr_scheduler_type": "constant", "warmup_steps": 100}},
    {"optim": {"scheduler": "constant", "num_warmup_steps": 100}},
    {"scheduler_config": {"type": "constant", "warmup_steps": 100}},
    {"lr_scheduler_type": "constant", "num_warmup_steps": 100},
]
OPTIM_STYLES = [
    {"learning_rate": 1.0e-4},
    {"optim": {"lr": 1.0e-4}},
    {"optimizer": {"learning_rate": 1.0e-4, "name": "adamw_torch"}},
    {"optimization": {"lr": 1.0e-4}},
    {"hyperparameters": {"learning_rate": 1.0e-4}},
    {"trainer": {"lr": 1.0e-4}},
    {"config": {"lr": 1.0e-4}},
    {"params": {"lr": 1.0e-4}},
    {"optimizer_config": {"lr": 1.0e-4}},
]
BATCH_STYLES = [
    {"per_device_train_batch_size": 4, "max_seq_length": 8192},
    {"train": {"batch_size": 4}, "data": {"max_length": 8192}},
    {"training_args": {"per_device_train_batch_size": 4}, "tokenizer": {"max_seq_length": 8192}},
    # an author's own section name: searched for the names as written
    {"run_settings": {"per_device_train_batch_size": 4, "max_seq_length": 8192}},
]


def _merge(*parts: dict) -> dict:
    out: dict = {}
    for part in parts:
        for key, value in part.items():
            if isinstance(value, dict) and isinstance(out.get(key), dict):
                out[key] = {**out[key], **value}
            else:
                out[key] = value
    return out


def _signature(text: str) -> list[tuple]:
    report = engine.lint_text(text, "run.yaml")
    assert report.problem is None and not report.internal
    out = []
    for f in report.findings:
        if f.rule in ("unknown-key", "key-not-in-release"):
            continue  # about the spelling of keys (and which releases accept it), not about the run
        numbers = tuple(sorted((k, v) for k, v in f.data.items()
                               if isinstance(v, (int, float)) and not isinstance(v, bool)))
        out.append((f.rule, f.severity.word, numbers))
    return sorted(out)


def _combinations():
    combos = list(itertools.product(MODEL_STYLES, SCHEDULE_STYLES, OPTIM_STYLES, BATCH_STYLES))
    # every style of each part at least once, paired with others in turn (not the full product)
    n = max(len(MODEL_STYLES), len(SCHEDULE_STYLES), len(OPTIM_STYLES), len(BATCH_STYLES))
    picked = [(MODEL_STYLES[i % len(MODEL_STYLES)], SCHEDULE_STYLES[(i * 2) % len(SCHEDULE_STYLES)],
               OPTIM_STYLES[(i * 3) % len(OPTIM_STYLES)], BATCH_STYLES[i % len(BATCH_STYLES)])
              for i in range(n * 3)]
    return picked + combos[:: max(1, len(combos) // 40)]


def test_the_same_run_under_any_section_names_gives_the_same_findings():
    flat = yaml.safe_dump(_merge(MODEL_STYLES[0], SCHEDULE_STYLES[0], OPTIM_STYLES[0], BATCH_STYLES[0]),
                          sort_keys=False)
    expected = _signature(flat)
    rules = {r for r, _s, _n in expected}
    # the planted defects: full fine-tune of a 7B at 1e-4, a constant schedule with warm-up,
    # an 8192-token sequence on a 4096-token model
    assert {"full-finetune-lr-too-high", "constant-schedule-ignores-warmup",
            "seq-len-above-context-window"} <= rules
    for parts in _combinations():
        text = yaml.safe_dump(_merge(*parts), sort_keys=False)
        assert _signature(text) == expected, text


@pytest.mark.parametrize("section", ["eval", "evaluation", "validation"])
def test_an_evaluation_batch_size_is_a_different_setting(section):
    text = (f"model_name_or_path: {MODEL}\ntrain:\n  batch_size: 4\n"
            f"{section}:\n  batch_size: 64\n  steps: 50\n")
    view = build_view(load_text(text, "run.yaml")[0])
    assert view.get("batch.per_device").path == ("train", "batch_size")
    assert view.value("batch.per_device") == 4
    # the evaluation section's own local name is read as what it is
    assert view.get("cadence.eval_steps").path == (section, "steps")


def test_an_evaluation_section_alone_gives_no_training_batch():
    text = f"model_name_or_path: {MODEL}\neval:\n  batch_size: 64\n  per_device_eval_batch_size: 64\n"
    view = build_view(load_text(text, "run.yaml")[0])
    assert view.get("batch.per_device") is None


def test_a_reference_model_section_is_not_the_trained_model():
    text = ("model_name_or_path: acme/policy-1b\nlearning_rate: 1.0e-5\n"
            f"ref_model:\n  model_name_or_path: {MODEL}\n  learning_rate: 0.5\n")
    view = build_view(load_text(text, "run.yaml")[0])
    assert view.value("model.ref") == "acme/policy-1b"
    assert view.value("optim.lr") == 1.0e-5


def test_a_setting_written_twice_says_which_one_is_used():
    text = "learning_rate: 2.0e-5\ntraining:\n  learning_rate: 1.0e-4\n  per_device_train_batch_size: 4\n"
    view = build_view(load_text(text, "run.yaml")[0])
    lr = view.get("optim.lr")
    assert lr.path == ("learning_rate",) and lr.value == 2.0e-5
    assert "training.learning_rate" in lr.note and "learning_rate is used" in lr.note


def test_prefix_styles_inside_adapter_sections():
    styles = [
        "use_peft: true\nlora_r: 16\nlora_alpha: 8\n",
        "lora:\n  r: 16\n  alpha: 8\n",
        "peft:\n  lora_r: 16\n  lora_alpha: 8\n",
        "adapter:\n  rank: 16\n  alpha: 8\n",
        "peft_config:\n  r: 16\n  lora_alpha: 8\n",
    ]
    for body in styles:
        view = build_view(load_text("model_name_or_path: acme/tiny-1b\n" + body, "run.yaml")[0])
        assert (view.value("adapter.rank"), view.value("adapter.alpha")) == (16, 8), body
        assert view.method == "lora", body


def test_quantisation_sections_by_their_local_names():
    text = ("model_name_or_path: acme/tiny-1b\nlora:\n  r: 8\nquantization:\n  load_in_4bit: true\n"
            "  quant_type: fp4\n  compute_dtype: bfloat16\n")
    view = build_view(load_text(text, "run.yaml")[0])
    assert view.value("quant.type_4bit") == "fp4"
    assert view.value("quant.compute_dtype") == "bfloat16"
    assert view.method == "qlora"


def test_adapter_and_quantisation_sections_say_the_method():
    text = ("model:\n  name_or_path: acme/tiny-1b\nadapter:\n  type: lora\n  rank: 16\n  alpha: 32\n"
            "quantization:\n  bits: 4\n  quant_type: nf4\n")
    view = build_view(load_text(text, "run.yaml")[0])
    assert view.method == "qlora" and view.method_stated
    assert view.value("quant.bits") == 4
