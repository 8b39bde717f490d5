"""Per-GPU memory estimate for a fine-tuning run, from the model's shapes and the run's settings.

Pure arithmetic, no torch. Every coefficient carries its basis, and the notes of a
:class:`MemoryBreakdown` repeat the ones used, so a message can quote them:

* model states (weights, gradients, optimizer, fp32 master weights): ZeRO paper
  (Rajbhandari et al., SC20) sec. 3.1, mixed-precision Adam = 2 + 2 + 12 = 16 bytes/param,
  and its Fig. 1 per-stage partitioning formulas;
* quantised weights: QLoRA paper (Dettmers et al. 2023) sec. 3, NF4/FP4 at 4 bits plus 32-bit
  block constants per 64 weights (0.5 bit/param) or, with double quantisation, 8/64 + 32/(64*256)
  = 0.127 bit/param;
* activations: the per-layer formula sbh(34 + 5as/h) of Korthikanti et al. 2022 (Eq. 1, Table 2)
  for GPT-style layers; for the gated-MLP, RMSNorm, grouped-query layers modelled here our own
  derivation (see :func:`layer_activation_bytes`), per dtype regime (fp32, 16-bit, autocast over
  fp32 weights) and with checkpointing, measured with saved-tensor hooks on torch 2.13 (CPU) in
  transformers 5.x models (tests/reference/test_memory_measured.py, bench/MEMORY.md);
* autocast's 16-bit weight copies: the casts its matmuls save for backward (measured, same test);
* logits: the transient peak of vocabulary-wide tensors, at the start of backward (logits, the
  fp32 log-softmax that cross_entropy saves after transformers' ForCausalLMLoss upcast, and two
  fp32 gradients; measured, same test).

Optimizers whose states are not a fixed number of bytes per parameter raise
:class:`NotEstimated`: no figure rather than AdamW's.

GB below means 1e9 bytes (the ZeRO paper's arithmetic); GiB means 2**30.
"""

from __future__ import annotations

import itertools
import math
from functools import lru_cache
from types import MappingProxyType

from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .models import (
    Architecture,
    NoDefaultTargets,
    lora_trainable_parameters,
    linear_modules,
    module_table,
    modules_to_save_matches,
    resolve_targets,
    rows_by_name,
    total_parameters,
)
from .models import _frozen, _targets_key

__all__ = (
    "MemoryInputs",
    "NotEstimated",
    "normalise_optimizer",
    "MemoryBreakdown",
    "DEFAULT_OVERHEAD_BYTES",
    "estimate_memory",
    "changes_that_fit",
    "zero_model_states_bytes",
    "korthikanti_layer_bytes",
    "full_recompute_layer_bytes",
    "layer_activation_bytes",
    "quantised_bits_per_param",
    "optimizer_state_bytes_per_param",
)

# CUDA context, cuBLAS/cuDNN workspaces and allocator slack. Common practice, no source: a CUDA
# context alone is typically several hundred MiB; 1 GiB is a round allowance.
DEFAULT_OVERHEAD_BYTES = 1 << 30

_BYTES = MappingProxyType({"fp32": 4, "bf16": 2, "fp16": 2})
_QUANT = ("int8", "nf4", "fp4")
_STORAGES = ("fp32", "bf16", "fp16", "int8", "nf4", "fp4")
_SHARDINGS = ("none", "zero0", "zero1", "zero2", "zero3", "fsdp_full", "fsdp_grad_op")
# which model states each scheme partitions across the data-parallel GPUs (ZeRO paper sec. 5, Fig. 1;
# FSDP FULL_SHARD partitions like ZeRO-3 and SHARD_GRAD_OP like ZeRO-2, from memory)
_SHARDED = MappingProxyType({
    "none": (),
    "zero0": (),
    "zero1": ("optimizer",),
    "zero2": ("optimizer", "gradients"),
    "fsdp_grad_op": ("optimizer", "gradients"),
    "zero3": ("optimizer", "gradients", "weights"),
    "fsdp_full": ("optimizer", "gradients", "weights"),
})


