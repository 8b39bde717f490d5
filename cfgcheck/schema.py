"""JSON Schema of the typed view, and the same constraints as small hand checks for ``lint``.

One table (``CONSTRAINTS``) says, per field of the view, its type and range or its accepted
words; ``view_schema()`` turns it into a JSON Schema (draft 2020-12) and ``layout_schema()`` into a
schema for config files of one layout (the keys people write), which editors can use while
typing. ``lint`` never imports jsonschema: ``violations()`` checks the same table by hand, and a
test proves the two agree (``tests/test_schema.py``). ``validate_with_jsonschema()`` is what
``cfgcheck schema --check`` uses.
"""

from __future__ import annotations

import functools
from types import MappingProxyType
from typing import Any

from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .layouts import BY_NAME, FIELD_TYPES, LAYOUTS, Layout

SCHEMA_ID = "https://cfgcheck.invalid/schema/run-view.json"

# transformers 5.24 trainer_utils.SchedulerType
HF_SCHEDULERS = ("linear", "cosine", "cosine_with_restarts", "polynomial", "constant",
                 "constant_with_warmup", "inverse_sqrt", "reduce_lr_on_plateau", "cosine_with_min_lr",
                 "cosine_warmup_with_min_lr", "warmup_stable_decay", "greedy")
# transformers 5.24 training_args.OptimizerNames, plus adamw_hf / adamw_apex_fused of 4.x (from memory)
HF_OPTIMIZERS = ("adamw_torch", "adamw_torch_fused", "adamw_torch_xla", "adamw_torch_npu_fused",
                 "adafactor", "adamw_anyprecision", "adamw_torch_4bit", "adamw_torch_8bit", "ademamix",
                 "sgd", "adagrad", "adamw_bnb_8bit", "adamw_8bit", "ademamix_8bit", "lion_8bit",
                 "lion_32bit", "paged_adamw_32bit", "paged_adamw_8bit", "paged_ademamix_32bit",
                 "paged_ademamix_8bit", "paged_lion_32bit", "paged_lion_8bit", "rmsprop", "rmsprop_bnb",
                 "rmsprop_bnb_8bit", "rmsprop_bnb_32bit", "galore_adamw", "galore_adamw_8bit",
                 "galore_adafactor", "galore_adamw_layerwise", "galore_adamw_8bit_layerwise",
                 "galore_adafactor_layerwise", "lomo", "adalomo", "grokadamw", "schedule_free_radam",
                 "schedule_free_adamw", "schedule_free_sgd", "apollo_adamw", "apollo_adamw_layerwise",
                 "stable_adamw", "adamw_hf", "adamw_apex_fused")
# transformers IntervalStrategy / SaveStrategy (5.24)
EVAL_STRATEGIES = ("no", "steps", "epoch")
SAVE_STRATEGIES = ("no", "steps", "epoch", "best")
# accelerate utils.DistributedType and mixed_precision choices
ACCELERATE_DISTRIBUTED = ("NO", "MULTI_CPU", "MULTI_GPU", "MULTI_NPU", "MULTI_MLU", "MULTI_SDAA",
                          "MULTI_MUSA", "MULTI_XPU", "DEEPSPEED", "FSDP", "XLA", "MEGATRON_LM",
                          "MULTI_HPU", "MULTI_NEURON")
ACCELERATE_PRECISION = ("no", "fp16", "bf16", "fp8")
# DeepSpeed runtime/lr_schedules.py VALID_LR_SCHEDULES
DEEPSPEED_SCHEDULERS = ("LRRangeTest", "OneCycle", "WarmupLR", "WarmupDecayLR", "WarmupCosineLR")

# Word lists a constraint can belong to; a layout names the ones its values are read by
# (Layout.word_lists): "transformers-arguments" (values parsed into TrainingArguments as they
# are), "transformers-strategies" (eval/save strategy words passed on to TrainingArguments),
# "peft-lora" (LoraConfig), "deepspeed", "accelerate".


