"""Planted defects are found wherever and however the setting is written.

Each case is a small project of invented configs (made-up organisations and tasks) in one of the
layouts cfgcheck reads, written the way practitioners write them, with one defect planted: the
case says which rule must find it (at warning or error) and, where it matters, which key the
finding must point to. Its clean twin changes only the planted value (``clean``: a text
replacement in one file) and must give no warning or error at all.

Model facts the cases rest on (the bundled catalogue, with its sources):
* Llama 2 7B: 6.74B parameters, a 4096-token context (Touvron et al. 2023, table 1).
* Mistral 7B v0.1: 7.24B parameters, a 32768-position table (Mistral config.json, from memory).
* Qwen2.5-7B-Instruct: 32768 positions in its config.json (Qwen2.5 model card).
* gemma-7b: an 8192-token context (Gemma Team 2024, table 1).
Thresholds come from the rule records (rules/<id>.yaml), which name their sources.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity


@dataclass(frozen=True)
class Case:
    id: str
    files: dict[str, str]
    rule: str  # the rule that must find the planted defect (at warning or above)
    clean: tuple[str, str, str]  # (file, old, new): the twin without the defect
    target: str = ""  # the file linted (default: the first one)
    at: str | None = None  # the dotted key the finding points to
    options: dict = field(default_factory=dict)
    in_file: str | None = None  # the file the finding is located in (default: the target)
    clean_options: dict | None = None  # the clean twin's options (default: the same)


L2 = "meta-llama/Llama-2-7b-hf"
MISTRAL = "mistralai/Mistral-7B-v0.1"
SMALL = "Qwen/Qwen2.5-0.5B"  # 0.49B parameters (Qwen2.5 model card), fits a 16 GB card

CASES: list[Case] = []


def case(*args, **kwargs) -> None:
    CASES.append(Case(*args, **kwargs))


# ----------------------------------------------------------------------------- flat trainer files

case("trainer-json-quoted-lr", {"run.json": f"""{{
  "model_name_or_path": "{MISTRAL}",
  "output_dir": "out/harbor-faq-full",
  "learning_rate": "1e-4",
  "num_train_epochs": 2,
  "per_device_train_batch_size": 4,
  "bf16": true
}}
"""}, "full-finetune-lr-too-high", ("run.json", '"1e-4"', '"2e-5"'), at="learning_rate")

case("trainer-yaml-anchor-merge", {"run.yaml": f"""\
common: &common
  bf16: true
  gradient_checkpointing: true
model_name_or_path: {L2}
output_dir: out/orchard-notes
<<: *common
learning_rate: 1.0e-4
num_train_epochs: 1
per_device_train_batch_size: 2
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"), at="learning_rate")

# ----------------------------------------------------------------------------- nested sections

case("sections-model-name-or-path", {"run.yaml": f"""\
model:
  name_or_path: {L2}
  torch_dtype: bfloat16
training:
  learning_rate: 1.0e-4
  num_train_epochs: 3
  per_device_train_batch_size: 4
  bf16: true
  output_dir: out/tidewater-support
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"), at="training.learning_rate")

case("sections-model-args-optim-lr", {"run.yaml": f"""\
model_args:
  model_name_or_path: {MISTRAL}
optim:
  name: adamw_torch
  lr: 0.0001
  weight_decay: 0.0
args:
  num_train_epochs: 2
  per_device_train_batch_size: 2
  bf16: true
"""}, "full-finetune-lr-too-high", ("run.yaml", "0.0001", "0.00002"), at="optim.lr")

case("sections-base-model-path-hparams", {"run.yaml": f"""\
base_model:
  path: {L2}
hparams:
  lr: "1e-4"
  epochs: 2
  batch_size: 8
precision:
  bf16: true
"""}, "full-finetune-lr-too-high", ("run.yaml", '"1e-4"', '"2e-5"'), at="hparams.lr")

case("schedule-section-constant-warmup", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
schedule:
  type: constant
  warmup_steps: 100
num_train_epochs: 1
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "type: constant", "type: constant_with_warmup"))

case("scheduler-section-name", {"run.yaml": f"""\
model:
  name: {L2}
peft:
  r: 16
  lora_alpha: 32
scheduler:
  name: constant
  num_warmup_steps: 50
training:
  learning_rate: 2.0e-4
  num_train_epochs: 1
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "name: constant", "name: constant_with_warmup"))

case("optim-section-holds-the-schedule", {"run.yaml": f"""\
model_name_or_path: {L2}
lora:
  r: 16
  alpha: 32
optim:
  lr: 2.0e-4
  scheduler: constant
  warmup_steps: 100
num_train_epochs: 1
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "scheduler: constant", "scheduler: constant_with_warmup"))

case("lr-schedule-section-warmup-ratio", {"run.yaml": f"""\
model_name_or_path: {L2}
lora_r: 8
lora_alpha: 16
learning_rate: 2.0e-4
lr_schedule:
  kind: constant
  warmup_steps: 30
num_train_epochs: 2
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "kind: constant", "kind: constant_with_warmup"))

case("peft-section-alpha-small", {"run.yaml": f"""\
model_name_or_path: {L2}
peft:
  r: 64
  lora_alpha: 8
  lora_dropout: 0.05
  target_modules: [q_proj, k_proj, v_proj, o_proj, gate_proj, up_proj, down_proj]
learning_rate: 1.0e-4
num_train_epochs: 1
"""}, "lora-scale-below-one", ("run.yaml", "lora_alpha: 8", "lora_alpha: 128"))

case("adapter-section-rank-alpha", {"run.yaml": f"""\
model:
  model_id: {MISTRAL}
adapter:
  rank: 128
  alpha: 16
  dropout: 0.0
  target_modules: all-linear
train:
  lr: 1.0e-4
  epochs: 1
"""}, "lora-scale-below-one", ("run.yaml", "alpha: 16", "alpha: 256"))

case("quantization-section-both-bits", {"run.yaml": f"""\
model_name_or_path: {L2}
quantization:
  load_in_4bit: true
  load_in_8bit: true
  bnb_4bit_quant_type: nf4
  bnb_4bit_compute_dtype: bfloat16
lora:
  r: 16
  alpha: 32
learning_rate: 2.0e-4
bf16: true
"""}, "quant-4bit-and-8bit-both-on", ("run.yaml", "load_in_8bit: true", "load_in_8bit: false"))

case("bnb-section-bf16-compute-fp16-trainer", {"run.yaml": f"""\
model_name_or_path: {L2}
bnb:
  load_in_4bit: true
  quant_type: nf4
  compute_dtype: bfloat16
  use_double_quant: true
peft_config:
  r: 16
  lora_alpha: 32
training_arguments:
  learning_rate: 2.0e-4
  fp16: true
"""}, "qlora-fp16-with-bf16-compute", ("run.yaml", "compute_dtype: bfloat16", "compute_dtype: float16"))

case("quantised-full-finetune", {"run.yaml": f"""\
model:
  name_or_path: {L2}
quantization_config:
  load_in_4bit: true
  bnb_4bit_quant_type: nf4
  bnb_4bit_compute_dtype: bfloat16
training:
  learning_rate: 1.0e-5
  bf16: true
"""}, "full-finetune-of-quantised-base", ("run.yaml", "load_in_4bit: true", "load_in_4bit: false"))

# ----------------------------------------------------------------------------- misspelt keys

case("typo-inside-training", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
training:
  learning_rate: 2.0e-4
  gradient_accumulation_step: 4
  num_train_epochs: 1
"""}, "unknown-key", ("run.yaml", "gradient_accumulation_step:", "gradient_accumulation_steps:"),
     at="training.gradient_accumulation_step")

case("typo-inside-lora", {"run.yaml": f"""\
model_name_or_path: {L2}
lora:
  lora_r: 16
  lora_alpah: 32
  lora_dropout: 0.05
learning_rate: 2.0e-4
num_train_epochs: 1
"""}, "unknown-key", ("run.yaml", "lora_alpah", "lora_alpha"), at="lora.lora_alpah")

case("typo-warmup-step-flat", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
warmup_step: 100
num_train_epochs: 1
"""}, "unknown-key", ("run.yaml", "warmup_step:", "warmup_steps:"), at="warmup_step")

case("typo-learning-rat-in-trainer-section", {"run.yaml": f"""\
model:
  name_or_path: {L2}
trainer:
  learning_rat: 2.0e-5
  num_train_epochs: 2
  bf16: true
"""}, "unknown-key", ("run.yaml", "learning_rat:", "learning_rate:"), at="trainer.learning_rat")

# ----------------------------------------------------------------------------- TRL

case("trl-dpo-prompt-fills-length", {"dpo.yaml": f"""\
model_name_or_path: {MISTRAL}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 5.0e-6
beta: 0.1
max_length: 1024
max_prompt_length: 1024
per_device_train_batch_size: 2
"""}, "max-prompt-length-leaves-no-completion", ("dpo.yaml", "max_prompt_length: 1024", "max_prompt_length: 512"))

