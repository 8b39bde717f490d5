"""Every config of the public corpus loads into the typed view with its values found.

The table below lists, per corpus file (../shared/corpus/public; PROVENANCE.tsv names the
upstream repository and commit), the layout, the method and the values as the file writes them.
For every LoRA/QLoRA recipe the rank, alpha, learning rate, micro-batch and accumulation were
compared with the file's own lines (grep of lora_rank/lora_r, lora_alpha, lr/learning_rate,
batch_size/micro_batch_size/per_device_train_batch_size, gradient_accumulation_steps). A second
test cross-checks every value the view took against what PyYAML / the json module read at the
same key path, so the view never invents a value. Skipped when ../shared is absent.
"""

from __future__ import annotations

import json
import math

import pytest
import yaml

from cfgcheck import api
from cfgcheck.load import LoadError, load_text, read_source
from cfgcheck.view import build_view, resolve_interpolation

from .conftest import SHARED

CORPUS = SHARED / "corpus" / "public"
FIELDS = {
    "rank": "adapter.rank", "alpha": "adapter.alpha", "lr": "optim.lr",
    "per_device": "batch.per_device", "accumulation": "batch.accumulation",
    "epochs": "optim.epochs", "max_steps": "optim.max_steps", "seq_len": "data.seq_len",
    "num_gpus": "hardware.num_gpus", "mixed": "precision.mixed",
    "distributed": "runtime.distributed", "zero_stage": "runtime.zero_stage",
}