class Constraint:
    minimum: float | None
    exclusive_minimum: float | None
    exclusive_maximum: float | None
    enum: tuple | None
    word_list: str | None  # only for layouts that read this word list (None: all)
    source: str

    __slots__ = ('minimum', 'exclusive_minimum', 'exclusive_maximum', 'enum', 'word_list', 'source')

    def __init__(self, minimum=None, exclusive_minimum=None, exclusive_maximum=None, enum=None, word_list=None, source=""):
        _setattr(self, 'minimum', minimum)
        _setattr(self, 'exclusive_minimum', exclusive_minimum)
        _setattr(self, 'exclusive_maximum', exclusive_maximum)
        _setattr(self, 'enum', enum)
        _setattr(self, 'word_list', word_list)
        _setattr(self, 'source', source)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(minimum={self.minimum!r}, exclusive_minimum={self.exclusive_minimum!r}, exclusive_maximum={self.exclusive_maximum!r}, enum={self.enum!r}, word_list={self.word_list!r}, source={self.source!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.minimum, self.exclusive_minimum, self.exclusive_maximum, self.enum, self.word_list, self.source) == (other.minimum, other.exclusive_minimum, other.exclusive_maximum, other.enum, other.word_list, other.source)
        return NotImplemented

    def __hash__(self):
        return hash((self.minimum, self.exclusive_minimum, self.exclusive_maximum, self.enum, self.word_list, self.source))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.minimum, self.exclusive_minimum, self.exclusive_maximum, self.enum, self.word_list, self.source)

    __setstate__ = _frozen_setstate


CONSTRAINTS: MappingProxyType[str, tuple[Constraint, ...]] = MappingProxyType({
    "adapter.rank": (Constraint(minimum=1, source="PEFT LoraConfig: r must be a positive integer"),),
    "adapter.alpha": (Constraint(exclusive_minimum=0, source="LoRA: the update is scaled by alpha/r"),),
    "adapter.dropout": (Constraint(minimum=0, exclusive_maximum=1, source="torch.nn.Dropout: p in [0, 1)"),),
    "adapter.bias": (Constraint(enum=("none", "all", "lora_only"), word_list="peft-lora",
                                source="PEFT LoraConfig.bias"),),
    "quant.type_4bit": (Constraint(enum=("nf4", "fp4"), source="transformers BitsAndBytesConfig"),),
    "quant.bits": (Constraint(enum=(2, 3, 4, 5, 6, 8), source="LLaMA-Factory quantization_bit"),),
    "optim.lr": (Constraint(exclusive_minimum=0, source="a learning rate is positive"),),
    "optim.warmup_ratio": (Constraint(minimum=0, exclusive_maximum=1,
                                      source="transformers 4.57: warmup_ratio must lie in range [0,1]"),),
    "optim.warmup_steps": (Constraint(minimum=0, source="transformers: warmup_steps >= 0"),),
    "optim.epochs": (Constraint(exclusive_minimum=0, source="a positive number of epochs"),),
    "optim.max_steps": (Constraint(minimum=-1, source="transformers TrainingArguments: -1 = by epochs"),),
    "optim.weight_decay": (Constraint(minimum=0, source="decoupled weight decay is not negative"),),
    "optim.grad_clip": (Constraint(minimum=0, source="a clipping norm is not negative"),),
    "optim.scheduler": (
        Constraint(enum=HF_SCHEDULERS, word_list="transformers-arguments", source="transformers SchedulerType"),
        Constraint(enum=DEEPSPEED_SCHEDULERS, word_list="deepspeed", source="DeepSpeed lr_schedules"),
    ),
    "optim.name": (Constraint(enum=HF_OPTIMIZERS, word_list="transformers-arguments",
                              source="transformers OptimizerNames"),),
    "batch.per_device": (Constraint(minimum=1, source="a batch holds at least one sample"),),
    "batch.accumulation": (Constraint(minimum=1, source="at least one micro-batch per step"),),
    "batch.global": (Constraint(minimum=1, source="DeepSpeed: train_batch_size > 0"),),
    "data.seq_len": (Constraint(minimum=1, source="a sequence holds at least one token"),),
    "cadence.eval_strategy": (Constraint(enum=EVAL_STRATEGIES, word_list="transformers-strategies",
                                         source="transformers IntervalStrategy"),),
    "cadence.save_strategy": (Constraint(enum=SAVE_STRATEGIES, word_list="transformers-strategies",
                                         source="transformers SaveStrategy"),),
    "cadence.eval_steps": (Constraint(exclusive_minimum=0, source="transformers: a step count or a ratio in (0, 1)"),),
    "cadence.save_steps": (Constraint(exclusive_minimum=0, source="transformers: a step count or a ratio in (0, 1)"),),
    "cadence.logging_steps": (Constraint(exclusive_minimum=0, source="transformers: a step count or a ratio in (0, 1)"),),
    "cadence.evals_per_epoch": (Constraint(minimum=1, source="a positive count"),),
    "cadence.saves_per_epoch": (Constraint(minimum=1, source="a positive count"),),
    "runtime.zero_stage": (Constraint(enum=(0, 1, 2, 3), source="DeepSpeed zero_optimization.stage"),),
    "runtime.distributed": (Constraint(enum=ACCELERATE_DISTRIBUTED, word_list="accelerate",
                                       source="accelerate DistributedType"),),
    "precision.mixed": (Constraint(enum=ACCELERATE_PRECISION, word_list="accelerate",
                                   source="accelerate mixed_precision choices"),),
    "hardware.num_gpus": (Constraint(minimum=1, source="a positive count"),),
    "hardware.num_machines": (Constraint(minimum=1, source="a positive count"),),
    "launch.num_machines": (Constraint(minimum=1, source="a positive count"),),
})

