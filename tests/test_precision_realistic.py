"""Realistic correct configs in the shapes other repositories use give no false alarm, and the
mistakes planted in some of them are still found.

Every case is a small invented repository or folder (our own organisation "acme" and its tasks),
modelled on the file formats of well-known fine-tuning repositories that are not in the public
corpus: research scripts with argument dataclasses or argparse options, OmegaConf / Hydra
configs, Lightning / NeMo-style, llm-foundry-style, GPT-NeoX-style, LitGPT-style (class_path /
init_args) and verl-style configs, DeepSpeed and accelerate variants, PEFT adapter configs of
other tuner types, newer torchtune / axolotl / LLaMA-Factory keys, a checkpoint folder. The files
are written to a temporary folder and linted as a user would lint the folder; each case lists
every finding at warning and above that it must give (rule, severity, key) and nothing else.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity
from cfgcheck.knowledge import repo_keys as rk
from cfgcheck.knowledge.pins import satisfies

from .conftest import SHARED
from .helpers import lint

NOT_READ = "not a format cfgcheck reads (yet)"

CASES: dict[str, dict[str, str]] = {
    'qlora_style_repo': {
        'setup.py': '',
        'train_qlora.py': """from dataclasses import dataclass, field
from typing import Optional
import transformers
from transformers import HfArgumentParser, Seq2SeqTrainingArguments


@dataclass
class ModelArguments:
    model_name_or_path: Optional[str] = field(default="acme/tiny-7b")
    trust_remote_code: Optional[bool] = field(default=False, metadata={"help": "remote code"})


@dataclass
class DataArguments:
    eval_dataset_size: int = field(default=1024)
    max_train_samples: Optional[int] = field(default=None)
    max_eval_samples: Optional[int] = field(default=None)
    source_max_len: int = field(default=1024)
    target_max_len: int = field(default=256)
    dataset: str = field(default="acme-instructions")
    dataset_format: Optional[str] = None


@dataclass
class TrainingArguments(Seq2SeqTrainingArguments):
    cache_dir: Optional[str] = field(default=None)
    train_on_source: Optional[bool] = field(default=False)
    mmlu_split: Optional[str] = field(default="eval")
    do_mmlu_eval: Optional[bool] = field(default=False)
    full_finetune: bool = field(default=False)
    adam8bit: bool = field(default=False)
    double_quant: bool = field(default=True)
    quant_type: str = field(default="nf4")
    bits: int = field(default=4)
    lora_r: int = field(default=64)
    lora_alpha: float = field(default=16)
    lora_dropout: float = field(default=0.0)
    max_memory_MB: int = field(default=80000)


def main():
    parser = HfArgumentParser((ModelArguments, DataArguments, TrainingArguments))
    model_args, data_args, training_args = parser.parse_yaml_file("configs/guanaco_7b.yaml")
""",
        'configs/guanaco_7b.yaml': """model_name_or_path: acme/tiny-7b
output_dir: ./output/tiny-7b-guanaco
dataset: acme-instructions
dataset_format: oasst1
source_max_len: 16
target_max_len: 512
max_train_samples: 50000
max_eval_samples: 1000
eval_dataset_size: 1024
bits: 4
quant_type: nf4
double_quant: true
lora_r: 64
lora_alpha: 16
lora_dropout: 0.1
max_memory_MB: 80000
full_finetune: false
do_train: true
do_eval: true
do_mmlu_eval: true
mmlu_split: eval
per_device_train_batch_size: 16
gradient_accumulation_steps: 1
max_steps: 1875
learning_rate: 0.0002
lr_scheduler_type: constant
warmup_ratio: 0.03
adam_beta2: 0.999
max_grad_norm: 0.3
weight_decay: 0.0
gradient_checkpointing: true
group_by_length: true
logging_steps: 10
save_strategy: steps
save_steps: 500
save_total_limit: 40
eval_strategy: steps
eval_steps: 187
per_device_eval_batch_size: 1
bf16: true
optim: paged_adamw_32bit
remove_unused_columns: false
seed: 0
""",
    },
    'open_instruct_style_repo': {
        'pyproject.toml': '',
        'open_instruct/utils.py': """import dataclasses
import sys
from typing import Any, NewType

import yaml
from transformers import HfArgumentParser

DataClassType = NewType("DataClassType", Any)


class ArgumentParserPlus(HfArgumentParser):
    def parse_yaml_and_args(self, yaml_arg: str, other_args=None):
        arg_list = self.parse_yaml_file(yaml_arg)
        return arg_list

    def parse(self):
        if len(sys.argv) == 2 and sys.argv[1].endswith(".yaml"):
            output = self.parse_yaml_file(sys.argv[1])
        else:
            output = self.parse_args_into_dataclasses()
        return output
""",
        'open_instruct/finetune.py': 'from dataclasses import dataclass, field\nfrom typing import List, Optional\n\nfrom open_instruct.utils import ArgumentParserPlus\n\n\n@dataclass\nclass FlatArguments:\n    """Full arguments class for all fine-tuning jobs."""\n\n    exp_name: str = "finetune"\n    model_name_or_path: Optional[str] = field(default=None, metadata={"help": "model"})\n    config_name: Optional[str] = None\n    use_flash_attn: bool = field(default=True)\n    model_revision: Optional[str] = None\n    tokenizer_name: Optional[str] = None\n    use_slow_tokenizer: bool = True\n    low_cpu_mem_usage: bool = False\n    dataset_name: Optional[str] = None\n    dataset_mixer: Optional[dict] = None\n    dataset_mixer_list: List[str] = field(default_factory=list)\n    dataset_mix_dir: Optional[str] = None\n    train_file: Optional[str] = None\n    max_train_samples: Optional[int] = None\n    preprocessing_num_workers: Optional[int] = None\n    max_seq_length: Optional[int] = None\n    overwrite_cache: bool = False\n    clip_grad_norm: float = -1\n    gradient_accumulation_steps: int = 1\n    learning_rate: float = 2e-5\n    logging_steps: Optional[int] = None\n    lora_rank: int = 64\n    lora_alpha: float = 16\n    lora_dropout: float = 0.1\n    lr_scheduler_type: str = "linear"\n    num_train_epochs: int = 2\n    output_dir: str = "output/"\n    per_device_train_batch_size: int = 8\n    use_lora: bool = False\n    use_qlora: bool = False\n    use_8bit_optimizer: bool = False\n    warmup_ratio: float = 0.03\n    weight_decay: float = 0.0\n    timeout: int = 1800\n    reduce_loss: str = "mean"\n    resume_from_checkpoint: Optional[str] = None\n    report_to: str = "all"\n    with_tracking: bool = False\n    checkpointing_steps: Optional[str] = None\n    keep_last_n_checkpoints: int = 3\n    gradient_checkpointing: bool = False\n    use_liger_kernel: bool = False\n    seed: int = 42\n    push_to_hub: bool = True\n    hf_entity: Optional[str] = None\n    try_launch_beaker_eval_jobs: bool = True\n    add_bos: bool = False\n    fused_optimizer: bool = True\n    load_balancing_loss: bool = False\n    load_balancing_weight: float = 0.5\n\n\ndef main(args: FlatArguments):\n    pass\n\n\nif __name__ == "__main__":\n    parser = ArgumentParserPlus((FlatArguments,))\n    args = parser.parse()\n    main(args)\n',
        'configs/train_configs/sft/acme_8b_sft.yaml': """model_name_or_path: acme/tiny-8b
model_revision: main
use_flash_attn: true
tokenizer_name: acme/tiny-8b
use_slow_tokenizer: true
dataset_mixer:
  acme/chat-mixture-v2: 1.0
  acme/safety-mix: 0.5
preprocessing_num_workers: 128
per_device_train_batch_size: 1
gradient_accumulation_steps: 2
learning_rate: 5.0e-06
lr_scheduler_type: linear
warmup_ratio: 0.03
weight_decay: 0.0
num_train_epochs: 2
output_dir: /output/
with_tracking: true
report_to:
  - wandb
logging_steps: 1
checkpointing_steps: epoch
dataset_mix_dir: /output/
max_seq_length: 4096
reduce_loss: sum
gradient_checkpointing: true
clip_grad_norm: 1.0
keep_last_n_checkpoints: 1
try_launch_beaker_eval_jobs: false
""",
        'configs/train_configs/sft/acme_8b_lora.yaml': """model_name_or_path: acme/tiny-8b
use_flash_attn: true
tokenizer_name: acme/tiny-8b
use_slow_tokenizer: true
train_file: data/processed/acme_mix/acme_mix_data.jsonl
max_seq_length: 2048
preprocessing_num_workers: 16
per_device_train_batch_size: 1
gradient_accumulation_steps: 16
learning_rate: 1.0e-04
lr_scheduler_type: linear
warmup_ratio: 0.03
weight_decay: 0.0
num_train_epochs: 5
output_dir: output/acme_8b_lora/
with_tracking: true
report_to:
  - tensorboard
logging_steps: 1
use_lora: true
lora_rank: 64
lora_alpha: 16
lora_dropout: 0.1
gradient_checkpointing: true
""",
    },
    'simple_parsing_repo': {
        'example/planted.yaml': """data:
  instruct_data: "/data/acme_chat_train.jsonl"
model_id_or_path: "/models/acme-7b-v3"
lora:
  rnak: 64
seq_lne: 32768
batch_size: 1
max_steps: 300
optim:
  lr: 6.e-5
run_dir: "/runs/acme-7b-chat"
""",
        'finetune/args.py': """import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Optional

from simple_parsing.helpers import Serializable


@dataclass
class DataArgs(Serializable):
    data: str = ""
    shuffle: bool = False
    instruct_data: str = ""
    eval_instruct_data: str = ""
    instruct: "InstructArgs" = field(default_factory=lambda: InstructArgs())


@dataclass
class InstructArgs(Serializable):
    shuffle: bool = True
    dynamic_chunk_fn_call: bool = True


@dataclass
class OptimArgs(Serializable):
    lr: float = 1e-4
    weight_decay: float = 0.1
    pct_start: float = 0.05


@dataclass
class LoraArgs(Serializable):
    enable: bool = True
    rank: int = 16
    dropout: float = 0.0
    scaling: float = 2.0


@dataclass
class WandbArgs(Serializable):
    project: Optional[str] = None
    offline: bool = False
    key: Optional[str] = None
    run_name: Optional[str] = None


@dataclass
class TrainArgs(Serializable):
    data: DataArgs
    model_id_or_path: str
    run_dir: str
    optim: OptimArgs = field(default_factory=OptimArgs)
    seed: int = 0
    num_microbatches: int = 1
    seq_len: int = 2048
    batch_size: int = 1
    max_norm: float = 1.0
    max_steps: int = 100
    log_freq: int = 1
    ckpt_freq: int = 0
    save_adapters: bool = True
    no_ckpt: bool = False
    num_ckpt_keep: Optional[int] = 3
    eval_freq: int = 0
    no_eval: bool = True
    checkpoint: bool = True
    world_size: Optional[int] = field(init=False, default=None)
    wandb: WandbArgs = field(default_factory=WandbArgs)
    lora: Optional[LoraArgs] = field(default_factory=LoraArgs)
""",
        'train.py': """import fire
from finetune.args import TrainArgs


def train(config: str):
    args: TrainArgs = TrainArgs.load(config, drop_extra_fields=False)
    print(args)


if __name__ == "__main__":
    fire.Fire(train)
""",
        'example/7B.yaml': """# data
data:
  instruct_data: "/data/acme_chat_train.jsonl"
  data: ""
  eval_instruct_data: "/data/acme_chat_eval.jsonl"

# model
model_id_or_path: "/models/acme-7b-v3"
lora:
  rank: 64

# optim
seq_len: 32768
batch_size: 1
max_steps: 300
optim:
  lr: 6.e-5
  weight_decay: 0.1
  pct_start: 0.05

# other
seed: 0
log_freq: 1
eval_freq: 100
no_eval: False
ckpt_freq: 100

save_adapters: True

run_dir: "/runs/acme-7b-chat"

wandb:
  project: null
  run_name: null
  key: null
  offline: False
""",
        'pyproject.toml': '',
    },
    'alignment_recipe_with_outside_classes': {
        'scripts/simpo_config.py': """from dataclasses import dataclass
from typing import Dict, Literal, Optional
from transformers import TrainingArguments


@dataclass
class SimPOConfig(TrainingArguments):
    max_length: Optional[int] = None
    max_prompt_length: Optional[int] = None
    max_target_length: Optional[int] = None
    beta: float = 2.0
    gamma_beta_ratio: float = 0.25
    sft_weight: float = 0.0
    label_smoothing: float = 0
    loss_type: Literal["sigmoid", "hinge"] = "sigmoid"
    disable_dropout: bool = True
    label_pad_token_id: int = -100
    padding_value: int = None
    truncation_mode: str = "keep_end"
    generate_during_eval: bool = False
    is_encoder_decoder: Optional[bool] = None
    model_init_kwargs: Optional[Dict] = None
    dataset_num_proc: Optional[int] = None
""",
        'scripts/run_simpo.py': """import sys
from alignment import DataArguments, H4ArgumentParser, ModelArguments
from simpo_config import SimPOConfig


def main():
    parser = H4ArgumentParser((ModelArguments, DataArguments, SimPOConfig))
    model_args, data_args, training_args = parser.parse()


if __name__ == "__main__":
    main()
""",
        'training_configs/acme-8b-instruct-simpo.yaml': """# Model arguments
model_name_or_path: acme/tiny-8b-instruct
torch_dtype: null
attn_implementation: flash_attention_2

# Data training arguments
dataset_mixer:
  acme/ultrafeedback-armorm: 1.0
dataset_splits:
- train
- test
preprocessing_num_workers: 12