class MemoryInputs:
    """What the estimate needs to know about a run.

    ``mixed_precision`` set means the ZeRO-paper recipe: 16-bit compute with fp32 master weights
    and fp32 optimizer states. How common setups map onto the fields:

    * transformers Trainer, model loaded in fp32 (``torch_dtype: float32``, or no torch_dtype under
      transformers 4; transformers 5 loads the checkpoint's dtype), ``bf16: true``: base_storage
      "fp32", mixed_precision "bf16" -> 4 + 4 + 8 = 16 B/param with AdamW, 16-bit activations;
    * transformers Trainer, model loaded in bf16 (``torch_dtype: bfloat16``), ``bf16: true``: the
      weights stay bf16 and torch's AdamW keeps bf16 states, no master copy: base_storage "bf16",
      mixed_precision None -> 2 + 2 + 4 = 8 B/param (measured against torch in tests/reference);
    * DeepSpeed with ``bf16``/``fp16`` enabled (fp32 master copy): base_storage "bf16"/"fp16",
      mixed_precision "bf16"/"fp16" -> 2 + 2 + 12 = 16 B/param (ZeRO paper sec. 3.1);
    * LoRA/QLoRA: the base storage as loaded; adapters are fp32 either way (PEFT).

    * DeepSpeed (``sharding`` "zero0" .. "zero3") with ``mixed_precision`` set casts the module to
      16-bit whatever it was loaded in and keeps fp32 master weights and fp32 states: 2 + 2 + 12
      bytes per trainable parameter before partitioning, the ZeRO paper's (2 + 2 + K)psi;
      "zero0" is DeepSpeed without partitioning.

    ``fused_attention``: transformers' default sdpa, or flash-attention; False for "eager".
    ``autocast``: the forward runs under torch.autocast (the Trainer's ``bf16``/``fp16`` flags
    outside DeepSpeed); with fp32 weights this changes what the activations cost and adds the
    16-bit weight copies autocast caches; with a 16-bit base it sizes the LoRA adapters' inputs.
    """

    arch: Architecture
    method: str  # "full" | "lora" | "qlora"
    base_storage: str  # "fp32" | "bf16" | "fp16" | "int8" | "nf4" | "fp4"
    double_quant: bool
    optimizer: str  # transformers `optim` names
    sgd_momentum: float
    mixed_precision: str | None  # "bf16" | "fp16" | None (no autocast; states in the weights' dtype)
    micro_batch: int
    seq_len: int
    gradient_checkpointing: bool
    fused_attention: bool  # flash / sdpa: no s^2 attention-score term
    lora_rank: int
    lora_targets: object
    modules_to_save: tuple[str, ...]
    num_gpus: int
    sharding: str  # "none" | "zero0" | "zero1" | "zero2" | "zero3" | "fsdp_full" | "fsdp_grad_op"
    overhead_bytes: int
    offload_optimizer: bool  # DeepSpeed zero_optimization.offload_optimizer: states and master in CPU RAM
    # Whether the forward runs under torch.autocast (the trainer's bf16/fp16 flags outside DeepSpeed).
    # None: derived as before -- autocast when mixed_precision is set and the weights are fp32.
    autocast: bool | None
    # Where base_storage came from, in words (e.g. the load-dtype default of the pinned transformers
    # version); repeated in the breakdown's notes.
    storage_note: str | None

    __slots__ = ('arch', 'method', 'base_storage', 'double_quant', 'optimizer', 'sgd_momentum', 'mixed_precision', 'micro_batch', 'seq_len', 'gradient_checkpointing', 'fused_attention', 'lora_rank', 'lora_targets', 'modules_to_save', 'num_gpus', 'sharding', 'overhead_bytes', 'offload_optimizer', 'autocast', 'storage_note')

    # the fields in order: the result cache keys the record by them, ``replaced`` copies them
    _record_fields = ('arch', 'method', 'base_storage', 'double_quant', 'optimizer', 'sgd_momentum', 'mixed_precision', 'micro_batch', 'seq_len', 'gradient_checkpointing', 'fused_attention', 'lora_rank', 'lora_targets', 'modules_to_save', 'num_gpus', 'sharding', 'overhead_bytes', 'offload_optimizer', 'autocast', 'storage_note')

    def __init__(self, arch, method, base_storage="bf16", double_quant=False, optimizer="adamw_torch", sgd_momentum=0.0, mixed_precision="bf16", micro_batch=1, seq_len=2048, gradient_checkpointing=False, fused_attention=True, lora_rank=8, lora_targets=None, modules_to_save=(), num_gpus=1, sharding="none", overhead_bytes=DEFAULT_OVERHEAD_BYTES, offload_optimizer=False, autocast=None, storage_note=None):
        _setattr(self, 'arch', arch)
        _setattr(self, 'method', method)
        _setattr(self, 'base_storage', base_storage)
        _setattr(self, 'double_quant', double_quant)
        _setattr(self, 'optimizer', optimizer)
        _setattr(self, 'sgd_momentum', sgd_momentum)
        _setattr(self, 'mixed_precision', mixed_precision)
        _setattr(self, 'micro_batch', micro_batch)
        _setattr(self, 'seq_len', seq_len)
        _setattr(self, 'gradient_checkpointing', gradient_checkpointing)
        _setattr(self, 'fused_attention', fused_attention)
        _setattr(self, 'lora_rank', lora_rank)
        _setattr(self, 'lora_targets', lora_targets)
        _setattr(self, 'modules_to_save', modules_to_save)
        _setattr(self, 'num_gpus', num_gpus)
        _setattr(self, 'sharding', sharding)
        _setattr(self, 'overhead_bytes', overhead_bytes)
        _setattr(self, 'offload_optimizer', offload_optimizer)
        _setattr(self, 'autocast', autocast)
        _setattr(self, 'storage_note', storage_note)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(arch={self.arch!r}, method={self.method!r}, base_storage={self.base_storage!r}, double_quant={self.double_quant!r}, optimizer={self.optimizer!r}, sgd_momentum={self.sgd_momentum!r}, mixed_precision={self.mixed_precision!r}, micro_batch={self.micro_batch!r}, seq_len={self.seq_len!r}, gradient_checkpointing={self.gradient_checkpointing!r}, fused_attention={self.fused_attention!r}, lora_rank={self.lora_rank!r}, lora_targets={self.lora_targets!r}, modules_to_save={self.modules_to_save!r}, num_gpus={self.num_gpus!r}, sharding={self.sharding!r}, overhead_bytes={self.overhead_bytes!r}, offload_optimizer={self.offload_optimizer!r}, autocast={self.autocast!r}, storage_note={self.storage_note!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.arch, self.method, self.base_storage, self.double_quant, self.optimizer, self.sgd_momentum, self.mixed_precision, self.micro_batch, self.seq_len, self.gradient_checkpointing, self.fused_attention, self.lora_rank, self.lora_targets, self.modules_to_save, self.num_gpus, self.sharding, self.overhead_bytes, self.offload_optimizer, self.autocast, self.storage_note) == (other.arch, other.method, other.base_storage, other.double_quant, other.optimizer, other.sgd_momentum, other.mixed_precision, other.micro_batch, other.seq_len, other.gradient_checkpointing, other.fused_attention, other.lora_rank, other.lora_targets, other.modules_to_save, other.num_gpus, other.sharding, other.overhead_bytes, other.offload_optimizer, other.autocast, other.storage_note)
        return NotImplemented

    def __hash__(self):
        return hash((self.arch, self.method, self.base_storage, self.double_quant, self.optimizer, self.sgd_momentum, self.mixed_precision, self.micro_batch, self.seq_len, self.gradient_checkpointing, self.fused_attention, self.lora_rank, self.lora_targets, self.modules_to_save, self.num_gpus, self.sharding, self.overhead_bytes, self.offload_optimizer, self.autocast, self.storage_note))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.arch, self.method, self.base_storage, self.double_quant, self.optimizer, self.sgd_momentum, self.mixed_precision, self.micro_batch, self.seq_len, self.gradient_checkpointing, self.fused_attention, self.lora_rank, self.lora_targets, self.modules_to_save, self.num_gpus, self.sharding, self.overhead_bytes, self.offload_optimizer, self.autocast, self.storage_note)

    __setstate__ = _frozen_setstate


class MemoryBreakdown:
    weights_bytes: int
    gradients_bytes: int
    optimizer_bytes: int
    master_weights_bytes: int
    activations_bytes: int
    logits_bytes: int
    overhead_bytes: int
    total_bytes: int
    notes: tuple[str, ...]
    trainable_parameters: int
    total_parameters: int
    # 16-bit copies of fp32 weights that torch.autocast casts and keeps until backward (in total_bytes)
    weight_copies_bytes: int
    # with activation checkpointing: the part of activations_bytes that is one layer's activations
    # while it is recomputed during backward (0 without checkpointing)
    recomputed_layer_bytes: int

    __slots__ = ('weights_bytes', 'gradients_bytes', 'optimizer_bytes', 'master_weights_bytes', 'activations_bytes', 'logits_bytes', 'overhead_bytes', 'total_bytes', 'notes', 'trainable_parameters', 'total_parameters', 'weight_copies_bytes', 'recomputed_layer_bytes')

    def __init__(self, weights_bytes, gradients_bytes, optimizer_bytes, master_weights_bytes, activations_bytes, logits_bytes, overhead_bytes, total_bytes, notes=(), trainable_parameters=0, total_parameters=0, weight_copies_bytes=0, recomputed_layer_bytes=0):
        _setattr(self, 'weights_bytes', weights_bytes)
        _setattr(self, 'gradients_bytes', gradients_bytes)
        _setattr(self, 'optimizer_bytes', optimizer_bytes)
        _setattr(self, 'master_weights_bytes', master_weights_bytes)
        _setattr(self, 'activations_bytes', activations_bytes)
        _setattr(self, 'logits_bytes', logits_bytes)
        _setattr(self, 'overhead_bytes', overhead_bytes)
        _setattr(self, 'total_bytes', total_bytes)
        _setattr(self, 'notes', notes)
        _setattr(self, 'trainable_parameters', trainable_parameters)
        _setattr(self, 'total_parameters', total_parameters)
        _setattr(self, 'weight_copies_bytes', weight_copies_bytes)
        _setattr(self, 'recomputed_layer_bytes', recomputed_layer_bytes)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(weights_bytes={self.weights_bytes!r}, gradients_bytes={self.gradients_bytes!r}, optimizer_bytes={self.optimizer_bytes!r}, master_weights_bytes={self.master_weights_bytes!r}, activations_bytes={self.activations_bytes!r}, logits_bytes={self.logits_bytes!r}, overhead_bytes={self.overhead_bytes!r}, total_bytes={self.total_bytes!r}, notes={self.notes!r}, trainable_parameters={self.trainable_parameters!r}, total_parameters={self.total_parameters!r}, weight_copies_bytes={self.weight_copies_bytes!r}, recomputed_layer_bytes={self.recomputed_layer_bytes!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.weights_bytes, self.gradients_bytes, self.optimizer_bytes, self.master_weights_bytes, self.activations_bytes, self.logits_bytes, self.overhead_bytes, self.total_bytes, self.notes, self.trainable_parameters, self.total_parameters, self.weight_copies_bytes, self.recomputed_layer_bytes) == (other.weights_bytes, other.gradients_bytes, other.optimizer_bytes, other.master_weights_bytes, other.activations_bytes, other.logits_bytes, other.overhead_bytes, other.total_bytes, other.notes, other.trainable_parameters, other.total_parameters, other.weight_copies_bytes, other.recomputed_layer_bytes)
        return NotImplemented

    def __hash__(self):
        return hash((self.weights_bytes, self.gradients_bytes, self.optimizer_bytes, self.master_weights_bytes, self.activations_bytes, self.logits_bytes, self.overhead_bytes, self.total_bytes, self.notes, self.trainable_parameters, self.total_parameters, self.weight_copies_bytes, self.recomputed_layer_bytes))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.weights_bytes, self.gradients_bytes, self.optimizer_bytes, self.master_weights_bytes, self.activations_bytes, self.logits_bytes, self.overhead_bytes, self.total_bytes, self.notes, self.trainable_parameters, self.total_parameters, self.weight_copies_bytes, self.recomputed_layer_bytes)

    __setstate__ = _frozen_setstate

    def components(self) -> list[tuple[str, int]]:
        return [
            ("weights", self.weights_bytes),
            ("gradients", self.gradients_bytes),
            ("optimizer states", self.optimizer_bytes),
            ("fp32 master weights", self.master_weights_bytes),
            ("16-bit weight copies (autocast)", self.weight_copies_bytes),
            ("activations", self.activations_bytes),
            ("logits and loss", self.logits_bytes),
            ("runtime overhead", self.overhead_bytes),
        ]