_TYPES = MappingProxyType({
    "int": {"type": "integer"},
    "number": {"type": "number"},
    "bool": {"type": "boolean"},
    "str": {"type": "string"},
    "names": {"anyOf": [{"type": "string"}, {"type": "array", "items": {"type": "string"}}]},
    "any": {},
})


def _applies(c: Constraint, layout: "Layout | str | None") -> bool:
    """Whether a constraint holds for a layout (given as a Layout or by its name)."""
    if c.word_list is None:
        return True
    lay = BY_NAME.get(layout) if isinstance(layout, str) else layout
    return lay is not None and c.word_list in lay.word_lists


def field_schema(name: str, layout: str | None = None) -> dict[str, Any]:
    """The JSON Schema of one view field (for one layout, or the union over layouts)."""
    out = dict(_TYPES[FIELD_TYPES.get(name, "any")])
    constraints = [c for c in CONSTRAINTS.get(name, ()) if layout is None or _applies(c, layout)]
    enums = [c for c in constraints if c.enum is not None]
    if layout is None and any(c.word_list for c in enums):
        enums = []  # layout-specific word lists: only in a layout's own schema
    for c in constraints:
        if c.enum is not None:
            continue
        if c.minimum is not None:
            out["minimum"] = c.minimum
        if c.exclusive_minimum is not None:
            out["exclusiveMinimum"] = c.exclusive_minimum
        if c.exclusive_maximum is not None:
            out["exclusiveMaximum"] = c.exclusive_maximum
    if enums:
        out["enum"] = list(dict.fromkeys(v for c in enums for v in c.enum))
        out.pop("type", None)
    if not out:
        return {"description": name}
    # an empty value (null) means "not set"; "auto" is filled in at launch
    extra = [{"type": "null"}]
    if FIELD_TYPES.get(name) in ("int", "number", "bool"):
        extra.append({"const": "auto"})
    return {"anyOf": [out] + extra, "description": name}


def view_schema() -> dict[str, Any]:
    """The typed view: our field names (dotted) and their types, ranges and words."""
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": SCHEMA_ID,
        "title": "cfgcheck run view",
        "type": "object",
        "properties": {name: field_schema(name) for name in FIELD_TYPES},
        "additionalProperties": False,
    }


def layout_schema(layout: Layout | str) -> dict[str, Any]:
    """A schema for config files of one layout: the keys people write, nested as written."""
    lay = BY_NAME[layout] if isinstance(layout, str) else layout
    props: dict[str, Any] = {}
    for name, specs in lay.fields.items():
        sch = field_schema(name, lay.name)
        for spec in specs:
            parts = spec[1:].split(".") if spec.startswith("=") else [spec]
            node = props
            for part in parts[:-1]:
                parent = node.setdefault(part, {"type": "object", "properties": {}})
                node = parent.setdefault("properties", {})  # a mapping field: its keys inside
            node.setdefault(parts[-1], sch)
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": f"https://cfgcheck.invalid/schema/{lay.name}.json",
        "title": f"cfgcheck: {lay.title}",
        "type": "object",
        "properties": props,
        "additionalProperties": True,
    }


