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
    # the method when nothing in the file states one (None: unknown)
    default_method: str | None = None
    # (regex, method) matched against the model builder name (component-style recipes)
    method_patterns: tuple[tuple[str, str], ...] = ()
    # ``${a.b}`` interpolations inside the file are resolved when the view is filled
    interpolates: bool = False
    # the layout's own names for adapter target modules -> the transformers leaf name
    # (None: the layout uses the transformers module names)
    module_names: dict[str, str] | None = None
    # every key that names evaluation data is known, so "none present" means "no eval data"
    eval_data_known: bool = False
    # why this layout's loader reads ``2e-5`` as a number (shown in the YAML-version finding)
    number_reader: str = ""

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
    "optim.scheduler_kwargs": "any",
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
    # added with the recipe-runner and launcher layouts
    "model.builder": "str",
    "model.flash_attention": "bool",
    "adapter.target_all_linear": "bool",
    "adapter.mlp": "bool",
    "adapter.output": "bool",
    "adapter.loftq": "any",
    "adapter.kernel_mlp": "bool",
    "adapter.kernel_qkv": "bool",
    "adapter.kernel_o": "bool",
    "quant.bits": "int",
    "export.merge": "any",
    "optim.embedding_lr": "number",
    "data.eval": "any",
    "cadence.evals_per_epoch": "int",
    "cadence.saves_per_epoch": "int",
    "runtime.distributed": "str",
    "runtime.fsdp": "any",
    "launch.num_machines": "int",
    "adapter.tie": "bool",
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
        "adapter.tie": ("ensure_weight_tying",),
        "adapter.loftq": ("loftq_config",),
        "quant.load_4bit": ("load_in_4bit",),
        "quant.load_8bit": ("load_in_8bit",),
        "quant.type_4bit": ("bnb_4bit_quant_type",),
        "quant.double": ("bnb_4bit_use_double_quant", "use_bnb_nested_quant"),
        "quant.compute_dtype": ("bnb_4bit_compute_dtype",),
        "optim.lr": ("learning_rate", "lr"),
        "optim.name": ("optim",),
        "optim.scheduler": ("lr_scheduler_type",),
        "optim.scheduler_kwargs": ("lr_scheduler_kwargs",),
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
        "adapter.tie": ("=ensure_weight_tying",),
        "adapter.loftq": ("=loftq_config",),
    },
    signature={"peft_type": 4, "base_model_name_or_path": 1, "task_type": 1, "r": 1,
               "lora_alpha": 1, "target_modules": 1, "fan_in_fan_out": 2, "inference_mode": 2},
    min_score=5,
)

# ---------------------------------------------------------------------------------------------
# Recipe runners and launchers

