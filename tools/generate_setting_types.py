#!/usr/bin/env python3
"""Regenerate ``cfgcheck/knowledge/setting_types.json``: the value type of each setting.

The fixer may rewrite a YAML-version-dependent value (``1e3``, ``off``) as a number or a
boolean only when the setting takes one; a text setting gets its text quoted instead, and a
setting of unknown or mixed type is left alone. This script reads the type annotations of the
argument classes of the reference libraries *installed in this interpreter* (transformers'
``TrainingArguments`` / ``Seq2SeqTrainingArguments``, every PEFT config class, TRL's configs when
TRL is installed) and classifies each field:

* ``number``  - int / float (optionally None);
* ``bool``    - bool (optionally None);
* ``text``    - str, an Enum of strings or a Literal of strings (optionally None);
* ``text-items`` / ``number-items`` - a list of those;
* ``mixed``   - anything else (``bool | str``, ``dict | str``, ...): the fixer leaves it alone.

Keys of layouts whose reader is not a Python dataclass (DeepSpeed JSON, accelerate launch files,
recipe runners) are listed by hand in ``HAND`` below, each group with its source.

Usage: ``python tools/generate_setting_types.py`` (writes), ``--check`` (exit 1 when stale).
"""

from __future__ import annotations

import argparse
import dataclasses
import enum
import inspect
import json
import sys
import types
import typing
from pathlib import Path

OUT = Path(__file__).resolve().parents[1] / "cfgcheck" / "knowledge" / "setting_types.json"

# Hand-listed settings: layout -> {type: [keys]}, with where each list comes from.
HAND: dict[str, dict[str, list[str]]] = {
    # accelerate: accelerate/commands/config/config_args.py, ClusterConfig fields (from memory)
    "accelerate": {
        "text": ["compute_environment", "distributed_type", "mixed_precision", "machine_rank_ip",
                 "main_process_ip", "main_training_function", "rdzv_backend", "gpu_ids",
                 "dynamo_backend", "debug_mode", "tpu_name", "tpu_zone", "base_job_name"],
        "bool": ["use_cpu", "downcast_bf16", "same_network", "tpu_use_cluster", "enable_cpu_affinity",
                 "debug"],
        "number": ["num_processes", "num_machines", "machine_rank", "main_process_port"],
    },
    # DeepSpeed config JSON (deepspeed.ai/docs/config-json, from memory): nearly every key is a
    # number or a boolean; the few text keys are listed.
    "deepspeed": {
        "text": ["type", "device", "nvme_path", "offload_param.device", "offload_optimizer.device",
                 "checkpoint_tag_validation", "load_universal_checkpoint_tag", "output_path",
                 "job_name"],
        "number": ["train_batch_size", "train_micro_batch_size_per_gpu", "gradient_accumulation_steps",
                   "gradient_clipping", "steps_per_print", "stage", "loss_scale", "loss_scale_window",
                   "initial_scale_power", "hysteresis", "min_loss_scale", "reduce_bucket_size",
                   "allgather_bucket_size", "stage3_prefetch_bucket_size",
                   "stage3_param_persistence_threshold", "stage3_max_live_parameters",
                   "stage3_max_reuse_distance", "sub_group_size", "lr", "weight_decay",
                   "warmup_min_lr", "warmup_max_lr", "warmup_num_steps", "total_num_steps"],
        "bool": ["enabled", "overlap_comm", "contiguous_gradients", "reduce_scatter",
                 "allgather_partitions", "round_robin_gradients", "pin_memory",
                 "stage3_gather_16bit_weights_on_model_save", "wall_clock_breakdown",
                 "zero_allow_untested_optimizer", "zero_force_ds_cpu_optimizer", "auto_cast"],
    },
    # recipe runners' own settings that name things (their config references: axolotl's
    # config options, LLaMA-Factory's argument classes, torchtune's recipe configs; from memory)
    "*": {
        "text": ["output_dir", "run_name", "hub_model_id", "hub_strategy", "hub_token", "revision",
                 "base_model", "base_model_config", "model_name_or_path", "tokenizer_name",
                 "tokenizer_name_or_path", "model_revision", "tokenizer_revision", "dataset_name",
                 "dataset", "dataset_dir", "dataset_prepared_path", "dataset_config_name",
                 "chat_template", "template", "wandb_project", "wandb_entity", "wandb_name",
                 "wandb_run_id", "mlflow_experiment_name", "logging_dir", "cache_dir",
                 "adapter_name_or_path", "lora_model_dir", "export_dir", "stage", "finetuning_type",
                 "path", "name", "split", "type", "conversation", "system_prompt", "default_system",
                 "special_tokens", "pad_token", "eos_token", "bos_token", "unk_token"],
        "text-items": ["tags", "report_to", "lora_target_modules", "target_modules",
                       "modules_to_save", "lora_modules_to_save"],
    },
}