# file -> (layout, method, {field: value as written in the file}); "auto" = filled in at launch
EXPECTED = {
    'DeepSpeedExamples__compression__gpt2__config__ds_config.json': ('deepspeed', None, {'lr': 0.001, 'per_device': 4, 'zero_stage': 0}),
    'DeepSpeedExamples__training__BingBertSquad__deepspeed_bsz24_config.json': ('deepspeed', None, {'lr': 3e-05, 'per_device': 3}),
    'DeepSpeedExamples__training__autotuning__hf__dsconfigs__ds_config_fp16_z2.json': ('deepspeed', None, {'per_device': 'auto', 'zero_stage': 2}),
    'DeepSpeedExamples__training__autotuning__hf__dsconfigs__ds_config_tune.json': ('deepspeed', None, {'per_device': 'auto'}),
    'DeepSpeedExamples__training__autotuning__hf__dsconfigs__ds_config_z3.json': ('deepspeed', None, {'per_device': 'auto', 'zero_stage': 3}),
    'DeepSpeedExamples__training__bing_bert__deepspeed_bsz64k_lamb_config_seq128.json': ('deepspeed', None, {'lr': 0.011, 'per_device': 64}),
    'DeepSpeedExamples__training__pipeline_parallelism__ds_config.json': ('deepspeed', None, {'lr': 0.001, 'per_device': 8}),
    'FastChat__playground__deepspeed_config_s2.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 2}),
    'FastChat__playground__deepspeed_config_s3.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'LLaMA-Factory__examples__accelerate__fsdp_config.yaml': ('accelerate', None, {'num_gpus': 2, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'LLaMA-Factory__examples__accelerate__fsdp_config_multiple_nodes.yaml': ('accelerate', None, {'num_gpus': 16, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'LLaMA-Factory__examples__deepspeed__ds_z2_config.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 2}),
    'LLaMA-Factory__examples__deepspeed__ds_z3_config.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'LLaMA-Factory__examples__deepspeed__ds_z3_offload_config.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'LLaMA-Factory__examples__extras__fsdp_qlora__llama3_lora_sft.yaml': ('llama-factory', 'qlora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__extras__galore__llama3_full_sft.yaml': ('llama-factory', 'full', {'lr': 1e-05, 'per_device': 1, 'accumulation': 1, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__extras__loraplus__llama3_lora_sft.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_full__qwen3_full_sft.yaml': ('llama-factory', 'full', {'lr': 1e-05, 'per_device': 1, 'accumulation': 2, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_lora__qwen3_lora_dpo.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 5e-06, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_lora__qwen3_lora_kto.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 5e-06, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_lora__qwen3_lora_reward.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_lora__qwen3_lora_sft.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_lora__qwen3_lora_sft_ds3.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 2, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_qlora__llama3_lora_sft_gptq.yaml': ('llama-factory', 'lora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__train_qlora__qwen3_lora_sft_otfq.yaml': ('llama-factory', 'qlora', {'rank': 8, 'lr': 0.0001, 'per_device': 1, 'accumulation': 8, 'epochs': 3.0, 'seq_len': 2048}),
    'LLaMA-Factory__examples__v1__train_full__train_full_fsdp2.yaml': ('llama-factory-v1', 'full', {'lr': 0.0001, 'per_device': 1, 'max_steps': 10, 'seq_len': 2048}),
    'LLaMA-Factory__examples__v1__train_lora__train_lora_sft.yaml': ('llama-factory-v1', 'lora', {'rank': 16, 'alpha': 32, 'lr': 0.0001, 'per_device': 1, 'max_steps': 10, 'seq_len': 2048}),
    'LoRA__examples__NLU__ds_config.json': ('deepspeed', None, {'zero_stage': 2}),
    'accelerate__examples__config_yaml_templates__deepspeed.yaml': ('accelerate', None, {'num_gpus': 2, 'distributed': 'DEEPSPEED'}),
    'accelerate__examples__config_yaml_templates__fp8.yaml': ('accelerate', None, {'mixed': 'fp8', 'distributed': 'NO'}),
    'accelerate__examples__config_yaml_templates__fsdp.yaml': ('accelerate', None, {'num_gpus': 2, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'accelerate__examples__config_yaml_templates__multi_gpu.yaml': ('accelerate', None, {'num_gpus': 2, 'mixed': 'bf16', 'distributed': 'MULTI_GPU'}),
    'accelerate__examples__config_yaml_templates__multi_node.yaml': ('accelerate', None, {'num_gpus': 8, 'distributed': 'MULTI_GPU'}),
    'accelerate__examples__deepspeed_config_templates__zero_stage2_config.json': ('deepspeed', None, {'lr': 'auto', 'per_device': 'auto', 'accumulation': 1, 'zero_stage': 2}),
    'accelerate__examples__deepspeed_config_templates__zero_stage2_offload_config.json': ('deepspeed', None, {'lr': 'auto', 'per_device': 'auto', 'accumulation': 1, 'zero_stage': 2}),
    'accelerate__examples__deepspeed_config_templates__zero_stage3_config.json': ('deepspeed', None, {'lr': 'auto', 'per_device': 'auto', 'accumulation': 1, 'zero_stage': 3}),
    'accelerate__examples__deepspeed_config_templates__zero_stage3_offload_config.json': ('deepspeed', None, {'lr': 'auto', 'per_device': 'auto', 'accumulation': 1, 'zero_stage': 3}),
    'accelerate__examples__torch_native_parallelism__configs__tp_hsdp.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'alignment-handbook__recipes__accelerate_configs__ddp.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'MULTI_GPU'}),
    'alignment-handbook__recipes__accelerate_configs__fsdp.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'alignment-handbook__recipes__accelerate_configs__zero3.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'alignment-handbook__recipes__constitutional-ai__sft__config_anthropic.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 8, 'accumulation': 4, 'epochs': 1, 'max_steps': -1, 'seq_len': 2048}),
    'alignment-handbook__recipes__smollm2__sft__config.yaml': ('trainer', 'full', {'lr': 0.0003, 'per_device': 4, 'accumulation': 4, 'epochs': 2, 'max_steps': -1, 'seq_len': 8192}),
    'alignment-handbook__recipes__smollm3__dpo__apo.yaml': ('trainer', 'full', {'lr': 1e-06, 'per_device': 1, 'accumulation': 2, 'epochs': 1, 'seq_len': 24576}),
    'alignment-handbook__recipes__smollm3__sft__mid.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 1, 'accumulation': 2, 'epochs': 5, 'max_steps': -1, 'seq_len': 32768}),
    'alignment-handbook__recipes__smollm3__sft__sft.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 1, 'accumulation': 2, 'epochs': 5, 'max_steps': -1, 'seq_len': 65536}),
    'alignment-handbook__recipes__smollm__sft__config.yaml': ('trainer', 'full', {'lr': 0.001, 'per_device': 4, 'accumulation': 4, 'epochs': 1, 'max_steps': -1, 'seq_len': 2048}),
    'alignment-handbook__recipes__starchat2-15b__dpo__config_v0.1.yaml': ('trainer', 'full', {'lr': 5e-07, 'per_device': 2, 'accumulation': 8, 'epochs': 2, 'seq_len': 1024}),
    'alignment-handbook__recipes__starchat2-15b__sft__config_v0.1.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 8, 'accumulation': 2, 'epochs': 3, 'max_steps': -1, 'seq_len': 2048}),
    'alignment-handbook__recipes__zephyr-141b-A35b__orpo__config_full.yaml': ('trainer', 'full', {'lr': 5e-06, 'per_device': 1, 'accumulation': 1, 'epochs': 3, 'seq_len': 2048}),
    'alignment-handbook__recipes__zephyr-7b-beta__dpo__config_full.yaml': ('trainer', 'full', {'lr': 5e-07, 'per_device': 8, 'accumulation': 2, 'epochs': 1, 'seq_len': 1024}),
    'alignment-handbook__recipes__zephyr-7b-beta__dpo__config_qlora.yaml': ('trainer', 'qlora', {'rank': 128, 'alpha': 128, 'lr': 5e-06, 'per_device': 4, 'accumulation': 4, 'epochs': 1, 'seq_len': 1024}),
    'alignment-handbook__recipes__zephyr-7b-beta__sft__config_full.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 16, 'accumulation': 1, 'epochs': 1, 'max_steps': -1, 'seq_len': 2048}),
    'alignment-handbook__recipes__zephyr-7b-beta__sft__config_qlora.yaml': ('trainer', 'qlora', {'rank': 16, 'alpha': 16, 'lr': 0.0002, 'per_device': 4, 'accumulation': 2, 'epochs': 1, 'max_steps': -1, 'seq_len': 2048}),
    'alignment-handbook__recipes__zephyr-7b-gemma__dpo__config_full.yaml': ('trainer', 'full', {'lr': 5e-07, 'per_device': 2, 'accumulation': 8, 'epochs': 2, 'seq_len': 1024}),
    'alignment-handbook__recipes__zephyr-7b-gemma__sft__config_full.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 4, 'accumulation': 4, 'epochs': 3, 'max_steps': -1, 'seq_len': 2048}),
    'axolotl__deepspeed_configs__zero1.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 1}),
    'axolotl__deepspeed_configs__zero2.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 2}),
    'axolotl__deepspeed_configs__zero3_bf16.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'axolotl__deepspeed_configs__zero3_bf16_cpuoffload_all.json': ('deepspeed', None, {'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'axolotl__examples__archived__falcon__config-7b-qlora.yml': ('axolotl', 'qlora', {'rank': 64, 'alpha': 16, 'lr': 0.0002, 'per_device': 1, 'accumulation': 2, 'epochs': 4, 'seq_len': 2048}),
    'axolotl__examples__gemma3__gemma-3-1b-qlora.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 1, 'accumulation': 4, 'epochs': 4, 'seq_len': 2048}),
    'axolotl__examples__gpt-oss__gpt-oss-20b-fft-deepspeed-zero3.yaml': ('axolotl', 'full', {'lr': 2e-05, 'per_device': 1, 'accumulation': 2, 'epochs': 1, 'seq_len': 4096}),
    'axolotl__examples__gpt-oss__gpt-oss-20b-fft-fsdp2.yaml': ('axolotl', 'full', {'lr': 2e-05, 'per_device': 1, 'accumulation': 2, 'epochs': 1, 'seq_len': 4096}),
    'axolotl__examples__llama-2__qlora.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 4, 'seq_len': 4096}),
    'axolotl__examples__llama-3__fft-8b.yaml': ('axolotl', 'full', {'lr': 2e-05, 'per_device': 1, 'accumulation': 8, 'epochs': 1, 'seq_len': 8192}),
    'axolotl__examples__llama-3__instruct-dpo-lora-8b.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 4, 'seq_len': 4096}),
    'axolotl__examples__llama-3__lora-1b.yml': ('axolotl', 'lora', {'rank': 16, 'alpha': 32, 'lr': 0.0002, 'per_device': 2, 'accumulation': 2, 'epochs': 1, 'seq_len': 2048}),
    'axolotl__examples__llama-3__qlora-1b-kto.yaml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 64, 'lr': 0.0002, 'per_device': 2, 'accumulation': 1, 'epochs': 1, 'seq_len': 2048}),
    'axolotl__examples__llama-3__qlora-1b.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 1, 'seq_len': 2048}),
    'axolotl__examples__llama-3__qlora-fsdp-70b.yaml': ('axolotl', 'qlora', {'rank': 8, 'alpha': 16, 'lr': 1e-05, 'per_device': 1, 'accumulation': 4, 'epochs': 4, 'seq_len': 512}),
    'axolotl__examples__mistral__bigstral__bigstral-ds-zero3.yaml': ('axolotl', 'full', {'lr': 0.0001, 'per_device': 1, 'accumulation': 1, 'epochs': 3, 'seq_len': 2048}),
    'axolotl__examples__mistral__mixtral__mixtral-qlora-fsdp.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 1, 'seq_len': 1024}),
    'axolotl__examples__mistral__orpo__mistral-qlora-orpo.yml': ('axolotl', 'qlora', {'rank': 32, 'alpha': 16, 'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 1, 'seq_len': 4096}),
    'axolotl__examples__phi__phi3-ft.yml': ('axolotl', 'lora', {'rank': 64, 'alpha': 32, 'lr': 5e-06, 'per_device': 2, 'accumulation': 1, 'epochs': 1, 'seq_len': 4096}),
    'axolotl__examples__qwen2__dpo.yaml': ('axolotl', 'full', {'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 4, 'seq_len': 2048}),
    'axolotl__examples__qwen2__reward-model.yaml': ('axolotl', 'full', {'lr': 0.0002, 'per_device': 2, 'accumulation': 4, 'epochs': 4, 'seq_len': 2048}),
    'open-r1__recipes__DeepSeek-R1-Distill-Qwen-1.5B__grpo__config_demo.yaml': ('trainer', 'full', {'lr': 1e-06, 'per_device': 16, 'accumulation': 4, 'epochs': 1, 'max_steps': -1}),
    'open-r1__recipes__OlympicCoder-7B__sft__config_v00.00.yaml': ('trainer', 'full', {'lr': 1e-05, 'per_device': 2, 'accumulation': 8, 'epochs': 10, 'max_steps': -1, 'seq_len': 32768}),
    'open-r1__recipes__OpenR1-Distill-7B__sft__config_distill.yaml': ('trainer', 'full', {'lr': 4e-05, 'per_device': 2, 'accumulation': 8, 'epochs': 5, 'max_steps': -1, 'seq_len': 32768}),
    'open-r1__recipes__Qwen2.5-1.5B-Instruct__grpo__config_demo.yaml': ('trainer', 'full', {'lr': 2e-05, 'per_device': 16, 'accumulation': 4, 'epochs': 1, 'max_steps': -1}),
    'open-r1__recipes__accelerate_configs__fsdp.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'peft__examples__causal_language_modeling__accelerate_ds_zero3_cpu_offload_config.yaml': ('accelerate', None, {'accumulation': 1, 'num_gpus': 1, 'mixed': 'no', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'peft__examples__int8_training__config.yaml': ('accelerate', None, {'num_gpus': 4, 'mixed': 'no', 'distributed': 'MULTI_XPU'}),
    'peft__examples__sft__configs__deepspeed_config.yaml': ('accelerate', None, {'accumulation': 4, 'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'peft__examples__sft__configs__deepspeed_config_z3_qlora.yaml': ('accelerate', None, {'num_gpus': 2, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'peft__examples__sft__configs__fsdp_config.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'peft__examples__sft__configs__fsdp_config_qlora.yaml': ('accelerate', None, {'num_gpus': 2, 'mixed': 'no', 'distributed': 'FSDP'}),
    'peft__method_comparison__MetaMathQA__default_training_params.json': ('peft-bench', None, {'lr': 0.0001, 'per_device': 4, 'max_steps': 5000, 'seq_len': 768}),
    'peft__method_comparison__MetaMathQA__experiments__full-finetuning__llama-3.2-3B-lr_0.00001__training_params.json': ('peft-bench', None, {'lr': 1e-05}),
    'peft__method_comparison__MetaMathQA__experiments__lora__llama-3.2-3B-rank32-dora__adapter_config.json': ('peft-adapter', 'lora', {'rank': 32, 'alpha': 64}),
    'peft__method_comparison__MetaMathQA__experiments__lora__llama-3.2-3B-rank32__adapter_config.json': ('peft-adapter', 'lora', {'rank': 32, 'alpha': 64}),
    'peft__method_comparison__MetaMathQA__experiments__lora__llama-3.2-3B-rank64-rslora__adapter_config.json': ('peft-adapter', 'lora', {'rank': 64, 'alpha': 64}),
    'stanford_alpaca__configs__default_offload_opt_param.json': ('deepspeed', None, {'lr': 'auto', 'per_device': 'auto', 'accumulation': 'auto', 'zero_stage': 3}),
    'torchtune__recipes__configs__gemma2__2B_lora_single_device.yaml': ('torchtune', 'lora', {'rank': 64, 'alpha': 128, 'lr': 2e-05, 'per_device': 8, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama2__7B_qlora.yaml': ('torchtune', 'qlora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_1__8B_full.yaml': ('torchtune', 'full', {'lr': 2e-05, 'per_device': 2, 'accumulation': 1, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_1__8B_lora.yaml': ('torchtune', 'lora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_1__8B_lora_dpo.yaml': ('torchtune', 'lora', {'rank': 8, 'alpha': 16, 'lr': 0.0005, 'per_device': 4, 'accumulation': 8, 'epochs': 1, 'seq_len': 1024}),
    'torchtune__recipes__configs__llama3_1__8B_qlora_single_device.yaml': ('torchtune', 'qlora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_2__3B_qat_lora.yaml': ('torchtune', 'lora', {'rank': 64, 'alpha': 128, 'lr': 0.0003, 'per_device': 4, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_2__8B_to_1B_KD_lora_distributed.yaml': ('torchtune', 'lora', {'rank': 64, 'alpha': 128, 'lr': 0.0003, 'per_device': 4, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__llama3_2_vision__11B_qlora.yaml': ('torchtune', 'qlora', {'rank': 8, 'alpha': 16, 'lr': 0.0001, 'per_device': 2, 'accumulation': 8, 'epochs': 1, 'seq_len': 8192}),
    'torchtune__recipes__configs__llama3_3__70B_full_multinode.yaml': ('torchtune', 'full', {'lr': 2e-05, 'per_device': 4, 'accumulation': 1, 'epochs': 1, 'seq_len': 1024}),
    'torchtune__recipes__configs__llama3__8B_dora.yaml': ('torchtune', 'lora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 1, 'epochs': 1}),
    'torchtune__recipes__configs__llama4__scout_17B_16E_lora.yaml': ('torchtune', 'lora', {'rank': 16, 'alpha': 32, 'lr': 2e-05, 'per_device': 2, 'accumulation': 1, 'epochs': 1}),
    'torchtune__recipes__configs__mistral__7B_full_ppo_low_memory.yaml': ('torchtune', 'full', {'lr': 3e-06, 'per_device': 128, 'accumulation': 1, 'seq_len': 512}),
    'torchtune__recipes__configs__phi3__mini_qlora_single_device.yaml': ('torchtune', 'qlora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__qwen2_5__7B_lora.yaml': ('torchtune', 'lora', {'rank': 8, 'alpha': 16, 'lr': 0.0003, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'torchtune__recipes__configs__qwen3__8B_full.yaml': ('torchtune', 'full', {'lr': 5e-06, 'per_device': 2, 'accumulation': 8, 'epochs': 1}),
    'trl__examples__accelerate_configs__alst_ulysses_4gpu.yaml': ('accelerate', None, {'num_gpus': 4, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'trl__examples__accelerate_configs__deepspeed_zero2.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 2}),
    'trl__examples__accelerate_configs__deepspeed_zero3.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'DEEPSPEED', 'zero_stage': 3}),
    'trl__examples__accelerate_configs__fsdp1.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'trl__examples__accelerate_configs__fsdp2.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'FSDP'}),
    'trl__examples__accelerate_configs__multi_gpu.yaml': ('accelerate', None, {'num_gpus': 8, 'mixed': 'bf16', 'distributed': 'MULTI_GPU'}),
    'trl__examples__cli_configs__example_config.yaml': ('trainer', 'full', {'lr': 0.0001}),}

# Not a config at all: bare template placeholders make it invalid JSON (PROVENANCE.tsv says so).
UNREADABLE = {"DeepSpeedExamples__training__data_efficiency__gpt_finetuning__finetune__ds_config_gpt2_TEMPLATE.json"}

needs_corpus = pytest.mark.skipif(not CORPUS.is_dir(), reason="../shared/corpus/public is not present")


def _view(name):
    src = read_source(CORPUS / name)
    return build_view(load_text(src.text, src.name)[0])


@needs_corpus
def test_table_covers_the_whole_corpus():
    on_disk = {p.name for p in CORPUS.iterdir() if p.suffix in (".json", ".yaml", ".yml")}
    assert on_disk == set(EXPECTED) | UNREADABLE


@needs_corpus
@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_corpus_file_values_land_in_the_view(name):
    layout, method, values = EXPECTED[name]
    view = _view(name)
    assert view.layout is not None, view.skipped
    assert view.layout.name == layout
    assert view.method == method
    for short, want in values.items():
        f = view.get(FIELDS[short])
        assert f is not None, f"{short} not found"
        got = "auto" if f.auto else f.value
        if isinstance(want, float):
            assert math.isclose(got, want), (short, got, want)
        else:
            assert got == want, (short, got, want)
    assert not view.type_problems, [(p.field.key, p.field.written) for p in view.type_problems]


def _reference(name):
    text = (CORPUS / name).read_text(encoding="utf-8")
    return json.loads(text) if name.endswith(".json") else yaml.safe_load(text)


def _at(data, path):
    for part in path:
        data = data[part]
    return data


@needs_corpus
@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_view_values_match_the_reference_parsers(name):
    """Every field's written value is what PyYAML (YAML) or json (JSON) reads at its path."""
    view = _view(name)
    ref = _reference(name)
    for f in view.fields.values():
        expected = _at(ref, f.path)
        assert f.written == expected, (f.key, f.written, expected)
        if f.value is not None and isinstance(expected, str) and not f.auto:
            ok, resolved = resolve_interpolation(ref, expected)
            source = resolved if ok else expected
            if isinstance(f.value, (int, float)) and not isinstance(f.value, bool):
                assert math.isclose(f.value, float(source)), (f.key, f.value, source)


@needs_corpus
def test_accelerate_and_override_files_are_no_longer_skipped():
    report = api.lint([str(CORPUS)])
    skipped = [fr.file for fr in report.files if fr.skipped and not fr.problem]
    assert skipped == []


@needs_corpus
def test_torchtune_interpolation_resolves_inside_the_file():
    # torchtune llama3_1/8B_lora.yaml: batch_size_val: ${batch_size}, batch_size: 2
    view = _view("torchtune__recipes__configs__llama3_1__8B_lora.yaml")
    data = view.doc.data
    assert data["batch_size_val"] == "${batch_size}"
    assert resolve_interpolation(data, data["batch_size_val"]) == (True, 2)
    assert resolve_interpolation(data, data["metric_logger"]["log_dir"]) == (
        True, "/tmp/torchtune/llama3_1_8B/lora/logs")


@needs_corpus
def test_no_unknown_key_warnings_on_the_corpus():
    """Keys the reference libraries accept are never called unknown; recipe runners are not judged."""
    report = api.lint([str(CORPUS)])
    hits = [(f.file, f.key) for f in report.findings if f.rule == "unknown-key" and f.severity.word != "info"]
    assert hits == []
    assert not report.internal


def test_rules_command_lists_every_rule_with_severity_and_source():
    from typer.testing import CliRunner

    from cfgcheck.catalogue import load_catalogue
    from cfgcheck.cli import app

    out = CliRunner().invoke(app, ["rules"])
    assert out.exit_code == 0
    lines = out.stdout.splitlines()
    for rule in load_catalogue().values():
        row = next(i for i, line in enumerate(lines) if line.startswith(rule.id + " "))
        assert rule.severity.word in lines[row]
        assert lines[row + 1].strip().startswith("source: " + rule.sources[0][:20])