case("trl-grpo-generation-batch-in-section", {"grpo.yaml": f"""\
model_name_or_path: Qwen/Qwen2.5-1.5B-Instruct
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 1.0e-5
trainer:
  num_generations: 8
  generation_batch_size: 12
  max_completion_length: 256
  per_device_train_batch_size: 4
"""}, "rl-generation-batch-not-divisible", ("grpo.yaml", "generation_batch_size: 12", "generation_batch_size: 16"))

case("trl-sft-seq-beyond-context", {"sft.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
dataset:
  max_seq_length: 8192
  packing: false
"""}, "seq-len-above-context-window", ("sft.yaml", "max_seq_length: 8192", "max_seq_length: 4096"))

# ----------------------------------------------------------------------------- axolotl

AXO = f"""\
base_model: {L2}
adapter: lora
lora_r: 16
lora_alpha: 32
lora_dropout: 0.05
lora_target_linear: true
sequence_len: 4096
sample_packing: false
micro_batch_size: 2
gradient_accumulation_steps: 4
num_epochs: 1
learning_rate: 0.0002
lr_scheduler: cosine
datasets:
  - path: orchard/faq-pairs
    type: alpaca
val_set_size: 0.05
output_dir: ./out/orchard
"""
case("axolotl-typo-lora-alpah", {"axo.yaml": AXO.replace("lora_alpha: 32", "lora_alpah: 32")},
     "unknown-key", ("axo.yaml", "lora_alpah", "lora_alpha"), at="lora_alpah")
case("axolotl-typo-num-epoch", {"axo.yaml": AXO.replace("num_epochs: 1", "num_epoch: 1")},
     "unknown-key", ("axo.yaml", "num_epoch:", "num_epochs:"), at="num_epoch")
case("axolotl-seq-beyond-context", {"axo.yaml": AXO.replace("sequence_len: 4096", "sequence_len: 8192")},
     "seq-len-above-context-window", ("axo.yaml", "sequence_len: 8192", "sequence_len: 4096"))
case("axolotl-bf16-on-v100", {"axo.yaml": AXO.replace(L2, SMALL).replace("sequence_len: 4096", "sequence_len: 1024")
                                         + "bf16: true\n"},
     "precision-unsupported-on-gpu", ("axo.yaml", "bf16: true", "bf16: false"), options={"gpu": "v100"})

# ----------------------------------------------------------------------------- LLaMA-Factory

LF = f"""\
model_name_or_path: {L2}
stage: sft
do_train: true
finetuning_type: lora
lora_rank: 16
lora_alpha: 32
lora_target: all
dataset: harbor_faq
template: llama2
cutoff_len: 4096
per_device_train_batch_size: 2
gradient_accumulation_steps: 8
learning_rate: 1.0e-4
num_train_epochs: 2.0
lr_scheduler_type: cosine
warmup_steps: 20
bf16: true
output_dir: saves/harbor
"""
case("llamafactory-typo-learning-rat", {"lf.yaml": LF.replace("learning_rate:", "learning_rat:")},
     "unknown-key", ("lf.yaml", "learning_rat:", "learning_rate:"), at="learning_rat")
case("llamafactory-full-at-adapter-lr", {"lf.yaml": LF.replace("finetuning_type: lora", "finetuning_type: full")
                                         .replace("lora_rank: 16\nlora_alpha: 32\nlora_target: all\n", "")},
     "full-finetune-lr-too-high", ("lf.yaml", "1.0e-4", "1.0e-5"))
case("llamafactory-cutoff-beyond-context", {"lf.yaml": LF.replace("cutoff_len: 4096", "cutoff_len: 16384")},
     "seq-len-above-context-window", ("lf.yaml", "cutoff_len: 16384", "cutoff_len: 4096"))

# ----------------------------------------------------------------------------- torchtune

TT_LORA = """\
output_dir: /tmp/tt/lantern
model:
  _component_: torchtune.models.{family}.lora_{builder}
  lora_attn_modules: ['q_proj', 'v_proj', 'output_proj']
  apply_lora_to_mlp: True
  lora_rank: 8
  lora_alpha: 16
  lora_dropout: 0.0
tokenizer:
  _component_: torchtune.models.{family}.{family}_tokenizer
  path: /tmp/tt/tokenizer.model
  max_seq_len: {seq}
checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  checkpoint_dir: /tmp/tt/base
  checkpoint_files: [model-00001-of-00002.safetensors, model-00002-of-00002.safetensors]
  output_dir: ${{output_dir}}
  model_type: {mtype}
resume_from_checkpoint: False
dataset:
  _component_: torchtune.datasets.alpaca_cleaned_dataset
  packed: False
seed: null
shuffle: True
batch_size: 2
optimizer:
  _component_: torch.optim.AdamW
  fused: True
  weight_decay: 0.01
  lr: 3e-4
lr_scheduler:
  _component_: torchtune.training.lr_schedulers.get_cosine_schedule_with_warmup
  num_warmup_steps: 100
loss:
  _component_: torchtune.modules.loss.CEWithChunkedOutputLoss
epochs: 1
max_steps_per_epoch: null
gradient_accumulation_steps: 8
clip_grad_norm: null
compile: False
device: cuda
enable_activation_checkpointing: True
dtype: bf16
metric_logger:
  _component_: torchtune.training.metric_logging.DiskLogger
  log_dir: ${{output_dir}}/logs
log_every_n_steps: 1
"""


def tt(family: str, builder: str, seq: int, mtype: str) -> str:
    return TT_LORA.format(family=family, builder=builder, seq=seq, mtype=mtype)


case("torchtune-llama2-builder-seq", {"tt.yaml": tt("llama2", "llama2_7b", 8192, "LLAMA2")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 8192", "max_seq_len: 4096"))
case("torchtune-mistral-builder-seq", {"tt.yaml": tt("mistral", "mistral_7b", 65536, "MISTRAL")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 65536", "max_seq_len: 32768"))
case("torchtune-qwen-builder-seq", {"tt.yaml": tt("qwen2_5", "qwen2_5_7b_instruct", 65536, "QWEN2")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 65536", "max_seq_len: 32768"))
case("torchtune-gemma-builder-seq", {"tt.yaml": tt("gemma", "gemma_7b", 16384, "GEMMA")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 16384", "max_seq_len: 8192"))
case("torchtune-typo-grad-accum", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                   .replace("gradient_accumulation_steps: 8", "gradient_accumulation_step: 8")},
     "unknown-key", ("tt.yaml", "gradient_accumulation_step:", "gradient_accumulation_steps:"),
     at="gradient_accumulation_step")
case("torchtune-typo-lora-alpah", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                   .replace("lora_alpha: 16", "lora_alpah: 16")},
     "unknown-key", ("tt.yaml", "lora_alpah", "lora_alpha"), at="model.lora_alpah")
case("torchtune-full-builder-lr", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                   .replace("lora_llama2_7b", "llama2_7b")
                                   .replace("  lora_attn_modules: ['q_proj', 'v_proj', 'output_proj']\n"
                                            "  apply_lora_to_mlp: True\n  lora_rank: 8\n  lora_alpha: 16\n"
                                            "  lora_dropout: 0.0\n", "")},
     "full-finetune-lr-too-high", ("tt.yaml", "lr: 3e-4", "lr: 2e-5"))

TINY_CONFIG = """{
  "architectures": ["LlamaForCausalLM"],
  "model_type": "llama",
  "hidden_size": 2048,
  "intermediate_size": 5632,
  "num_hidden_layers": 22,
  "num_attention_heads": 32,
  "num_key_value_heads": 4,
  "max_position_embeddings": 2048,
  "vocab_size": 32000,
  "tie_word_embeddings": false,
  "torch_dtype": "bfloat16"
}
"""
case("torchtune-checkpoint-dir-config", {
    "recipes/tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
    .replace("torchtune.models.llama2.lora_llama2_7b", "lanternlab.models.build_small_lm")
    .replace("/tmp/tt/base", "../weights/small-lm"),
    "weights/small-lm/config.json": TINY_CONFIG},
    "seq-len-above-context-window", ("recipes/tt.yaml", "max_seq_len: 4096", "max_seq_len: 2048"))

# ----------------------------------------------------------------------------- DeepSpeed, launchers

DS = """{
  "train_batch_size": 64,
  "train_micro_batch_size_per_gpu": "auto",
  "gradient_accumulation_steps": "auto",
  "gradient_clipping": "auto",
  "bf16": {"enabled": "auto"},
  "zero_optimization": {"stage": 2}
}
"""
case("deepspeed-linked-global-batch", {
    "run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
per_device_train_batch_size: 4
gradient_accumulation_steps: 4
bf16: true
deepspeed: ds_z2.json
""", "ds_z2.json": DS}, "deepspeed-file-contradicts-config", ("ds_z2.json", '"train_batch_size": 64', '"train_batch_size": 32'),
    options={"gpus": 2})

