"""The defaults a runner applies to what a recipe leaves out, each with its source and versions.

Layout data, like the tables in ``layouts.py``: the values a runner fills in when the file does
not write them, where they depend on other values (a function of the view). A layout names its
table here with ``Layout.defaults_table``; constant defaults live in the layout itself
(``Layout.defaults``). The open path (``cfgcheck.run``) adds them to the view as
``Field(origin="default", note=...)`` in ``RunView.supplied``; the plan and the rules read them
through ``RunView.effective``. A default is a defined value, not a guess: a verdict may rest on it.
"""

from __future__ import annotations

from types import MappingProxyType
from typing import Any, Callable

from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .view import RunView


class Default:
    field: str
    value: Callable[[RunView], Any] | Any  # a value, or a function of the view (None: does not apply)
    note: str  # in plain words, with the source and the versions where it holds

    __slots__ = ('field', 'value', 'note')

    def __init__(self, field, value, note):
        _setattr(self, 'field', field)
        _setattr(self, 'value', value)
        _setattr(self, 'note', note)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(field={self.field!r}, value={self.value!r}, note={self.note!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.field, self.value, self.note) == (other.field, other.value, other.note)
        return NotImplemented

    def __hash__(self):
        return hash((self.field, self.value, self.note))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.field, self.value, self.note)

    __setstate__ = _frozen_setstate


def _qlora(view: RunView) -> bool:
    return view.method == "qlora"


def _axolotl_dtype(view: RunView):
    bf16, fp16 = view.get("precision.bf16"), view.get("precision.fp16")
    if bf16 is not None and (bf16.value is True or bf16.auto):
        return "bfloat16"
    if fp16 is not None and fp16.value is True:
        return "float16"
    return None


def _axolotl_bf16(view: RunView):
    f = view.get("precision.bf16")
    return True if f is not None and f.auto else None


def _when(cond: Callable[[RunView], bool], value: Any) -> Callable[[RunView], Any]:
    return lambda view: value if cond(view) else None


def _lf_alpha(view: RunView):
    if not view.is_adapter:
        return None
    rank = view.value("adapter.rank", 8)
    return 2 * rank if isinstance(rank, int) and rank > 0 else None


def _lf_checkpointing(view: RunView):
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    return None if data.get("disable_gradient_checkpointing") is True else True


def _lf_4bit(value):
    return lambda view: value if view.value("quant.bits") == 4 else None


_AXOLOTL_SRC = "axolotl (0.4 to 0.19, from memory)"
_LF_MODEL = "LLaMA-Factory hparams/model_args.py ModelArguments"
_LF_FT = "LLaMA-Factory hparams/finetuning_args.py LoraArguments"

_TRL_SFT = ("trl/trainer/sft_config.py of TRL 0.24, SFTConfig defaults that override "
            "TrainingArguments; releases before 0.20 kept the TrainingArguments defaults, from memory")

# SFTConfig fields that no plain TrainingArguments file has: the file is read by TRL's SFT trainer
SFT_ONLY_KEYS = frozenset({"packing", "dataset_text_field", "completion_only_loss",
                           "assistant_only_loss", "padding_free", "dataset_num_proc", "eos_token"})


def _sft(view: RunView) -> bool:
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    return not SFT_ONLY_KEYS.isdisjoint(data) and not _grpo(view)  # (a key that is not text is none)


# GRPOConfig fields that preference trainers (DPO, ORPO, KTO share max_prompt_length and
# max_completion_length) do not have
GRPO_ONLY_KEYS = frozenset({"reward_funcs", "reward_weights", "num_iterations", "epsilon_high",
                            "scale_rewards", "mask_truncated_completions"})


def _grpo(view: RunView) -> bool:
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    return view.has("rl.num_generations") or not GRPO_ONLY_KEYS.isdisjoint(data)


def _grpo_seq(view: RunView):
    if not _grpo(view) or view.has("data.seq_len"):
        return None
    return int(view.value("data.max_prompt", 512)) + int(view.value("data.max_completion", 256))


_LF_V1 = "LLaMA-Factory 0.9.5 v1/config/training_args.py TrainingArguments"

