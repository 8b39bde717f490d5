"""Hypothesis strategies for configs in every supported layout: valid, mutated and truncated.

To cover a new layout, add one entry to ``LAYOUTS``: a name and a strategy that draws the mapping
a user would write in that layout (keys it recognises, values of the right and of the wrong kind).
Everything else (serialising as YAML or JSON, mutating, truncating, re-encoding) is shared.
"""

from __future__ import annotations

import codecs
import json

import yaml
from hypothesis import strategies as st

# --------------------------------------------------------------------------- values

_small_ints = st.integers(min_value=-4, max_value=5000)
_numbers_as_text = st.sampled_from(["1e-4", "2e-5", "3.0e-4", "0.0002", "1_000", "0777", "8", "-1", ".5"])
_words = st.sampled_from(["auto", "yes", "no", "on", "off", "true", "none", "", "cosine", "linear",
                          "adamw_torch", "paged_adamw_8bit", "steps", "epoch", "no", "fp16", "bf16",
                          "float16", "bfloat16", "nf4", "fp4", "LORA", "CAUSAL_LM", "chatml", "t4"])
_text = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12)
_models = st.sampled_from(["tidewater/support-7b", "fjordline/router-1b", "./local-model", "", "gpt2",
                           "meta-llama/Llama-2-7b-hf", "Qwen/Qwen2.5-0.5B"])
_floats = st.floats(allow_nan=True, allow_infinity=True, width=32)

scalar = st.one_of(st.none(), st.booleans(), _small_ints, st.integers(), _floats, _numbers_as_text,
                   _words, _text)
value = st.recursive(scalar, lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                   st.dictionaries(_text, inner, max_size=3)),
                     max_leaves=6)


def _lr() -> st.SearchStrategy:
    return st.one_of(st.floats(min_value=1e-7, max_value=1.0), _numbers_as_text, value)


def _count() -> st.SearchStrategy:
    return st.one_of(st.integers(min_value=0, max_value=512), st.just("auto"), value)


def _flag() -> st.SearchStrategy:
    return st.one_of(st.booleans(), st.sampled_from(["true", "yes", "off", "auto"]), value)


def _mapping(required: dict, optional: dict) -> st.SearchStrategy:
    optional = {k: v for k, v in optional.items() if k not in required}
    return st.fixed_dictionaries(required, optional=optional)


# --------------------------------------------------------------------------- layouts

_trainer_keys = {
    "model_name_or_path": _models,
    "learning_rate": _lr(),
    "per_device_train_batch_size": _count(),
    "gradient_accumulation_steps": _count(),
    "num_train_epochs": st.one_of(st.floats(min_value=0, max_value=10), value),
    "max_steps": _count(),
    "warmup_ratio": st.one_of(st.floats(min_value=0, max_value=1), value),
    "lr_scheduler_type": _words,
    "bf16": _flag(),
    "fp16": _flag(),
    "tf32": _flag(),
    "lora_r": _count(),
    "lora_alpha": _count(),
    "lora_dropout": st.one_of(st.floats(min_value=0, max_value=1), value),
    "use_rslora": _flag(),
    "use_peft": _flag(),
    "lora_target_modules": st.one_of(st.lists(st.sampled_from(["q_proj", "v_proj", "all-linear"])), value),
    "load_in_4bit": _flag(),
    "bnb_4bit_quant_type": _words,
    "bnb_4bit_compute_dtype": _words,
    "eval_strategy": _words,
    "eval_steps": _count(),
    "save_steps": _count(),
    "logging_steps": _count(),
    "max_seq_length": _count(),
    "chat_template": st.one_of(_words, _text),
    "num_train_rows": _count(),
    "num_gpus": _count(),
    "gradient_checkpointing": _flag(),
    "torch_dtype": _words,
    "deepspeed": st.one_of(st.just("ds_config.json"), value),
    "output_dir": st.just("out/tidewater"),
}


def _trainer_flat() -> st.SearchStrategy:
    return _mapping({"learning_rate": _lr()}, _trainer_keys)


def _trainer_nested() -> st.SearchStrategy:
    return _mapping(
        {"model": _mapping({"model_name_or_path": _models}, {"torch_dtype": _words,
                                                            "load_in_4bit": _flag()}),
         "training": _mapping({"learning_rate": _lr()}, {k: _trainer_keys[k] for k in (
             "per_device_train_batch_size", "gradient_accumulation_steps", "num_train_epochs",
             "max_steps", "bf16", "fp16", "eval_steps", "save_steps", "warmup_ratio")})},
        {"lora": _mapping({}, {"r": _count(), "alpha": _count(), "dropout": value,
                               "target_modules": value, "use_rslora": _flag()}),
         "quantization": _mapping({}, {"load_in_4bit": _flag(), "bnb_4bit_quant_type": _words}),
         "data": _mapping({}, {"max_seq_length": _count(), "chat_template": _words}),
         "hardware": _mapping({}, {"num_gpus": _count(), "num_nodes": _count()})},
    )