case("deepspeed-linked-global-batch-sections", {
    "run.yaml": f"""\
model:
  name_or_path: {L2}
lora:
  r: 16
  alpha: 32
train:
  batch_size: 4
  gradient_accumulation_steps: 2
  learning_rate: 2.0e-4
eval:
  batch_size: 16
deepspeed: ./ds.json
""", "ds.json": DS}, "deepspeed-file-contradicts-config", ("ds.json", '"train_batch_size": 64', '"train_batch_size": 32'),
    options={"gpus": 4})

case("bf16-in-precision-section-on-t4", {"run.yaml": f"""\
model_name_or_path: {SMALL}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
per_device_train_batch_size: 1
max_length: 512
precision:
  bf16: true
"""}, "precision-unsupported-on-gpu", ("run.yaml", "bf16: true", "fp16: true"), options={"gpu": "t4"})

ACC = """\
compute_environment: LOCAL_MACHINE
distributed_type: MULTI_GPU
num_machines: 1
num_processes: 2
machine_rank: 0
mixed_precision: bf16
gpu_ids: all
main_training_function: main
"""
case("accelerate-bf16-on-v100", {"accelerate.yaml": ACC}, "precision-unsupported-on-gpu",
     ("accelerate.yaml", "mixed_precision: bf16", "mixed_precision: fp16"), options={"gpu": "v100"})

# ----------------------------------------------------------------------------- PEFT adapter config

case("peft-adapter-rank-beyond-width", {"adapter_config.json": """{
  "peft_type": "LORA",
  "task_type": "CAUSAL_LM",
  "base_model_name_or_path": "openai-community/gpt2",
  "r": 1024,
  "lora_alpha": 2048,
  "lora_dropout": 0.05,
  "target_modules": ["c_attn"],
  "fan_in_fan_out": true,
  "inference_mode": true,
  "bias": "none"
}
"""}, "lora-rank-above-matrix-dim", ("adapter_config.json", '"r": 1024,\n  "lora_alpha": 2048',
                                     '"r": 16,\n  "lora_alpha": 32'))

case("peft-adapter-target-missing", {"adapter_config.json": f"""{{
  "peft_type": "LORA",
  "task_type": "CAUSAL_LM",
  "base_model_name_or_path": "{L2}",
  "r": 16,
  "lora_alpha": 32,
  "lora_dropout": 0.05,
  "target_modules": ["q_proj", "v_proj", "query_key_value"],
  "fan_in_fan_out": false,
  "inference_mode": true,
  "bias": "none"
}}
"""}, "lora-target-not-in-model", ("adapter_config.json", ', "query_key_value"', ""))

# ----------------------------------------------------------------------------- composed configs

case("composed-defaults-override-lr", {
    "conf/base.yaml": f"model_name_or_path: {L2}\nnum_train_epochs: 2\nper_device_train_batch_size: 4\n"
                      "learning_rate: 2.0e-5\nbf16: true\n",
    "conf/hot.yaml": "defaults:\n  - base\n  - _self_\nlearning_rate: 1.0e-4\noutput_dir: out/hot\n"},
    "full-finetune-lr-too-high", ("conf/hot.yaml", "learning_rate: 1.0e-4", "learning_rate: 2.0e-5"),
    target="conf/hot.yaml")

case("composed-base-file-schedule", {
    "base.yaml": f"model_name_or_path: {L2}\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
                 "learning_rate: 2.0e-4\nlr_scheduler_type: cosine\nwarmup_steps: 100\n",
    "const.yaml": "base_config: base.yaml\nlr_scheduler_type: constant\n"},
    "constant-schedule-ignores-warmup", ("const.yaml", "lr_scheduler_type: constant",
                                         "lr_scheduler_type: constant_with_warmup"), target="const.yaml")

case("composed-group-sections", {
    "cfg/train.yaml": "defaults:\n  - model: llama7b\n  - optim: hot\n  - _self_\nseed: 7\n",
    "cfg/model/llama7b.yaml": f"name_or_path: {L2}\n",
    "cfg/optim/hot.yaml": "lr: 1.0e-4\nweight_decay: 0.0\n"},
    "full-finetune-lr-too-high", ("cfg/optim/hot.yaml", "lr: 1.0e-4", "lr: 2.0e-5"),
    target="cfg/train.yaml", in_file="cfg/optim/hot.yaml")

# ----------------------------------------------------------------------------- sweeps

case("sweep-lr-values-one-fails", {
    "base.yaml": f"model_name_or_path: {L2}\nper_device_train_batch_size: 4\nbf16: true\nnum_train_epochs: 1\n",
    "sweep.yaml": """\
program: train.py
method: grid
metric: {name: eval/loss, goal: minimize}
command: [python, train.py, --config, base.yaml]
parameters:
  learning_rate:
    values: [1.0e-5, 2.0e-5, 1.0e-4]
  weight_decay:
    values: [0.0, 0.1]
"""}, "full-finetune-lr-too-high", ("sweep.yaml", "1.0e-4]", "3.0e-5]"), target="sweep.yaml")

case("sweep-lora-alpha-grid", {
    "sweep.yaml": f"""\
method: random
metric:
  name: eval_loss
  goal: minimize
parameters:
  model_name_or_path:
    value: {L2}
  use_peft:
    value: true
  lora_r:
    value: 64
  lora_alpha:
    values: [8, 64, 128]
  learning_rate:
    distribution: log_uniform_values
    min: 5.0e-5
    max: 2.0e-4
"""}, "lora-scale-below-one", ("sweep.yaml", "[8, 64, 128]", "[64, 128]"), target="sweep.yaml")

# ----------------------------------------------------------------------------- launch scripts

case("script-variable-lr", {"train.sh": f"""\
#!/usr/bin/env bash
set -euo pipefail
MODEL={L2}
LR=1e-4
torchrun --nproc_per_node 4 finetune.py \\
    --model_name_or_path $MODEL \\
    --learning_rate $LR \\
    --num_train_epochs 2 \\
    --per_device_train_batch_size 4 \\
    --bf16 True \\
    --output_dir out/lighthouse
"""}, "full-finetune-lr-too-high", ("train.sh", "LR=1e-4", "LR=2e-5"))

case("script-dashed-names", {"train.sh": f"""\
#!/bin/bash
accelerate launch --num_processes 2 sft.py \\
  --model-name-or-path {L2} \\
  --learning-rate 1e-4 \\
  --num-train-epochs 1 \\
  --per-device-train-batch-size 2
"""}, "full-finetune-lr-too-high", ("train.sh", "--learning-rate 1e-4", "--learning-rate 2e-5"))


# ----------------------------------------------------------------------------- more shapes