# ---------------------------------------------------------------------------------------------
# Published formulas, exposed for tests and messages
# ---------------------------------------------------------------------------------------------


def zero_model_states_bytes(psi: float, *, stage: int, num_gpus: int, optimizer_k: float = 12) -> float:
    """Per-device model-state bytes of mixed-precision training, ZeRO paper Fig. 1.

    stage 0: (2 + 2 + K)psi; 1 (P_os): 2psi + 2psi + K psi/N; 2 (P_os+g): 2psi + (2 + K)psi/N;
    3 (P_os+g+p): (2 + 2 + K)psi/N. K = 12 for mixed-precision Adam (sec. 3.1).
    """
    n = max(int(num_gpus), 1)
    if stage == 0:
        return (2 + 2 + optimizer_k) * psi
    if stage == 1:
        return 2 * psi + 2 * psi + optimizer_k * psi / n
    if stage == 2:
        return 2 * psi + (2 + optimizer_k) * psi / n
    if stage == 3:
        return (2 + 2 + optimizer_k) * psi / n
    raise ValueError(f"ZeRO stage must be 0, 1, 2 or 3, got {stage}")


def korthikanti_layer_bytes(s: int, b: int, h: int, a: int) -> int:
    """Activation bytes of one GPT-style layer without recompute: sbh(34 + 5as/h) (Korthikanti et al. Eq. 1)."""
    return 34 * s * b * h + 5 * a * s * s * b


def full_recompute_layer_bytes(s: int, b: int, h: int) -> int:
    """Bytes kept per layer with full activation recomputation: 2sbh (Korthikanti et al. Table 2)."""
    return 2 * s * b * h


def quantised_bits_per_param(storage: str, double_quant: bool = False) -> float:
    """Bits per quantised weight, block constants included (QLoRA paper sec. 3).

    nf4/fp4: 4 + 32/64 = 4.5 without double quantisation, 4 + 8/64 + 32/(64*256) = 4.127 with it.
    int8 (LLM.int8()): 8 bits; its per-row fp32 scales are added per layer in :func:`estimate_memory`.
    """
    if storage in ("nf4", "fp4"):
        return 4 + (8 / 64 + 32 / (64 * 256) if double_quant else 32 / 64)
    if storage == "int8":
        return 8.0
    if storage in _BYTES:
        return 8.0 * _BYTES[storage]
    raise ValueError(f"unknown weight storage {storage!r}; expected one of {', '.join(_STORAGES)}")


_ADAM_32 = frozenset({
    "adamw_torch", "adamw_torch_fused", "adamw_hf", "adamw", "adam", "adamw_apex_fused", "adamw_anyprecision",
    "adamw_torch_xla", "adamw_torch_npu_fused", "paged_adamw_32bit", "paged_adam_32bit", "adamw_32bit",
})
_ADAM_8 = frozenset({"adamw_8bit", "adamw_bnb_8bit", "paged_adamw_8bit", "adam_8bit", "paged_adam_8bit", "adamw_torch_8bit"})
_ONE_STATE_32 = frozenset({"lion_32bit", "paged_lion_32bit", "adagrad", "rmsprop", "rmsprop_bnb_32bit"})
_ONE_STATE_8 = frozenset({"lion_8bit", "paged_lion_8bit", "rmsprop_bnb_8bit", "rmsprop_8bit"})


class NotEstimated(ValueError):
    """The run uses something the estimate does not model (an optimizer, a training mode): no figure
    is better than one built on the wrong arithmetic."""


# Class names written as a component path (torchtune `optimizer._component_`, recipe runners'
# `optimizer_type`) mapped onto the transformers `optim` names the table below knows (from memory of
# torch.optim and bitsandbytes.optim class names).
_CLASS_NAMES = MappingProxyType({
    "adamw": "adamw_torch", "adam": "adam", "sgd": "sgd", "adagrad": "adagrad", "rmsprop": "rmsprop",
    "adamw8bit": "adamw_8bit", "adam8bit": "adam_8bit", "pagedadamw": "paged_adamw_32bit",
    "pagedadamw32bit": "paged_adamw_32bit", "pagedadamw8bit": "paged_adamw_8bit", "pagedadam": "paged_adam_32bit",
    "pagedadam8bit": "paged_adam_8bit", "adamw32bit": "adamw_32bit", "lion": "lion_32bit", "lion8bit": "lion_8bit",
    "pagedlion": "paged_lion_32bit", "pagedlion8bit": "paged_lion_8bit", "adafactor": "adafactor",
})


def normalise_optimizer(optimizer: str | None) -> str:
    """A transformers `optim` name for ``optimizer`` (also accepting a dotted class path)."""
    return _normalised(str(optimizer or "adamw_torch"))


@lru_cache(maxsize=256)  # a few names recur across a corpus
def _normalised(written: str) -> str:
    name = written.strip()
    if "." in name or any(c.isupper() for c in name):
        leaf = name.rsplit(".", 1)[-1].lower().replace("_", "")
        return _CLASS_NAMES.get(leaf, leaf)
    return name.lower()


