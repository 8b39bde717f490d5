"""Key layouts: mapping tables from the keys people write to the fields of the typed view.

A layout is data: how to recognise it and, for each field of the view, the keys that fill it.
Adding a layout means adding a table here (and, for a new library, its known keys), never a rule.

Key specs:
* ``"learning_rate"`` — a bare name: found at the top level, or inside the known sections of the
  layout (``training: {learning_rate: ...}``), also with the section's prefix dropped
  (``lora: {alpha: 32}`` fills ``lora_alpha``).
* ``"=optimizer.params.lr"`` — an exact dotted path from the document root.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Layout:
    name: str
    title: str
    fields: dict[str, tuple[str, ...]]
    # keys whose presence says "this is a file of that layout", with a weight each
    signature: dict[str, int]
    min_score: int = 2
    # section names searched for bare names, and the prefixes a section lets you drop
    sections: dict[str, tuple[str, ...]] = field(default_factory=dict)
    # fields a layout's own loader reads as numbers even when YAML 1.1 gives text
    coerces_numbers: bool = False
    # what a "method" value means in this layout
    method_values: dict[str, str] = field(default_factory=dict)

    @property
    def has_bare_names(self) -> bool:
        """Whether any key spec is a bare name (searched in sections) rather than a root path."""
        return any(not s.startswith("=") for specs in self.fields.values() for s in specs)


# The field types the view knows; the type rule checks values against them.
FIELD_TYPES: dict[str, str] = {
    "method": "str",
    "model.ref": "str",
    "model.dtype": "str",
    "model.attention": "str",
    "adapter.enabled": "bool",
    "adapter.kind": "str",
    "adapter.rank": "int",
    "adapter.alpha": "number",
    "adapter.rslora": "bool",
    "adapter.dropout": "number",
    "adapter.targets": "names",
    "adapter.save_modules": "names",
    "adapter.init": "any",
    "adapter.dora": "bool",
    "adapter.bias": "str",
    "quant.load_4bit": "bool",
    "quant.load_8bit": "bool",
    "quant.type_4bit": "str",
    "quant.double": "bool",
    "quant.compute_dtype": "str",
    "optim.lr": "number",
    "optim.name": "str",
    "optim.scheduler": "str",
    "optim.warmup_ratio": "number",
    "optim.warmup_steps": "number",
    "optim.epochs": "number",
    "optim.max_steps": "int",
    "optim.weight_decay": "number",
    "optim.grad_clip": "number",
    "batch.per_device": "int",
    "batch.accumulation": "int",
    "batch.global": "int",
    "precision.bf16": "bool",
    "precision.fp16": "bool",
    "precision.tf32": "bool",
    "precision.mixed": "str",
    "data.seq_len": "int",
    "data.packing": "bool",
    "data.chat_template": "str",
    "data.new_tokens": "names",
    "data.rows": "int",
    "cadence.eval_strategy": "str",
    "cadence.eval_steps": "number",
    "cadence.save_strategy": "str",
    "cadence.save_steps": "number",
    "cadence.logging_steps": "number",
    "cadence.load_best": "bool",
    "runtime.gradient_checkpointing": "bool",
    "runtime.use_cache": "bool",
    "runtime.deepspeed": "any",
    "runtime.zero_stage": "int",
    "runtime.fsdp": "any",
    "hardware.num_gpus": "int",
    "hardware.num_machines": "int",
}

_TRAINER_SECTIONS: dict[str, tuple[str, ...]] = {
    # section name -> prefixes that may be dropped inside it
    "model": (),
    "model_args": (),
    "model_arguments": (),
    "lora": ("lora_",),
    "peft": ("lora_",),
    "peft_config": ("lora_",),
    "adapter": ("lora_",),
    "training": (),
    "train": (),
    "training_args": (),
    "training_arguments": (),
    "trainer": (),
    "args": (),
    "hyperparameters": (),
    "data": (),
    "data_args": (),
    "dataset": (),
    "tokenizer": (),
    "optim": (),
    "optimizer": (),
    "optimization": (),
    "quantization": ("bnb_4bit_",),
    "quantization_config": ("bnb_4bit_",),
    "bnb": ("bnb_4bit_",),
    "evaluation": (),
    "eval": (),
    "logging": (),
    "checkpointing": (),
    "precision": (),
    "hardware": (),
    "distributed": (),
}

TRAINER = Layout(
    name="trainer",
    title="trainer-style arguments (transformers / PEFT / TRL names, flat or in sections)",
    sections=_TRAINER_SECTIONS,
    fields={
        "method": ("finetuning_method", "tuning_method"),
        "model.ref": ("model_name_or_path", "base_model_name_or_path", "pretrained_model_name_or_path",
                      "base_model", "model_id"),
        "model.dtype": ("torch_dtype", "model_dtype", "dtype"),
        "model.attention": ("attn_implementation",),
        "adapter.enabled": ("use_peft", "use_lora"),
        "adapter.rank": ("lora_r", "r", "lora_rank"),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target_modules", "target_modules"),
        "adapter.save_modules": ("lora_modules_to_save", "modules_to_save"),
        "adapter.init": ("init_lora_weights",),
        "adapter.dora": ("use_dora",),
        "adapter.bias": ("lora_bias",),
        "quant.load_4bit": ("load_in_4bit",),
        "quant.load_8bit": ("load_in_8bit",),
        "quant.type_4bit": ("bnb_4bit_quant_type",),
        "quant.double": ("bnb_4bit_use_double_quant", "use_bnb_nested_quant"),
        "quant.compute_dtype": ("bnb_4bit_compute_dtype",),
        "optim.lr": ("learning_rate", "lr"),
        "optim.name": ("optim",),
        "optim.scheduler": ("lr_scheduler_type",),
        "optim.warmup_ratio": ("warmup_ratio",),
        "optim.warmup_steps": ("warmup_steps",),
        "optim.epochs": ("num_train_epochs",),
        "optim.max_steps": ("max_steps",),
        "optim.weight_decay": ("weight_decay",),
        "optim.grad_clip": ("max_grad_norm",),
        "batch.per_device": ("per_device_train_batch_size",),
        "batch.accumulation": ("gradient_accumulation_steps",),
        "batch.global": ("global_batch_size", "total_batch_size", "effective_batch_size"),
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("max_seq_length", "max_length", "model_max_length"),
        "data.packing": ("packing",),
        "data.chat_template": ("chat_template",),
        "data.new_tokens": ("added_tokens", "new_special_tokens", "additional_special_tokens"),
        "data.rows": ("num_train_rows", "train_rows"),
        "cadence.eval_strategy": ("eval_strategy", "evaluation_strategy"),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.gradient_checkpointing": ("gradient_checkpointing",),
        "runtime.use_cache": ("use_cache",),
        "runtime.deepspeed": ("deepspeed",),
        "runtime.fsdp": ("fsdp",),
        "hardware.num_gpus": ("num_gpus", "world_size", "nproc_per_node"),
        "hardware.num_machines": ("num_nodes", "nnodes"),
    },
    signature={
        "learning_rate": 2, "per_device_train_batch_size": 3, "gradient_accumulation_steps": 2,
        "num_train_epochs": 2, "model_name_or_path": 3, "lora_r": 3, "lora_alpha": 3,
        "output_dir": 1, "bf16": 1, "fp16": 1, "max_steps": 1, "warmup_ratio": 2, "warmup_steps": 1,
        "lr_scheduler_type": 2, "save_steps": 1, "eval_steps": 1, "logging_steps": 1,
        "load_in_4bit": 2, "use_peft": 2, "target_modules": 1, "lora_target_modules": 2,
        "max_seq_length": 1, "gradient_checkpointing": 1, "optim": 1, "lora_dropout": 2,
        "eval_strategy": 1, "save_strategy": 1, "chat_template": 1, "torch_dtype": 1,
        "dataset_name": 1, "dataset_mixture": 1, "r": 0,
    },
)

DEEPSPEED = Layout(
    name="deepspeed",
    title="DeepSpeed configuration JSON",
    fields={
        "batch.per_device": ("=train_micro_batch_size_per_gpu",),
        "batch.accumulation": ("=gradient_accumulation_steps",),
        "batch.global": ("=train_batch_size",),
        "precision.bf16": ("=bf16.enabled", "=bfloat16.enabled"),
        "precision.fp16": ("=fp16.enabled",),
        "optim.lr": ("=optimizer.params.lr",),
        "optim.name": ("=optimizer.type",),
        "optim.scheduler": ("=scheduler.type",),
        "optim.warmup_steps": ("=scheduler.params.warmup_num_steps",),
        "optim.weight_decay": ("=optimizer.params.weight_decay",),
        "optim.grad_clip": ("=gradient_clipping",),
        "runtime.zero_stage": ("=zero_optimization.stage",),
    },
    signature={
        "train_batch_size": 3, "train_micro_batch_size_per_gpu": 3, "zero_optimization": 3,
        "gradient_clipping": 1, "steps_per_print": 2, "wall_clock_breakdown": 2,
        "zero_allow_untested_optimizer": 2, "fp16": 1, "bf16": 1, "optimizer": 1, "scheduler": 1,
        "gradient_accumulation_steps": 1, "bfloat16": 1, "amp": 1, "flops_profiler": 2,
        "activation_checkpointing": 1, "tensorboard": 1, "autotuning": 2,
    },
    min_score=3,
)

PEFT_ADAPTER = Layout(
    name="peft-adapter",
    title="PEFT adapter_config.json",
    fields={
        "model.ref": ("=base_model_name_or_path",),
        "adapter.rank": ("=r",),
        "adapter.alpha": ("=lora_alpha",),
        "adapter.rslora": ("=use_rslora",),
        "adapter.dropout": ("=lora_dropout",),
        "adapter.targets": ("=target_modules",),
        "adapter.save_modules": ("=modules_to_save",),
        "adapter.init": ("=init_lora_weights",),
        "adapter.dora": ("=use_dora",),
        "adapter.bias": ("=bias",),
    },
    signature={"peft_type": 4, "base_model_name_or_path": 1, "task_type": 1, "r": 1,
               "lora_alpha": 1, "target_modules": 1, "fan_in_fan_out": 2, "inference_mode": 2},
    min_score=5,
)

# Order matters only for ties: the most specific layouts first.
LAYOUTS: tuple[Layout, ...] = (PEFT_ADAPTER, DEEPSPEED, TRAINER)
BY_NAME = {lay.name: lay for lay in LAYOUTS}

# Words that say a file is something other than a training config (counted as skipped).
NOT_TRAINING = {
    "github-workflow": {"jobs", "runs-on", "steps"},
    "compose": {"services", "volumes", "networks"},
    "pre-commit": {"repos"},
    "kubernetes": {"apiVersion", "kind", "metadata", "spec"},
}