case("top-level-model-path-key", {"run.yaml": f"""\
model_path: {L2}
learning_rate: 1.0e-4
num_train_epochs: 2
per_device_train_batch_size: 4
bf16: true
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"))

case("model-section-model-name", {"run.yaml": f"""\
model:
  model_name: {MISTRAL}
  torch_dtype: bfloat16
training:
  learning_rate: 1.0e-4
  num_train_epochs: 1
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"))

case("model-section-pretrained-path", {"run.yaml": f"""\
model:
  pretrained_model_name_or_path: {L2}
config:
  lr: 1.0e-4
  epochs: 1
  batch_size: 4
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"), at="config.lr")

case("train-config-section", {"run.json": f"""{{
  "model": {{"name_or_path": "{L2}"}},
  "train_config": {{"lr": "1e-4", "num_epochs": 2, "micro_batch_size": 4}}
}}
"""}, "full-finetune-lr-too-high", ("run.json", '"1e-4"', '"2e-5"'), at="train_config.lr")

case("sft-section-of-a-trl-recipe", {"run.yaml": f"""\
model_name_or_path: {L2}
sft:
  learning_rate: 1.0e-4
  num_train_epochs: 1
  max_length: 2048
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"), at="sft.learning_rate")

case("top-level-num-warmup-steps", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
lr_scheduler_type: constant
num_warmup_steps: 100
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "lr_scheduler_type: constant", "lr_scheduler_type: constant_with_warmup"))

case("nested-scheduler-in-optimizer", {"run.yaml": f"""\
model_name_or_path: {L2}
peft:
  r: 16
  lora_alpha: 32
optimizer:
  name: adamw_torch
  lr: 2.0e-4
  scheduler:
    type: constant
    warmup_steps: 80
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "type: constant", "type: constant_with_warmup"))

case("quoted-numbers-in-lora-section", {"run.yaml": f"""\
model_name_or_path: {L2}
lora:
  r: "64"
  alpha: "8"
learning_rate: "1e-4"
num_train_epochs: 1
"""}, "lora-scale-below-one", ("run.yaml", 'alpha: "8"', 'alpha: "128"'))

case("quantization-bits-full-finetune", {"run.yaml": f"""\
model:
  name: {L2}
quantization:
  bits: 4
  quant_type: nf4
training:
  learning_rate: 1.0e-5
  num_train_epochs: 1
"""}, "full-finetune-of-quantised-base", ("run.yaml", "quantization:\n  bits: 4\n  quant_type: nf4\n", ""))

case("json-nested-sections-typo", {"run.json": f"""{{
  "model": {{"name_or_path": "{L2}"}},
  "peft": {{"r": 16, "lora_alpha": 32}},
  "training": {{"learning_rate": 2e-4, "num_train_epoch": 3}}
}}
"""}, "unknown-key", ("run.json", '"num_train_epoch"', '"num_train_epochs"'), at="training.num_train_epoch")

case("anchor-shared-lora-block", {"run.yaml": f"""\
lora_defaults: &lora
  r: 64
  lora_alpha: 8
  lora_dropout: 0.05
model_name_or_path: {L2}
peft:
  <<: *lora
  target_modules: all-linear
learning_rate: 1.0e-4
"""}, "lora-scale-below-one", ("run.yaml", "lora_alpha: 8", "lora_alpha: 128"))

case("axolotl-constant-with-warmup", {"axo.yaml": AXO.replace("lr_scheduler: cosine", "lr_scheduler: constant\nwarmup_steps: 50")},
     "constant-schedule-ignores-warmup", ("axo.yaml", "lr_scheduler: constant", "lr_scheduler: cosine"))
case("axolotl-full-finetune-hot", {"axo.yaml": AXO.replace("adapter: lora\n", "")
                                   .replace("lora_r: 16\nlora_alpha: 32\nlora_dropout: 0.05\nlora_target_linear: true\n", "")
                                   .replace("learning_rate: 0.0002", "learning_rate: 0.0001")},
     "full-finetune-lr-too-high", ("axo.yaml", "learning_rate: 0.0001", "learning_rate: 0.00002"))
case("axolotl-alpha-small", {"axo.yaml": AXO.replace("lora_r: 16\nlora_alpha: 32", "lora_r: 128\nlora_alpha: 8")},
     "lora-scale-below-one", ("axo.yaml", "lora_alpha: 8", "lora_alpha: 256"))
case("axolotl-typo-grad-accum", {"axo.yaml": AXO.replace("gradient_accumulation_steps:", "gradient_accumulation_step:")},
     "unknown-key", ("axo.yaml", "gradient_accumulation_step:", "gradient_accumulation_steps:"))

LF_FULL = LF.replace("finetuning_type: lora", "finetuning_type: full").replace(
    "lora_rank: 16\nlora_alpha: 32\nlora_target: all\n", "") + "logging_steps: 10\nsave_steps: 500\nmax_grad_norm: 1.0\n"
case("llamafactory-full-many-shared-keys", {"lf.yaml": LF_FULL}, "full-finetune-lr-too-high",
     ("lf.yaml", "1.0e-4", "1.0e-5"))
case("llamafactory-quantised-full", {"lf.yaml": LF_FULL.replace("1.0e-4", "1.0e-5") + "quantization_bit: 4\n"},
     "full-finetune-of-quantised-base", ("lf.yaml", "quantization_bit: 4\n", ""))
case("llamafactory-alpha-small", {"lf.yaml": LF.replace("lora_rank: 16\nlora_alpha: 32", "lora_rank: 128\nlora_alpha: 16")},
     "lora-scale-below-one", ("lf.yaml", "lora_alpha: 16", "lora_alpha: 256"))
case("llamafactory-typo-num-epoch", {"lf.yaml": LF.replace("num_train_epochs:", "num_train_epoch:")},
     "unknown-key", ("lf.yaml", "num_train_epoch:", "num_train_epochs:"))

case("torchtune-codellama-builder-not-llama2", {"tt.yaml": tt("code_llama2", "code_llama2_7b", 32768, "LLAMA2")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 32768", "max_seq_len: 16384"))
case("torchtune-llama3-builder", {"tt.yaml": tt("llama3", "llama3_8b", 16384, "LLAMA3")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 16384", "max_seq_len: 8192"))
case("torchtune-phi3-builder", {"tt.yaml": tt("phi3", "phi3_mini", 8192, "PHI3_MINI")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 8192", "max_seq_len: 4096"))
case("torchtune-qlora-llama2", {"tt.yaml": tt("llama2", "llama2_7b", 8192, "LLAMA2").replace("lora_llama2_7b", "qlora_llama2_7b")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 8192", "max_seq_len: 4096"))
case("torchtune-gemma2-builder", {"tt.yaml": tt("gemma2", "gemma2_9b", 16384, "GEMMA2")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 16384", "max_seq_len: 8192"))
case("torchtune-qwen2-builder", {"tt.yaml": tt("qwen2", "qwen2_1_5b", 65536, "QWEN2")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 65536", "max_seq_len: 32768"))
case("torchtune-lora-alpha-small", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                    .replace("lora_rank: 8\n  lora_alpha: 16", "lora_rank: 64\n  lora_alpha: 4")},
     "lora-scale-below-one", ("tt.yaml", "lora_alpha: 4", "lora_alpha: 128"))
case("torchtune-tokenizer-max-seq-length-typo", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                                 .replace("max_seq_len: 4096", "max_seq_length: 4096")},
     "unknown-key", ("tt.yaml", "max_seq_length: 4096", "max_seq_len: 4096"))
case("torchtune-checkpoint-dir-interpolated", {
    "tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
    .replace("torchtune.models.llama2.lora_llama2_7b", "lanternlab.models.build_small_lm")
    .replace("output_dir: /tmp/tt/lantern", "output_dir: /tmp/tt/lantern\nbase_dir: ./weights/small-lm")
    .replace("checkpoint_dir: /tmp/tt/base", "checkpoint_dir: ${base_dir}"),
    "weights/small-lm/config.json": TINY_CONFIG},
    "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 4096", "max_seq_len: 2048"))

case("deepspeed-alone-batch-arithmetic", {"ds.json": """{
  "train_batch_size": 32,
  "train_micro_batch_size_per_gpu": 4,
  "gradient_accumulation_steps": 2,
  "bf16": {"enabled": true},
  "zero_optimization": {"stage": 3, "stage3_gather_16bit_weights_on_model_save": true}
}
"""}, "global-batch-mismatch", ("ds.json", '"train_batch_size": 32', '"train_batch_size": 64'), options={"gpus": 8})

case("deepspeed-bf16-on-v100", {"ds.json": """{
  "train_micro_batch_size_per_gpu": 4,
  "gradient_accumulation_steps": 2,
  "bf16": {"enabled": true},
  "zero_optimization": {"stage": 2}
}
"""}, "precision-unsupported-on-gpu", ('ds.json', '"bf16": {"enabled": true}', '"fp16": {"enabled": true}'),
     options={"gpu": "v100"})

case("deepspeed-gpus-from-launch-file", {
    "run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
per_device_train_batch_size: 4
gradient_accumulation_steps: 4
bf16: true
deepspeed: ds_z2.json
""", "ds_z2.json": DS, "acc.yaml": ACC.replace("num_processes: 2", "num_processes: 8")},
    "deepspeed-file-contradicts-config", ("ds_z2.json", '"train_batch_size": 64', '"train_batch_size": 128'),
    options={"launch": ["{dir}/acc.yaml"]})

case("accelerate-launch-bf16-for-trainer-on-t4", {
    "run.yaml": f"""\
model_name_or_path: {SMALL}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
per_device_train_batch_size: 1
max_length: 512
""", "acc.yaml": ACC.replace("num_processes: 2", "num_processes: 1").replace("MULTI_GPU", "NO")},
    "precision-unsupported-on-gpu", ("acc.yaml", "mixed_precision: bf16", "mixed_precision: fp16"),
    options={"gpu": "t4", "launch": ["{dir}/acc.yaml"]})

case("composed-json-base-with-overrides", {
    "base.json": f'{{"model_name_or_path": "{L2}", "learning_rate": 2e-5, "num_train_epochs": 1, "bf16": true}}\n',
    "run.yaml": "base: base.json\noutput_dir: out/x\n"},
    "full-finetune-lr-too-high", ("run.yaml", "output_dir: out/x\n", "output_dir: out/x\n"),
    target="run.yaml", options={"overrides": ["learning_rate=1e-4"]},
    clean_options={"overrides": ["learning_rate=2e-5"]})

case("composed-base-list", {
    "configs/model.yaml": f"model_name_or_path: {L2}\n",
    "configs/train.yaml": "learning_rate: 2.0e-5\nnum_train_epochs: 1\nper_device_train_batch_size: 4\n",
    "configs/exp.yaml": "_base_: [model.yaml, train.yaml]\nper_device_train_batch_size: 8\nmax_length: 8192\n"},
    "seq-len-above-context-window", ("configs/exp.yaml", "max_length: 8192", "max_length: 4096"),
    target="configs/exp.yaml")

case("sweep-dotted-section-parameter", {
    "base.yaml": f"model:\n  name_or_path: {L2}\ntraining:\n  learning_rate: 2.0e-5\n  num_train_epochs: 1\n",
    "sweep.yaml": """\
program: train.py
method: grid
command: [python, train.py, --config=base.yaml]
parameters:
  training.learning_rate:
    values: [1.0e-5, 1.0e-4]
"""}, "full-finetune-lr-too-high", ("sweep.yaml", "1.0e-4]", "2.0e-5]"), target="sweep.yaml")

case("sweep-nested-parameters", {
    "sweep.yaml": f"""\
method: bayes
metric:
  name: eval_loss
  goal: minimize
parameters:
  model_name_or_path:
    value: {L2}
  optim:
    parameters:
      lr:
        values: [1.0e-5, 1.0e-4]
"""}, "full-finetune-lr-too-high", ("sweep.yaml", "1.0e-4]", "2.0e-5]"), target="sweep.yaml")

case("sweep-string-values", {
    "sweep.yaml": f"""\
method: grid
parameters:
  model_name_or_path:
    value: {L2}
  learning_rate:
    values: ["1e-5", "1e-4"]
"""}, "full-finetune-lr-too-high", ("sweep.yaml", '"1e-4"]', '"2e-5"]'), target="sweep.yaml")

case("script-default-expansion", {"run_sft.sh": f"""\
#!/usr/bin/env bash
LR=${{LR:-1e-4}}
EPOCHS=${{EPOCHS:-2}}
python train.py \\
  --model_name_or_path {L2} \\
  --learning_rate "${{LR}}" \\
  --num_train_epochs ${{EPOCHS}} \\
  --bf16
"""}, "full-finetune-lr-too-high", ("run_sft.sh", "LR:-1e-4", "LR:-2e-5"))

case("script-equals-form-deepspeed", {"launch.sh": f"""\
#!/bin/bash
export MODEL_PATH={MISTRAL}
deepspeed --num_gpus 8 train.py \\
    --model_name_or_path=$MODEL_PATH \\
    --learning_rate=1e-4 \\
    --per_device_train_batch_size=2
"""}, "full-finetune-lr-too-high", ("launch.sh", "--learning_rate=1e-4", "--learning_rate=2e-5"))

case("script-env-prefix-typo", {"go.sh": f"""\
#!/bin/bash
CUDA_VISIBLE_DEVICES=0,1 python finetune.py \\
    --model_name_or_path {L2} \\
    --use_peft --lora_r 16 --lora_alpha 32 \\
    --learning_rate 2e-4 \\
    --gradient_accumulation_step 4
"""}, "unknown-key", ("go.sh", "--gradient_accumulation_step 4", "--gradient_accumulation_steps 4"))

# ----------------------------------------------------------------------------- third round

case("script-torch-distributed-run", {"run.sh": f"""\
python -m torch.distributed.run --nproc_per_node=4 --master_port=29501 sft.py \\
  --model_name_or_path {MISTRAL} --learning_rate 1e-4 --bf16 True
"""}, "full-finetune-lr-too-high", ("run.sh", "--learning_rate 1e-4", "--learning_rate 2e-5"))

case("two-level-adapter-section", {"run.yaml": f"""\
model_name_or_path: {L2}
peft:
  method: lora
  lora:
    r: 64
    alpha: 8
learning_rate: 1.0e-4
"""}, "lora-scale-below-one", ("run.yaml", "alpha: 8", "alpha: 128"))

case("fsdp-wrap-class-in-trainer-config", {"run.yaml": f"""\
model_name_or_path: {L2}
learning_rate: 2.0e-5
bf16: true
fsdp: "full_shard auto_wrap"
fsdp_config:
  transformer_layer_cls_to_wrap: [MistralDecoderLayer]
"""}, "fsdp-wrap-class-not-in-model", ("run.yaml", "MistralDecoderLayer", "LlamaDecoderLayer"))

case("fsdp-wrap-class-in-launch-file", {
    "run.yaml": f"model_name_or_path: {L2}\nlearning_rate: 2.0e-5\nbf16: true\n",
    "fsdp.yaml": """\
compute_environment: LOCAL_MACHINE
distributed_type: FSDP
fsdp_config:
  fsdp_auto_wrap_policy: TRANSFORMER_BASED_WRAP
  fsdp_sharding_strategy: FULL_SHARD
  fsdp_transformer_layer_cls_to_wrap: Qwen2DecoderLayer
  fsdp_state_dict_type: SHARDED_STATE_DICT
mixed_precision: bf16
num_machines: 1
num_processes: 8
machine_rank: 0
main_training_function: main
"""}, "fsdp-wrap-class-not-in-model", ("fsdp.yaml", "Qwen2DecoderLayer", "LlamaDecoderLayer"),
    options={"launch": ["{dir}/fsdp.yaml"]})

case("deepspeed-zero3-no-gather", {"ds.json": """{
  "train_micro_batch_size_per_gpu": "auto",
  "gradient_accumulation_steps": "auto",
  "bf16": {"enabled": "auto"},
  "zero_optimization": {"stage": 3, "overlap_comm": true,
                        "stage3_gather_16bit_weights_on_model_save": false}
}
"""}, "zero3-save-without-gathered-weights", ("ds.json", '"stage3_gather_16bit_weights_on_model_save": false',
                                             '"stage3_gather_16bit_weights_on_model_save": true'))

case("inline-deepspeed-global-batch", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
per_device_train_batch_size: 2
gradient_accumulation_steps: 8
deepspeed:
  train_batch_size: 64
  train_micro_batch_size_per_gpu: auto
  gradient_accumulation_steps: auto
  gradient_clipping: auto
  zero_optimization: {{stage: 2}}
"""}, "deepspeed-file-contradicts-config", ("run.yaml", "train_batch_size: 64", "train_batch_size: 16"),
    options={"gpus": 1})

case("local-model-folder-config", {
    "configs/run.yaml": "model_name_or_path: ../weights/small-lm\nlearning_rate: 3.0e-3\nnum_train_epochs: 1\n",
    "weights/small-lm/config.json": TINY_CONFIG}, "full-finetune-lr-too-high",
    ("configs/run.yaml", "3.0e-3", "2.0e-4"), target="configs/run.yaml")

case("grpo-lengths-beyond-engine", {"grpo.yaml": """\
model_name_or_path: Qwen/Qwen2.5-1.5B-Instruct
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 1.0e-5
use_vllm: true
vllm_max_model_length: 2048
max_prompt_length: 1024
max_completion_length: 2048
num_generations: 8
per_device_train_batch_size: 8
"""}, "rl-lengths-exceed-generation-engine", ("grpo.yaml", "max_completion_length: 2048", "max_completion_length: 1024"))

case("dashed-key-in-yaml", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning-rate: 2.0e-4
num_train_epochs: 1
"""}, "unknown-key", ("run.yaml", "learning-rate:", "learning_rate:"))

case("camel-case-key-in-yaml", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
numTrainEpochs: 1
"""}, "unknown-key", ("run.yaml", "numTrainEpochs:", "num_train_epochs:"))

case("composed-hydra-override-group", {
    "conf/config.yaml": "defaults:\n  - model: llama7b\n  - optim: gentle\n  - _self_\nseed: 3\n",
    "conf/model/llama7b.yaml": f"name_or_path: {L2}\n",
    "conf/optim/gentle.yaml": "lr: 2.0e-5\n",
    "conf/optim/hot.yaml": "lr: 1.0e-4\n"},
    "full-finetune-lr-too-high", ("conf/optim/hot.yaml", "lr: 1.0e-4", "lr: 2.0e-5"),
    target="conf/config.yaml", options={"overrides": ["optim=hot"]}, in_file="conf/optim/hot.yaml")

case("composed-base-relative-up", {
    "base/common.yaml": f"model_name_or_path: {L2}\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\nlearning_rate: 2.0e-4\n",
    "exp/a/run.yaml": "extends: ../../base/common.yaml\nlora_alpha: 1\n"},
    "lora-scale-below-one", ("exp/a/run.yaml", "lora_alpha: 1", "lora_alpha: 32"), target="exp/a/run.yaml",
    at="lora_alpha")

case("sweep-config-file-as-parameter", {
    "base.yaml": f"model_name_or_path: {L2}\nnum_train_epochs: 1\nbf16: true\n",
    "sweep.yaml": """\
program: train.py
method: grid
parameters:
  config:
    value: base.yaml
  learning_rate:
    values: [2.0e-5, 1.0e-4]
"""}, "full-finetune-lr-too-high", ("sweep.yaml", "1.0e-4]", "3.0e-5]"), target="sweep.yaml")

case("sweep-axolotl-base", {
    "axo.yaml": AXO,
    "sweep.yaml": """\
program: axolotl
method: grid
command: [axolotl, train, axo.yaml, "${args}"]
parameters:
  lora_alpha:
    values: [2, 32]
  learning_rate:
    values: [0.0001, 0.0002]
"""}, "lora-scale-below-one", ("sweep.yaml", "[2, 32]", "[16, 32]"), target="sweep.yaml")

case("multi-document-yaml", {"runs.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
---
model_name_or_path: {L2}
learning_rate: 1.0e-4
num_train_epochs: 1
"""}, "full-finetune-lr-too-high", ("runs.yaml", "learning_rate: 1.0e-4", "learning_rate: 2.0e-5"))

# ----------------------------------------------------------------------------- second shapes of each kind

case("json-optimizer-section-schedule", {"run.json": f"""{{
  "model_name_or_path": "{L2}",
  "peft_config": {{"r": 16, "lora_alpha": 32}},
  "optimizer": {{"type": "adamw_torch", "lr": 2e-4, "lr_scheduler": "constant", "num_warmup_steps": 50}}
}}
"""}, "constant-schedule-ignores-warmup", ("run.json", '"lr_scheduler": "constant"', '"lr_scheduler": "constant_with_warmup"'))

case("llm-section-model-name", {"run.yaml": """\
llm:
  model_name: Qwen/Qwen2.5-7B
params:
  lr: "1e-4"
  epochs: 1
"""}, "full-finetune-lr-too-high", ("run.yaml", '"1e-4"', '"2e-5"'), at="params.lr")

case("dpo-config-section", {"run.yaml": f"""\
model:
  model_path: {MISTRAL}
dpo_config:
  beta: 0.1
  lr: 1.0e-4
  max_length: 2048
"""}, "full-finetune-lr-too-high", ("run.yaml", "lr: 1.0e-4", "lr: 5.0e-7"), at="dpo_config.lr")

case("json-no-trainer-scheduler-names", {"run.json": f"""{{
  "model_name_or_path": "{L2}",
  "use_peft": true, "lora_r": 8, "lora_alpha": 16,
  "learning_rate": 2e-4,
  "lr_scheduler_type": "constant",
  "num_warmup_steps": 10
}}
"""}, "constant-schedule-ignores-warmup", ("run.json", '"lr_scheduler_type": "constant"', '"lr_scheduler_type": "cosine"'))

case("llamafactory-dpo-full-shared-keys", {"lf_dpo.yaml": f"""\
model_name_or_path: {MISTRAL}
stage: dpo
do_train: true
finetuning_type: full
pref_beta: 0.1
dataset: orchard_prefs
template: mistral
cutoff_len: 2048
per_device_train_batch_size: 1
gradient_accumulation_steps: 8
learning_rate: 1.0e-4
num_train_epochs: 1.0
lr_scheduler_type: cosine
warmup_steps: 10
logging_steps: 5
save_steps: 200
bf16: true
output_dir: saves/orchard-dpo
"""}, "full-finetune-lr-too-high", ("lf_dpo.yaml", "1.0e-4", "5.0e-7"))

case("torchtune-qwen3-builder", {"tt.yaml": tt("qwen3", "qwen3_8b_instruct", 65536, "QWEN3")},
     "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 65536", "max_seq_len: 32768"))