def optimizer_state_bytes_per_param(optimizer: str, *, state_bytes: int = 4, sgd_momentum: float = 0.0):
    """(bytes per trainable parameter, note) for the optimizer's own state, master weights excluded.

    AdamW keeps two states (exp_avg, exp_avg_sq): 2 x 4 B in fp32 (ZeRO paper sec. 3.1, K = 12 less
    the 4 B master copy). bitsandbytes 8-bit variants keep them in 1 byte each plus one fp32 scale per
    2048-value block (from memory). Lion/Adagrad/RMSprop keep one state; SGD one momentum buffer if
    momentum > 0, else none. Adafactor is handled per tensor in :func:`estimate_memory`. Any other
    optimizer raises :class:`NotEstimated` rather than being counted as AdamW.
    ``state_bytes`` is the dtype of 32-bit states: 4, or 2 when training purely in 16-bit (torch
    allocates states like the parameter, from memory).
    """
    name = normalise_optimizer(optimizer)
    if name in _ADAM_32:
        return 2 * state_bytes, f"{name}: two {state_bytes}-byte states per parameter (ZeRO paper sec. 3.1)"
    if name in _ADAM_8:
        return 2 + 8 / 2048, f"{name}: two 1-byte states per parameter plus block scales (bitsandbytes, from memory)"
    if name in _ONE_STATE_32:
        return state_bytes, f"{name}: one {state_bytes}-byte state per parameter (from memory)"
    if name in _ONE_STATE_8:
        return 1 + 4 / 2048, f"{name}: one 1-byte state per parameter plus block scales (from memory)"
    if name.startswith("sgd"):
        if sgd_momentum and sgd_momentum > 0:
            return state_bytes, f"sgd with momentum {sgd_momentum}: one momentum buffer per parameter"
        return 0, "sgd without momentum: no optimizer state"
    if name.startswith("adafactor"):
        return 0, "adafactor: factored second moment, counted per tensor"
    # GaLore / APOLLO (low-rank projected states), LOMO / AdaLomo and the layer-wise variants
    # (updates fused into backward, no gradients held), schedule-free and other state layouts:
    # their memory is not a per-parameter table entry (from memory of transformers' OptimizerNames)
    raise NotEstimated(f"optimizer {name!r} is not modelled (its states and gradients are not a fixed number "
                       "of bytes per parameter here): memory not estimated")


# ---------------------------------------------------------------------------------------------
# Activations (own derivation, checked against torch's saved tensors in tests/reference)
# ---------------------------------------------------------------------------------------------


# the projections that read the same input (q/k/v, gate/up): their adapters can share one copy
_INPUT_GROUPS = MappingProxyType({"q_proj": "attn_in", "k_proj": "attn_in", "v_proj": "attn_in", "qkv_proj": "attn_in",
                                  "gate_proj": "mlp_in", "up_proj": "mlp_in", "gate_up_proj": "mlp_in"})


@lru_cache(maxsize=64)  # the shapes alone decide it: once per architecture
def _input_widths(arch: Architecture) -> MappingProxyType:
    """Per decoder layer: leaf module name -> in_features of each nn.Linear (or Conv1D)."""
    return MappingProxyType({leaf: fin for leaf, (fin, _fout) in linear_modules(arch).items()})


def layer_activation_bytes(
    arch: Architecture,
    *,
    micro_batch: int,
    seq_len: int,
    fused_attention: bool = True,
    act_bytes: int = 2,
    frozen: bool = False,
    lora_leaves: frozenset[str] = frozenset(),
    lora_rank: int = 8,
    adapter_act_bytes: int = 2,
    residual_bytes: int | None = None,
    cast_copies: bool = False,
    adapter_shared_input: bool = False,
) -> int:
    """Bytes one decoder layer keeps for backward, without recomputation.

    Our own derivation for the transformers 5.x layers modelled here, counting what each op
    saves, checked op by op against torch's saved tensors (measured with saved-tensor hooks,
    torch 2.13 on CPU, tests/reference/test_memory_measured.py). Symbols: s = seq_len, b =
    micro_batch, q = heads x head_dim, k = kv_heads x head_dim, I = intermediate size,
    C = ``act_bytes`` (dtype of matmul outputs: 2 under 16-bit weights or autocast, 4 in fp32),
    R = ``residual_bytes`` (dtype of the residual stream: the weights' dtype, 4 for fp32 weights
    even under autocast; defaults to C):

    * each RMSNorm (transformers upcasts to fp32): the fp32 input 4sbh, the fp32 rsqrt 4sb, plus
      the normalised tensor when the norm weight trains (R*sbh; 4sbh for gemma's fp32
      (1 + weight) product);
    * attention: the projection input (R*sbh, shared by q/k/v; under autocast over fp32 weights
      (``cast_copies``) each projection casts its own 16-bit copy, C*sbh each: 3 for q/k/v, 1 for
      a fused qkv), Q C*sbq, K and V C*sbk each, the output C*sbq and the fp32 log-sum-exp
      4*a*s*b. Eager attention repeats K and V to all heads (C*sbq each), keeps the fp32 softmax
      output 4*a*s^2*b, its 16-bit copy 2*a*s^2*b only when C = 2 (in fp32 the cast is a no-op),
      and copies the output before o_proj (C*sbq, saved only when o_proj's weight trains).
      (Korthikanti et al. 2022 Eq. 1 count 5as^2b for GPT layers with a dropout mask; fused
      attention keeps only Q, K, V, output and the log-sum-exp, and o_proj reads the output in place);
    * gated MLP (SwiGLU/GeGLU, phi3's fused gate_up_proj alike): the projection input (R*sbh, or
      one C*sbh cast copy per projection under ``cast_copies``: 2, 1 for fused gate_up) and 4
      tensors of width I (gate output, activation output, up output, their product) 4*C*sbI;
    * mixtral: router input and logits, then per routed expert (experts_per_token) a gathered
      copy of the token states, the 4 width-I tensors and the expert output (for the routing
      weights' gradient);
    * phi3 with fused attention: V is a view that keeps the whole qkv output alive, and the
      attention output is copied before o_proj; gemma2's eager soft-capping keeps its tanh output;
    * gemma2's extra norms and qwen3's q/k norms are counted like the others.

    With ``frozen`` (adapters on a frozen base), inputs of frozen linear layers are not saved
    (torch saves a matmul input only for the weight's gradient). Each adapted layer
    (``lora_leaves``: leaf names) keeps its own copy of its input cast to the adapter dtype
    (PEFT casts the input to the fp32 adapter weights; under autocast the matmul recasts it to
    16-bit: ``adapter_act_bytes`` 4 or 2) and the lora_A output of width ``lora_rank``. When the
    input already is in the adapter dtype (fp32 weights, no autocast: ``adapter_shared_input``)
    PEFT's cast is a no-op and the adapters of one input share it (q/k/v, gate/up), and
    o_proj's adapter reads the attention output in place under fused attention.
    """
    s, b, h = seq_len, micro_batch, arch.hidden_size
    sb = s * b
    C = act_bytes
    R = residual_bytes if residual_bytes is not None else C
    q = arch.num_heads * arch.head_dim
    k = arch.num_kv_heads * arch.head_dim
    inter = arch.intermediate_size
    fam = arch.family
    fused_qkv = fam == "phi3"  # qkv_proj / gate_up_proj

    # adapted layers: their own input copy in the adapter dtype plus the rank-wide lora_A output
    adapters = 0
    if frozen:
        widths = _input_widths(arch)
        shared = adapter_shared_input  # PEFT's cast to the fp32 adapter dtype is a no-op
        groups_seen: set[str] = set()
        for leaf in sorted(lora_leaves):
            if leaf not in widths:
                continue
            adapters += adapter_act_bytes * sb * lora_rank
            if shared:
                group = _INPUT_GROUPS.get(leaf, leaf)
                if group in groups_seen:
                    continue
                groups_seen.add(group)
                if leaf == "o_proj" and fused_attention and fam != "phi3":
                    continue  # reads the saved attention output in place
            adapters += adapter_act_bytes * sb * widths[leaf]

    gemma_like = fam in ("gemma", "gemma2")  # GemmaRMSNorm multiplies by (1 + weight) in fp32
    norm_bytes = 4 * sb * h + 4 * sb + (0 if frozen else (4 if gemma_like else R) * sb * h)
    n_norms = 4 if fam == "gemma2" else 2
    total = n_norms * norm_bytes + adapters
    # attention
    if not frozen:  # the projections' input, kept for their weight gradients
        total += (C * sb * h * (1 if fused_qkv else 3)) if cast_copies else R * sb * h
    if fam == "qwen3":  # q_norm / k_norm on per-head vectors
        total += 4 * sb * (q + k) + 4 * sb * (arch.num_heads + arch.num_kv_heads)
        total += 0 if frozen else C * sb * (q + k)
    if fused_attention:
        total += C * sb * q + 2 * C * sb * k + C * sb * q + 4 * sb * arch.num_heads  # Q, K, V, out, lse
        if fam == "phi3":
            # V is a view of the fused qkv output, which stays alive whole; the output is copied
            # before o_proj
            total += C * sb * (q + k) + C * sb * q
    else:
        total += C * sb * q + 2 * C * sb * q  # Q, and K and V repeated to all heads
        if not frozen:
            total += C * sb * q  # output copied (transpose + contiguous) before o_proj
        total += 4 * arch.num_heads * s * s * b  # fp32 softmax output
        if C == 2:
            total += 2 * arch.num_heads * s * s * b  # its 16-bit copy for the value matmul
        if fam == "gemma2":  # attention logit soft-capping keeps the tanh output
            total += C * arch.num_heads * s * s * b
    # MLP
    if fam == "mixtral":
        E, kk = max(arch.num_experts, 1), max(arch.experts_per_token, 1)
        total += C * sb * h + C * sb * E  # router input (shared with experts' input) and logits
        # per routed copy: gathered input, gate/up output, activation output, product, and the
        # expert output kept for the routing weights' gradient
        total += kk * (C * sb * h + 4 * C * sb * inter + C * sb * h)
    else:
        if not frozen:
            total += (C * sb * h * (1 if fused_qkv else 2)) if cast_copies else R * sb * h
        total += 3 * C * sb * inter  # gate output, activation output, up output
        if not frozen:
            total += C * sb * inter  # product = down_proj input
    return total