# SimPOTrainer arguments
bf16: true
beta: 10
gamma_beta_ratio: 0.3
do_eval: true
eval_strategy: steps
eval_steps: 400
gradient_accumulation_steps: 16
gradient_checkpointing: true
gradient_checkpointing_kwargs:
  use_reentrant: False
hub_model_id: simpo-exps
learning_rate: 1.0e-6
log_level: info
logging_steps: 5
lr_scheduler_type: cosine
max_length: 2048
max_prompt_length: 1800
num_train_epochs: 1
optim: adamw_torch
output_dir: outputs/acme-8b-instruct-simpo
run_name: acme-8b-instruct-simpo
per_device_train_batch_size: 2
per_device_eval_batch_size: 4
push_to_hub: false
save_strategy: "steps"
save_steps: 1000000
report_to:
- wandb
save_total_limit: 20
seed: 42
warmup_ratio: 0.1
""",
        'pyproject.toml': '',
        'training_configs/acme-8b-planted.yaml': """model_name_or_path: acme/tiny-8b-instruct
beta: 10
gamma_beta_ration: 0.3
learning_rate: 1.0e-6
per_device_train_batch_size: 2
num_train_epochs: 1
output_dir: outputs/planted
""",
    },
    'argparse_dashes_and_dest_repo': {
        'setup.cfg': '',
        'train.py': """import argparse
import subprocess
import yaml


def build_parser():
    parser = argparse.ArgumentParser(description="Fine-tune a causal LM on acme tickets")
    parser.add_argument("--model-name", type=str, required=True)
    parser.add_argument("--lr", type=float, default=3e-4)
    parser.add_argument("--min-lr", type=float, default=3e-5)
    parser.add_argument("--warmup-iters", type=int, default=100)
    parser.add_argument("--max-iters", type=int, default=5000)
    parser.add_argument("--lr-decay-iters", type=int, default=5000)
    parser.add_argument("--batch-size", type=int, default=8)
    parser.add_argument("--grad-accum", dest="gradient_accumulation_steps", type=int, default=1)
    parser.add_argument("--block-size", type=int, default=1024)
    parser.add_argument("--lora-rank", type=int, default=8)
    parser.add_argument("--lora-alpha", type=float, default=16)
    parser.add_argument("--eval-interval", type=int, default=250)
    parser.add_argument("--eval-iters", type=int, default=200)
    parser.add_argument("--beta2", type=float, default=0.95)
    parser.add_argument("--grad-clip", type=float, default=1.0)
    parser.add_argument("--dtype", choices=["bfloat16", "float16", "float32"], default="bfloat16")
    parser.add_argument("--compile", action="store_true")
    parser.add_argument("--out-dir", default="out")
    group = parser.add_argument_group("data")
    group.add_argument("--dataset", default="acme_tickets")
    group.add_argument("--max_train_samples", type=int)
    return parser


def run_from_yaml(path):
    with open(path) as fh:
        cfg = yaml.safe_load(fh)
    argv = []
    for key, value in cfg.items():
        argv.append(f"--{key.replace('_', '-')}")
        argv.append(str(value))
    return build_parser().parse_args(argv)
""",
        'configs/tickets_lora.yaml': """model_name: acme/tiny-1b
lr: 3e-4
min_lr: 3e-5
warmup_iters: 200
max_iters: 6000
lr_decay_iters: 6000
batch_size: 16
grad_accum: 4
block_size: 2048
lora_rank: 16
lora_alpha: 32
eval_interval: 500
eval_iters: 100
beta2: 0.99
grad_clip: 1.0
dtype: bfloat16
out_dir: out/tickets-lora
dataset: acme_tickets
max_train_samples: 100000
""",
    },
    'pydantic_and_fire_repo': {
        # optimizer.name goes to the script's own settings, not to transformers' OptimizerNames
        'cfg/optim_words.yaml': """base_model: acme/tiny-1b
learning_rate: 2.0e-4
optimizer:
  name: adamw
  lr: 2.0e-4
""",
        'cfg/planted.yaml': """base_model: acme/tiny-1b
learning_rate: 2.0e-4
contxt_length: 4096
lora:
  rank: 16
  alpah: 32
""",
        'finetune.py': """import fire
import yaml
from pydantic import BaseModel, Field


class LoraSettings(BaseModel):
    rank: int = 8
    alpha: int = 16
    dropout: float = 0.05
    targets: list[str] = Field(default_factory=lambda: ["q_proj", "v_proj"])


class RunSettings(BaseModel):
    base_model: str
    learning_rate: float = 1e-4
    min_lr: float = 1e-6
    warmup_steps: int = 50
    micro_batch_size: int = 4
    grad_accum_steps: int = 4
    epochs: int = 3
    context_length: int = 2048
    lora: LoraSettings = LoraSettings()
    save_every: int = 500
    wandb_project: str | None = None


def main(config: str, dry_run: bool = False):
    with open(config) as fh:
        settings = RunSettings(**yaml.safe_load(fh))
    print(settings)


if __name__ == "__main__":
    fire.Fire(main)
""",
        'cfg/acme_1b.yaml': """base_model: acme/tiny-1b
learning_rate: 2.0e-4
min_lr: 2.0e-6
warmup_steps: 100
micro_batch_size: 8
grad_accum_steps: 2
epochs: 2
context_length: 4096
lora:
  rank: 16
  alpha: 32
  dropout: 0.05
  targets: [q_proj, k_proj, v_proj, o_proj]
save_every: 250
wandb_project: acme-tickets
""",
        'pyproject.toml': '',
    },
    'hydra_target_repo': {
        'pyproject.toml': '',
        'src/train.py': """import hydra
from omegaconf import DictConfig


@hydra.main(version_base="1.3", config_path="../configs", config_name="train.yaml")
def main(cfg: DictConfig):
    model = hydra.utils.instantiate(cfg.model)
    trainer = hydra.utils.instantiate(cfg.trainer)
    trainer.fit(model)


if __name__ == "__main__":
    main()
""",
        'configs/train.yaml': """defaults:
  - _self_
  - data: instructions
  - model: lora_causal_lm
  - trainer: gpu
  - experiment: null

task_name: train
seed: 12345
ckpt_path: null
""",
        'configs/model/lora_causal_lm.yaml': """_target_: src.models.lora_module.LoraCausalLM
model_name_or_path: acme/tiny-7b
lora_rank: 16
lora_alpha: 32
lora_dropout: 0.05
optimizer:
  _target_: torch.optim.AdamW
  _partial_: true
  lr: 2e-4
  weight_decay: 0.0
scheduler:
  _target_: transformers.get_cosine_schedule_with_warmup
  _partial_: true
  num_warmup_steps: 100
  num_training_steps: 2000
""",
        'configs/data/instructions.yaml': """_target_: src.data.instructions.InstructionDataModule
data_dir: ${paths.data_dir}
batch_size: 8
max_length: 1024
num_workers: 4
pin_memory: false
""",
        'configs/trainer/gpu.yaml': """_target_: lightning.pytorch.trainer.Trainer
default_root_dir: ${paths.output_dir}
min_epochs: 1
max_epochs: 3
accelerator: gpu
devices: 1
precision: bf16-mixed
accumulate_grad_batches: 4
gradient_clip_val: 1.0
check_val_every_n_epoch: 1
deterministic: false
""",
        'configs/experiment/long_run.yaml': """# @package _global_
defaults:
  - override /model: lora_causal_lm
  - override /trainer: gpu

seed: 42
trainer:
  max_epochs: 10
model:
  optimizer:
    lr: 1e-4
""",
    },
    'nemo_style_config': {
        'conf/megatron_gpt_finetuning_config.yaml': """name: megatron_gpt_peft_${model.peft.peft_scheme}_tuning

trainer:
  devices: 8
  accelerator: gpu
  num_nodes: 1
  precision: bf16
  logger: False
  enable_checkpointing: False
  use_distributed_sampler: False
  max_epochs: 9999
  max_steps: 20000
  log_every_n_steps: 10
  val_check_interval: 200
  gradient_clip_val: 1.0

exp_manager:
  explicit_log_dir: null
  exp_dir: null
  name: ${name}
  create_checkpoint_callback: True
  checkpoint_callback_params:
    monitor: validation_loss
    save_top_k: 1
    mode: min

model:
  seed: 1234
  tensor_model_parallel_size: 1
  pipeline_model_parallel_size: 1
  global_batch_size: 128
  micro_batch_size: 4
  restore_from_path: /models/acme-7b.nemo
  resume_from_checkpoint: null
  save_nemo_on_validation_end: False
  sync_batch_comm: False
  megatron_amp_O2: False
  sequence_parallel: False
  activations_checkpoint_granularity: null
  activations_checkpoint_method: null
  activations_checkpoint_num_layers: null
  answer_only_loss: True
  gradient_as_bucket_view: False
  hidden_dropout: 0.0
  attention_dropout: 0.0
  ffn_dropout: 0.0
  peft:
    peft_scheme: "lora"
    restore_from_path: null
    lora_tuning:
      target_modules: ['attention_qkv']
      adapter_dim: 32
      alpha: ${model.peft.lora_tuning.adapter_dim}
      adapter_dropout: 0.0
      column_init_method: 'xavier'
      row_init_method: 'zero'
  data:
    train_ds:
      file_names: ["/data/acme_train.jsonl"]
      global_batch_size: ${model.global_batch_size}
      micro_batch_size: ${model.micro_batch_size}
      shuffle: True
      num_workers: 0
      memmap_workers: 2
      pin_memory: True
      max_seq_length: 2048
      min_seq_length: 1
      drop_last: True
      concat_sampling_probabilities: [1.0]
      label_key: 'output'
      add_eos: True
      add_sep: False
      add_bos: False
      truncation_field: "input"
      prompt_template: "{input} {output}"
  optim:
    name: fused_adam
    lr: 1e-4
    weight_decay: 0.01
    betas:
    - 0.9
    - 0.98
    sched:
      name: CosineAnnealing
      warmup_steps: 50
      min_lr: 0.0
      constant_steps: 0
      monitor: val_loss
      reduce_on_plateau: false
""",
    },
    'foundry_style_config': {
        'yamls/finetune/acme-7b-instruct.yaml': """variables:
  max_seq_len: 2048
  global_seed: 17
  run_name: acme-7b-instruct

max_seq_len: ${variables.max_seq_len}
run_name: ${variables.run_name}

model:
  name: hf_causal_lm
  pretrained_model_name_or_path: acme/tiny-7b
  pretrained: true
  use_auth_token: false

tokenizer:
  name: acme/tiny-7b
  kwargs:
    model_max_length: ${variables.max_seq_len}

train_loader:
  name: finetuning
  dataset:
    hf_name: acme/instruct-v1
    split: train
    max_seq_len: ${variables.max_seq_len}
    allow_pad_trimming: false
    decoder_only_format: true
    shuffle: true
  drop_last: true
  num_workers: 8

scheduler:
  name: cosine_with_warmup
  t_warmup: 100ba
  alpha_f: 0.1

optimizer:
  name: decoupled_adamw
  lr: 6.0e-5
  betas:
  - 0.9
  - 0.95
  eps: 1.0e-08
  weight_decay: 0.0

algorithms:
  gradient_clipping:
    clipping_type: norm
    clipping_threshold: 1.0

max_duration: 2ep
eval_interval: 1ep
eval_first: false
global_train_batch_size: 64

seed: ${variables.global_seed}
device_eval_batch_size: 8
device_train_microbatch_size: 8
precision: amp_bf16

fsdp_config:
  sharding_strategy: FULL_SHARD
  mixed_precision: PURE
  activation_checkpointing: true
  activation_checkpointing_reentrant: false
  activation_cpu_offload: false
  limit_all_gathers: true

progress_bar: false
log_to_console: true
console_log_interval: 1ba

callbacks:
  speed_monitor:
    window_size: 10
  lr_monitor: {}
  memory_monitor: {}
  runtime_estimator: {}
""",
    },
    'neox_style_configs': {
        'configs/acme-1-3B.yml': """# GPT-2 pretraining setup
{
   "pipe_parallel_size": 1,
   "model_parallel_size": 1,

   "num_layers": 24,
   "hidden_size": 2048,
   "num_attention_heads": 16,
   "seq_length": 2048,
   "max_position_embeddings": 2048,
   "norm": "layernorm",
   "pos_emb": "rotary",
   "no_weight_tying": true,
   "gpt_j_residual": false,
   "output_layer_parallelism": "column",

   "scaled_upper_triang_masked_softmax_fusion": false,
   "bias_gelu_fusion": false,
   "rope_fusion": false,
   "layernorm_fusion": false,

   "init_method": "small_init",
   "output_layer_init_method": "wang_init",

   "optimizer": {
     "type": "Adam",
     "params": {
       "lr": 0.0002,
       "betas": [0.9, 0.95],
       "eps": 1.0e-8,
     }
   },
   "min_lr": 0.00002,

   "zero_optimization": {
    "stage": 1,
    "allgather_partitions": True,
    "allgather_bucket_size": 500000000,
    "overlap_comm": True,
    "reduce_scatter": True,
    "reduce_bucket_size": 500000000,
    "contiguous_gradients": True,
  },

   "train_micro_batch_size_per_gpu": 4,
   "data_impl": "mmap",

   "checkpoint_activations": true,
   "checkpoint_num_layers": 1,
   "partition_activations": true,
   "synchronize_each_layer": true,

   "gradient_clipping": 1.0,
   "weight_decay": 0.1,
   "hidden_dropout": 0,
   "attention_dropout": 0,

   "fp16": {
     "fp16": true,
     "enabled": true,
     "loss_scale": 0,
     "loss_scale_window": 1000,
     "hysteresis": 2,
     "min_loss_scale": 1
   },

   "train_iters": 320000,
   "lr_decay_iters": 320000,
   "distributed_backend": "nccl",
   "lr_decay_style": "cosine",
   "warmup": 0.01,
   "checkpoint_factor": 10000,
   "eval_interval": 1000,
   "eval_iters": 10,

   "log_interval": 100,
   "steps_per_print": 10,
   "keep_last_n_checkpoints": 4,
   "wall_clock_breakdown": true,
}
""",
        'configs/local_setup.yml': """{
  "data_path": "data/acme/acme_text_document",
  "vocab_file": "data/gpt2-vocab.json",
  "merge_file": "data/gpt2-merges.txt",
  "save": "checkpoints",
  "load": "checkpoints",
  "checkpoint_validation_with_forward_pass": False,
  "tensorboard_dir": "tensorboard",
  "log_dir": "logs",
  "use_wandb": True,
  "wandb_host": "https://api.wandb.ai",
  "wandb_project": "acme-neox"
}
""",
    },
    'class_path_config': {
        'config_hub/finetune/acme-1b/lora.yaml': """# The path to the base model's checkpoint directory to load for finetuning. (type: <class 'Path'>, default: checkpoints/stabilityai/stablelm-base-alpha-3b)