case("torchtune-checkpoint-dir-in-text", {
    "tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
    .replace("torchtune.models.llama2.lora_llama2_7b", "lanternlab.models.build_small_lm")
    .replace("output_dir: /tmp/tt/lantern", "output_dir: /tmp/tt/lantern\nroot: ./weights")
    .replace("checkpoint_dir: /tmp/tt/base", "checkpoint_dir: ${root}/small-lm"),
    "weights/small-lm/config.json": TINY_CONFIG},
    "seq-len-above-context-window", ("tt.yaml", "max_seq_len: 4096", "max_seq_len: 2048"))

case("sweep-nested-min-max", {
    "sweep.yaml": f"""\
method: random
metric: {{name: eval_loss, goal: minimize}}
parameters:
  model:
    parameters:
      name_or_path:
        value: {L2}
  training:
    parameters:
      learning_rate:
        min: 1.0e-5
        max: 1.0e-4
"""}, "full-finetune-lr-too-high", ("sweep.yaml", "max: 1.0e-4", "max: 2.0e-5"), target="sweep.yaml")

case("launch-deepspeed-bf16-on-v100", {
    "run.yaml": f"model_name_or_path: {SMALL}\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
                "learning_rate: 2.0e-4\nper_device_train_batch_size: 1\nmax_length: 512\n",
    "ds.json": '{\n  "train_micro_batch_size_per_gpu": "auto",\n  "gradient_accumulation_steps": "auto",\n'
               '  "gradient_clipping": "auto",\n  "bf16": {"enabled": true},\n  "zero_optimization": {"stage": 2}\n}\n'},
    "precision-unsupported-on-gpu", ("ds.json", '"bf16": {"enabled": true}', '"fp16": {"enabled": "auto"}'),
    options={"gpu": "v100", "launch": ["{dir}/ds.json"], "gpus": 1})