# ---------------------------------------------------------------------------------------------
# The estimate
# ---------------------------------------------------------------------------------------------


def _validate(inp: MemoryInputs) -> None:
    if inp.method not in ("full", "lora", "qlora"):
        raise ValueError(f"method must be 'full', 'lora' or 'qlora', got {inp.method!r}")
    if inp.base_storage not in _STORAGES:
        raise ValueError(f"base_storage must be one of {', '.join(_STORAGES)}, got {inp.base_storage!r}")
    if inp.method == "full" and inp.base_storage in _QUANT:
        raise ValueError(f"full fine-tuning cannot train {inp.base_storage} weights; use adapters or 16/32-bit weights")
    if inp.sharding not in _SHARDINGS:
        raise ValueError(f"sharding must be one of {', '.join(_SHARDINGS)}, got {inp.sharding!r}")
    if inp.mixed_precision not in (None, "bf16", "fp16"):
        raise ValueError(f"mixed_precision must be 'bf16', 'fp16' or None, got {inp.mixed_precision!r}")
    for name in ("micro_batch", "seq_len", "num_gpus", "lora_rank"):
        value = getattr(inp, name)
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            raise ValueError(f"{name} must be a positive integer, got {value!r}")


@lru_cache(maxsize=64)  # the shapes alone decide it: once per architecture
def _quantised_rows(arch: Architecture) -> tuple[int, int, int]:
    """(weights bitsandbytes quantises, output rows of those layers, everything else) in parameters.

    Quantised: the weight matrices of the decoder's nn.Linear layers (not lm_head: transformers keeps
    the output embedding in 16-bit) and, assumed, mixtral's expert tensors. Kept in 16-bit:
    embeddings, lm_head, norms, biases, the router.
    """
    quant = rows = 0
    for name, kind, params in module_table(arch):
        if kind in ("linear", "conv1d") and name != "lm_head":
            # transformers' bitsandbytes integration quantises GPT-2's Conv1D too (weight stored in x out)
            fout, fin = params["weight"] if kind == "linear" else params["weight"][::-1]
            quant += fout * fin
            rows += fout
        elif kind == "experts":
            for shape in params.values():
                quant += math.prod(shape)
                rows += shape[0] * shape[1]
    return quant, rows, total_parameters(arch) - quant


def _adafactor_state_bytes(shapes: list[tuple[int, ...]]) -> int:
    # transformers Adafactor (from memory): factored second moment, rows + cols fp32 values per matrix,
    # a full fp32 tensor for vectors; no first moment with the default beta1=None.
    total = 0
    for shape in shapes:
        if len(shape) >= 2:
            total += 4 * (math.prod(shape[:-1]) + math.prod(shape[:-2] + shape[-1:]))
        else:
            total += 4 * math.prod(shape)
    return total


@lru_cache(maxsize=64)
def _trainable_shapes_full(arch: Architecture) -> tuple[tuple[int, ...], ...]:
    out = []
    for name, _kind, params in module_table(arch):
        if name == "lm_head" and arch.tie_word_embeddings:
            continue
        out.extend(tuple(s) for s in params.values())
    return tuple(out)


@lru_cache(maxsize=64)
def _head_parameters(arch: Architecture) -> int:
    """Parameters of lm_head (tied or not)."""
    row = rows_by_name(arch).get("lm_head")
    return sum(math.prod(sh) for sh in row[2].values()) if row is not None else 0


@lru_cache(maxsize=128)
def _linear_weight_params(arch: Architecture, *, skip_first_attention_inputs: bool = False) -> int:
    """Parameters of every matmul weight (decoder linears, experts, lm_head, tied or not) and their biases."""
    total = 0
    first = f"model.layers.0.self_attn."
    for name, kind, params in module_table(arch):
        if kind not in ("linear", "conv1d", "experts"):
            continue
        if skip_first_attention_inputs and name.startswith(first) and name.rsplit(".", 1)[-1] in (
                "q_proj", "k_proj", "v_proj", "qkv_proj"):
            continue
        total += sum(math.prod(s) for s in params.values())
    return total


def _adapter_shapes(arch: Architecture, targets, modules_to_save, rank: int) -> list[tuple[int, int]]:
    """(lora_A, lora_B) weight shapes of every adapted module with a weight matrix."""
    rows = rows_by_name(arch)
    shapes: list[tuple[int, int]] = []
    for tname in resolve_targets(arch, targets, list(modules_to_save) or None):
        if tname in rows:
            fout, fin = rows[tname][2]["weight"]
            shapes += [(rank, fin), (fout, rank)]
    return shapes


_RESOLVED_CACHE: dict = {}  # (arch, targets, modules_to_save) -> (names, leaf names); bounded below


