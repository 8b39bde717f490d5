"""MLX LM fine-tuning configs: recognised as their own layout, their values and the runner's
defaults land in the view, and the loader's number reading is known.

The configs are our own (a Saltmarsh Cartography support-chat scenario). Expected values come from
mlx-lm 0.32.2 mlx_lm/lora.py (CONFIG_DEFAULTS, the float resolver of its YAML loader, train_model).
"""

from __future__ import annotations

from cfgcheck.findings import Severity
from cfgcheck.load import load_text
from cfgcheck.run import open_view
from cfgcheck.view import build_view

from .helpers import lint

MLX = """\
model: saltmarsh/harbour-chat-7b
train: true
fine_tune_type: lora
optimizer: adamw
data: data/harbour
num_layers: 8
batch_size: 2
iters: 600
val_batches: 25
learning_rate: 1e-5
steps_per_report: 10
steps_per_eval: 100
adapter_path: adapters
save_every: 100
grad_checkpoint: true
lora_parameters:
  rank: 16
  scale: 10.0
  dropout: 0.05
"""


def _view(text: str):
    view = build_view(load_text(text, "harbour.yaml", "yaml")[0])
    open_view(view, "harbour.yaml")
    return view


def test_an_mlx_lm_config_is_its_own_layout_and_its_values_land_in_the_view():
    view = _view(MLX)
    assert view.layout is not None and view.layout.name == "mlx-lm"
    assert view.method == "lora"
    assert view.value("model.ref") == "saltmarsh/harbour-chat-7b"
    assert view.value("adapter.rank") == 16
    assert view.value("adapter.dropout") == 0.05
    assert view.value("batch.per_device") == 2
    assert view.value("optim.lr") == 1e-5  # the loader's float resolver reads 1e-5 as a float
    assert view.value("runtime.gradient_checkpointing") is True
    # the LoRA scale is not an alpha: nothing fills adapter.alpha from it
    assert view.get("adapter.alpha") is None


def test_the_runner_defaults_fill_what_the_file_leaves_out():
    view = _view(MLX)
    # mlx-lm 0.32.2 CONFIG_DEFAULTS: max_seq_length 2048, grad_accumulation_steps 1
    seq = view.effective("data.seq_len")
    assert seq is not None and seq.value == 2048 and seq.origin == "default" and "mlx-lm" in seq.note
    assert view.effective_value("batch.accumulation") == 1
    # a written value is never replaced by a default
    assert view.effective("batch.per_device").origin != "default"
    bare = _view("model: saltmarsh/harbour-chat-7b\nfine_tune_type: lora\niters: 10\nsteps_per_eval: 5\n"
                 "lora_parameters: {rank: 8}\n")
    assert bare.effective_value("batch.per_device") == 4  # CONFIG_DEFAULTS batch_size


def test_full_means_the_last_blocks_only_and_dora_is_an_adapter():
    # train_model: "full" unfreezes model.layers[-num_layers:], 16 blocks unless num_layers is -1
    # some blocks train fully, the others stay frozen: neither a full fine-tune nor an adapter run
    full = _view(MLX.replace("fine_tune_type: lora", "fine_tune_type: full"))
    assert full.method is None and full.method_stated and not full.is_adapter
    assert _view(MLX.replace("fine_tune_type: lora", "fine_tune_type: dora")).method == "lora"
    # no fine_tune_type: CONFIG_DEFAULTS says lora
    assert _view(MLX.replace("fine_tune_type: lora\n", "")).method == "lora"


def test_an_exponent_without_a_dot_is_harmless_here_and_said_so():
    report = lint(MLX, "harbour.yaml")
    hits = [f for f in report.findings if f.rule == "yaml-version-dependent-value"]
    assert [(f.key, f.severity, f.data.get("variant")) for f in hits] == \
        [("learning_rate", Severity.INFO, "exponent-read-as-number")]


def test_a_plain_mlx_lm_config_gives_no_warning():
    report = lint(MLX, "harbour.yaml")
    assert [f.rule for f in report.findings if f.severity >= Severity.WARNING] == []


def test_the_loaders_float_resolver_holds_for_values_no_field_reads():
    # mlx-lm 0.32.2 lora.py: the resolver belongs to the YAML loader, so lr_schedule's warmup_init
    # (read by build_schedule, not by cfgcheck's view) is a float too
    text = MLX + "lr_schedule:\n  name: cosine_decay\n  warmup: 50\n  warmup_init: 1e-7\n  arguments: [1e-5, 600, 1e-7]\n"
    hits = [f for f in lint(text, "harbour.yaml").findings if f.rule == "yaml-version-dependent-value"]
    assert {f.data.get("variant") for f in hits} == {"exponent-read-as-number"}
    assert {f.severity for f in hits} == {Severity.INFO}
    assert "lr_schedule.warmup_init" in {f.key for f in hits}


def test_the_same_unknown_value_elsewhere_is_still_a_question():
    # a trainer-style file read by PyYAML: an untyped 1e-7 is text there, and cfgcheck says so
    text = "model_name_or_path: saltmarsh/harbour-chat-7b\nlearning_rate: 2.0e-5\nmy_floor: 1e-7\n"
    hits = [f for f in lint(text, "harbour.yaml").findings if f.rule == "yaml-version-dependent-value"]
    assert [(f.key, f.data.get("variant")) for f in hits] == [("my_floor", "exponent-type-unknown")]