def layout_names() -> list[str]:
    return [lay.name for lay in LAYOUTS]


# --------------------------------------------------------------------------- hand checks

class Violation:
    field: str
    value: Any
    problem: str  # "below" | "at-or-above" | "not-above" | "not-one-of"
    bound: Any
    source: str

    __slots__ = ('field', 'value', 'problem', 'bound', 'source')

    def __init__(self, field, value, problem, bound, source):
        _setattr(self, 'field', field)
        _setattr(self, 'value', value)
        _setattr(self, 'problem', problem)
        _setattr(self, 'bound', bound)
        _setattr(self, 'source', source)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(field={self.field!r}, value={self.value!r}, problem={self.problem!r}, bound={self.bound!r}, source={self.source!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.field, self.value, self.problem, self.bound, self.source) == (other.field, other.value, other.problem, other.bound, other.source)
        return NotImplemented

    def __hash__(self):
        return hash((self.field, self.value, self.problem, self.bound, self.source))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.field, self.value, self.problem, self.bound, self.source)

    __setstate__ = _frozen_setstate


def violations(name: str, value: Any, layout: "Layout | str | None") -> list[Violation]:
    """What the schema would reject in one typed value (the value already has the right type)."""
    return value_violations(name, value, tuple(c for c in CONSTRAINTS.get(name, ()) if _applies(c, layout)))


def value_violations(name: str, value: Any, constraints: tuple[Constraint, ...]) -> list[Violation]:
    """``violations`` against constraints already known to apply (``applicable``)."""
    out: list[Violation] = []
    for c in constraints:
        if c.enum is not None:
            probe = value.strip() if isinstance(value, str) else value
            if probe not in c.enum:
                out.append(Violation(name, value, "not-one-of", c.enum, c.source))
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            continue
        if c.minimum is not None and value < c.minimum:
            out.append(Violation(name, value, "below", c.minimum, c.source))
        if c.exclusive_minimum is not None and value <= c.exclusive_minimum:
            out.append(Violation(name, value, "not-above", c.exclusive_minimum, c.source))
        if c.exclusive_maximum is not None and value >= c.exclusive_maximum:
            out.append(Violation(name, value, "at-or-above", c.exclusive_maximum, c.source))
    return out


# id of a layout (or of None) -> (that layout, {field: the constraints that hold for it}), worked
# out once per layout object (a cache: CONSTRAINTS and the layouts are fixed tables)
_APPLICABLE_CACHE: dict[int, tuple[Any, dict[str, tuple[Constraint, ...]]]] = {}


def applicable(layout: "Layout | None") -> dict[str, tuple[Constraint, ...]]:
    """Field -> the constraints that hold for LAYOUT, for the fields that have any."""
    key = id(layout)
    got = _APPLICABLE_CACHE.get(key)
    if got is None or got[0] is not layout:
        table = {}
        for name, constraints in CONSTRAINTS.items():
            held = tuple(c for c in constraints if _applies(c, layout))
            if held:
                table[name] = held
        got = _APPLICABLE_CACHE[key] = (layout, table)
    return got[1]


@functools.lru_cache(maxsize=None)
def _validator(layout: str | None):
    import jsonschema  # only `cfgcheck schema` and the tests pay for it

    schema = view_schema()
    if layout is not None:
        schema["properties"] = {n: field_schema(n, layout) for n in FIELD_TYPES}
    return jsonschema.Draft202012Validator(schema)


def validate_with_jsonschema(values: dict[str, Any], layout: str | None = None) -> list[str]:
    """Validate {field: value} with jsonschema (imported here only). -> error messages."""
    validator = _validator(layout)
    return sorted(f"{'.'.join(map(str, e.path)) or '(root)'}: {e.message}"
                  for e in validator.iter_errors(values))


def dumps(schema: dict[str, Any]) -> str:
    import json

    return json.dumps(schema, indent=2, sort_keys=False) + "\n"
