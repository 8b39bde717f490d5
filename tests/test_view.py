"""The typed view: the same run written in different key layouts gives the same fields."""

from __future__ import annotations

import pytest

from cfgcheck.load import load_text
from cfgcheck.view import build_view


def view_of(text, name="c.yaml"):
    return build_view(load_text(text, name)[0])


FLAT = "use_peft: true\nlora_r: 16\nlora_alpha: 32\nlearning_rate: 2.0e-4\nper_device_train_batch_size: 4\ngradient_accumulation_steps: 8\n"
NESTED = "model:\n  use_peft: true\nlora:\n  lora_r: 16\n  lora_alpha: 32\ntraining:\n  learning_rate: 2.0e-4\n  per_device_train_batch_size: 4\n  gradient_accumulation_steps: 8\n"
DROPPED = "peft:\n  r: 16\n  alpha: 32\n  dropout: 0.05\ntraining:\n  learning_rate: 2.0e-4\n  per_device_train_batch_size: 4\n  gradient_accumulation_steps: 8\n"


@pytest.mark.parametrize("text", [FLAT, NESTED, DROPPED], ids=["flat", "nested", "prefix-dropped"])
def test_same_fields_from_every_trainer_spelling(text):
    v = view_of(text)
    assert v.layout.name == "trainer"
    assert v.method == "lora"
    assert (v.value("adapter.rank"), v.value("adapter.alpha")) == (16, 32)
    assert v.value("optim.lr") == 2.0e-4
    assert (v.value("batch.per_device"), v.value("batch.accumulation")) == (4, 8)


def test_fields_keep_their_key_path():
    v = view_of(DROPPED)
    assert v.get("adapter.alpha").key == "peft.alpha"
    assert v.get("adapter.dropout").value == 0.05
    assert v.get("optim.lr").key == "training.learning_rate"


def test_method_inference():
    assert view_of("learning_rate: 2.0e-5\nnum_train_epochs: 3\n").method == "full"
    assert view_of("use_peft: false\nlora_r: 16\nlearning_rate: 2.0e-5\n").method == "full"
    assert view_of("use_peft: true\nlora_r: 16\nload_in_4bit: true\n").method == "qlora"
    assert view_of("lora_r: 8\nlora_alpha: 16\nlearning_rate: 1.0e-4\n").method == "lora"


def test_deepspeed_layout_and_auto():
    text = '{"train_batch_size": "auto", "train_micro_batch_size_per_gpu": 4, "gradient_accumulation_steps": 8, "bf16": {"enabled": true}, "zero_optimization": {"stage": 3}, "optimizer": {"type": "AdamW", "params": {"lr": 3e-5}}}'
    v = view_of(text, "ds.json")
    assert v.layout.name == "deepspeed" and v.method is None
    assert v.get("batch.global").auto and v.value("batch.global") is None
    assert v.value("batch.per_device") == 4 and v.value("runtime.zero_stage") == 3
    assert v.value("precision.bf16") is True and v.value("optim.lr") == 3e-5
    assert v.get("precision.bf16").key == "bf16.enabled"


def test_peft_adapter_config():
    text = '{"peft_type": "LORA", "base_model_name_or_path": "acme/m-1b", "r": 32, "lora_alpha": 64, "target_modules": ["q_proj", "v_proj"], "task_type": "CAUSAL_LM", "use_rslora": false}'
    v = view_of(text, "adapter_config.json")
    assert v.layout.name == "peft-adapter" and v.method == "lora"
    assert (v.value("adapter.rank"), v.value("adapter.alpha")) == (32, 64)
    assert v.value("adapter.targets") == ["q_proj", "v_proj"]


def test_numbers_written_as_text_are_read_and_marked():
    v = view_of("learning_rate: 1e-4\nper_device_train_batch_size: 4\n")
    f = v.get("optim.lr")
    assert f.value == 1e-4 and f.from_text and f.written == "1e-4"
    assert v.type_problems == []


def test_type_problems():
    v = view_of("learning_rate: fast\nper_device_train_batch_size: [4]\nbf16: maybe\n")
    assert sorted(p.field.name for p in v.type_problems) == ["batch.per_device", "optim.lr", "precision.bf16"]


@pytest.mark.parametrize("text,why", [
    ("on:\n  push: {}\njobs:\n  test:\n    runs-on: ubuntu-latest\n    steps: []\n", "github-workflow"),
    ("services:\n  web:\n    image: nginx\nvolumes: {}\n", "compose"),
    ("- a\n- b\n", "not a mapping"),
    ("", "empty"),
    ("name: my-dataset\nsplit: train\n", "no training-config keys"),
])
def test_files_that_are_not_training_configs_are_skipped(text, why):
    v = view_of(text)
    assert v.layout is None and why in v.skipped


def test_layout_found_is_the_best_score_of_every_layout():
    # the layouts a document is scored against are picked by its keys; scoring every layout must
    # give the same answer
    from cfgcheck.layouts import BY_NAME, LAYOUTS
    from cfgcheck.view import _score, detect_layout

    def every_layout(data):
        top = frozenset(k for k in data if isinstance(k, str))
        best, best_score = None, 0
        for layout in LAYOUTS:
            s = _score(layout, data, top)
            if s >= layout.min_score and layout.extends and top & layout.extends_marks:
                s += _score(BY_NAME[layout.extends], data, top)
            if s >= layout.min_score and s > best_score:
                best, best_score = layout, s
        return best

    docs = [
        {"learning_rate": 2e-5, "per_device_train_batch_size": 4, "num_train_epochs": 1},
        {"training": {"learning_rate": 1e-4, "lora_r": 8}, "model": {"name_or_path": "acme/m"}},
        {"zero_optimization": {"stage": 2}, "train_micro_batch_size_per_gpu": 1},
        {"base_model": "acme/m", "adapter": "lora", "lora_r": 16, "micro_batch_size": 2},
        {"Trainer": {"LearningRate": 3e-4}, "notes": "x"},
        {"r": 8, "lora_alpha": 16, "peft_type": "LORA", "target_modules": ["q_proj"]},
        {"compute_environment": "LOCAL_MACHINE", "distributed_type": "DEEPSPEED"},
        {"x": {"y": {"z": 1}}, "w": 2},
        {"model_name_or_path": "acme/m", "stage": "sft", "finetuning_type": "lora", "lora_rank": 8},
    ]
    for data in docs:
        found, why = detect_layout(data)
        assert found is every_layout(data), data


def test_a_view_and_the_run_that_holds_it_print_without_recursing():
    """An opened run holds its view and the view its run: the repr shows the cycle as ``...``
    (as a dataclass's repr does) instead of recursing until Python gives up."""
    from cfgcheck.load import load_text
    from cfgcheck.run import open_view
    from cfgcheck.view import build_view

    doc = load_text("model_name_or_path: acme/tiny-7b\nlearning_rate: 2.0e-5\n", "run.yaml")[0]
    view = build_view(doc)
    run = open_view(view, "run.yaml")
    assert view.run is run and run.view is view
    text = repr(view)
    assert text.startswith("RunView(") and "..." in text
    assert "learning_rate" in text  # the fields are still shown