_NONE = type(None)


def _kind(tp) -> str:
    if isinstance(tp, str):
        return "mixed"
    if tp is _NONE:
        return "none"
    if tp is bool:
        return "bool"
    if tp in (int, float):
        return "number"
    if tp is str:
        return "text"
    if inspect.isclass(tp) and issubclass(tp, enum.Enum):
        vals = {type(m.value) for m in tp}
        return "text" if vals <= {str} else "mixed"
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin is typing.Literal:
        vals = {type(a) for a in args}
        return "text" if vals <= {str} else ("bool" if vals <= {bool} else "mixed")
    if origin in (typing.Union, types.UnionType):
        kinds = {_kind(a) for a in args} - {"none"}
        return kinds.pop() if len(kinds) == 1 else "mixed"
    if origin in (list, tuple, set) and args:
        inner = {_kind(a) for a in args if a is not Ellipsis}
        if inner == {"text"}:
            return "text-items"
        if inner == {"number"}:
            return "number-items"
    return "mixed"


def _classes():
    from transformers import Seq2SeqTrainingArguments, TrainingArguments

    out = [TrainingArguments, Seq2SeqTrainingArguments]
    try:
        import trl
        out += [c for _, c in inspect.getmembers(trl, inspect.isclass)
                if dataclasses.is_dataclass(c) and c.__name__.endswith(("Config", "Arguments"))]
    except Exception:  # TRL not installed: transformers and PEFT only
        pass
    peft_classes = []
    try:
        import peft

        peft_classes = [c for _, c in inspect.getmembers(peft, inspect.isclass)
                        if dataclasses.is_dataclass(c) and c.__name__.endswith("Config")]
    except Exception:
        pass
    return out, peft_classes


def _fields(classes) -> dict[str, str]:
    found: dict[str, set[str]] = {}
    for cls in classes:
        try:
            hints = typing.get_type_hints(cls)
        except Exception:
            hints = {}
        for f in dataclasses.fields(cls):
            found.setdefault(f.name, set()).add(_kind(hints.get(f.name, f.type)))
    return {k: (v.pop() if len(v) == 1 else "mixed") for k, v in sorted(found.items())}


def build() -> dict:
    import importlib.metadata as md

    trainer, adapter = _classes()
    versions = {}
    for name in ("transformers", "peft", "trl"):
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            pass
    layouts = {"trainer": _fields(trainer + adapter), "peft-adapter": _fields(adapter)}
    for layout, groups in HAND.items():
        table = layouts.setdefault(layout, {})
        for kind, keys in groups.items():
            for k in keys:
                table.setdefault(k, kind)
    return {"format": 1, "generated_by": "tools/generate_setting_types.py", "read_from": versions,
            "layouts": {k: dict(sorted(v.items())) for k, v in sorted(layouts.items())}}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--check", action="store_true")
    args = ap.parse_args(argv)
    text = json.dumps(build(), indent=1, sort_keys=False) + "\n"
    if args.check:
        same = OUT.exists() and OUT.read_text() == text
        print("setting_types.json is current" if same else "setting_types.json is stale")
        return 0 if same else 1
    OUT.write_text(text)
    print(f"wrote {OUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