case("fsdp-launch-file-for-axolotl", {
    "axo.yaml": AXO.replace(L2, MISTRAL),
    "fsdp.yaml": """\
compute_environment: LOCAL_MACHINE
distributed_type: FSDP
fsdp_config:
  fsdp_transformer_layer_cls_to_wrap: LlamaDecoderLayer
  fsdp_sharding_strategy: FULL_SHARD
mixed_precision: bf16
num_machines: 1
num_processes: 4
main_training_function: main
"""}, "fsdp-wrap-class-not-in-model", ("fsdp.yaml", "LlamaDecoderLayer", "MistralDecoderLayer"),
    options={"launch": ["{dir}/fsdp.yaml"]})

case("composed-group-choice-model", {
    "conf/train.yaml": "defaults:\n  - model: small\n  - _self_\nmax_length: 8192\nlearning_rate: 2.0e-5\n",
    "conf/model/small.yaml": "model_name_or_path: Qwen/Qwen2.5-0.5B\n",
    "conf/model/llama7b.yaml": f"model_name_or_path: {L2}\n"},
    "seq-len-above-context-window", ("conf/train.yaml", "max_length: 8192", "max_length: 4096"),
    target="conf/train.yaml", options={"overrides": ["model=llama7b"]})

case("sweep-config-file-parameter-json", {
    "configs/base.json": f'{{"model_name_or_path": "{L2}", "use_peft": true, "lora_r": 64, "lora_alpha": 128}}\n',
    "sweep.yaml": """\
program: train.py
method: grid
parameters:
  config_file:
    value: configs/base.json
  lora_alpha:
    values: [4, 128]
  learning_rate:
    value: 1.0e-4
"""}, "lora-scale-below-one", ("sweep.yaml", "[4, 128]", "[64, 128]"), target="sweep.yaml")

# ----------------------------------------------------------------------------- LLaMA-Factory v1

V1 = """\
model: Qwen/Qwen2.5-7B-Instruct
model_class: llm
peft_config:
  name: lora
  r: 16
  lora_alpha: 32
  lora_dropout: 0.05
  target_modules: all
kernel_config:
  name: auto
dist_config:
  name: fsdp2
train_dataset: data/harbor_sft.yaml
output_dir: outputs/harbor
micro_batch_size: 2
global_batch_size: 32
cutoff_len: 4096
learning_rate: 1.0e-4
max_steps: 500
"""
V1_FULL = V1.replace("peft_config:\n  name: lora\n  r: 16\n  lora_alpha: 32\n  lora_dropout: 0.05\n  target_modules: all\n", "")
case("llamafactory-v1-full-hot", {"v1.yaml": V1_FULL}, "full-finetune-lr-too-high", ("v1.yaml", "1.0e-4", "2.0e-5"))
case("llamafactory-v1-cutoff-beyond-context", {"v1.yaml": V1.replace("cutoff_len: 4096", "cutoff_len: 65536")},
     "seq-len-above-context-window", ("v1.yaml", "cutoff_len: 65536", "cutoff_len: 32768"))
case("llamafactory-v1-typo-cutoff", {"v1.yaml": V1.replace("cutoff_len:", "cutof_len:")},
     "unknown-key", ("v1.yaml", "cutof_len:", "cutoff_len:"), at="cutof_len")
# bf16 is on by default in the v1 trainer (llamafactory 0.9.5 v1/config/training_args.py)
case("llamafactory-v1-default-bf16-on-v100", {"v1.yaml": V1.replace("Qwen/Qwen2.5-7B-Instruct", SMALL)
                                              .replace("micro_batch_size: 2", "micro_batch_size: 1")
                                              .replace("global_batch_size: 32", "global_batch_size: 8")
                                              .replace("cutoff_len: 4096", "cutoff_len: 512")},
     "precision-unsupported-on-gpu", ("v1.yaml", "max_steps: 500\n", "max_steps: 500\nbf16: false\n"),
     options={"gpu": "v100", "gpus": 8})