DEFAULTS: MappingProxyType[str, tuple[Default, ...]] = MappingProxyType({
    "llama-factory-v1": (
        Default("precision.bf16", True, f"bf16 defaults to true ({_LF_V1})"),
        Default("optim.lr", 1.0e-4, f"learning_rate defaults to 1e-4 ({_LF_V1})"),
        Default("optim.epochs", 3, f"num_train_epochs defaults to 3 ({_LF_V1})"),
        Default("batch.per_device", 1, f"micro_batch_size defaults to 1 ({_LF_V1})"),
        Default("data.seq_len", 2048, f"cutoff_len defaults to 2048 ({_LF_V1})"),
        Default("runtime.gradient_checkpointing", True,
                f"enable_activation_checkpointing defaults to true ({_LF_V1})"),
    ),
    "peft-bench": (
        Default("cadence.eval_strategy", "steps",
                "the runner evaluates every eval_steps steps: PEFT method_comparison/MetaMathQA run.py "
                "train(): 'if step % eval_steps == 0'"),
    ),
    "axolotl": (
        Default("model.dtype", _axolotl_dtype,
                f"bf16: true or auto loads the weights in bf16 (fp16: true in fp16): the runner sets "
                f"torch_dtype from these switches ({_AXOLOTL_SRC})"),
        Default("precision.bf16", _axolotl_bf16,
                f"bf16: auto turns bf16 on where the card supports it ({_AXOLOTL_SRC})"),
        Default("quant.load_4bit", _when(_qlora, True),
                f"adapter: qlora loads the base model in 4 bits ({_AXOLOTL_SRC})"),
        Default("quant.type_4bit", _when(_qlora, "nf4"),
                f"adapter: qlora quantises the base to NF4 ({_AXOLOTL_SRC}: BitsAndBytesConfig "
                f"bnb_4bit_quant_type nf4)"),
        Default("quant.double", _when(_qlora, True),
                f"adapter: qlora uses double quantisation ({_AXOLOTL_SRC}: bnb_4bit_use_double_quant true)"),
        Default("adapter.targets", lambda v: "all-linear" if v.is_on("adapter.target_all_linear") else None,
                f"lora_target_linear: true puts adapters on every linear layer but the output head "
                f"({_AXOLOTL_SRC})"),
    ),
    "llama-factory": (
        Default("model.dtype", lambda v: "bfloat16" if isinstance(v.doc.data, dict)
                and v.doc.data.get("pure_bf16") is True else None,
                f"pure_bf16: true trains the bf16 weights directly, without mixed precision "
                f"(LLaMA-Factory hparams/finetuning_args.py FinetuningArguments)"),
        Default("adapter.rank", lambda v: 8 if v.is_adapter else None,
                f"lora_rank defaults to 8 ({_LF_FT})"),
        Default("adapter.alpha", _lf_alpha,
                f"lora_alpha defaults to 2 x lora_rank ({_LF_FT}: 'default: lora_rank * 2')"),
        Default("adapter.targets", lambda v: "all" if v.is_adapter else None,
                f"lora_target defaults to all, every linear layer ({_LF_FT})"),
        Default("runtime.gradient_checkpointing", _lf_checkpointing,
                f"gradient checkpointing is on unless disable_gradient_checkpointing: true ({_LF_MODEL})"),
        Default("quant.type_4bit", _lf_4bit("nf4"),
                f"quantization_type defaults to nf4 ({_LF_MODEL})"),
        Default("quant.double", _lf_4bit(True),
                f"double_quantization defaults to true ({_LF_MODEL})"),
        Default("quant.load_4bit", _lf_4bit(True), f"quantization_bit: 4 loads the base in 4 bits ({_LF_MODEL})"),
        Default("data.seq_len", 2048,
                "cutoff_len defaults to 2048 (LLaMA-Factory hparams/data_args.py DataArguments, from memory)"),
    ),
    "trainer": (
        Default("data.seq_len", _grpo_seq,
                "a GRPO sequence is the prompt plus the completion: max_prompt_length + "
                "max_completion_length, 512 and 256 where not written (TRL GRPOConfig 0.14 and later)"),
        Default("rl.num_generations", lambda v: 8 if _grpo(v) and not v.has("rl.num_generations") else None,
                "num_generations defaults to 8 completions per prompt, and each prompt is sampled that "
                "often per epoch (TRL GRPOConfig and RepeatSampler, 0.14 and later)"),
        Default("data.seq_len", lambda v: 1024 if _sft(v) else None,
                "TRL's SFTConfig truncates to max_length 1024 by default (TRL 0.12 to 0.2x; "
                "max_seq_length before 0.20)"),
        Default("runtime.gradient_checkpointing", lambda v: True if _sft(v) else None,
                f"TRL's SFTConfig turns gradient checkpointing on by default ({_TRL_SFT})"),
        Default("precision.bf16", lambda v: True if _sft(v) and not v.is_on("precision.fp16") else None,
                f"TRL's SFTConfig turns bf16 on unless fp16 is set ({_TRL_SFT})"),
    ),
    "deepspeed": (
        # value None + auto: filled in at launch, as train_batch_size / (micro-batch x GPUs)
        Default("batch.accumulation", "derived",
                "DeepSpeed derives an omitted gradient_accumulation_steps as train_batch_size / "
                "(train_micro_batch_size_per_gpu x GPUs) (DeepSpeed runtime/config.py, "
                "_set_batch_related_parameters, from memory)"),
    ),
})

# The word a layout uses for "every linear layer" in its target list -> PEFT's word
ALL_LINEAR_WORDS = frozenset({"all", "all-linear", "all_linear"})