checkpoint_dir: checkpoints/acme/tiny-1b

# Directory in which to save checkpoints and logs. (type: <class 'Path'>, default: out/lora)
out_dir: out/finetune/lora-acme-1b

# The precision to use for finetuning. Possible choices: "bf16-true", "bf16-mixed", "32-true". (type: Optional[str], default: null)
precision: bf16-true

# If set, quantize the model with this algorithm. See ``tutorials/quantize.md`` for more information. (type: Optional[Literal['nf4', 'nf4-dq', 'fp4', 'fp4-dq', 'int8-training']], default: null)
quantize:

# How many devices/GPUs to use. (type: Union[int, str], default: 1)
devices: 1

# How many nodes to use. (type: int, default: 1)
num_nodes: 1

# The LoRA rank. (type: int, default: 8)
lora_r: 32

# The LoRA alpha. (type: int, default: 16)
lora_alpha: 16

# The LoRA dropout value. (type: float, default: 0.05)
lora_dropout: 0.05

# Whether to apply LoRA to the query weights in attention. (type: bool, default: True)
lora_query: true

# Whether to apply LoRA to the key weights in attention. (type: bool, default: False)
lora_key: false

# Whether to apply LoRA to the value weights in attention. (type: bool, default: True)
lora_value: true

# Whether to apply LoRA to the output projection in the attention block. (type: bool, default: False)
lora_projection: false

# Whether to apply LoRA to the weights of the MLP in the attention block. (type: bool, default: False)
lora_mlp: false

# Whether to apply LoRA to output head in GPT. (type: bool, default: False)
lora_head: false

# Data-related arguments. If not provided, the default is ``litgpt.data.Alpaca``.
data:
  class_path: litgpt.data.Alpaca2k
  init_args:
    mask_prompt: false
    val_split_fraction: 0.05
    prompt_style: alpaca
    ignore_index: -100
    seed: 42
    num_workers: 4

# Training-related arguments. See ``litgpt.args.TrainArgs`` for details
train:
  # Number of optimizer steps between saving checkpoints (type: Optional[int], default: 1000)
  save_interval: 200
  # Number of iterations between logging calls (type: int, default: 1)
  log_interval: 1
  # Number of samples between optimizer steps across data-parallel ranks (type: int, default: 128)
  global_batch_size: 8
  # Number of samples per data-parallel rank (type: int, default: 4)
  micro_batch_size: 2
  # Number of iterations with learning rate warmup active (type: int, default: 100)
  lr_warmup_steps: 10
  # Number of epochs to train on (type: Optional[int], default: 5)
  epochs: 4
  # Total number of tokens to train on (type: Optional[int], default: null)
  max_tokens:
  # Limits the number of optimizer steps to run. (type: Optional[int], default: null)
  max_steps:
  # Limits the length of samples. Off by default (type: Optional[int], default: null)
  max_seq_length: 512
  # Whether to tie the embedding weights with the language modeling head weights. (type: Optional[bool], default: False)
  tie_embeddings:
  #   (type: Optional[float], default: null)
  max_norm:
  #   (type: float, default: 6e-05)
  min_lr: 6.0e-05

# Evaluation-related arguments. See ``litgpt.args.EvalArgs`` for details
eval:
  # Number of optimizer steps between evaluation calls (type: int, default: 100)
  interval: 100
  # Number of tokens to generate (type: Optional[int], default: 100)
  max_new_tokens: 100
  # Number of iterations (type: int, default: 100)
  max_iters: 100
  # Whether to evaluate on the validation set at the beginning of the training
  initial_validation: false
  # Whether to evaluate on the validation set at the end the training
  final_validation: true

# The name of the logger to send metrics to. (type: Literal['wandb', 'tensorboard', 'csv'], default: csv)
logger_name: csv

# The random seed to use for reproducibility. (type: int, default: 1337)
seed: 1337

# Optimizer-related arguments
optimizer:
  class_path: torch.optim.AdamW
  init_args:
    #   (type: float, default: 0.001)
    lr: 0.0002
    #   (type: float, default: 0.01)
    weight_decay: 0.0
    #   (type: tuple, default: (0.9,0.999))
    betas:
      - 0.9
      - 0.95
""",
    },
    'rl_sections_config': {
        'examples/config/ppo_acme.yaml': """data:
  tokenizer: null
  train_files: ~/data/acme_math/train.parquet
  val_files: ~/data/acme_math/test.parquet
  prompt_key: prompt
  max_prompt_length: 512
  max_response_length: 512
  train_batch_size: 1024
  return_raw_chat: False
  shuffle: True

actor_rollout_ref:
  hybrid_engine: True
  model:
    path: ~/models/acme-7b
    external_lib: null
    override_config: {}
    enable_gradient_checkpointing: True
    use_remove_padding: False
  actor:
    strategy: fsdp
    ppo_mini_batch_size: 256
    ppo_micro_batch_size_per_gpu: 4
    use_dynamic_bsz: False
    grad_clip: 1.0
    clip_ratio: 0.2
    entropy_coeff: 0.001
    use_kl_loss: False
    ppo_epochs: 1
    shuffle: False
    optim:
      lr: 1e-6
      lr_warmup_steps_ratio: 0.
      min_lr_ratio: null
      warmup_style: constant
      total_training_steps: -1
    fsdp_config:
      wrap_policy:
        min_num_params: 0
      param_offload: False
      optimizer_offload: False
      fsdp_size: -1
  rollout:
    name: vllm
    temperature: 1.0
    top_k: -1
    top_p: 1
    prompt_length: ${data.max_prompt_length}
    response_length: ${data.max_response_length}
    dtype: bfloat16
    gpu_memory_utilization: 0.5
    tensor_model_parallel_size: 2
    max_num_batched_tokens: 8192
    n: 1

critic:
  strategy: fsdp
  optim:
    lr: 1e-5
    lr_warmup_steps_ratio: 0.
    warmup_style: constant
  model:
    path: ~/models/acme-7b
    enable_gradient_checkpointing: True
  ppo_mini_batch_size: ${actor_rollout_ref.actor.ppo_mini_batch_size}
  ppo_micro_batch_size_per_gpu: 4
  ppo_epochs: ${actor_rollout_ref.actor.ppo_epochs}
  grad_clip: 1.0
  cliprange_value: 0.5

algorithm:
  gamma: 1.0
  lam: 1.0
  adv_estimator: gae
  kl_penalty: kl
  kl_ctrl:
    type: fixed
    kl_coef: 0.001

trainer:
  total_epochs: 30
  total_training_steps: null
  project_name: acme_ppo
  experiment_name: acme-7b-gae
  logger: ['console', 'wandb']
  nnodes: 1
  n_gpus_per_node: 8
  save_freq: -1
  test_freq: 5
  critic_warmup: 0
  default_local_dir: checkpoints/${trainer.project_name}/${trainer.experiment_name}
""",
    },
    'deepspeed_variants': {
        'ds_hf_auto_z3.json': """{
  "fp16": {
    "enabled": "auto",
    "loss_scale": 0,
    "loss_scale_window": 1000,
    "initial_scale_power": 16,
    "hysteresis": 2,
    "min_loss_scale": 1
  },
  "bf16": {
    "enabled": "auto"
  },
  "optimizer": {
    "type": "AdamW",
    "params": {
      "lr": "auto",
      "betas": "auto",
      "eps": "auto",
      "weight_decay": "auto"
    }
  },
  "scheduler": {
    "type": "WarmupDecayLR",
    "params": {
      "total_num_steps": "auto",
      "warmup_min_lr": "auto",
      "warmup_max_lr": "auto",
      "warmup_num_steps": "auto"
    }
  },
  "zero_optimization": {
    "stage": 3,
    "offload_optimizer": {
      "device": "cpu",
      "pin_memory": true
    },
    "offload_param": {
      "device": "none"
    },
    "overlap_comm": true,
    "contiguous_gradients": true,
    "sub_group_size": 1e9,
    "reduce_bucket_size": "auto",
    "stage3_prefetch_bucket_size": "auto",
    "stage3_param_persistence_threshold": "auto",
    "stage3_max_live_parameters": 1e9,
    "stage3_max_reuse_distance": 1e9,
    "stage3_gather_16bit_weights_on_model_save": true,
    "zero_hpz_partition_size": 8,
    "zero_quantized_weights": false,
    "zero_quantized_gradients": false
  },
  "gradient_accumulation_steps": "auto",
  "gradient_clipping": "auto",
  "steps_per_print": 2000,
  "train_batch_size": "auto",
  "train_micro_batch_size_per_gpu": "auto",
  "wall_clock_breakdown": false,
  "comms_logger": {
    "enabled": true,
    "verbose": false,
    "prof_all": true,
    "debug": false
  }
}
""",
        'ds_autotune.json': """{
  "train_micro_batch_size_per_gpu": "auto",
  "gradient_accumulation_steps": "auto",
  "fp16": {"enabled": true},
  "zero_optimization": {"stage": [0, 1, 2, 3]},
  "autotuning": {
    "enabled": true,
    "fast": false,
    "metric": "throughput",
    "start_profile_step": 3,
    "end_profile_step": 5,
    "max_train_batch_size": 256,
    "num_tuning_micro_batch_sizes": 3,
    "tuner_type": "model_based",
    "tuner_early_stopping": 5,
    "tuner_num_trials": 50,
    "results_dir": "autotuning_results",
    "exps_dir": "autotuning_exps",
    "overwrite": false,
    "arg_mappings": {
      "train_micro_batch_size_per_gpu": "--per_device_train_batch_size",
      "gradient_accumulation_steps ": "--gradient_accumulation_steps"
    }
  }
}
""",
        'ds_autotune_fixed.json': """{
  "train_micro_batch_size_per_gpu": "auto",
  "fp16": {"enabled": true},
  "zero_optimization": {"stage": 2, "reduce_bucket_size": 5e8},
  "autotuning": {
    "enabled": true,
    "arg_mappings": {
      "train_micro_batch_size_per_gpu": "--per_device_train_batch_size",
      "gradient_accumulation_steps ": "--gradient_accumulation_steps"
    }
  }
}
""",
        'ds_bf16_z2_monitor.json': """{
  "train_batch_size": 256,
  "train_micro_batch_size_per_gpu": 8,
  "gradient_accumulation_steps": 4,
  "bf16": {"enabled": true},
  "zero_optimization": {
    "stage": 2,
    "allgather_partitions": true,
    "allgather_bucket_size": 2e8,
    "overlap_comm": true,
    "reduce_scatter": true,
    "reduce_bucket_size": 2e8,
    "contiguous_gradients": true,
    "round_robin_gradients": true
  },
  "data_types": {"grad_accum_dtype": "fp32"},
  "gradient_clipping": 1.0,
  "prescale_gradients": false,
  "communication_data_type": "bf16",
  "zero_allow_untested_optimizer": true,
  "tensorboard": {"enabled": true, "output_path": "logs/", "job_name": "acme_z2"},
  "wandb": {"enabled": false, "project": "acme"},
  "csv_monitor": {"enabled": false, "output_path": "logs/csv", "job_name": "acme_z2"},
  "flops_profiler": {"enabled": false, "profile_step": 10, "module_depth": -1, "top_modules": 1, "detailed": true},
  "activation_checkpointing": {"partition_activations": false, "cpu_checkpointing": false, "contiguous_memory_optimization": false, "number_checkpoints": null, "synchronize_checkpoint_boundary": false, "profile": false},
  "checkpoint": {"tag_validation": "Warn", "load_universal": false, "use_node_local_storage": false},
  "aio": {"block_size": 1048576, "queue_depth": 8, "thread_count": 1, "single_submit": false, "overlap_events": true},
  "elasticity": {"enabled": false, "max_train_batch_size": 2000, "micro_batch_sizes": [2, 4, 6], "min_gpus": 1, "max_gpus": 10000, "min_time": 20, "version": 0.1}
}
""",
    },
    'accelerate_variants': {
        'fsdp2_tp.yaml': """compute_environment: LOCAL_MACHINE
debug: false
distributed_type: FSDP
downcast_bf16: 'no'
enable_cpu_affinity: false
fsdp_config:
  fsdp_activation_checkpointing: true
  fsdp_auto_wrap_policy: TRANSFORMER_BASED_WRAP
  fsdp_cpu_ram_efficient_loading: true
  fsdp_offload_params: false
  fsdp_reshard_after_forward: true
  fsdp_state_dict_type: SHARDED_STATE_DICT
  fsdp_version: 2
machine_rank: 0
main_training_function: main
mixed_precision: bf16
num_machines: 1
num_processes: 8
parallelism_config:
  parallelism_config_dp_replicate_size: 1
  parallelism_config_dp_shard_size: 4
  parallelism_config_tp_size: 2
  parallelism_config_cp_size: 1