def _resolved(arch: Architecture, targets, modules_to_save) -> tuple[tuple[str, ...], frozenset[str]]:
    """resolve_targets and the set of their last name components, once per architecture and targets."""
    try:
        key = (arch, _targets_key(arch, targets), _frozen(modules_to_save))
        hit = _RESOLVED_CACHE.get(key)
    except TypeError:
        hit = key = None
    if hit is None:
        names = tuple(resolve_targets(arch, targets, modules_to_save))
        hit = (names, frozenset(t.rsplit(".", 1)[-1] for t in names))
        if key is not None:
            if len(_RESOLVED_CACHE) >= 4096:
                _RESOLVED_CACHE.clear()
            _RESOLVED_CACHE[key] = hit
    return hit


@lru_cache(maxsize=256)
def _first_lora_a(arch: Architecture, targets: tuple[str, ...], rank: int) -> int:
    """lora_A parameters of the adapted q/k/v (qkv) projections of the first layer."""
    widths = linear_modules(arch)
    total = 0
    for t in targets:
        leaf = t.rsplit(".", 1)[-1]
        if t.startswith("model.layers.0.self_attn.") and leaf in ("q_proj", "k_proj", "v_proj", "qkv_proj") \
                and leaf in widths:
            total += rank * widths[leaf][0]
    return total