def _deepspeed() -> st.SearchStrategy:
    return _mapping(
        {"train_batch_size": _count(), "train_micro_batch_size_per_gpu": _count()},
        {"gradient_accumulation_steps": _count(),
         "zero_optimization": _mapping({"stage": st.one_of(st.integers(0, 3), value)},
                                       {"offload_optimizer": value}),
         "bf16": _mapping({"enabled": _flag()}, {}),
         "fp16": _mapping({"enabled": _flag()}, {"loss_scale": value}),
         "optimizer": _mapping({"type": _words}, {"params": _mapping({"lr": _lr()}, {"weight_decay": value})}),
         "scheduler": _mapping({"type": _words}, {"params": value}),
         "gradient_clipping": value, "steps_per_print": _count()},
    )


def _peft_adapter() -> st.SearchStrategy:
    return _mapping(
        {"peft_type": st.sampled_from(["LORA", "lora", "ADALORA"]), "r": _count(), "lora_alpha": _count()},
        {"base_model_name_or_path": _models, "task_type": _words, "target_modules": value,
         "lora_dropout": value, "use_rslora": _flag(), "fan_in_fan_out": _flag(),
         "inference_mode": _flag(), "init_lora_weights": value, "bias": _words, "use_dora": _flag(),
         "modules_to_save": value},
    )


def _mlx_lm() -> st.SearchStrategy:
    # mlx-lm 0.32.2 mlx_lm/lora.py CONFIG_DEFAULTS keys; lora_parameters as its examples write it
    lora = _mapping({"rank": _count()}, {"scale": value, "dropout": value, "keys": value})
    return _mapping(
        {"fine_tune_type": st.sampled_from(["lora", "dora", "full", "LORA", ""]), "lora_parameters": lora,
         "iters": _count()},
        {"model": _models, "batch_size": _count(), "learning_rate": _lr(), "steps_per_eval": _count(),
         "steps_per_report": _count(), "save_every": _count(), "val_batches": _count(),
         "max_seq_length": _count(), "grad_checkpoint": _flag(), "grad_accumulation_steps": _count(),
         "optimizer": _words, "num_layers": _count(), "lr_schedule": value, "adapter_path": _text},
    )


# name -> strategy of the mapping a user writes in that layout; add new layouts here
LAYOUTS: dict[str, st.SearchStrategy] = {
    "trainer-flat": _trainer_flat(),
    "trainer-nested": _trainer_nested(),
    "deepspeed": _deepspeed(),
    "peft-adapter": _peft_adapter(),
    "mlx-lm": _mlx_lm(),
}

config = st.one_of(*LAYOUTS.values())


# --------------------------------------------------------------------------- texts

def _yaml_text(data, flow: bool) -> str:
    return yaml.safe_dump(data, default_flow_style=flow, sort_keys=False, allow_unicode=True)


@st.composite
def valid_text(draw, layout: st.SearchStrategy | None = None) -> tuple[str, str]:
    """(file name, text) of a config in one of the layouts, as YAML or JSON."""
    data = draw(layout if layout is not None else config)
    fmt = draw(st.sampled_from(["yaml-block", "yaml-flow", "json"]))
    if fmt == "json":
        try:
            return "config.json", json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False)
        except ValueError:  # NaN or infinity: no JSON spelling; write it as YAML (.nan, .inf)
            fmt = "yaml-block"
    return "config.yaml", _yaml_text(data, fmt == "yaml-flow")


_hostile_chars = st.sampled_from(list(":[]{}&*!|>-?#%@`'\"\t\n \x00\ufeff\u2028,") + ["\r\n", "<<: ", "---\n", "&a ", "*a"])


@st.composite
def mutated_text(draw) -> tuple[str, str]:
    name, text = draw(valid_text())
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["insert", "delete", "replace", "duplicate-line", "truncate"]))
        pos = draw(st.integers(0, len(text)))
        if op == "insert":
            text = text[:pos] + draw(_hostile_chars) + text[pos:]
        elif op == "delete":
            text = text[:pos] + text[pos + 1:]
        elif op == "replace":
            text = text[:pos] + draw(_hostile_chars) + text[pos + 1:]
        elif op == "duplicate-line":
            lines = text.splitlines(keepends=True) or [""]
            i = pos % len(lines)
            text = "".join(lines[: i + 1] + [lines[i]] + lines[i + 1:])
        else:
            text = text[:pos]
    return name, text


@st.composite
def truncated_text(draw) -> tuple[str, str]:
    name, text = draw(valid_text())
    return name, text[: draw(st.integers(0, len(text)))]


@st.composite
def config_bytes(draw) -> tuple[str, bytes]:
    """(file name, bytes): any of the texts above, in UTF-8 or with a BOM, sometimes cut mid-character."""
    name, text = draw(st.one_of(valid_text(), mutated_text(), truncated_text()))
    enc = draw(st.sampled_from(["utf-8", "utf-8-sig", "utf-16"]))
    raw = text.encode("utf-8") if enc == "utf-8" else (
        codecs.BOM_UTF8 + text.encode("utf-8") if enc == "utf-8-sig" else text.encode("utf-16"))
    if draw(st.booleans()) and raw:
        raw = raw[: draw(st.integers(0, len(raw)))]  # a file cut off while it was written
    return name, raw