rdzv_backend: static
same_network: true
tpu_env: []
tpu_use_cluster: false
tpu_use_sudo: false
use_cpu: false
""",
        'dynamo_multi.yaml': """compute_environment: LOCAL_MACHINE
distributed_type: MULTI_GPU
dynamo_config:
  dynamo_backend: INDUCTOR
  dynamo_mode: max-autotune
  dynamo_use_dynamic: true
  dynamo_use_fullgraph: false
gpu_ids: all
machine_rank: 0
main_process_ip: 10.0.0.4
main_process_port: 29500
main_training_function: main
mixed_precision: fp8
fp8_config:
  backend: TE
  fp8_format: HYBRID
  amax_history_len: 32
  amax_compute_algo: max
  interval: 1
  override_linear_precision: [false, false, false]
  use_autocast_during_eval: false
num_machines: 2
num_processes: 16
rdzv_backend: c10d
same_network: false
use_cpu: false
""",
        'deepspeed_inline.yaml': """compute_environment: LOCAL_MACHINE
debug: false
deepspeed_config:
  deepspeed_multinode_launcher: standard
  gradient_accumulation_steps: 4
  gradient_clipping: 1.0
  offload_optimizer_device: cpu
  offload_param_device: none
  zero3_init_flag: true
  zero3_save_16bit_model: true
  zero_stage: 3
distributed_type: DEEPSPEED
downcast_bf16: 'no'
machine_rank: 0
main_training_function: main
mixed_precision: bf16
num_machines: 1
num_processes: 4
rdzv_backend: static
same_network: true
use_cpu: false
""",
    },
    'peft_adapters_of_other_kinds': {
        'oft/adapter_config.json': """{
  "alpha_pattern": {},
  "auto_mapping": null,
  "base_model_name_or_path": "acme/tiny-1b",
  "bias": "none",
  "block_share": false,
  "coft": false,
  "eps": 6e-05,
  "exclude_modules": null,
  "fan_in_fan_out": false,
  "inference_mode": true,
  "init_weights": true,
  "layers_pattern": null,
  "layers_to_transform": null,
  "module_dropout": 0.0,
  "modules_to_save": null,
  "num_cayley_neumann_terms": 5,
  "oft_block_size": 32,
  "peft_type": "OFT",
  "r": 0,
  "rank_pattern": {},
  "revision": null,
  "target_modules": ["q_proj", "v_proj"],
  "task_type": "CAUSAL_LM",
  "use_cayley_neumann": true
}
""",
        'vera/adapter_config.json': """{
  "base_model_name_or_path": "acme/tiny-1b",
  "bias": "none",
  "d_initial": 0.1,
  "fan_in_fan_out": false,
  "inference_mode": true,
  "init_weights": true,
  "layers_pattern": null,
  "layers_to_transform": null,
  "modules_to_save": null,
  "peft_type": "VERA",
  "projection_prng_key": 0,
  "r": 256,
  "revision": null,
  "save_projection": true,
  "target_modules": ["q_proj", "v_proj"],
  "task_type": "CAUSAL_LM",
  "vera_dropout": 0.0
}
""",
        'prompt/adapter_config.json': """{
  "auto_mapping": null,
  "base_model_name_or_path": "acme/tiny-1b",
  "inference_mode": true,
  "num_attention_heads": 16,
  "num_layers": 16,
  "num_transformer_submodules": 1,
  "num_virtual_tokens": 20,
  "peft_type": "PROMPT_TUNING",
  "prompt_tuning_init": "TEXT",
  "prompt_tuning_init_text": "Classify if the ticket is a complaint or not:",
  "revision": null,
  "task_type": "CAUSAL_LM",
  "token_dim": 2048,
  "tokenizer_kwargs": null,
  "tokenizer_name_or_path": "acme/tiny-1b"
}
""",
        'lora_new/adapter_config.json': """{
  "alora_invocation_tokens": null,
  "alpha_pattern": {},
  "arrow_config": null,
  "auto_mapping": null,
  "base_model_name_or_path": "acme/tiny-1b",
  "bias": "none",
  "corda_config": null,
  "ensure_weight_tying": false,
  "eva_config": null,
  "exclude_modules": null,
  "fan_in_fan_out": false,
  "inference_mode": true,
  "init_lora_weights": true,
  "layer_replication": null,
  "layers_pattern": null,
  "layers_to_transform": null,
  "loftq_config": {},
  "lora_alpha": 32,
  "lora_bias": false,
  "lora_dropout": 0.05,
  "megatron_config": null,
  "megatron_core": "megatron.core",
  "modules_to_save": null,
  "peft_type": "LORA",
  "peft_version": "0.18.0",
  "qalora_group_size": 16,
  "r": 16,
  "rank_pattern": {},
  "revision": null,
  "target_modules": ["q_proj", "k_proj", "v_proj", "o_proj", "gate_proj", "up_proj", "down_proj"],
  "target_parameters": null,
  "task_type": "CAUSAL_LM",
  "trainable_token_indices": null,
  "use_dora": false,
  "use_qalora": false,
  "use_rslora": false
}
""",
    },
    'torchtune_newer_components': {
        'qwen3_4B_lora.yaml': """output_dir: /tmp/torchtune/qwen3_4B/lora

model:
  _component_: torchtune.models.qwen3.lora_qwen3_4b_instruct
  lora_attn_modules: ['q_proj', 'v_proj', 'output_proj']
  apply_lora_to_mlp: True
  lora_rank: 32
  lora_alpha: 64
  lora_dropout: 0.0

tokenizer:
  _component_: torchtune.models.qwen3.qwen3_tokenizer
  path: /models/Qwen3-4B/vocab.json
  merges_file: /models/Qwen3-4B/merges.txt
  max_seq_len: null

checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  checkpoint_dir: /models/Qwen3-4B
  checkpoint_files: [model-00001-of-00003.safetensors, model-00002-of-00003.safetensors, model-00003-of-00003.safetensors]
  recipe_checkpoint: null
  output_dir: ${output_dir}
  model_type: QWEN3
resume_from_checkpoint: False
save_adapter_weights_only: False

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
  _component_: torchtune.modules.loss.LinearCrossEntropyLoss

epochs: 1
max_steps_per_epoch: null
gradient_accumulation_steps: 8
clip_grad_norm: null
compile: False

metric_logger:
  _component_: torchtune.training.metric_logging.DiskLogger
  log_dir: ${output_dir}/logs
log_every_n_steps: 1
log_peak_memory_stats: True
log_level: INFO

device: cuda
dtype: bf16

enable_activation_checkpointing: True
enable_activation_offloading: False

profiler:
  _component_: torchtune.training.setup_torch_profiler
  enabled: False
  output_dir: ${output_dir}/profiling_outputs
  cpu: True
  cuda: True
  profile_memory: False
  with_stack: False
  record_shapes: True
  with_flops: False
  wait_steps: 5
  warmup_steps: 3
  active_steps: 2
  num_cycles: 1
""",
        'llama3_2_1B_full_dist.yaml': """output_dir: /tmp/torchtune/llama3_2_1B/full

tokenizer:
  _component_: torchtune.models.llama3.llama3_tokenizer
  path: /models/Llama-3.2-1B-Instruct/original/tokenizer.model
  max_seq_len: 2048

dataset:
  _component_: torchtune.datasets.chat_dataset
  source: json
  data_files: data/acme_chat.json
  conversation_column: messages
  conversation_style: openai
  split: train
  packed: True
seed: 42
shuffle: True

model:
  _component_: torchtune.models.llama3_2.llama3_2_1b

checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  checkpoint_dir: /models/Llama-3.2-1B-Instruct/
  checkpoint_files: [model.safetensors]
  recipe_checkpoint: null
  output_dir: ${output_dir}
  model_type: LLAMA3_2
resume_from_checkpoint: False

batch_size: 4
epochs: 3
optimizer:
  _component_: torch.optim.AdamW
  lr: 2e-5
  fused: True
loss:
  _component_: torchtune.modules.loss.LinearCrossEntropyLoss
max_steps_per_epoch: null
clip_grad_norm: null
compile: False
optimizer_in_bwd: False
gradient_accumulation_steps: 1

device: cuda
enable_activation_checkpointing: False
enable_activation_offloading: False
custom_sharded_layers: ['tok_embeddings', 'output']
fsdp_cpu_offload: False
dtype: bf16
tensor_parallel_dim: 1
tensor_parallel_plan:
  _component_: torchtune.models.llama3.base_llama_tp_plan
data_parallel_shard_dim: -1
data_parallel_replicate_dim: 1
keep_last_n_checkpoints: 2
enable_async_checkpointing: False

metric_logger:
  _component_: torchtune.training.metric_logging.DiskLogger
  log_dir: ${output_dir}/logs
log_every_n_steps: 1
log_peak_memory_stats: True
""",
    },
    'axolotl_newer_keys': {
        'qwen3-8b-lora-cce.yaml': """base_model: Qwen/Qwen3-8B
plugins:
  - axolotl.integrations.cut_cross_entropy.CutCrossEntropyPlugin
  - axolotl.integrations.liger.LigerPlugin
liger_rope: true
liger_rms_norm: true
liger_glu_activation: true
cut_cross_entropy: true

load_in_8bit: false
load_in_4bit: false
strict: false

chat_template: qwen3
datasets:
  - path: acme/support-chats
    type: chat_template
    split: train
    field_messages: messages
    message_property_mappings:
      role: role
      content: content
    roles_to_train: ["assistant"]
    train_on_eos: turn
dataset_prepared_path: last_run_prepared
val_set_size: 0.02
output_dir: ./outputs/qwen3-8b-lora

sequence_len: 4096
sample_packing: true
eval_sample_packing: true
pad_to_sequence_len: true

adapter: lora
lora_r: 32
lora_alpha: 64
lora_dropout: 0.0
lora_target_linear: true
lora_mlp_kernel: true
lora_qkv_kernel: true
lora_o_kernel: true

wandb_project: acme-support
wandb_entity:
wandb_watch:
wandb_name:
wandb_log_model:

gradient_accumulation_steps: 4
micro_batch_size: 2
num_epochs: 2
optimizer: adamw_torch_fused
lr_scheduler: cosine
learning_rate: 0.0002

bf16: auto
tf32: true

gradient_checkpointing: true
gradient_checkpointing_kwargs:
  use_reentrant: false
resume_from_checkpoint:
logging_steps: 1
flash_attention: true

warmup_ratio: 0.05
evals_per_epoch: 4
saves_per_epoch: 1
save_first_step: true
weight_decay: 0.0
special_tokens:
""",
        'llama-3.1-8b-fsdp2-full.yaml': """base_model: meta-llama/Llama-3.1-8B
datasets:
  - path: acme/instructions-v3
    type: alpaca
val_set_size: 0.0
output_dir: ./outputs/full-fsdp2
sequence_len: 8192
sample_packing: true
flex_attention: true
flex_attn_compile_kwargs:
  dynamic: false
  mode: max-autotune-no-cudagraphs
gradient_accumulation_steps: 1
micro_batch_size: 1
num_epochs: 1
optimizer: adamw_torch_fused
lr_scheduler: cosine
learning_rate: 2e-5
bf16: true
tf32: false
gradient_checkpointing: true
activation_offloading: true
logging_steps: 1
warmup_steps: 100
saves_per_epoch: 1
weight_decay: 0.0
fsdp_version: 2
fsdp_config:
  offload_params: false
  state_dict_type: FULL_STATE_DICT
  auto_wrap_policy: TRANSFORMER_BASED_WRAP
  transformer_layer_cls_to_wrap: LlamaDecoderLayer
  reshard_after_forward: true
  cpu_ram_efficient_loading: true
context_parallel_size: 2
special_tokens:
  pad_token: <|end_of_text|>
""",
    },
    'llama_factory_newer_keys': {
        'qwen3_lora_sft_thinking.yaml': """### model
model_name_or_path: Qwen/Qwen3-4B
trust_remote_code: true

### method
stage: sft
do_train: true
finetuning_type: lora
lora_rank: 16
lora_alpha: 32
lora_dropout: 0.05
lora_target: all
use_dora: false
pissa_init: false
loraplus_lr_ratio: 16.0

### dataset
dataset: acme_support_zh,acme_support_en
template: qwen3
enable_thinking: true
cutoff_len: 4096
max_samples: 20000
overwrite_cache: true
preprocessing_num_workers: 16
dataloader_num_workers: 4
mask_history: false
neat_packing: false

### output
output_dir: saves/qwen3-4b/lora/sft
logging_steps: 10
save_steps: 500
plot_loss: true
overwrite_output_dir: true
save_only_model: false
report_to: swanlab
use_swanlab: true
swanlab_project: acme-sft

### train
per_device_train_batch_size: 2
gradient_accumulation_steps: 8
learning_rate: 1.0e-4
num_train_epochs: 3.0
lr_scheduler_type: cosine
warmup_ratio: 0.1
bf16: true
ddp_timeout: 180000000
resume_from_checkpoint: null
flash_attn: fa2

### eval
val_size: 0.05
per_device_eval_batch_size: 2
eval_strategy: steps
eval_steps: 500
""",
        'qwen2_5vl_lora_sft.yaml': """### model
model_name_or_path: Qwen/Qwen2.5-VL-7B-Instruct
image_max_pixels: 262144
video_max_pixels: 16384
trust_remote_code: true

### method
stage: sft
do_train: true
finetuning_type: lora
lora_rank: 8
lora_target: all
freeze_vision_tower: true
freeze_multi_modal_projector: true
freeze_language_model: false

### dataset
dataset: acme_receipts
template: qwen2_vl
cutoff_len: 2048
max_samples: 1000
overwrite_cache: true
preprocessing_num_workers: 16

### output
output_dir: saves/qwen2_5vl-7b/lora/sft
logging_steps: 10
save_steps: 500
plot_loss: true
overwrite_output_dir: true