def estimate_memory(inp: MemoryInputs) -> MemoryBreakdown:
    """Peak memory per GPU: model states, activations, logits and a fixed runtime overhead.

    Raises ValueError for settings outside the model (unknown method, storage or sharding, full
    fine-tuning of quantised weights, non-positive sizes) and :class:`NotEstimated` for an
    optimizer it does not model.
    """
    _validate(inp)
    arch = inp.arch
    notes: list[str] = []
    if inp.storage_note:
        notes.append(inp.storage_note)
    n_total = total_parameters(arch)
    mp = inp.mixed_precision is not None
    storage = inp.base_storage
    if inp.method == "qlora" and storage not in _QUANT:
        notes.append(f"qlora with base_storage {storage}: counted as nf4 (QLoRA paper: NF4 base weights)")
        storage = "nf4"
    deepspeed = inp.sharding.startswith("zero")
    # DeepSpeed's bf16/fp16 engine casts the module to 16-bit and keeps fp32 master weights and
    # fp32 optimizer states for what trains (ZeRO paper sec. 3.1: 2 + 2 + 12 bytes per parameter);
    # it runs the 16-bit module directly, without torch.autocast (from memory of DeepSpeed's engine)
    ds_cast = deepspeed and mp
    if ds_cast and storage == "fp32":
        notes.append(f"DeepSpeed with {inp.mixed_precision} casts the fp32-loaded weights to {inp.mixed_precision}")
        storage = inp.mixed_precision
    autocast = (inp.autocast if inp.autocast is not None else mp) and not ds_cast
    fp32_forward = storage == "fp32"

    # --- weights of the base model -------------------------------------------------------------
    if storage in _QUANT:
        quant, rows, rest = _quantised_rows(arch)
        bits = quantised_bits_per_param(storage, inp.double_quant)
        base_bytes = quant * bits / 8 + rest * 2
        if storage == "int8":
            base_bytes += rows * 4
            notes.append("int8 weights: 1 byte/param plus one fp32 scale per output row (LLM.int8(), from memory)")
        else:
            dq = "with" if inp.double_quant else "without"
            notes.append(
                f"{storage} weights {dq} double quantisation: {bits:.3f} bits/param "
                "(QLoRA paper sec. 3: 0.5 bit/param block constants, 0.127 with double quantisation)"
            )
        notes.append("embeddings, lm_head, norms and biases stay 16-bit under bitsandbytes quantisation")
        if arch.is_moe:
            notes.append("mixtral expert tensors counted as quantised (unverified for the transformers 5 fused layout)")
    else:
        base_bytes = n_total * _BYTES[storage]

    # --- trainable parameters and their states ---------------------------------------------------
    # bytes per trainable parameter: weight, gradient, fp32 master copy, one optimizer state value
    copies = 0
    if inp.method == "full":
        trainable = n_total
        if ds_cast:
            w_b, g_b, master_b, state_b = 2, 2, 4, 4
            notes.append(
                f"DeepSpeed mixed precision: {inp.mixed_precision} weights and gradients, fp32 master copy and "
                "fp32 optimizer states (ZeRO paper sec. 3.1: 2 + 2 + 12 = 16 bytes/param with Adam)"
            )
        elif storage == "fp32":
            w_b, g_b, master_b, state_b = 4, 4, 0, 4
            notes.append("fp32 weights: 4 B weights + 4 B gradients per parameter, fp32 optimizer states"
                         + (" (autocast computes in 16-bit; the fp32 weights are the master copy)" if autocast else ""))
        elif mp:
            w_b, g_b, master_b, state_b = 2, 2, 4, 4
            notes.append(
                "mixed precision: 16-bit weights and gradients, fp32 master copy "
                "(ZeRO paper sec. 3.1: 2 + 2 + 12 = 16 bytes/param with Adam)"
            )
        else:
            w_b, g_b, master_b, state_b = 2, 2, 0, 2
            notes.append("pure 16-bit training: gradients and optimizer states in the weights' 16-bit dtype")
        adapter_shapes = _trainable_shapes_full(arch)
        weights_bytes = base_bytes
        adapters = 0
    else:
        targets = inp.lora_targets
        try:
            trainable = lora_trainable_parameters(
                arch, rank=inp.lora_rank, targets=targets, modules_to_save=list(inp.modules_to_save) or None
            )
        except NoDefaultTargets:
            targets = "all-linear"
            notes.append("target_modules unset and PEFT has no default for this family: estimated with all-linear")
            trainable = lora_trainable_parameters(
                arch, rank=inp.lora_rank, targets=targets, modules_to_save=list(inp.modules_to_save) or None
            )
        rows = rows_by_name(arch)
        for name in modules_to_save_matches(arch, list(inp.modules_to_save)):
            copies += sum(math.prod(s) for k, r in rows.items() if k == name or k.startswith(name + ".") for s in r[2].values())
        if copies:
            notes.append(f"modules_to_save: {copies:,} parameters held twice (frozen original + trainable copy, PEFT)")
        adapters = trainable - copies
        if ds_cast:
            # the engine casts adapters and copies with the module; the optimizer keeps fp32 masters
            a_b = copy_b = 2
            master_b = 4
            notes.append(f"DeepSpeed mixed precision: adapters and copies in {inp.mixed_precision} with an fp32 master "
                         "copy and fp32 optimizer states (ZeRO paper sec. 3.1)")
        else:
            # PEFT get_peft_model(autocast_adapter_dtype=True) upcasts 16-bit adapter weights to fp32;
            # modules_to_save copies keep the base dtype (observed with PEFT 0.21, tests/reference).
            a_b, master_b = 4, 0
            copy_b = 4 if storage == "fp32" else 2
            notes.append("LoRA adapters in fp32 (PEFT autocast_adapter_dtype): 4 B weights + 4 B gradients per parameter")
            if copies:
                notes.append(
                    f"modules_to_save copies train in {'fp32' if copy_b == 4 else '16-bit'}: {copy_b} B weights, "
                    f"{copy_b} B gradients and {copy_b}-byte optimizer states per parameter, no master copy"
                )
        adapter_targets = targets  # the adapters' shapes, worked out only for an optimizer that needs them
        weights_bytes = base_bytes + adapters * a_b + copies * copy_b

    name = normalise_optimizer(inp.optimizer)
    if inp.method == "full":
        gradients_bytes = trainable * g_b
        master_bytes = trainable * master_b
        if name.startswith("adafactor"):
            optimizer_bytes = _adafactor_state_bytes(adapter_shapes)
        else:
            per_param, note = optimizer_state_bytes_per_param(name, state_bytes=state_b, sgd_momentum=inp.sgd_momentum)
            optimizer_bytes = trainable * per_param
            notes.append(note)
    else:
        gradients_bytes = adapters * a_b + copies * copy_b
        master_bytes = (adapters + copies) * master_b
        copy_state_b = 4 if ds_cast else copy_b
        if name.startswith("adafactor"):
            adapter_shapes = _adapter_shapes(arch, adapter_targets, inp.modules_to_save, inp.lora_rank)
            optimizer_bytes = _adafactor_state_bytes(adapter_shapes) + 4 * copies  # copies: upper bound
        else:
            per_param, note = optimizer_state_bytes_per_param(name, state_bytes=4, sgd_momentum=inp.sgd_momentum)
            copy_per_param, _ = optimizer_state_bytes_per_param(name, state_bytes=copy_state_b,
                                                                sgd_momentum=inp.sgd_momentum)
            optimizer_bytes = adapters * per_param + copies * copy_per_param
            notes.append(note)
    if name.startswith("adafactor"):
        notes.append("adafactor: factored second moment (rows + columns per matrix, fp32), no first moment (from memory)")
    if name.startswith("paged_"):
        notes.append(f"{name}: states can page to CPU memory under pressure; counted as resident on the GPU")

    # --- sharding (ZeRO paper Fig. 1: P_os divides optimizer states and master weights by N_d,
    # P_os+g also the gradients, P_os+g+p also the weights -- frozen ones included) -------------
    n = inp.num_gpus
    sharded = _SHARDED[inp.sharding] if n > 1 else ()
    if inp.sharding == "zero0":
        notes.append("DeepSpeed ZeRO stage 0: nothing partitioned")
    elif inp.sharding != "none" and n == 1:
        notes.append(f"{inp.sharding} on one GPU partitions nothing")
    if "optimizer" in sharded:
        optimizer_bytes /= n
        master_bytes /= n
    if "gradients" in sharded:
        gradients_bytes /= n
    if "weights" in sharded:
        weights_bytes /= n
    if sharded:
        notes.append(
            f"{inp.sharding} across {n} GPUs partitions {', '.join(sharded)} (ZeRO paper Fig. 1 formulas)"
        )
    if inp.offload_optimizer:
        optimizer_bytes = 0
        master_bytes = 0
        notes.append("optimizer states and fp32 master weights offloaded to CPU memory (DeepSpeed ZeRO-Offload, from memory)")

    # --- activations, autocast's weight copies, logits ----------------------------------------------
    # dtype of matmul outputs (C), of the residual stream (R); autocast over fp32 weights gives
    # every projection its own 16-bit input copy (measured with saved-tensor hooks, torch 2.13 on CPU)
    C = 2 if (autocast or not fp32_forward) else 4
    R = 4 if fp32_forward else 2
    cast_copies = autocast and fp32_forward
    frozen = inp.method != "full"
    leaves = frozenset()
    resolved: tuple[str, ...] = ()
    if frozen:
        try:
            resolved, leaves = _resolved(arch, inp.lora_targets, list(inp.modules_to_save) or None)
        except NoDefaultTargets:
            resolved, leaves = _resolved(arch, "all-linear", None)
    adapter_b = 2 if (autocast or ds_cast) else 4
    per_layer = layer_activation_bytes(
        arch,
        micro_batch=inp.micro_batch,
        seq_len=inp.seq_len,
        fused_attention=inp.fused_attention,
        act_bytes=C,
        frozen=frozen,
        lora_leaves=leaves,
        lora_rank=inp.lora_rank,
        adapter_act_bytes=adapter_b,
        residual_bytes=R,
        cast_copies=cast_copies,
        adapter_shared_input=fp32_forward and not autocast,
    )
    s, b, h = inp.seq_len, inp.micro_batch, arch.hidden_size
    sb = s * b
    sbh = sb * h
    saved_copies = set(modules_to_save_matches(arch, list(inp.modules_to_save))) if frozen else set()
    embed_trains = not frozen or "model.embed_tokens" in saved_copies
    head_trains = not frozen or "lm_head" in saved_copies or "lm_head" in resolved
    if cast_copies:
        notes.append("autocast over fp32 weights: the residual stream stays fp32 (4sbh) and each projection "
                     "keeps its own 16-bit input copy (measured with saved-tensor hooks, torch 2.13 on CPU)")
    if inp.gradient_checkpointing:
        # the layer input, kept (non-reentrant: by the recompute closure) in the residual dtype: R*sbh,
        # 2sbh in 16-bit as Korthikanti et al. Table 2, 4sbh with fp32 weights; the checkpoint also
        # keeps the inputs all layers share: the int64 position ids (batch 1) and, with eager
        # attention, the 4-D additive mask b*s*s in the residual dtype (measured, torch 2.13 on CPU)
        activations = arch.num_layers * R * sbh + 8 * s
        if not inp.fused_attention:
            activations += R * b * s * s
        activations += per_layer  # one layer recomputed at a time during backward
        notes.append(
            f"activation checkpointing: {R}sbh per layer kept (the layer input; Korthikanti et al. Table 2 "
            "give 2sbh in 16-bit) plus one layer's activations while it is recomputed"
        )
    else:
        activations = arch.num_layers * per_layer
        if frozen and not embed_trains:
            # the first layer's input norm saves nothing: the frozen embedding output needs no gradient
            activations -= 4 * sbh + 4 * sb
        notes.append(
            f"activations: {per_layer / sbh:.1f} sbh bytes per layer (own derivation for this layer type, "
            "checked with saved-tensor hooks; Korthikanti et al. Eq. 1 give 34 + 5as/h for GPT layers)"
        )
    if not inp.fused_attention:
        notes.append("eager attention keeps the a*s*s score matrices (fp32 softmax output"
                     + (" + its 16-bit copy)" if C == 2 else ")"))
    # final norm (fp32 input + rsqrt), its normalised output and the lm_head input when they train;
    # the rotary cos/sin tables (one (s, head_dim) pair shared by all layers, residual dtype); the
    # int64 token ids the embedding's and the loss's backward keep
    activations += 4 * sbh + 4 * sb
    if not frozen:
        activations += (4 if arch.family in ("gemma", "gemma2") else R) * sbh
    if head_trains:
        activations += (C if cast_copies else R) * sbh
    activations += 2 * s * arch.head_dim * R
    activations += 8 * sb * (2 if embed_trains else 1)

    # torch.autocast casts each fp32 weight to 16-bit at every matmul; the copy stays alive when the
    # matmul saves it for the input's gradient, i.e. when its input needs a gradient and it runs
    # outside a checkpointed layer (measured, torch 2.13 on CPU: nothing else keeps it): 2 bytes
    # per such weight. Frozen base: the first layer's q/k/v (and their lora_A) read the frozen
    # embedding output, which needs no gradient.
    weight_copies = 0
    first_free = frozen and not embed_trains
    head_params = _head_parameters(arch)
    if autocast and (fp32_forward or frozen):
        if inp.gradient_checkpointing:
            weight_copies = 2 * head_params if fp32_forward else 0  # lm_head runs outside the checkpoints
        else:
            if fp32_forward:
                weight_copies = 2 * _linear_weight_params(arch, skip_first_attention_inputs=first_free)
            if frozen:
                weight_copies += 2 * (adapters - (_first_lora_a(arch, resolved, inp.lora_rank) if first_free else 0))
        if weight_copies:
            notes.append("autocast's 16-bit copies of fp32 weights (adapters included), saved by their matmuls "
                         "until backward: 2 bytes per weight (measured, torch 2.13 on CPU)")

    tokens = inp.seq_len * inp.micro_batch
    # vocabulary-wide tensors, the peak alive at once (measured, torch 2.13 on CPU): the logits
    # (C bytes, held by the model output through backward), transformers' ForCausalLMLoss fp32
    # upcast (forward only; a no-op in fp32) and cross_entropy's saved fp32 log-softmax; the peak
    # comes at the start of backward: logits + saved log-softmax + the gradient arriving from the
    # loss + the log-softmax gradient = (C + 4 + 4 + 4) bytes per token and vocabulary entry
    logits_bytes = tokens * arch.vocab_size * (C + 12)
    if arch.family == "gemma2":  # final_logit_softcapping keeps a tanh output of the logits' size
        logits_bytes += tokens * arch.vocab_size * C
        notes.append("gemma2 final logit soft-capping keeps one more b*s*V tensor (own derivation)")
    notes.append(
        f"logits and loss: the transient peak of b*s*V tensors alive at once ({C + 12} bytes per token and "
        "vocabulary entry: logits, the saved fp32 log-softmax and the two fp32 gradients at the start of "
        "backward), not only the 4 bytes cross_entropy saves (measured, torch 2.13 on CPU)"
    )
    notes.append(f"runtime overhead {inp.overhead_bytes / 2**30:.2f} GiB (CUDA context etc.; common practice, no source)")

    parts = [weights_bytes, gradients_bytes, optimizer_bytes, master_bytes, activations, logits_bytes, weight_copies]
    ints = [int(math.ceil(x)) for x in parts]
    total = sum(ints) + inp.overhead_bytes
    return MemoryBreakdown(
        weights_bytes=ints[0],
        gradients_bytes=ints[1],
        optimizer_bytes=ints[2],
        master_weights_bytes=ints[3],
        activations_bytes=ints[4],
        logits_bytes=ints[5],
        overhead_bytes=inp.overhead_bytes,
        total_bytes=total,
        notes=tuple(notes),
        trainable_parameters=trainable,
        total_parameters=n_total,
        weight_copies_bytes=ints[6],
        recomputed_layer_bytes=per_layer if inp.gradient_checkpointing else 0,
    )