case("llamafactory-v1-lora-alpha-small", {"v1.yaml": V1.replace("r: 16\n  lora_alpha: 32", "r: 128\n  lora_alpha: 8")},
     "lora-scale-below-one", ("v1.yaml", "lora_alpha: 8", "lora_alpha: 256"))

# ----------------------------------------------------------------------------- PEFT method comparison

BENCH = """{
  "model_id": "meta-llama/Llama-3.2-3B",
  "dtype": "bfloat16",
  "max_seq_length": 768,
  "batch_size": 4,
  "batch_size_eval": 32,
  "max_steps": 3000,
  "eval_steps": 250,
  "compile": false,
  "use_gc": false,
  "seed": 0,
  "grad_norm_clip": 1.0,
  "optimizer_type": "AdamW",
  "optimizer_kwargs": {"lr": 1e-4, "weight_decay": 0.1},
  "lr_scheduler": "cosine",
  "use_amp": false,
  "autocast_adapter_dtype": true,
  "attn_implementation": null,
  "generation_kwargs": {"max_length": 800, "max_new_tokens": 300},
  "query_template": "Riddle: {query}\\nAnswer:",
  "init_kv_cache_prefix": null
}
"""
BENCH_ADAPTER = """{
  "peft_type": "LORA", "task_type": "CAUSAL_LM", "base_model_name_or_path": null,
  "r": 32, "lora_alpha": 64, "lora_dropout": 0.0, "target_modules": null,
  "bias": "none", "fan_in_fan_out": false, "inference_mode": false
}
"""
# Llama 3.2 3B: 3.21B parameters (the bundled catalogue): the 3-20B band of the rule
case("bench-full-finetuning-experiment-lr", {
    "bench/experiments/full-finetuning/llama-3b-lr-hot/training_params.json": '{"optimizer_kwargs": {"lr": 1e-4}}\n',
    "bench/default_training_params.json": BENCH,
    "bench/experiments/lora/rank32/adapter_config.json": BENCH_ADAPTER,
    "bench/experiments/lora/rank32/training_params.json": '{"optimizer_kwargs": {"lr": 2e-4}}\n'},
    "full-finetune-lr-too-high", ("bench/experiments/full-finetuning/llama-3b-lr-hot/training_params.json",
                                  "1e-4", "1e-5"))
case("bench-lora-experiment-is-not-full", {
    "bench/experiments/lora/rank32/training_params.json": '{"optimizer_kwargs": {"lr": 2e-4}, "max_seq_length": 262144}\n',
    "bench/default_training_params.json": BENCH,
    "bench/experiments/lora/rank32/adapter_config.json": BENCH_ADAPTER},
    "seq-len-above-context-window", ("bench/experiments/lora/rank32/training_params.json", "262144", "768"))
case("bench-eval-interval-beyond-run", {"default_training_params.json": BENCH.replace('"eval_steps": 250', '"eval_steps": 4000')},
     "cadence-longer-than-run", ("default_training_params.json", '"eval_steps": 4000', '"eval_steps": 500'))
case("bench-experiment-model-override", {
    "experiments/full-finetuning/smol/training_params.json": '{"model_id": "HuggingFaceTB/SmolLM-360M", "max_seq_length": 4096, "optimizer_kwargs": {"lr": 1e-4}}\n',
    "experiments/default_training_params.json": BENCH},
    "seq-len-above-context-window", ("experiments/full-finetuning/smol/training_params.json", '"max_seq_length": 4096', '"max_seq_length": 2048'))

# ----------------------------------------------------------------------------- run length in sections

case("schedule-section-epochs-beside-max-steps", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
training:
  learning_rate: 2.0e-4
  max_steps: 1000
schedule:
  type: cosine
  epochs: 3
"""}, "max-steps-overrides-epochs", ("run.yaml", "  epochs: 3\n", ""))

case("no-trainer-max-train-steps", {"run.json": f"""{{
  "model_name_or_path": "{L2}",
  "use_peft": true, "lora_r": 16, "lora_alpha": 32,
  "learning_rate": 2e-4,
  "num_train_epochs": 2,
  "max_train_steps": 800
}}
"""}, "max-steps-overrides-epochs", ("run.json", ',\n  "max_train_steps": 800', ""))

case("train-section-total-steps-short-warmup", {"run.yaml": f"""\
model_name_or_path: {L2}
peft:
  r: 16
  lora_alpha: 32
train:
  lr: 2.0e-4
  total_steps: 150
scheduler:
  name: cosine
  warmup_steps: 200
"""}, "warmup-longer-than-run", ("run.yaml", "warmup_steps: 200", "warmup_steps: 10"))

case("warmup-ratio-and-steps-in-two-sections", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
scheduler:
  type: cosine
  warmup_ratio: 0.1
training:
  warmup_steps: 100
"""}, "warmup-ratio-and-steps-both-set", ("run.yaml", "  warmup_ratio: 0.1\n", ""))

case("best-model-cadence-in-eval-and-save-sections", {"run.yaml": f"""\
model_name_or_path: {L2}
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
eval_dataset: orchard/val
eval:
  strategy: steps
  steps: 300
save:
  strategy: steps
  steps: 500
load_best_model_at_end: true
"""}, "best-model-needs-matching-cadence", ("run.yaml", "steps: 500", "steps: 600"))

case("attention-kernel-in-model-section", {"run.yaml": f"""\
model:
  name_or_path: {L2}
  attn_implementation: flash_attention_2
  torch_dtype: float32
use_peft: true
lora_r: 16
lora_alpha: 32
learning_rate: 2.0e-4
"""}, "attention-kernel-unsuited", ("run.yaml", "torch_dtype: float32", "torch_dtype: bfloat16"))

case("dpo-section-prompt-fills-length", {"dpo.yaml": f"""\
model:
  name_or_path: {MISTRAL}
peft:
  enabled: true
  r: 16
  alpha: 32
dpo:
  learning_rate: 5.0e-6
  max_length: 512
  max_prompt_length: 512
"""}, "max-prompt-length-leaves-no-completion", ("dpo.yaml", "max_prompt_length: 512", "max_prompt_length: 256"))

case("axolotl-linked-deepspeed-batch", {
    "axo.yaml": AXO + "deepspeed: zero2.json\nbf16: true\n", "zero2.json": DS},
    "deepspeed-file-contradicts-config", ("zero2.json", '"train_batch_size": 64', '"train_batch_size": 64'),
    options={"gpus": 4}, clean_options={"gpus": 8})

# ----------------------------------------------------------------------------- launch files feed the config's run

FSDP_ACC = """\
compute_environment: LOCAL_MACHINE
distributed_type: FSDP
fsdp_config:
  fsdp_auto_wrap_policy: TRANSFORMER_BASED_WRAP
  fsdp_sharding_strategy: FULL_SHARD
  fsdp_activation_checkpointing: true
  fsdp_transformer_layer_cls_to_wrap: LlamaDecoderLayer
mixed_precision: bf16
num_machines: 1
num_processes: 8
main_training_function: main
"""
Z3_ACC = """\
compute_environment: LOCAL_MACHINE
distributed_type: DEEPSPEED
deepspeed_config:
  zero_stage: 3
  zero3_init_flag: true
  zero3_save_16bit_model: false
  offload_optimizer_device: none
mixed_precision: bf16
num_machines: 1
num_processes: 8
"""
case("launch-fsdp-checkpointing-beside-trainer", {
    "run.yaml": f"model_name_or_path: {L2}\nlearning_rate: 2.0e-5\nbf16: true\ngradient_checkpointing: true\n",
    "fsdp.yaml": FSDP_ACC}, "fsdp-and-trainer-checkpointing-both-on",
    ("run.yaml", "gradient_checkpointing: true", "gradient_checkpointing: false"),
    options={"launch": ["{dir}/fsdp.yaml"]}, at="gradient_checkpointing")
case("launch-fsdp-checkpointing-beside-axolotl", {
    "axo.yaml": AXO + "gradient_checkpointing: true\nbf16: true\n", "fsdp.yaml": FSDP_ACC},
    "fsdp-and-trainer-checkpointing-both-on",
    ("fsdp.yaml", "fsdp_activation_checkpointing: true", "fsdp_activation_checkpointing: false"),
    options={"launch": ["{dir}/fsdp.yaml"]})
case("launch-zero3-save-for-full-finetune", {
    "run.yaml": f"model_name_or_path: {L2}\nlearning_rate: 2.0e-5\nbf16: true\n", "z3.yaml": Z3_ACC},
    "zero3-save-without-gathered-weights", ("z3.yaml", "zero3_save_16bit_model: false", "zero3_save_16bit_model: true"),
    options={"launch": ["{dir}/z3.yaml"]})