### train
per_device_train_batch_size: 1
gradient_accumulation_steps: 8
learning_rate: 1.0e-4
num_train_epochs: 3.0
lr_scheduler_type: cosine
warmup_ratio: 0.1
bf16: true
ddp_timeout: 180000000
""",
    },
    'checkpoint_folder': {
        'wandb/run-20240101_000000-abcd/files/config.yaml': """wandb_version: 1

_wandb:
  desc: null
  value:
    python_version: 3.11.9
    cli_version: 0.17.0
    framework: huggingface
    is_jupyter_run: false
learning_rate:
  desc: null
  value: 2.0e-05
per_device_train_batch_size:
  desc: null
  value: 4
num_train_epochs:
  desc: null
  value: 3
lr_scheduler_type:
  desc: null
  value: cosine
warmup_ratio:
  desc: null
  value: 0.03
model_name_or_path:
  desc: null
  value: acme/tiny-7b
bf16:
  desc: null
  value: true
""",
        'checkpoint-500/config.json': """{
  "architectures": ["LlamaForCausalLM"],
  "attention_bias": false,
  "attention_dropout": 0.0,
  "bos_token_id": 1,
  "eos_token_id": 2,
  "head_dim": 64,
  "hidden_act": "silu",
  "hidden_size": 2048,
  "initializer_range": 0.02,
  "intermediate_size": 5632,
  "max_position_embeddings": 2048,
  "model_type": "llama",
  "num_attention_heads": 32,
  "num_hidden_layers": 22,
  "num_key_value_heads": 4,
  "pretraining_tp": 1,
  "rms_norm_eps": 1e-05,
  "rope_scaling": null,
  "rope_theta": 10000.0,
  "tie_word_embeddings": false,
  "torch_dtype": "bfloat16",
  "transformers_version": "4.46.3",
  "use_cache": false,
  "vocab_size": 32000
}
""",
        'checkpoint-500/generation_config.json': """{"bos_token_id": 1, "eos_token_id": 2, "max_length": 2048, "pad_token_id": 0, "transformers_version": "4.46.3", "do_sample": true, "temperature": 0.6, "top_p": 0.9}
""",
        'checkpoint-500/tokenizer_config.json': """{
  "add_bos_token": true,
  "add_eos_token": false,
  "bos_token": "<s>",
  "chat_template": "{% for message in messages %}{{ message['content'] }}{% endfor %}",
  "clean_up_tokenization_spaces": false,
  "eos_token": "</s>",
  "legacy": false,
  "model_max_length": 2048,
  "pad_token": "</s>",
  "padding_side": "right",
  "sp_model_kwargs": {},
  "tokenizer_class": "LlamaTokenizer",
  "unk_token": "<unk>"
}
""",
        'checkpoint-500/special_tokens_map.json': """{"bos_token": {"content": "<s>", "lstrip": false, "normalized": false, "rstrip": false, "single_word": false}, "eos_token": "</s>", "pad_token": "</s>", "unk_token": "<unk>"}
""",
        'checkpoint-500/trainer_state.json': """{
  "best_metric": 1.2345,
  "best_model_checkpoint": "out/checkpoint-500",
  "epoch": 1.5,
  "eval_steps": 100,
  "global_step": 500,
  "is_hyper_param_search": false,
  "is_local_process_zero": true,
  "is_world_process_zero": true,
  "log_history": [
    {"epoch": 0.03, "grad_norm": 1.23, "learning_rate": 2e-05, "loss": 1.9, "step": 10},
    {"epoch": 0.3, "eval_loss": 1.5, "eval_runtime": 12.3, "step": 100}
  ],
  "logging_steps": 10,
  "max_steps": 1000,
  "num_input_tokens_seen": 0,
  "num_train_epochs": 3,
  "save_steps": 500,
  "stateful_callbacks": {"TrainerControl": {"args": {"should_epoch_stop": false, "should_evaluate": false, "should_log": false, "should_save": true, "should_training_stop": false}, "attributes": {}}},
  "total_flos": 1.2e17,
  "train_batch_size": 4,
  "trial_name": null,
  "trial_params": null
}
""",
        'checkpoint-500/adapter_config.json': """{
  "alpha_pattern": {},
  "auto_mapping": null,
  "base_model_name_or_path": "acme/tiny-1b",
  "bias": "none",
  "fan_in_fan_out": false,
  "inference_mode": true,
  "init_lora_weights": true,
  "layers_pattern": null,
  "layers_to_transform": null,
  "lora_alpha": 32,
  "lora_dropout": 0.05,
  "modules_to_save": null,
  "peft_type": "LORA",
  "r": 16,
  "rank_pattern": {},
  "revision": null,
  "target_modules": ["q_proj", "k_proj", "v_proj", "o_proj", "gate_proj", "up_proj", "down_proj"],
  "task_type": "CAUSAL_LM",
  "use_dora": false,
  "use_rslora": false
}
""",
        'all_results.json': """{"epoch": 3.0, "eval_loss": 1.21, "eval_runtime": 30.1, "eval_samples": 1000, "train_loss": 1.35, "train_runtime": 3600.2, "train_samples": 50000, "train_samples_per_second": 41.6, "train_steps_per_second": 1.3}
""",
        'hparams.yaml': """lr: 0.0001
batch_size: 16
max_epochs: 5
warmup_steps: 100
model_name: acme/tiny-1b
weight_decay: 0.01
""",
        'environment.yml': """name: acme-ft
channels:
  - pytorch
  - nvidia
  - conda-forge
dependencies:
  - python=3.11
  - pytorch=2.4
  - pip
  - pip:
      - transformers==4.46.3
      - peft==0.13.2
""",
        'dataset_info.json': """{
  "acme_support": {"file_name": "acme_support.json", "formatting": "sharegpt", "columns": {"messages": "conversations"}, "tags": {"role_tag": "from", "content_tag": "value", "user_tag": "human", "assistant_tag": "gpt"}},
  "acme_pref": {"file_name": "acme_pref.json", "ranking": true, "columns": {"prompt": "instruction", "chosen": "chosen", "rejected": "rejected"}}
}
""",
    },
    'example_script_repo': {
        'setup.py': '',
        'run_clm.py': """from dataclasses import dataclass, field
from typing import Optional
from transformers import HfArgumentParser, TrainingArguments


@dataclass
class ModelArguments:
    model_name_or_path: Optional[str] = field(default=None)
    model_type: Optional[str] = field(default=None)
    config_overrides: Optional[str] = field(default=None)
    config_name: Optional[str] = field(default=None)
    tokenizer_name: Optional[str] = field(default=None)
    cache_dir: Optional[str] = field(default=None)
    use_fast_tokenizer: bool = field(default=True)
    model_revision: str = field(default="main")
    token: str = field(default=None)
    trust_remote_code: bool = field(default=False)
    torch_dtype: Optional[str] = field(default=None, metadata={"choices": ["auto", "bfloat16", "float16", "float32"]})
    low_cpu_mem_usage: bool = field(default=False)


@dataclass
class DataTrainingArguments:
    dataset_name: Optional[str] = field(default=None)
    dataset_config_name: Optional[str] = field(default=None)
    train_file: Optional[str] = field(default=None)
    validation_file: Optional[str] = field(default=None)
    max_train_samples: Optional[int] = field(default=None)
    max_eval_samples: Optional[int] = field(default=None)
    streaming: bool = field(default=False)
    block_size: Optional[int] = field(default=None)
    overwrite_cache: bool = field(default=False)
    validation_split_percentage: Optional[int] = field(default=5)
    preprocessing_num_workers: Optional[int] = field(default=None)
    keep_linebreaks: bool = field(default=True)


def main():
    parser = HfArgumentParser((ModelArguments, DataTrainingArguments, TrainingArguments))
    model_args, data_args, training_args = parser.parse_yaml_file("clm.yaml")
""",
        'clm_tinystories.yaml': """model_name_or_path: acme/tiny-1b
torch_dtype: bfloat16
low_cpu_mem_usage: true
dataset_name: acme/short-stories
dataset_config_name: default
block_size: 1024
validation_split_percentage: 2
preprocessing_num_workers: 8
keep_linebreaks: false
max_train_samples: 200000
do_train: true
do_eval: true
output_dir: out/clm
per_device_train_batch_size: 8
gradient_accumulation_steps: 4
learning_rate: 2.0e-5
num_train_epochs: 1
lr_scheduler_type: cosine
warmup_steps: 200
logging_steps: 20
save_strategy: epoch
eval_strategy: epoch
bf16: true
report_to: none
""",
        'clm_planted.yaml': """model_name_or_path: acme/tiny-1b
dataset_name: acme/short-stories
block_size: 1024
max_train_sample: 200000
do_train: true
output_dir: out/clm
per_device_train_batch_size: 8
gradient_accumulation_step: 4
learning_rate: 2.0e-5
num_train_epochs: 1
lr_scheduler_type: constant
warmup_steps: 200
load_best_model_at_end: true
eval_strategy: steps
eval_steps: 300
save_strategy: steps
save_steps: 500
bf16: true
""",
    },
    'argparse_cli_text_repo': {
        'pyproject.toml': '',
        'train.py': """import argparse
import yaml


def get_args():
    p = argparse.ArgumentParser()
    p.add_argument("--config", type=str)
    p.add_argument("--model", type=str, default="acme/tiny-1b")
    p.add_argument("--lr", type=float, default=1e-4)
    p.add_argument("--min_lr", type=float, default=1e-6)
    p.add_argument("--warmup_iters", type=int, default=100)
    p.add_argument("--max_iters", type=int, default=2000)
    p.add_argument("--lora_rank", type=int, default=8)
    p.add_argument("--lora_alpha", type=int, default=16)
    p.add_argument("--micro_batch", type=int, default=4)
    p.add_argument("--grad_accum", type=int, default=8)
    p.add_argument("--seq_len", type=int, default=2048)
    args = p.parse_args()
    if args.config:
        with open(args.config) as fh:
            cfg = yaml.safe_load(fh)
        cli = []
        for k, v in cfg.items():
            cli += [f"--{k}", str(v)]
        args = p.parse_args(cli)
    return args
""",
        'run_a.yaml': """model: acme/tiny-1b
lr: 2e-4
min_lr: 2e-6
warmup_iters: 200
max_iters: 4000
lora_rank: 16
lora_alpha: 32
micro_batch: 8
grad_accum: 4
seq_len: 4096
""",
        'run_planted.yaml': """model: acme/tiny-1b
lr: 2e-4
min_lr: 2e-6
warmup_iter: 200
max_iters: 4000
lora_rnak: 16
lora_alpha: 32
micro_batch: 8
grad_accum: 4
seq_len: 4096
""",
    },
    'omegaconf_repo': {
        'train.py': """from omegaconf import OmegaConf


def main(path):
    cfg = OmegaConf.load(path)
    lr = cfg.optim.lr
    print(cfg.model.name, lr, cfg.train.max_steps)
""",
        'configs/base.yaml': """model:
  name: acme/tiny-1b
  dtype: bfloat16
optim:
  lr: 3e-4
  min_lr: 3e-5
  weight_decay: 0.1
  betas: [0.9, 0.95]
train:
  max_steps: 5000
  warmup_steps: 250
  micro_batch_size: 4
  grad_accum: 8
  seq_len: 2048
  log_every: 10
  save_every: 1000
lora:
  r: 16
  alpha: 32
  dropout: 0.05
  targets: [q_proj, k_proj, v_proj, o_proj, gate_proj, up_proj, down_proj]
""",
        'pyproject.toml': '',
    },
    'planted_mistakes_in_many_layouts': {
        'ds_planted.json': """{
  "train_batch_size": 64,
  "train_micro_batch_size_per_gpu": 4,
  "gradient_accumulation_steps": 4,
  "bf16": {"enabled": true},
  "fp16": {"enabled": true},
  "zero_optimization": {
    "stage": 3,
    "offload_optimizer": {"device": "cpu", "pin_memory": true},
    "stage3_gather_16bit_weights_on_model_sav": true
  },
  "optimizer": {"type": "AdamW", "params": {"lr": 2e-5, "betas": [0.9, 0.999], "eps": 1e-8, "weight_decay": 0.0}},
  "scheduler": {"type": "WarmupCosineLR", "params": {"total_num_steps": "auto", "warmup_num_steps": "auto", "cos_min_ratio": 0.1, "warmup_type": "linear"}},
  "gradient_clipping": 1.0
}
""",
        'ds_cosine_ok.json': """{
  "train_micro_batch_size_per_gpu": "auto",
  "gradient_accumulation_steps": "auto",
  "bf16": {"enabled": "auto"},
  "zero_optimization": {"stage": 2, "overlap_comm": true, "contiguous_gradients": true, "reduce_bucket_size": "auto"},
  "optimizer": {"type": "AdamW", "params": {"lr": "auto", "betas": "auto", "eps": "auto", "weight_decay": "auto", "torch_adam": true, "adam_w_mode": true}},
  "scheduler": {"type": "WarmupCosineLR", "params": {"total_num_steps": "auto", "warmup_num_steps": "auto", "warmup_min_ratio": 0.0, "cos_min_ratio": 0.1, "warmup_type": "linear"}},
  "gradient_clipping": "auto",
  "zero_force_ds_cpu_optimizer": false
}
""",
        'accel_planted.yaml': """compute_environment: LOCAL_MACHINE
distributed_type: FSDP
fsdp_config:
  fsdp_auto_wrap_policy: TRANSFORMER_BASED_WRAP
  fsdp_offload_param: true
  fsdp_sharding_strategy: FULL_SHARD
  fsdp_state_dict_type: SHARDED_STATE_DICT
  fsdp_use_orig_params: true