# ---------------------------------------------------------------------------------------------
# What would make it fit
# ---------------------------------------------------------------------------------------------

_EIGHT_BIT = MappingProxyType({"paged_adamw_32bit": "paged_adamw_8bit", "paged_adam_32bit": "paged_adam_8bit"})


def _single_changes(inp: MemoryInputs) -> list[tuple[str, dict]]:
    """Candidate changes, cheapest first (least effect on the result and speed of the run)."""
    out: list[tuple[str, dict]] = []
    if not inp.gradient_checkpointing:
        out.append(("turn on activation checkpointing (gradient_checkpointing: true)", {"gradient_checkpointing": True}))
    if inp.micro_batch > 1:
        half = inp.micro_batch // 2
        out.append((
            f"halve the micro-batch {inp.micro_batch} -> {half} and double gradient accumulation "
            "to keep the effective batch",
            {"micro_batch": half},
        ))
    if inp.micro_batch > 2:
        out.append((
            f"reduce the micro-batch {inp.micro_batch} -> 1 and multiply gradient accumulation by "
            f"{inp.micro_batch} to keep the effective batch",
            {"micro_batch": 1},
        ))
    opt = normalise_optimizer(inp.optimizer)
    if opt in _ADAM_32:
        target = _EIGHT_BIT.get(opt, "adamw_8bit")
        out.append((f"use an 8-bit optimizer (optim: {target})", {"optimizer": target}))
    if inp.num_gpus > 1 and inp.sharding not in ("zero3", "fsdp_full"):
        # estimated as DeepSpeed ZeRO-3 runs it: a run in 16-bit gets fp32 master weights and fp32
        # states (ZeRO paper sec. 3.1), so the hint carries the same 16 bytes/param the estimate of
        # that config would
        half = inp.mixed_precision or (inp.base_storage if inp.base_storage in ("bf16", "fp16") else None)
        if half is None and inp.autocast:
            half = "bf16"
        out.append((
            f"shard weights, gradients and optimizer states across the {inp.num_gpus} GPUs (DeepSpeed ZeRO-3"
            + (f" with {half}: fp32 master weights and states" if half else "") + ")",
            {"sharding": "zero3", "mixed_precision": half},
        ))
    if inp.method == "full":
        out.append((
            f"train LoRA adapters (r={inp.lora_rank}, all linear layers) instead of all weights",
            {"method": "lora", "lora_targets": inp.lora_targets or "all-linear"},
        ))
    if inp.method != "qlora" and inp.base_storage not in ("nf4", "fp4"):
        out.append((
            "load the base in 4-bit NF4 with double quantisation and train adapters (QLoRA)",
            {"method": "qlora", "base_storage": "nf4", "double_quant": True,
             "lora_targets": inp.lora_targets or "all-linear"},
        ))
    elif inp.base_storage in ("nf4", "fp4") and not inp.double_quant:
        out.append(("turn on double quantisation (bnb_4bit_use_double_quant: true)", {"double_quant": True}))
    return out


def changes_that_fit(inp: MemoryInputs, capacity_bytes: int) -> list[tuple[str, MemoryInputs, MemoryBreakdown]]:
    """Changes (single, then combined) after which the estimate fits ``capacity_bytes``, cheapest first.

    Each entry is (description, changed inputs, new estimate). Combinations are tried only when no
    single change fits, and a combination is left out when one of its parts already fits. Empty
    when nothing fits.
    """
    singles = _single_changes(inp)
    fields = dict(zip(MemoryInputs._record_fields, inp.__getstate__()))
    fits: list[tuple[tuple[int, ...], str, MemoryInputs, MemoryBreakdown]] = []

    def attempt(idx: tuple[int, ...]):
        changes: dict = {}
        for i in idx:
            if set(singles[i][1]) & set(changes):
                return None  # two changes of the same setting (e.g. two micro-batch sizes)
            changes.update(singles[i][1])
        new = MemoryInputs(**dict(fields, **changes))  # ``replaced``, from the fields read once
        try:
            est = estimate_memory(new)
        except ValueError:
            return None
        if est.total_bytes <= capacity_bytes:
            return new, est
        return None

    for size in range(1, len(singles) + 1):
        for idx in itertools.combinations(range(len(singles)), size):
            if any(set(prev).issubset(idx) for prev, *_ in fits):
                continue
            got = attempt(idx)
            if got:
                label = "; ".join(singles[i][0] for i in idx)
                fits.append((idx, label, got[0], got[1]))
        if fits:
            break
    fits.sort(key=lambda f: (len(f[0]), f[0]))
    return [(label, new, est) for _idx, label, new, est in fits]