AXOLOTL = Layout(
    name="axolotl",
    title="axolotl-style recipe (adapter: lora|qlora, lora_r, micro_batch_size, num_epochs)",
    # axolotl reads the YAML with yaml.safe_load, then validates it with a pydantic settings
    # model: learning_rate is `str | float` with a validator that calls float() on text
    # (axolotl 0.19.0 utils/schemas/training.py, convert_learning_rate), and float fields are
    # coerced by pydantic's lax mode.
    coerces_numbers=True,
    number_reader="axolotl validates the file with a pydantic model that converts this text to a float",
    default_method="full",
    # axolotl turns evaluation off itself when there is no eval data (core/builders/base.py)
    sections={"peft": ("lora_",), "loftq_config": ("loftq_",), "bnb_config_kwargs": ()},
    fields={
        "method": ("adapter",),
        "model.ref": ("base_model",),
        "model.dtype": ("torch_dtype",),
        "model.attention": ("attn_implementation",),
        "model.flash_attention": ("flash_attention",),
        "adapter.rank": ("lora_r",),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("peft_use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target_modules",),
        "adapter.target_all_linear": ("lora_target_linear",),
        "adapter.save_modules": ("lora_modules_to_save",),
        "adapter.init": ("peft_init_lora_weights", "init_lora_weights"),
        "adapter.loftq": ("loftq_bits",),
        "adapter.dora": ("peft_use_dora",),
        "adapter.bias": ("lora_bias",),
        "adapter.kernel_mlp": ("lora_mlp_kernel",),
        "adapter.kernel_qkv": ("lora_qkv_kernel",),
        "adapter.kernel_o": ("lora_o_kernel",),
        "quant.load_4bit": ("load_in_4bit",),
        "quant.load_8bit": ("load_in_8bit",),
        "quant.type_4bit": ("bnb_4bit_quant_type",),
        "quant.double": ("bnb_4bit_use_double_quant",),
        "quant.compute_dtype": ("bnb_4bit_compute_dtype",),
        "optim.lr": ("learning_rate",),
        "optim.name": ("optimizer",),
        "optim.scheduler": ("lr_scheduler",),
        "optim.warmup_ratio": ("warmup_ratio",),
        "optim.warmup_steps": ("warmup_steps",),
        "optim.epochs": ("num_epochs",),
        "optim.max_steps": ("max_steps",),
        "optim.weight_decay": ("weight_decay",),
        "optim.grad_clip": ("max_grad_norm",),
        "optim.embedding_lr": ("embedding_lr",),
        "batch.per_device": ("micro_batch_size",),
        "batch.accumulation": ("gradient_accumulation_steps",),
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("sequence_len",),
        "data.packing": ("sample_packing",),
        "data.eval": ("val_set_size", "test_datasets"),
        "cadence.eval_strategy": ("eval_strategy",),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.evals_per_epoch": ("evals_per_epoch",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.saves_per_epoch": ("saves_per_epoch",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.gradient_checkpointing": ("gradient_checkpointing",),
        "runtime.deepspeed": ("deepspeed",),
        "runtime.fsdp": ("fsdp_config",),
        "export.merge": ("merge_lora",),
    },
    signature={
        "base_model": 2, "adapter": 2, "micro_batch_size": 3, "num_epochs": 2, "sequence_len": 3,
        "lora_target_linear": 3, "sample_packing": 3, "val_set_size": 2, "dataset_prepared_path": 3,
        "lora_r": 1, "lora_alpha": 1, "lora_model_dir": 3, "lr_scheduler": 1, "evals_per_epoch": 3,
        "saves_per_epoch": 3, "wandb_project": 1, "special_tokens": 1, "datasets": 1,
        "load_in_4bit": 1, "pad_to_sequence_len": 2, "eval_sample_packing": 3, "tokenizer_type": 1,
    },
    min_score=5,
)

LLAMA_FACTORY = Layout(
    name="llama-factory",
    title="LLaMA-Factory-style arguments (finetuning_type, lora_rank, lora_target, cutoff_len)",
    # the file goes to transformers' HfArgumentParser.parse_dict after yaml.safe_load: text stays text
    default_method="lora",  # FinetuningArguments.finetuning_type defaults to "lora"
    eval_data_known=True,
    fields={
        "method": ("finetuning_type",),
        "model.ref": ("model_name_or_path",),
        "model.attention": ("flash_attn",),
        "adapter.rank": ("lora_rank",),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target",),
        "adapter.save_modules": ("additional_target",),
        "adapter.dora": ("use_dora",),
        "adapter.init": ("pissa_init",),
        "quant.bits": ("quantization_bit",),
        "quant.type_4bit": ("quantization_type",),
        "quant.double": ("double_quantization",),
        "optim.lr": ("learning_rate",),
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
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("cutoff_len",),
        "data.packing": ("packing",),
        "data.eval": ("eval_dataset", "val_size"),
        # max_samples caps each dataset, not the total: not a row count
        "cadence.eval_strategy": ("eval_strategy",),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.deepspeed": ("deepspeed",),
        "export.merge": ("export_dir",),
    },
    signature={
        # the keys it shares with the trainer layout score there; these are its own
        "finetuning_type": 6, "stage": 3, "cutoff_len": 4, "lora_target": 4, "template": 3,
        "quantization_bit": 3, "lora_rank": 2, "do_train": 1, "max_samples": 2, "plot_loss": 4,
        "preprocessing_num_workers": 1, "overwrite_cache": 2, "quantization_method": 2, "ddp_timeout": 1,
    },
    min_score=5,
)

LLAMA_FACTORY_V1 = Layout(
    name="llama-factory-v1",
    title="LLaMA-Factory v1 arguments (model, peft_config block, micro_batch_size, cutoff_len)",
    default_method="full",  # no peft_config block: every weight trains
    fields={
        "method": ("=peft_config.name",),
        "model.ref": ("=model",),
        "adapter.rank": ("=peft_config.r",),
        "adapter.alpha": ("=peft_config.lora_alpha",),
        "adapter.dropout": ("=peft_config.lora_dropout",),
        "adapter.targets": ("=peft_config.target_modules",),
        "optim.lr": ("=learning_rate",),
        "optim.max_steps": ("=max_steps",),
        "optim.epochs": ("=num_train_epochs",),
        "batch.per_device": ("=micro_batch_size",),
        "batch.accumulation": ("=gradient_accumulation_steps",),
        "data.seq_len": ("=cutoff_len",),
        "precision.bf16": ("=bf16",),
    },
    signature={"model_class": 4, "kernel_config": 3, "dist_config": 2, "sample_backend": 3,
               "train_dataset": 1, "peft_config": 1, "cutoff_len": 1, "micro_batch_size": 1,
               "quant_config": 2},
    min_score=6,
)

TORCHTUNE = Layout(
    name="torchtune",
    title="component-style recipe (_component_ keys, model builder, lora_rank, optimizer.lr)",
    # torchtune loads recipes with OmegaConf.load, whose YAML loader adds an implicit float
    # resolver that accepts a mantissa without a dot and an exponent without a sign
    # (omegaconf 2.3.0 _utils.py get_yaml_loader: `[-+]?[0-9]+(?:_[0-9]+)*(?:[eE][-+]?[0-9]+)`).
    coerces_numbers=True,
    number_reader="the recipe is loaded by OmegaConf, whose YAML reader takes it as a float",
    interpolates=True,
    default_method="full",
    method_patterns=((r"(^|\.)qlora_", "qlora"), (r"(^|\.)lora_", "lora")),
    module_names={"q_proj": "q_proj", "k_proj": "k_proj", "v_proj": "v_proj",
                  "output_proj": "o_proj"},
    fields={
        "model.builder": ("=model._component_",),
        "model.dtype": ("=dtype",),
        "adapter.rank": ("=model.lora_rank",),
        "adapter.alpha": ("=model.lora_alpha",),
        "adapter.dropout": ("=model.lora_dropout",),
        "adapter.targets": ("=model.lora_attn_modules",),
        "adapter.mlp": ("=model.apply_lora_to_mlp",),
        "adapter.output": ("=model.apply_lora_to_output",),
        "adapter.dora": ("=model.use_dora",),
        "optim.lr": ("=optimizer.lr",),
        "optim.name": ("=optimizer._component_",),
        "optim.scheduler": ("=lr_scheduler._component_",),
        "optim.warmup_steps": ("=lr_scheduler.num_warmup_steps",),
        "optim.weight_decay": ("=optimizer.weight_decay",),
        "optim.epochs": ("=epochs",),
        "optim.grad_clip": ("=clip_grad_norm",),
        "batch.per_device": ("=batch_size",),
        "batch.accumulation": ("=gradient_accumulation_steps",),
        "data.seq_len": ("=tokenizer.max_seq_len",),
        "data.packing": ("=dataset.packed",),
        "cadence.logging_steps": ("=log_every_n_steps",),
        "runtime.gradient_checkpointing": ("=enable_activation_checkpointing",),
    },
    signature={
        "_component_": 3, "checkpointer": 3, "enable_activation_checkpointing": 3,
        "max_steps_per_epoch": 3, "log_every_n_steps": 2, "metric_logger": 2, "epochs": 1,
        "batch_size": 1, "dtype": 1, "recipe_checkpoint": 2, "compile": 1, "loss": 1,
    },
    sections={"model": (), "optimizer": (), "tokenizer": (), "checkpointer": (), "dataset": (),
              "lr_scheduler": (), "loss": (), "metric_logger": (), "profiler": ()},
    min_score=6,
)

ACCELERATE = Layout(
    name="accelerate",
    title="accelerate launch config (distributed_type, num_processes, mixed_precision)",
    fields={
        "runtime.distributed": ("=distributed_type",),
        # accelerate's num_processes counts processes over all machines
        "hardware.num_gpus": ("=num_processes",),
        "launch.num_machines": ("=num_machines",),
        "precision.mixed": ("=mixed_precision",),
        "runtime.deepspeed": ("=deepspeed_config.deepspeed_config_file",),
        "runtime.zero_stage": ("=deepspeed_config.zero_stage",),
        "batch.accumulation": ("=deepspeed_config.gradient_accumulation_steps",),
        "optim.grad_clip": ("=deepspeed_config.gradient_clipping",),
        "runtime.fsdp": ("=fsdp_config",),
        "runtime.gradient_checkpointing": ("=fsdp_config.fsdp_activation_checkpointing",),
    },
    signature={
        "compute_environment": 3, "distributed_type": 3, "num_processes": 2, "num_machines": 2,
        "machine_rank": 2, "main_training_function": 3, "mixed_precision": 1, "deepspeed_config": 2,
        "fsdp_config": 2, "rdzv_backend": 2, "downcast_bf16": 3, "same_network": 2, "use_cpu": 1,
        "tpu_env": 2, "main_process_ip": 2, "main_process_port": 2, "gpu_ids": 2,
    },
    min_score=3,
)

PEFT_BENCH = Layout(
    name="peft-bench",
    title="PEFT method-comparison training parameters (defaults and per-experiment overrides)",
    fields={
        "model.ref": ("=model_id",),
        "model.dtype": ("=dtype",),
        "model.attention": ("=attn_implementation",),
        "optim.lr": ("=optimizer_kwargs.lr",),
        "optim.weight_decay": ("=optimizer_kwargs.weight_decay",),
        "optim.name": ("=optimizer_type",),
        "optim.scheduler": ("=lr_scheduler",),
        "optim.max_steps": ("=max_steps",),
        "optim.grad_clip": ("=grad_norm_clip",),
        "batch.per_device": ("=batch_size",),
        "data.seq_len": ("=max_seq_length",),
        "cadence.eval_steps": ("=eval_steps",),
        "runtime.gradient_checkpointing": ("=use_gc",),
    },
    signature={
        "optimizer_kwargs": 3, "optimizer_type": 2, "batch_size_eval": 2, "use_amp": 2,
        "grad_norm_clip": 2, "autocast_adapter_dtype": 3, "use_gc": 2, "query_template": 2,
        "init_kv_cache_prefix": 3, "generation_kwargs": 1,
    },
    min_score=3,
)

# Order matters only for ties: the most specific layouts first.
LAYOUTS: tuple[Layout, ...] = (PEFT_ADAPTER, DEEPSPEED, ACCELERATE, PEFT_BENCH, TORCHTUNE,
                               LLAMA_FACTORY_V1, LLAMA_FACTORY, AXOLOTL, TRAINER)
BY_NAME = {lay.name: lay for lay in LAYOUTS}

# Words that say a file is something other than a training config (counted as skipped).
NOT_TRAINING = {
    "github-workflow": {"jobs", "runs-on", "steps"},
    "compose": {"services", "volumes", "networks"},
    "pre-commit": {"repos"},
    "kubernetes": {"apiVersion", "kind", "metadata", "spec"},
}