machine_rank: 0
mixed_precision: bf16
num_machines: 1
num_processes: 4
""",
        'lokr/adapter_config.json': """{"alpha": 16, "alpha_pattern": {}, "base_model_name_or_path": "acme/tiny-1b", "decompose_both": false, "decompose_factor": -1, "exclude_modules": null, "inference_mode": true, "init_weights": true, "layers_pattern": null, "layers_to_transform": null, "module_dropout": 0.0, "modules_to_save": null, "peft_type": "LOKR", "r": 8, "rank_dropout": 0.0, "rank_dropout_scale": false, "rank_pattern": {}, "revision": null, "target_modules": ["q_proj", "v_proj"], "task_type": "CAUSAL_LM", "use_effective_conv2d": false}
""",
        'ia3/adapter_config.json': """{"base_model_name_or_path": "acme/tiny-1b", "exclude_modules": null, "fan_in_fan_out": false, "feedforward_modules": ["down_proj"], "inference_mode": true, "init_ia3_weights": true, "modules_to_save": null, "peft_type": "IA3", "revision": null, "target_modules": ["k_proj", "v_proj", "down_proj"], "task_type": "CAUSAL_LM"}
""",
        'adalora/adapter_config.json': """{"base_model_name_or_path": "acme/tiny-1b", "beta1": 0.85, "beta2": 0.85, "bias": "none", "deltaT": 10, "fan_in_fan_out": false, "inference_mode": true, "init_lora_weights": true, "init_r": 12, "lora_alpha": 32, "lora_dropout": 0.1, "orth_reg_weight": 0.5, "peft_type": "ADALORA", "r": 8, "target_modules": ["q_proj", "v_proj"], "target_r": 8, "task_type": "CAUSAL_LM", "tfinal": 1000, "tinit": 200, "total_step": 5000}
""",
        'grpo_trainer.yaml': """model_name_or_path: acme/tiny-1b-instruct
dtype: bfloat16
attn_implementation: flash_attention_2
dataset_name: acme/math-prompts
output_dir: out/grpo
bf16: true
use_vllm: true
vllm_mode: colocate
vllm_gpu_memory_utilization: 0.3
num_generations: 8
per_device_train_batch_size: 8
gradient_accumulation_steps: 4
max_prompt_length: 512
max_completion_length: 1024
learning_rate: 1.0e-6
lr_scheduler_type: cosine
warmup_steps: 20
beta: 0.0
loss_type: dr_grpo
scale_rewards: false
mask_truncated_completions: true
epsilon_high: 0.28
reward_funcs: [accuracy, format]
reward_weights: [1.0, 0.2]
num_train_epochs: 1
logging_steps: 5
save_strategy: steps
save_steps: 100
gradient_checkpointing: true
report_to: [wandb]
seed: 42
""",
        'axo_planted.yml': """base_model: acme/tiny-1b
load_in_4bit: true
adapter: qlora
datasets:
  - path: acme/support-chats
    type: chat_template
sequence_len: 2048
sample_packing: true
lora_r: 16
lora_alpah: 32
lora_dropout: 0.05
lora_target_linear: true
micro_batch_size: 2
gradient_accumulation_steps: 4
num_epochs: 1
optimizer: paged_adamw_8bit
lr_scheduler: cosine
learning_rate: 0.0002
bf16: auto
flash_attention: true
warmup_steps: 10
""",
        'lf_planted.yaml': """model_name_or_path: Qwen/Qwen3-4B
stage: sft
do_train: true
finetuning_type: lora
lora_rank: 16
lora_alpah: 32
lora_target: all
dataset: acme_support
template: qwen3
cutoff_len: 2048
output_dir: saves/qwen3-4b/lora
per_device_train_batch_size: 2
gradient_accumulation_steps: 8
learning_rate: 1.0e-4
num_train_epochs: 3.0
lr_scheduler_type: cosine
warmup_ratio: 0.1
bf16: true
""",
    },
    'h2o_style_config': {
        'cfg.yaml': """architecture:
    backbone_dtype: int4
    gradient_checkpointing: true
    intermediate_dropout: 0.0
    pretrained: true
    pretrained_weights: ''
augmentation:
    neftune_noise_alpha: 0.0
    random_parent_probability: 0.0
    skip_parent_probability: 0.0
    token_mask_probability: 0.0
dataset:
    add_eos_token_to_answer: true
    add_eos_token_to_prompt: true
    add_eos_token_to_system: true
    answer_column: output
    chatbot_author: acme
    chatbot_name: helper
    data_sample: 1.0
    data_sample_choice:
    - Train
    - Validation
    limit_chained_samples: false
    mask_prompt_labels: true
    parent_id_column: None
    personalize: false
    prompt_column:
    - instruction
    system_column: None
    text_answer_separator: <|answer|>
    text_prompt_start: <|prompt|>
    text_system_start: <|system|>
    train_dataframe: /data/acme_train.pq
    validation_dataframe: None
    validation_size: 0.01
    validation_strategy: automatic
environment:
    compile_model: false
    deepspeed_reduce_bucket_size: 1000000
    deepspeed_stage3_param_persistence_threshold: 1000000
    deepspeed_stage3_prefetch_bucket_size: 1000000
    find_unused_parameters: false
    gpus:
    - '0'
    huggingface_branch: main
    mixed_precision: true
    number_of_workers: 8
    seed: -1
    trust_remote_code: true
    use_deepspeed: false
experiment_name: acme-helper-1b
llm_backbone: acme/tiny-1b
logging:
    logger: None
    neptune_project: ''
output_directory: output/acme-helper-1b/
prediction:
    batch_size_inference: 0
    do_sample: false
    max_length_inference: 256
    metric: Perplexity
    min_length_inference: 2
    num_beams: 1
    num_history: 4
    repetition_penalty: 1.2
    stop_tokens: ''
    temperature: 0.0
    top_k: 0
    top_p: 1.0
problem_type: text_causal_language_modeling
tokenizer:
    add_prompt_answer_tokens: false
    max_length: 512
    padding_quantile: 1.0
    tokenizer_kwargs: '{"use_fast": true, "add_prefix_space": false}'
training:
    batch_size: 2
    differential_learning_rate: 1.0e-05
    differential_learning_rate_layers: []
    drop_last_batch: true
    epochs: 1
    evaluate_before_training: false
    evaluation_epochs: 1.0
    grad_accumulation: 1
    gradient_clip: 0.0
    learning_rate: 0.0001
    lora: true
    lora_alpha: 16
    lora_dropout: 0.05
    lora_r: 4
    lora_target_modules: ''
    loss_function: TokenAveragedCrossEntropy
    optimizer: AdamW
    save_checkpoint: last
    schedule: Cosine
    train_validation_data: false
    warmup_epochs: 0.0
    weight_decay: 0.0
""",
    },
    'levanter_style_config': {
        'llama_small_ft.yaml': """data:
  train_urls:
    - "gs://acme-data/chat/train.{1..16}.jsonl.gz"
  validation_urls:
    - "gs://acme-data/chat/val.jsonl.gz"
  cache_dir: "gs://acme-data/tokenized/chat/"
  tokenizer: "acme/tiny-1b"
model:
  type: llama
  seq_len: 2048
  hidden_dim: 2048
  intermediate_dim: 5632
  num_layers: 22
  num_heads: 32
  num_kv_heads: 4
initialize_from_hf: "acme/tiny-1b"
use_hf_model_config: true
trainer:
  tracker:
    type: wandb
    project: "acme-levanter"
    tags: ["llama", "ft"]
  mp: p=f32,c=bfloat16
  train_batch_size: 256
  num_train_steps: 10000
  steps_per_eval: 1000
  tensor_parallel_axes: ["mlp", "heads"]
  fsdp_axis: "embed"
  batch_axis: "batch"
optimizer:
  learning_rate: 3e-5
  weight_decay: 0.0
  warmup: 0.01
  min_lr_ratio: 0.1
  lr_schedule: cosine
""",
    },
    'olmo_style_config': {
        'olmo-1b-ft.yaml': """run_name: acme-olmo-1b-ft
seed: 6198
dry_run: false
model:
  d_model: 2048
  n_heads: 16
  n_layers: 16
  mlp_ratio: 8
  weight_tying: true
  alibi: false
  rope: true
  flash_attention: true
  attention_dropout: 0.0
  multi_query_attention: false
  include_bias: false
  block_type: sequential
  layer_norm_type: default
  activation_type: swiglu
  max_sequence_length: 2048
  vocab_size: 50280
  embedding_size: 50304
  init_device: meta
  init_fn: mitchell
compile: null
optimizer:
  name: adamw
  learning_rate: 2.0e-5
  weight_decay: 0.1
  betas:
  - 0.9
  - 0.95
  metrics_log_interval: 10
scheduler:
  name: linear_with_warmup
  t_warmup: 200
  alpha_f: 0.001
tokenizer:
  identifier: tokenizers/acme-tokenizer.json
  truncate_direction: right
save_folder: runs/${run_name}
save_overwrite: false
save_interval: 1000
save_num_checkpoints_to_keep: 1
load_path: null
max_duration: 3ep
global_train_batch_size: 128
device_train_microbatch_size: 8
precision: amp_bf16
fsdp:
  wrapping_strategy: by_block
  precision: mixed
max_grad_norm: 1.0
max_grad_norm_ratio: null
speed_monitor:
  window_size: 20
eval_interval: 1000
eval_subset_num_batches: -1
device_eval_batch_size: ${device_train_microbatch_size}
data:
  paths:
  - /data/acme/tokenized/part-0-00000.npy
  pad_direction: right
  num_workers: 0
  drop_last: true
  pin_memory: true
  prefetch_factor: 16
  persistent_workers: true
  timeout: 0
""",
    },
    'trainer_with_fsdp_json': {
        'fsdp_config.json': """{
  "transformer_layer_cls_to_wrap": ["LlamaDecoderLayer"],
  "backward_prefetch": "backward_pre",
  "forward_prefetch": false,
  "limit_all_gathers": true,
  "use_orig_params": true,
  "sync_module_states": true,
  "cpu_ram_efficient_loading": true,
  "activation_checkpointing": false,
  "xla": false
}
""",
        'sft_fsdp.yaml': """model_name_or_path: meta-llama/Llama-3.1-8B
dataset_name: acme/support-chats
output_dir: out/sft-fsdp
per_device_train_batch_size: 2
gradient_accumulation_steps: 8
learning_rate: 1.0e-5
num_train_epochs: 2
lr_scheduler_type: cosine
warmup_steps: 100
bf16: true
gradient_checkpointing: true
fsdp: "full_shard auto_wrap"
fsdp_config: fsdp_config.json
max_length: 4096
packing: true
logging_steps: 10
save_strategy: epoch
report_to: none
""",
    },
    'megatron_style_config': {
        'gpt_config.yaml': """# WARNING: Yaml configs is currently an experimental feature
language_model:
  num_layers: 24
  hidden_size: 1024
  num_attention_heads: 16
  num_query_groups: null
  ffn_hidden_size: null
  kv_channels: null
  hidden_dropout: 0.0
  attention_dropout: 0.0
  fp32_residual_connection: False
  apply_residual_connection_post_layernorm: False
  layernorm_epsilon: 1.e-5
  layernorm_zero_centered_gamma: True
  add_bias_linear: False
  bias_activation_fusion: False
  add_qkv_bias: False
  gated_linear_unit: False
  activation_func: swiglu
  num_moe_experts: null
  rotary_interleaved: False
  window_size: null
  init_method: null
  init_method_std: 0.02
  output_layer_init_method: null
  apply_query_key_layer_scaling: False
  attention_softmax_in_fp32: False
  bias_dropout_fusion: True
  apply_rope_fusion: True
  recompute_granularity: null
  recompute_method: null
  recompute_num_layers: null
  distribute_saved_activations: null
  fp8: null
model_parallel:
  tensor_model_parallel_size: 1
  context_parallel_size: 1
  pipeline_model_parallel_size: 1
  virtual_pipeline_model_parallel_size: null
  sequence_parallel: True
  expert_model_parallel_size: 1
  perform_initialization: True
  use_cpu_initialization: null
  fp16: False
  bf16: True
  params_dtype: null
  timers: null
  gradient_accumulation_fusion: True
  async_tensor_model_parallel_allreduce: True
  tp_comm_overlap: False
  pipeline_dtype: null
  grad_scale_func: null
  enable_autocast: False
  autocast_dtype: null
  variable_seq_lengths: False
  num_microbatches_with_partial_activation_checkpoints: null
  overlap_p2p_comm: False
  batch_p2p_comm: True
  batch_p2p_sync: True
  use_ring_exchange_p2p: False
  deallocate_pipeline_outputs: False
  no_sync_func: null
  grad_sync_func: null
  param_sync_func: null
  pipeline_model_parallel_split_rank: null
  cpu_offloading: False
  cpu_offloading_num_layers: 0
  _cpu_offloading_context: null
  cpu_offloading_weights: False
  cpu_offloading_activations: True
  barrier_with_L1_time: True