case("launch-zero3-save-for-llamafactory-full", {"lf.yaml": LF_FULL.replace("1.0e-4", "1.0e-5"), "z3.yaml": Z3_ACC},
     "zero3-save-without-gathered-weights", ("z3.yaml", "zero3_save_16bit_model: false", "zero3_save_16bit_model: true"),
     options={"launch": ["{dir}/z3.yaml"]})

# ----------------------------------------------------------------------------- component parameters

case("torchtune-typo-in-optimizer", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                     .replace("weight_decay: 0.01", "weight_deacy: 0.01")},
     "unknown-key", ("tt.yaml", "weight_deacy", "weight_decay"), at="optimizer.weight_deacy")
case("torchtune-full-recipe-sgd-typo", {"tt.yaml": tt("llama2", "llama2_7b", 4096, "LLAMA2")
                                        .replace("_component_: torch.optim.AdamW\n  fused: True\n  weight_decay: 0.01",
                                                 "_component_: torch.optim.SGD\n  momentum: 0.9\n  nesterov_: True")},
     "unknown-key", ("tt.yaml", "nesterov_:", "nesterov:"), at="optimizer.nesterov_")

# ----------------------------------------------------------------------------- Hydra's own groups and grids

case("composed-with-hydra-plugin-groups", {
    "conf/train.yaml": "defaults:\n  - model: llama\n  - optional local: mine\n  - override hydra/launcher: joblib\n"
                       "  - _self_\nlearning_rate: 1.0e-4\nnum_train_epochs: 1\n",
    "conf/model/llama.yaml": f"model_name_or_path: {L2}\n"},
    "full-finetune-lr-too-high", ("conf/train.yaml", "learning_rate: 1.0e-4", "learning_rate: 2.0e-5"),
    target="conf/train.yaml")
case("hydra-sweeper-grid-one-combination-fails", {
    "conf/grid.yaml": "defaults:\n  - model: llama\n  - _self_\nlearning_rate: 2.0e-5\nnum_train_epochs: 1\n"
                      "hydra:\n  sweeper:\n    params:\n      learning_rate: 1e-5,1e-4\n      weight_decay: 0.0,0.1\n",
    "conf/model/llama.yaml": f"model_name_or_path: {L2}\n"},
    "full-finetune-lr-too-high", ("conf/grid.yaml", "1e-5,1e-4", "1e-5,2e-5"), target="conf/grid.yaml",
    at="learning_rate")
case("hydra-sweeper-choice-of-lora-alpha", {
    "exp.yaml": f"model_name_or_path: {L2}\nuse_peft: true\nlora_r: 64\nlora_alpha: 128\nlearning_rate: 1.0e-4\n"
                "hydra:\n  sweeper:\n    params:\n      lora_alpha: choice(8,128)\n"},
    "lora-scale-below-one", ("exp.yaml", "choice(8,128)", "choice(64,128)"))

# ----------------------------------------------------------------------------- more section names

case("bnb-config-section-with-full-finetune", {"run.yaml": f"""\
model:
  name_or_path: {L2}
bnb_config:
  load_in_4bit: true
  bnb_4bit_quant_type: nf4
training_params:
  lr: 1.0e-5
  epochs: 1
"""}, "full-finetune-of-quantised-base", ("run.yaml", "load_in_4bit: true", "load_in_4bit: false"))
case("lora-params-and-optimizer-config", {"run.json": f"""{{
  "model_config": {{"model_name": "{L2}"}},
  "lora_params": {{"rank": 64, "alpha": 8, "dropout": 0.05}},
  "optimizer_config": {{"name": "adamw_torch", "lr": 1e-4}},
  "scheduler_config": {{"type": "cosine", "warmup_steps": 30}}
}}
"""}, "lora-scale-below-one", ("run.json", '"alpha": 8', '"alpha": 128'))
case("scheduler-config-constant-with-warmup", {"run.yaml": f"""\
model_name_or_path: {L2}
peft_params:
  r: 8
  lora_alpha: 16
trainer_kwargs:
  learning_rate: 2.0e-4
scheduler_config:
  name: constant
  warmup_steps: 40
"""}, "constant-schedule-ignores-warmup", ("run.yaml", "name: constant", "name: constant_with_warmup"))

# ----------------------------------------------------------------------------- wrapped and CamelCase sections

case("everything-under-an-experiment-wrapper", {"run.yaml": f"""\
experiment:
  model:
    name_or_path: {L2}
  training:
    learning_rate: 1.0e-4
    num_train_epochs: 1
"""}, "full-finetune-lr-too-high", ("run.yaml", "1.0e-4", "2.0e-5"), at="experiment.training.learning_rate")
case("dataclass-named-sections-in-json", {"args.json": f"""{{
  "ModelArguments": {{"model_name_or_path": "{MISTRAL}"}},
  "DataTrainingArguments": {{"max_seq_length": 65536}},
  "TrainingArguments": {{"learning_rate": 2e-5, "num_train_epochs": 1}}
}}
"""}, "seq-len-above-context-window", ("args.json", "65536", "32768"))
case("upper-case-local-names", {"run.yaml": f"""\
model_name_or_path: {L2}
Training:
  LR: 1.0e-4
  Epochs: 1
"""}, "full-finetune-lr-too-high", ("run.yaml", "LR: 1.0e-4", "LR: 2.0e-5"), at="Training.LR")

case("bench-experiment-writing-one-setting", {
    "bench/experiments/lora/long/training_params.json": '{"max_seq_length": 262144}\n',
    "bench/default_training_params.json": BENCH,
    "bench/experiments/lora/long/adapter_config.json": BENCH_ADAPTER},
    "seq-len-above-context-window", ("bench/experiments/lora/long/training_params.json", "262144", "4096"))

case("deepspeed-gpus-from-hardware-section", {
    "run.yaml": f"""\
model:
  name_or_path: {L2}
lora:
  r: 16
  alpha: 32
train:
  batch_size: 4
  grad_accum: 2
  lr: 2.0e-4
hardware:
  gpus: 4
deepspeed: ds.json
""", "ds.json": DS}, "deepspeed-file-contradicts-config", ("ds.json", '"train_batch_size": 64', '"train_batch_size": 32'))

# ----------------------------------------------------------------------------- the test

def _write(tmp_path, files: dict[str, str]) -> None:
    for name, text in files.items():
        p = tmp_path / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)


def _lint(tmp_path, c: Case, files: dict[str, str], given: dict | None = None):
    _write(tmp_path, files)
    target = tmp_path / (c.target or next(iter(c.files)))
    options = {k: [x.replace("{dir}", str(tmp_path)) for x in v] if k == "launch" else v
               for k, v in (c.options if given is None else given).items()}
    report = api.lint([target], project=None, **options)
    assert not report.problems and not report.internal, (report.problems, report.internal)
    return target, report


@pytest.mark.parametrize("c", CASES, ids=[c.id for c in CASES])
def test_the_planted_defect_is_found(tmp_path, c: Case):
    target, report = _lint(tmp_path, c, c.files)
    hits = [f for f in report.findings if f.rule == c.rule and f.severity >= Severity.WARNING]
    assert hits, [(f.rule, f.severity.word, f.key, f.message) for f in report.findings]
    if c.at is not None:
        assert c.at in [f.key for f in hits], [(f.key, f.message) for f in hits]
    where = tmp_path / c.in_file if c.in_file else (target if not c.clean[0] else None)
    if c.in_file:
        assert str(where) in [f.file for f in hits]


@pytest.mark.parametrize("c", CASES, ids=[c.id for c in CASES])
def test_the_clean_twin_gives_no_warning(tmp_path, c: Case):
    name, old, new = c.clean
    assert old in c.files[name], "the clean twin must change the planted value"
    files = dict(c.files)
    files[name] = files[name].replace(old, new, 1)
    _target, report = _lint(tmp_path, c, files, c.clean_options)
    loud = [(f.rule, f.severity.word, f.key, f.message) for f in report.findings if f.severity >= Severity.WARNING]
    assert loud == []


def test_a_finding_names_the_train_batch_not_the_eval_batch(tmp_path):
    """``train.batch_size`` and ``eval.batch_size`` are different settings: the cross-file batch
    check uses the train one and says so."""
    c = next(c for c in CASES if c.id == "deepspeed-linked-global-batch-sections")
    _target, report = _lint(tmp_path, c, c.files)
    hit = next(f for f in report.findings if f.rule == c.rule and f.severity >= Severity.WARNING)
    # 4 per device x 2 accumulation x 4 GPUs = 32, not the file's 64 (the eval batch of 16 is not used)
    assert hit.data["per_device"] == 4 and hit.data["expected"] == 32
    assert hit.data["per_device_from"] == "train.batch_size"
    assert "(train.batch_size)" in hit.message
