"""The recipe-runner and launcher layouts: detection, values, method, and the YAML-version severity.

Configs here are our own (Fjordline Analytics and Copperleaf scenarios), written in each layout.
"""

from __future__ import annotations

import pytest

from cfgcheck.findings import Severity
from cfgcheck.load import load_text
from cfgcheck.view import build_view

from .helpers import lint

AXOLOTL = """\
base_model: fjordline/support-7b
adapter: qlora
load_in_4bit: true
sequence_len: 2048
sample_packing: true
micro_batch_size: 2
gradient_accumulation_steps: 8
num_epochs: 2
learning_rate: 2e-5
lora_r: 16
lora_alpha: 32
lora_target_linear: true
"""

LLAMA_FACTORY = """\
model_name_or_path: fjordline/support-7b
stage: sft
finetuning_type: lora
lora_rank: 16
lora_target: q_proj,v_proj
quantization_bit: 4
cutoff_len: 4096
template: default
per_device_train_batch_size: 2
gradient_accumulation_steps: 4
learning_rate: 2e-5
"""

TORCHTUNE = """\
output_dir: /tmp/copperleaf
model:
  _component_: torchtune.models.llama3_1.qlora_llama3_1_8b
  lora_attn_modules: [q_proj, v_proj]
  apply_lora_to_mlp: true
  lora_rank: 16
  lora_alpha: 32
optimizer:
  _component_: torch.optim.AdamW
  lr: 2e-4
checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  output_dir: ${output_dir}
batch_size: 4
batch_size_val: ${batch_size}
gradient_accumulation_steps: 4
epochs: 1
dtype: bf16
enable_activation_checkpointing: true
"""

ACCELERATE = """\
compute_environment: LOCAL_MACHINE
distributed_type: FSDP
num_machines: 2
num_processes: 16
mixed_precision: bf16
fsdp_config:
  fsdp_sharding_strategy: FULL_SHARD
"""


def _view(text, name="case.yaml"):
    return build_view(load_text(text, name)[0])


@pytest.mark.parametrize("text,layout,method,values", [
    (AXOLOTL, "axolotl", "qlora", {"adapter.rank": 16, "batch.per_device": 2, "optim.epochs": 2,
                                    "data.seq_len": 2048, "adapter.target_all_linear": True}),
    (LLAMA_FACTORY, "llama-factory", "qlora", {"adapter.rank": 16, "quant.bits": 4, "data.seq_len": 4096,
                                                "adapter.targets": "q_proj,v_proj"}),
    (TORCHTUNE, "torchtune", "qlora", {"adapter.rank": 16, "batch.per_device": 4, "optim.lr": 2e-4,
                                        "runtime.gradient_checkpointing": True, "adapter.mlp": True}),
    (ACCELERATE, "accelerate", None, {"hardware.num_gpus": 16, "launch.num_machines": 2,
                                      "precision.mixed": "bf16", "runtime.distributed": "FSDP"}),
])
def test_layout_values(text, layout, method, values):
    view = _view(text)
    assert view.layout.name == layout
    assert view.method == method
    for name, want in values.items():
        assert view.value(name) == want, name


def test_llama_factory_default_method_is_lora_and_freeze_is_neither():
    # LLaMA-Factory FinetuningArguments.finetuning_type defaults to "lora"
    base = "model_name_or_path: a/b\nstage: sft\ncutoff_len: 1024\ntemplate: default\n"
    assert _view(base).method == "lora"
    assert _view(base + "finetuning_type: freeze\n").method is None
    assert _view(base + "finetuning_type: full\n").method == "full"


def test_torchtune_full_builder_is_full():
    text = TORCHTUNE.replace("qlora_llama3_1_8b", "llama3_1_8b")
    assert _view(text).method == "full"


def _yaml_finding(text):
    report = lint(text)
    hits = [f for f in report.findings if f.rule == "yaml-version-dependent-value"]
    assert len(hits) == 1
    return hits[0]


def test_exponent_is_info_where_the_loader_reads_a_float():
    for text in (AXOLOTL, TORCHTUNE):
        f = _yaml_finding(text)
        assert f.severity == Severity.INFO
        assert "harmless" in f.message and f.data["variant"] == "exponent-read-as-number"


def test_exponent_stays_a_warning_for_argument_parser_layouts():
    for text in (LLAMA_FACTORY, "learning_rate: 2e-5\nnum_train_epochs: 1\n"):
        f = _yaml_finding(text)
        assert f.severity == Severity.WARNING


def test_omegaconf_reads_the_exponent_as_a_float():
    omegaconf = pytest.importorskip("omegaconf")  # the reference for the torchtune layout's claim
    cfg = omegaconf.OmegaConf.create("lr: 2e-5\n")
    assert isinstance(cfg.lr, float) and cfg.lr == 2e-5