use_legacy_models: False
spec: null
micro_batch_size: 2
global_batch_size: 128
rampup_batch_size: [32, 32, 65324160]
check_for_nan_in_loss_and_grad: True
num_layers_per_virtual_pipeline_stage: null
encoder_num_layers: null
decoder_num_layers: null
rotary_seq_len_interpolation_factor: null
add_position_embedding: False
make_vocab_size_divisible_by: 128
group_query_attention: False
exit_signal_handler: False
exit_duration_in_mins: null
exit_interval: null
untie_embeddings_and_output_weights: True
position_embedding_type: rope
rotary_percent: 0.5
openai_gelu: False
squared_relu: False
swiglu: True
onnx_safe: null
bert_binary_head: True
max_position_embeddings: 4096
transformer_impl: local
use_flash_attn: False
seed: 1234
data_parallel_random_init: False
init_method_xavier_uniform: False
lr: 3.0e-4
lr_decay_style: cosine
lr_decay_iters: null
lr_decay_samples: 255126953
lr_warmup_fraction: null
lr_warmup_iters: 0
lr_warmup_samples: 81381
lr_warmup_init: 0.0
min_lr: 3.0e-5
weight_decay: 0.1
start_weight_decay: null
end_weight_decay: null
weight_decay_incr_style: constant
clip_grad: 1.0
adam_beta1: 0.9
adam_beta2: 0.95
adam_eps: 1.e-08
sgd_momentum: 0.9
override_opt_param_scheduler: False
use_checkpoint_opt_param_scheduler: False
train_iters: null
train_samples: 268554688
eval_iters: 32
eval_interval: 2000
skip_train: False
seq_length: 4096
""",
    },
}

# (file, rule, severity, key, suggestion) of every finding at warning and above. Each was judged
# a real defect: a key a fresh install of the library that reads it refuses, a schedule or
# cadence the Trainer mishandles, or a mistake planted on purpose.
EXPECTED: dict[str, set[tuple]] = {
    # warmup_ratio and group_by_length reach transformers' TrainingArguments (the script's class
    # derives from Seq2SeqTrainingArguments), which a fresh install (5.24) no longer takes; HF's
    # "constant" schedule ignores warm-up (transformers optimization.py get_constant_schedule).
    # dataset, max_train_samples, lora_r ... are the script's own DataArguments / fields.
    "qlora_style_repo": {
        ("configs/guanaco_7b.yaml", "constant-schedule-ignores-warmup", "warning", "lr_scheduler_type", None),
        ("configs/guanaco_7b.yaml", "key-not-in-release", "warning", "group_by_length", None),
        ("configs/guanaco_7b.yaml", "key-not-in-release", "warning", "warmup_ratio", None),
    },
    # the parser is built only from the repository's FlatArguments: max_seq_length, use_lora,
    # warmup_ratio are its fields, whatever TRL or transformers releases do with those names
    "open_instruct_style_repo": set(),
    # planted: typos of the simple-parsing dataclass fields (lora.rank, seq_len), suggested from
    # the repository's own keys
    "simple_parsing_repo": {
        ("example/planted.yaml", "unknown-key", "warning", "lora.rnak", "rank"),
        ("example/planted.yaml", "unknown-key", "warning", "seq_lne", "seq_len"),
    },
    # SimPOConfig derives from transformers' TrainingArguments: warmup_ratio meets a fresh
    # transformers; torch_dtype goes to ModelArguments of a package not in the repository
    "alignment_recipe_with_outside_classes": {
        ("training_configs/acme-8b-instruct-simpo.yaml", "key-not-in-release", "warning", "warmup_ratio", None),
    },
    "argparse_dashes_and_dest_repo": set(),
    # planted: typos of the pydantic model's fields (RunSettings(**yaml.safe_load(fh)))
    "pydantic_and_fire_repo": {
        ("cfg/planted.yaml", "unknown-key", "warning", "contxt_length", "context_length"),
        ("cfg/planted.yaml", "unknown-key", "warning", "lora.alpah", "alpha"),
    },
    "hydra_target_repo": set(),
    "nemo_style_config": set(),
    "foundry_style_config": set(),
    "neox_style_configs": set(),
    "class_path_config": set(),
    "rl_sections_config": set(),
    # DeepSpeed 0.16 replaced aio.thread_count (intra_op_parallelism); elasticity is not read by
    # the newest scanned release (cfgcheck/knowledge/known_keys.json, generated)
    "deepspeed_variants": {
        ("ds_bf16_z2_monitor.json", "key-not-in-release", "warning", "aio.thread_count", None),
        ("ds_bf16_z2_monitor.json", "key-not-in-release", "warning", "elasticity", None),
    },
    "accelerate_variants": set(),
    "peft_adapters_of_other_kinds": set(),
    "torchtune_newer_components": set(),
    "axolotl_newer_keys": set(),
    "llama_factory_newer_keys": set(),
    "checkpoint_folder": set(),
    # planted: two typos of the script's and the Trainer's keys, a constant schedule with
    # warm-up, save_steps 500 not a multiple of eval_steps 300 with load_best_model_at_end
    # (transformers TrainingArguments.__post_init__ raises)
    "example_script_repo": {
        ("clm_planted.yaml", "best-model-needs-matching-cadence", "error", "save_steps", "600"),
        ("clm_planted.yaml", "constant-schedule-ignores-warmup", "warning", "lr_scheduler_type", None),
        ("clm_planted.yaml", "unknown-key", "warning", "gradient_accumulation_step", "gradient_accumulation_steps"),
        ("clm_planted.yaml", "unknown-key", "warning", "max_train_sample", "max_train_samples"),
    },
    # planted: typos of the script's own argparse options (its whole key set)
    "argparse_cli_text_repo": {
        ("run_planted.yaml", "unknown-key", "warning", "lora_rnak", "lora_rank"),
        ("run_planted.yaml", "unknown-key", "warning", "warmup_iter", "warmup_iters"),
    },
    "omegaconf_repo": set(),
    "h2o_style_config": set(),
    "megatron_style_config": set(),
    "levanter_style_config": set(),
    "olmo_style_config": set(),
    "trainer_with_fsdp_json": set(),
    # planted: a typo in each layout, bf16 and fp16 both on in a DeepSpeed file (DeepSpeed
    # runtime/config.py asserts they are not both enabled)
    "planted_mistakes_in_many_layouts": {
        ("accel_planted.yaml", "unknown-key", "warning", "fsdp_config.fsdp_offload_param", "fsdp_config.fsdp_offload_params"),
        ("axo_planted.yml", "unknown-key", "warning", "lora_alpah", "lora_alpha"),
        ("ds_planted.json", "bf16-and-fp16-both-on", "error", "fp16.enabled", None),
        ("ds_planted.json", "unknown-key", "warning",
         "zero_optimization.stage3_gather_16bit_weights_on_model_sav",
         "zero_optimization.stage3_gather_16bit_weights_on_model_save"),
        ("lf_planted.yaml", "unknown-key", "warning", "lora_alpah", "lora_alpha"),
    },
}

# files named in the summary as formats not read, with the format's name
NOT_READ_FILES: dict[str, dict[str, str]] = {
    "hydra_target_repo": {"configs/train.yaml": "composed", "configs/model/lora_causal_lm.yaml": "composed"},
    "nemo_style_config": {"conf/megatron_gpt_finetuning_config.yaml": "lightning"},
    "foundry_style_config": {"yamls/finetune/acme-7b-instruct.yaml": "llm-foundry"},
    "neox_style_configs": {"configs/acme-1-3B.yml": "gpt-neox", "configs/local_setup.yml": "gpt-neox"},
    "class_path_config": {"config_hub/finetune/acme-1b/lora.yaml": "class-path"},
    "rl_sections_config": {"examples/config/ppo_acme.yaml": "rl-trainer-sections"},
    "deepspeed_variants": {"ds_autotune.json": "deepspeed-autotuning"},
    "h2o_style_config": {"cfg.yaml": "h2o-llmstudio"},
    "megatron_style_config": {"gpt_config.yaml": "megatron-lm"},
    "levanter_style_config": {"llama_small_ft.yaml": "levanter"},
    "olmo_style_config": {"olmo-1b-ft.yaml": "llm-foundry"},
}


def _write(tmp_path: Path, files: dict[str, str]) -> Path:
    root = tmp_path / "repo"
    for rel, text in files.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    return root


def _lint_case(tmp_path: Path, name: str):
    root = _write(tmp_path, CASES[name])
    report = api.lint([str(root)], project=None)
    assert report.problems == [] and report.internal == []
    return root, report


def _rel(root: Path, file: str) -> str:
    return Path(file).relative_to(root).as_posix()


@pytest.mark.parametrize("name", sorted(CASES))
def test_realistic_configs_give_exactly_the_judged_findings(tmp_path, name):
    root, report = _lint_case(tmp_path, name)
    got = {(_rel(root, f.file), f.rule, f.severity.word, f.key, f.data.get("suggestion"))
           for f in report.findings if f.severity >= Severity.WARNING}
    assert got == EXPECTED[name]


@pytest.mark.parametrize("name", sorted(NOT_READ_FILES))
def test_other_trainers_formats_are_named_never_read_as_a_layout(tmp_path, name):
    root, report = _lint_case(tmp_path, name)
    by_file = {_rel(root, fr.file): fr for fr in report.files}
    for rel, fmt in NOT_READ_FILES[name].items():
        fr = by_file[rel]
        assert fr.skipped and NOT_READ in fr.skipped and f"({fmt})" in fr.skipped, fr.skipped
        assert fr.findings == []
    from cfgcheck.render import render

    summary = render("text", report, report.findings)
    assert NOT_READ in summary


def test_a_checkpoint_folder_holds_no_training_config_but_its_adapter(tmp_path):
    root, report = _lint_case(tmp_path, "checkpoint_folder")
    checked = sorted(_rel(root, fr.file) for fr in report.files if not fr.skipped)
    assert checked == ["checkpoint-500/adapter_config.json"]
    state = next(fr for fr in report.files if fr.file.endswith("trainer_state.json"))
    assert "trainer-state" in state.skipped
    run = next(fr for fr in report.files if fr.file.endswith("files/config.yaml"))
    assert "wandb-run-record" in run.skipped


def test_exponents_are_harmless_for_a_script_that_turns_values_into_command_line_text(tmp_path):
    root, report = _lint_case(tmp_path, "argparse_dashes_and_dest_repo")
    hits = {f.key: f for f in report.findings if f.rule == "yaml-version-dependent-value"}
    # lr 3e-4 and min_lr 3e-5: PyYAML (YAML 1.1) reads text, str() keeps it, argparse's float()
    # converts it (Python docs, argparse type=float)
    assert sorted(hits) == ["lr", "min_lr"]
    assert all(f.severity == Severity.INFO and "harmless" in f.message for f in hits.values())
    # --grad-accum (dest gradient_accumulation_steps) is the option the config's grad_accum names
    assert not [f for f in report.findings if f.rule == "unknown-key"]


def test_exponents_are_harmless_for_a_repository_that_loads_configs_with_omegaconf(tmp_path):
    root, report = _lint_case(tmp_path, "omegaconf_repo")
    hits = [f for f in report.findings if f.rule == "yaml-version-dependent-value"]
    assert sorted(f.key for f in hits) == ["optim.lr", "optim.min_lr"]
    assert all(f.severity == Severity.INFO and "OmegaConf" in f.message for f in hits)


def test_a_near_miss_is_only_an_info_when_the_parser_takes_a_class_of_an_unread_package(tmp_path):
    root, report = _lint_case(tmp_path, "alignment_recipe_with_outside_classes")
    hits = [f for f in report.findings if f.rule == "unknown-key" and f.key == "gamma_beta_ration"]
    assert [(f.severity, f.data["suggestion"]) for f in hits] == [(Severity.INFO, "gamma_beta_ratio")]
    # torch_dtype: TRL's ModelConfig dropped it, but TRL does not read this file
    assert not [f for f in report.findings if f.rule == "key-not-in-release" and f.key == "torch_dtype"]


def test_the_repositorys_own_keys_are_the_candidates_when_its_classes_read_the_file(tmp_path):
    files = {
        "pyproject.toml": "",
        "train.py": (
            "from dataclasses import dataclass, field\n"
            "from transformers import HfArgumentParser\n\n\n"
            "@dataclass\nclass RunArguments:\n"
            "    lora_rank: int = field(default=8)\n"
            "    learning_rate: float = 2e-5\n\n\n"
            "parser = HfArgumentParser((RunArguments,))\n"),
        # lora_rnak: TRL's lora_r is one edit away too, but the script does not read TRL's names
        "run.yaml": "model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nlora_rnak: 16\n",
    }
    root = _write(tmp_path, files)
    report = api.lint([str(root)], project=None)
    hits = [(f.key, f.severity, f.data.get("suggestion")) for f in report.findings if f.rule == "unknown-key"]
    assert hits == [("lora_rnak", Severity.WARNING, "lora_rank")]


def test_trainer_defaults_do_not_hold_for_a_file_parsed_only_into_the_scripts_own_class(tmp_path):
    text = ("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nload_best_model_at_end: true\n"
            "eval_strategy: steps\neval_steps: 300\n")
    # without a repository: TrainingArguments' save_steps default 500 is no multiple of 300
    # (transformers TrainingArguments: save_steps=500; __post_init__ raises)
    lone = lint(text, str(_write(tmp_path / "lone", {"run.yaml": text}) / "run.yaml"))
    assert [f.rule for f in lone.findings if f.severity >= Severity.WARNING] == ["best-model-needs-matching-cadence"]
    files = {
        "pyproject.toml": "",
        "train.py": (
            "from dataclasses import dataclass\nfrom transformers import HfArgumentParser\n\n\n"
            "@dataclass\nclass RunArguments:\n    model_name_or_path: str = 'acme/tiny-1b'\n"
            "    learning_rate: float = 2e-5\n    eval_strategy: str = 'steps'\n    eval_steps: int = 300\n"
            "    save_steps: int = 900\n    load_best_model_at_end: bool = False\n\n\n"
            "parser = HfArgumentParser((RunArguments,))\n"),
        "run.yaml": text,
    }
    root = _write(tmp_path / "own", files)
    report = api.lint([str(root)], project=None)
    assert [f for f in report.findings if f.severity >= Severity.WARNING] == []


def test_a_runners_keys_are_judged_against_the_releases_it_installs_with(tmp_path):
    # llamafactory 0.9.5 requires transformers >=4.55.0,<=5.6.0 (its wheel's METADATA): a fresh
    # install keeps warmup_ratio, which transformers removed only in 5.15
    # (cfgcheck/knowledge/known_keys.json, generated)
    text = CASES["llama_factory_newer_keys"]["qwen3_lora_sft_thinking.yaml"]
    path = _write(tmp_path, {"run.yaml": text}) / "run.yaml"
    fresh = lint(text, str(path))
    assert not [f for f in fresh.findings if f.rule == "key-not-in-release"]
    # evaluation_strategy left transformers in 4.51, before any release the runner allows
    old = text + "evaluation_strategy: steps\n"
    hits = [f for f in lint(old, str(path)).findings if f.rule == "key-not-in-release"]
    assert [f.key for f in hits] == ["evaluation_strategy"]
    assert "the newest scanned release llamafactory 0.9.5 allows" in hits[0].message
    # with transformers 5.24 stated as installed, the key is refused
    pinned = lint(text, str(path), installed=["transformers==5.24.0"])
    hits = [f for f in pinned.findings if f.rule == "key-not-in-release"]
    assert [f.key for f in hits] == ["warmup_ratio"]


def test_lora_fields_of_a_peft_config_are_read_only_for_lora_adapters():
    # PEFT OFTConfig: r (blocks) and oft_block_size, exactly one of them non-zero (PEFT 0.21
    # tuners/oft/config.py); r 0 is right for OFT and wrong for LoRA (LoraConfig: r > 0)
    oft = CASES["peft_adapters_of_other_kinds"]["oft/adapter_config.json"]
    assert not [f for f in lint(oft, "adapter_config.json", "json").findings if f.severity >= Severity.WARNING]
    lora = '{"peft_type": "LORA", "base_model_name_or_path": "acme/tiny-1b", "r": 0, "lora_alpha": 16, ' \
           '"target_modules": ["q_proj", "v_proj"], "task_type": "CAUSAL_LM"}'
    hits = [f for f in lint(lora, "adapter_config.json", "json").findings if f.rule == "value-outside-schema"]
    assert [f.key for f in hits] == ["r"]


def test_keyword_arguments_of_another_component_are_no_near_misses():
    text = ("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-4\noptimizer:\n  betas: [0.9, 0.95]\n"
            "  init_args:\n    betas: [0.9, 0.95]\n    eps: 1.0e-8\nmodel_init_kwargs:\n  revison: main\n"
            "training:\n  gradient_accumulation_step: 4\n")
    report = lint(text, "run.yaml")
    hits = [(f.key, f.data.get("suggestion")) for f in report.findings if f.rule == "unknown-key"
            and f.severity >= Severity.WARNING]
    # betas is torch AdamW's (torch/optim/adamw.py), never DPO's beta; the typo in training: stays
    assert hits == [("training.gradient_accumulation_step", "gradient_accumulation_steps")]


# ---------------------------------------------------------------------------------------------
# the argument shapes read from a repository's Python files (ast only)

def test_argument_shapes_read_from_python_sources():
    source = '''
import argparse, click, fire, yaml, attr
from dataclasses import dataclass, field
from typing import NamedTuple, TypedDict
from pydantic import BaseModel, Field


@dataclass
class Data:
    max_train_samples: int = field(default=None, metadata={"help": "cap"})
    source_max_len: int = 512


@attr.s
class Opt:
    warmup_iters = attr.ib(default=100)
    decay: float = attr.ib(default=0.1)


class Base(BaseModel):
    base_lr: float = 1e-4


class Lora(Base):
    lora_rank: int = Field(8, alias="adapter_rank")


class Shape(NamedTuple):
    seq_len: int


class Row(TypedDict):
    prompt_column: str


class NotSettings:
    plain_attribute: int = 3


def main(epochs: int = 1, *, micro_batch: int = 4):
    pass


p = argparse.ArgumentParser()
p.add_argument("--grad-accum", dest="gradient_accumulation_steps", type=int)
p.add_argument("--min-lr", "--final_lr", type=float)
p.add_argument("data_dir")
click.option("--log-every", type=int)
fire.Fire(main)
cfg = yaml.safe_load(open("c.yaml"))
cfg["train"]["total_tokens"]
cfg.get("eval_every", 10)
'''
    keys = set(rk.keys_of_source(source, "train.py"))
    want = {"max_train_samples", "source_max_len", "warmup_iters", "decay", "base_lr", "lora_rank",
            "adapter_rank", "seq_len", "prompt_column", "epochs", "micro_batch",
            "gradient_accumulation_steps", "grad_accum", "min_lr", "final_lr", "data_dir", "log_every",
            "train", "total_tokens", "eval_every"}
    assert want <= keys
    assert "plain_attribute" not in keys


def test_argument_shapes_never_break_on_odd_sources():
    for text in ("def (:", "x = " + "(" * 300 + ")" * 300, "\x00", "cfg = yaml.safe_load(f)\ncfg()()[0].get('a')\n"):
        assert isinstance(rk.keys_of_source(text), dict)
        assert isinstance(rk.parsers_of_source(text), tuple)


def test_the_libraries_behind_a_repositorys_parsers(tmp_path):
    def libs(files):
        root = _write(tmp_path / str(len(list(tmp_path.iterdir()))), {"pyproject.toml": "", **files})
        return rk.repo_keys(root / "pyproject.toml").reader_libraries

    own = "from dataclasses import dataclass\nfrom transformers import HfArgumentParser\n" \
          "@dataclass\nclass A:\n    x: int = 1\nHfArgumentParser((A,))\n"
    assert libs({"t.py": own}) == frozenset()
    derived = own.replace("class A:", "class A(TrainingArguments):").replace(
        "import HfArgumentParser", "import HfArgumentParser, TrainingArguments")
    assert libs({"t.py": derived}) == {"transformers"}
    outside = derived.replace("HfArgumentParser((A,))", "HfArgumentParser((ModelArguments, A))") \
        + "from acme_align import ModelArguments\n"
    assert libs({"t.py": outside}) == {"transformers", "other"}
    dotted = "import transformers\nfrom dataclasses import dataclass\n@dataclass\nclass A:\n    x: int = 1\n" \
             "transformers.HfArgumentParser((A, transformers.TrainingArguments))\n"
    assert libs({"t.py": dotted}) == {"transformers"}
    based = "import transformers as tf\nfrom dataclasses import dataclass\n" \
            "@dataclass\nclass B(tf.TrainingArguments):\n    y: int = 1\ntf.HfArgumentParser((B,))\n"
    assert libs({"t.py": based}) == {"transformers"}
    pyd_dotted = "import pydantic, yaml\nclass S(pydantic.BaseModel):\n    lr: float = 1e-4\n" \
                 "S(**yaml.safe_load(open('c.yaml')))\n"
    assert libs({"t.py": pyd_dotted}) == frozenset()
    trl = "from trl import ModelConfig, SFTConfig, TrlParser\nTrlParser((SFTConfig, ModelConfig))\n"
    assert libs({"t.py": trl}) == {"trl", "transformers"}
    local = {"cfg.py": "from dataclasses import dataclass\n@dataclass\nclass B:\n    y: int = 2\n",
             "t.py": "from cfg import B\nfrom transformers import HfArgumentParser\nHfArgumentParser((B,))\n"}
    assert libs(local) == frozenset()
    assert libs({"t.py": "import argparse\nargparse.ArgumentParser(description='x')\n"}) is None
    pyd = "import yaml\nfrom pydantic import BaseModel\nclass S(BaseModel):\n    lr: float = 1e-4\n"
    assert libs({"t.py": pyd + "s = S(**yaml.safe_load(open('c.yaml')))\n"}) == frozenset()
    assert libs({"t.py": pyd + "def f(**kw):\n    return S(**kw)\n"}) is None  # not built from a config
    sp = "from simple_parsing.helpers import Serializable\nfrom dataclasses import dataclass\n" \
         "@dataclass\nclass T(Serializable):\n    seq_len: int = 2048\nT.load('c.yaml')\n"
    assert libs({"t.py": sp}) == frozenset()


@pytest.mark.parametrize("version,spec,ok", [
    ("5.0.0", "!=4.52.0,!=4.57.0,<=5.6.0,>=4.55.0", True),
    ("5.10.4", "!=4.52.0,!=4.57.0,<=5.6.0,>=4.55.0", False),
    ("4.57.0", "!=4.57.0,>=4.55.0", False),
    ("4.57.6", "!=4.57.0,>=4.55.0", True),
    ("5.16.1", "==5.16.1", True),
    ("5.16.0", "==5.16.1", False),
    ("1.13.2", "==1.13.*", True),
    ("1.14.0", "~=1.13", True),
    ("2.0.0", "~=1.13", False),
    ("0.24.0", "<0.24.0", False),
])
def test_requirement_specifiers(version, spec, ok):
    # PEP 440 version specifiers; checked against packaging, the reference implementation
    assert satisfies(version, spec) is ok
    packaging = pytest.importorskip("packaging.specifiers")
    assert packaging.SpecifierSet(spec).contains(version) is ok


def test_a_word_that_is_another_settings_term_is_no_slip_of_the_keyboard():
    # use_qlora (a common script flag) is one letter from use_lora, but qlora is a method of its
    # own: a near key is named at info, never a warning "did you mean"
    report = lint("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nuse_qlora: true\n"
                  "gradient_accumulation_step: 4\n", "run.yaml")
    got = {f.key: (f.severity, f.data.get("variant"), f.data.get("suggestion"))
           for f in report.findings if f.rule == "unknown-key"}
    assert got["use_qlora"] == (Severity.INFO, "near-miss-other-term", "use_lora")
    # the singular of a term is the same term: still a slip
    assert got["gradient_accumulation_step"] == (Severity.WARNING, "typo", "gradient_accumulation_steps")


def test_realistic_research_script_keys_get_no_warning_suggestion():
    # keys research scripts commonly declare (nanoGPT-style loops, argparse flags, their own
    # dataclasses): none is a near miss of a trainer key worth a warning, whoever reads them
    names = ("lr min_lr max_lr warmup_iters lr_decay_iters eval_iters batch_size micro_batch_size "
             "grad_accum block_size n_layer n_head n_embd beta1 beta2 grad_clip decay_lr dtype compile "
             "wandb_log out_dir eval_interval log_interval save_interval init_from lora_rank lora_target "
             "quant_bits bits double_quant quant_type max_train_samples max_eval_samples "
             "source_max_len target_max_len max_source_length max_target_length use_qlora use_lora "
             "lora_enable train_on_inputs val_set_size micro_batch min_lr_ratio final_lr clip_grad "
             "max_prompt_len max_response_len response_column prompt_column text_column eval_every "
             "save_every log_every accumulation_steps grad_accum_steps lora_scale scaling").split()
    text = "learning_rate: 2.0e-5\n" + "".join(f"{n}: 1\n" for n in names)
    report = lint(text, "run.yaml")
    assert report.skipped is None
    assert [(f.key, f.data.get("suggestion")) for f in report.findings
            if f.rule == "unknown-key" and f.severity >= Severity.WARNING] == []


def test_a_repositorys_argument_files_are_read_before_vendored_code(tmp_path, monkeypatch):
    root = tmp_path / "repo"
    (root / "aaa_vendor" / "lib").mkdir(parents=True)
    for i in range(3):
        (root / "aaa_vendor" / "lib" / f"mod{i}.py").write_text(f"x{i} = {i}\n")
    (root / "scripts" / "sft").mkdir(parents=True)
    (root / "scripts" / "sft" / "train_sft.py").write_text(
        "import argparse\nargparse.ArgumentParser().add_argument('--warmup-iters')\n")
    (root / "pyproject.toml").write_text("")
    (root / "run.yaml").write_text("learning_rate: 2.0e-5\n")
    monkeypatch.setattr(rk, "MAX_FILES", 1)
    rk._scan.cache_clear()
    try:
        found = rk.repo_keys(root / "run.yaml")
        assert found.files == 1 and "warmup_iters" in found.keys
    finally:
        rk._scan.cache_clear()


CORPUS = SHARED / "corpus" / "public"


@pytest.mark.skipif(not CORPUS.is_dir(), reason="../shared/corpus/public is not present")
def test_public_llama_factory_recipes_are_judged_against_the_transformers_the_runner_installs():
    files = sorted(CORPUS.glob("LLaMA-Factory__*.yaml"))
    assert files
    report = api.lint([str(f) for f in files], project=None)
    # llamafactory 0.9.5 installs transformers <=5.6.0, which still takes warmup_ratio
    assert [f.key for f in report.findings if f.rule == "key-not-in-release"] == []
    # and none of them is taken for a format cfgcheck does not read
    assert not [fr.file for fr in report.files if fr.skipped and NOT_READ in fr.skipped]


def test_keys_only_read_from_a_loaded_config_still_meet_the_librarys_release(tmp_path):
    # train.py reads warmup_ratio from the config and may hand it to TrainingArguments, whose
    # fresh release (transformers 5.24, cfgcheck/knowledge/known_keys.json) no longer takes it;
    # a test file that reads torch_dtype declares nothing
    files = {
        "pyproject.toml": "",
        "train.py": "import yaml\ncfg = yaml.safe_load(open('run.yaml'))\nwarm = cfg['warmup_ratio']\n",
        "tests/test_config.py": "import yaml\nassert yaml.safe_load(open('run.yaml'))['fjord_depth'] == 2\n",
        "run.yaml": "model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nwarmup_ratio: 0.1\nfjord_depth: 2\n",
    }
    root = _write(tmp_path, files)
    rk._scan.cache_clear()
    found = rk.repo_keys(root / "run.yaml")
    assert "warmup_ratio" in found.read_only and "fjord_depth" not in found.keys
    report = api.lint([str(root / "run.yaml")], project=None)
    assert [f.key for f in report.findings if f.rule == "key-not-in-release"] == ["warmup_ratio"]
    # read by the script, so no unknown key
    assert not [f for f in report.findings if f.rule == "unknown-key" and f.key == "warmup_ratio"]