def test_pydantic_coerces_exponent_text_to_float():
    pydantic = pytest.importorskip("pydantic")  # axolotl validates its config with pydantic

    class Settings(pydantic.BaseModel):
        learning_rate: float

    assert Settings(learning_rate="2e-5").learning_rate == 2e-5


def test_interpolation_inside_the_file():
    view = _view(TORCHTUNE)
    from cfgcheck.view import resolve_interpolation

    assert resolve_interpolation(view.doc.data, "${batch_size}") == (True, 4)
    assert resolve_interpolation(view.doc.data, "${output_dir}/logs") == (True, "/tmp/copperleaf/logs")
    assert resolve_interpolation(view.doc.data, "${oc.env:HOME}") == (False, "${oc.env:HOME}")
    assert resolve_interpolation(view.doc.data, "${missing}") == (False, "${missing}")
    loop = {"a": "${b}", "b": "${a}"}
    assert resolve_interpolation(loop, "${a}")[0] in (True, False)  # terminates


def test_interpolated_field_takes_the_target_value():
    text = TORCHTUNE.replace("batch_size: 4\n", "base_batch: 4\nbatch_size: ${base_batch}\n")
    f = _view(text).get("batch.per_device")
    assert f.value == 4 and f.written == "${base_batch}"


# --------------------------------------------------------------------------- component recipes' model

_TT_LLAMA2 = """\
model:
  _component_: torchtune.models.llama2.lora_llama2_7b
  lora_attn_modules: [q_proj, v_proj]
  lora_rank: 8
  lora_alpha: 16
tokenizer:
  _component_: torchtune.models.llama2.llama2_tokenizer
  path: /nonexistent/acme-llama2/tokenizer.model
  max_seq_len: 8192
checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  checkpoint_dir: /nonexistent/acme-llama2
  checkpoint_files: [model.safetensors]
  model_type: LLAMA2
  output_dir: /tmp/out
enable_activation_checkpointing: true
max_steps_per_epoch: null
log_every_n_steps: 1
batch_size: 2
epochs: 1
"""


def test_component_recipe_model_comes_from_its_builder():
    from cfgcheck import engine
    from cfgcheck.load import load_text
    from cfgcheck.view import build_view

    view = build_view(load_text(_TT_LLAMA2, "r.yaml")[0])
    ref = view.get("model.ref")
    assert ref.value == "meta-llama/Llama-2-7b-hf" and ref.path == ("model", "_component_")
    assert "lora_llama2_7b" in ref.note
    # Llama 2 has a 4096-token context (Touvron et al. 2023, table 1; torchtune llama2_7b max_seq_len=4096)
    report = engine.lint_text(_TT_LLAMA2, "r.yaml")
    hits = [f for f in report.findings if f.rule == "seq-len-above-context-window"]
    assert hits and hits[0].severity.word == "warning" and hits[0].key == "tokenizer.max_seq_len"


def test_component_recipe_model_from_the_checkpoint_folder(tmp_path):
    import json

    from cfgcheck import engine

    folder = tmp_path / "acme-model"
    folder.mkdir()
    # a Llama-2-7B-shaped config.json (shapes: Touvron et al. 2023, table 1)
    (folder / "config.json").write_text(json.dumps({
        "architectures": ["LlamaForCausalLM"], "model_type": "llama", "hidden_size": 4096,
        "intermediate_size": 11008, "num_hidden_layers": 32, "num_attention_heads": 32,
        "num_key_value_heads": 32, "vocab_size": 32000, "max_position_embeddings": 4096,
        "tie_word_embeddings": False, "torch_dtype": "float16"}))
    text = _TT_LLAMA2.replace("torchtune.models.llama2.lora_llama2_7b", "acme.models.custom_builder")
    text = text.replace("/nonexistent/acme-llama2", str(folder))
    cfg = tmp_path / "r.yaml"
    cfg.write_text(text)
    report = engine.lint_file(cfg)
    hits = [f for f in report.findings if f.rule == "seq-len-above-context-window"]
    assert hits and hits[0].severity.word == "warning"


def test_recipe_runner_added_tokens_feed_the_chat_format_view():
    from cfgcheck import engine

    text = ("base_model: mistralai/Mistral-7B-v0.1\nadapter: lora\nlora_r: 16\nlora_alpha: 32\n"
            "lora_target_linear: true\nmicro_batch_size: 2\nsequence_len: 2048\nsample_packing: true\n"
            "chat_template: chatml\nspecial_tokens:\n  eos_token: \"<|im_end|>\"\n"
            "tokens:\n  - \"<|im_start|>\"\n  - \"<|im_end|>\"\n")
    report = engine.lint_text(text, "a.yaml")
    hits = [f for f in report.findings if f.rule == "chat-format-untrained-embeddings"]
    assert hits and hits[0].key == "tokens"
    fixed = text + "lora_modules_to_save:\n  - embed_tokens\n  - lm_head\n"
    assert not [f for f in engine.lint_text(fixed, "a.yaml").findings
                if f.rule == "chat-format-untrained-embeddings"]
