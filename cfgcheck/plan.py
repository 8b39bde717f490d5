"""The derived run: parameters, adapter scale, batch and steps, and the memory estimate per GPU.

One function, ``derive_plan``, turns a typed view (plus the command-line knowledge: GPU, GPU
count, rows) into numbers. The memory rule and ``cfgcheck derive`` both use it, so what the rule
says and what the plan shows cannot drift apart.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from types import MappingProxyType
from typing import Any

from ._records import guarded_repr
from .knowledge.hardware import Gpu
from .memo import remembered
from .knowledge.memory import MemoryBreakdown, MemoryInputs, changes_that_fit, estimate_memory
from .knowledge import models as _models
from .knowledge.models import Architecture, UnsupportedFamily, lora_scale, total_parameters
from .schedule import Schedule, derive_for, per_device_for, resolve_interval
from .defaults import ALL_LINEAR_WORDS
from .run import _offloaded, _section, own_fsdp
from .view import RunView

DEFAULT_SEQ_LEN = 2048  # assumed when the config sets none (common practice, no source)
_UNREAD = object()  # an argument the caller left out (None is a value)

_DTYPES = MappingProxyType({"bfloat16": "bf16", "bf16": "bf16", "float16": "fp16", "fp16": "fp16", "half": "fp16",
           "float32": "fp32", "fp32": "fp32", "float": "fp32"})


class Plan:
    method: str | None
    method_stated: bool
    model_ref: str | None
    arch: Architecture | None
    total_parameters: int | None
    trainable_parameters: int | None
    adapter_scale: float | None
    effective_lr: float | None
    learning_rate: float | None
    schedule: Schedule | None
    tokens_per_step: int | None
    seq_len: int | None
    seq_len_assumed: bool
    warmup_steps: int | None
    cadence: dict[str, int | None]
    memory_inputs: MemoryInputs | None
    memory: MemoryBreakdown | None
    memory_problem: str | None  # why there is no estimate
    gpu: Gpu | None
    assumptions: list[str]  # guesses: nothing says these (words)
    defaults: list[str]  # runner and trainer defaults used (words)
    supplied: list[tuple[str, str]]  # (origin, words): linked, launch, flag
    context: str  # the launch context the plan used, in words
    gpus_assumed: bool  # the GPU count matters (sharded) and nothing names it
    load_note: str | None  # which load-dtype default the estimate used, in words
    # the learning-rate schedule as written (None: not written), its kwargs, and the strategy
    # words of evaluation, saving and logging (None: not written) -- what the pictures draw
    scheduler: str | None
    scheduler_kwargs: dict
    strategies: dict[str, str | None]

    __slots__ = ('method', 'method_stated', 'model_ref', 'arch', 'total_parameters', 'trainable_parameters', 'adapter_scale', 'effective_lr', 'learning_rate', 'schedule', 'tokens_per_step', 'seq_len', 'seq_len_assumed', 'warmup_steps', 'cadence', 'memory_inputs', 'memory', 'memory_problem', 'gpu', 'assumptions', 'defaults', 'supplied', 'context', 'gpus_assumed', 'load_note', 'scheduler', 'scheduler_kwargs', 'strategies')

    def __init__(self, method, method_stated, model_ref, arch, total_parameters=None, trainable_parameters=None, adapter_scale=None, effective_lr=None, learning_rate=None, schedule=None, tokens_per_step=None, seq_len=None, seq_len_assumed=False, warmup_steps=None, cadence=None, memory_inputs=None, memory=None, memory_problem=None, gpu=None, assumptions=None, defaults=None, supplied=None, context="", gpus_assumed=False, load_note=None, scheduler=None, scheduler_kwargs=None, strategies=None):
        self.method = method
        self.method_stated = method_stated
        self.model_ref = model_ref
        self.arch = arch
        self.total_parameters = total_parameters
        self.trainable_parameters = trainable_parameters
        self.adapter_scale = adapter_scale
        self.effective_lr = effective_lr
        self.learning_rate = learning_rate
        self.schedule = schedule
        self.tokens_per_step = tokens_per_step
        self.seq_len = seq_len
        self.seq_len_assumed = seq_len_assumed
        self.warmup_steps = warmup_steps
        self.cadence = {} if cadence is None else cadence
        self.memory_inputs = memory_inputs
        self.memory = memory
        self.memory_problem = memory_problem
        self.gpu = gpu
        self.assumptions = [] if assumptions is None else assumptions
        self.defaults = [] if defaults is None else defaults
        self.supplied = [] if supplied is None else supplied
        self.context = context
        self.gpus_assumed = gpus_assumed
        self.load_note = load_note
        self.scheduler = scheduler
        self.scheduler_kwargs = {} if scheduler_kwargs is None else scheduler_kwargs
        self.strategies = {} if strategies is None else strategies

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(method={self.method!r}, method_stated={self.method_stated!r}, model_ref={self.model_ref!r}, arch={self.arch!r}, total_parameters={self.total_parameters!r}, trainable_parameters={self.trainable_parameters!r}, adapter_scale={self.adapter_scale!r}, effective_lr={self.effective_lr!r}, learning_rate={self.learning_rate!r}, schedule={self.schedule!r}, tokens_per_step={self.tokens_per_step!r}, seq_len={self.seq_len!r}, seq_len_assumed={self.seq_len_assumed!r}, warmup_steps={self.warmup_steps!r}, cadence={self.cadence!r}, memory_inputs={self.memory_inputs!r}, memory={self.memory!r}, memory_problem={self.memory_problem!r}, gpu={self.gpu!r}, assumptions={self.assumptions!r}, defaults={self.defaults!r}, supplied={self.supplied!r}, context={self.context!r}, gpus_assumed={self.gpus_assumed!r}, load_note={self.load_note!r}, scheduler={self.scheduler!r}, scheduler_kwargs={self.scheduler_kwargs!r}, strategies={self.strategies!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.method, self.method_stated, self.model_ref, self.arch, self.total_parameters, self.trainable_parameters, self.adapter_scale, self.effective_lr, self.learning_rate, self.schedule, self.tokens_per_step, self.seq_len, self.seq_len_assumed, self.warmup_steps, self.cadence, self.memory_inputs, self.memory, self.memory_problem, self.gpu, self.assumptions, self.defaults, self.supplied, self.context, self.gpus_assumed, self.load_note, self.scheduler, self.scheduler_kwargs, self.strategies) == (other.method, other.method_stated, other.model_ref, other.arch, other.total_parameters, other.trainable_parameters, other.adapter_scale, other.effective_lr, other.learning_rate, other.schedule, other.tokens_per_step, other.seq_len, other.seq_len_assumed, other.warmup_steps, other.cadence, other.memory_inputs, other.memory, other.memory_problem, other.gpu, other.assumptions, other.defaults, other.supplied, other.context, other.gpus_assumed, other.load_note, other.scheduler, other.scheduler_kwargs, other.strategies)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    @property
    def rslora_alpha(self) -> int | None:
        """alpha ~ sqrt(hidden_size) under rank-stabilised scaling (a rule of thumb, no source)."""
        return math.isqrt(self.arch.hidden_size) if self.arch is not None else None

    @property
    def capacity_bytes(self) -> int | None:
        return self.gpu.memory_bytes if self.gpu else None

    def as_dict(self) -> dict[str, Any]:
        s = self.schedule
        mem = None
        if self.memory is not None:
            m = self.memory
            mem = {"weights_bytes": m.weights_bytes, "gradients_bytes": m.gradients_bytes,
                   "optimizer_bytes": m.optimizer_bytes, "master_weights_bytes": m.master_weights_bytes,
                   "weight_copies_bytes": m.weight_copies_bytes,
                   "activations_bytes": m.activations_bytes, "logits_bytes": m.logits_bytes,
                   "overhead_bytes": m.overhead_bytes, "total_bytes": m.total_bytes,
                   "capacity_bytes": self.capacity_bytes, "notes": list(m.notes)}
        return {
            "method": self.method,
            "model": self.model_ref,
            "model_source": self.arch.source if self.arch else None,
            "model_entry": (self.arch.entry or None) if self.arch else None,
            "model_match": (self.arch.how or None) if self.arch else None,
            "model_assumed": self.arch.assumed if self.arch else None,
            "active_parameters": _models.active_parameters(self.arch) if self.arch and self.arch.is_moe else None,
            "total_parameters": self.total_parameters,
            "trainable_parameters": self.trainable_parameters,
            "trainable_fraction": (self.trainable_parameters / self.total_parameters
                                   if self.trainable_parameters and self.total_parameters else None),
            "adapter_scale": self.adapter_scale,
            "rslora_alpha_suggestion": self.rslora_alpha,
            "learning_rate": self.learning_rate,
            "effective_adapter_learning_rate": self.effective_lr,
            "effective_batch_size": s.effective_batch if s else None,
            "tokens_per_step": self.tokens_per_step,
            "sequence_length": self.seq_len,
            "steps_per_epoch": s.steps_per_epoch if s else None,
            "total_steps": s.total_steps if s else None,
            "warmup_steps": self.warmup_steps,
            "eval_every_steps": self.cadence.get("eval"),
            "save_every_steps": self.cadence.get("save"),
            "logging_every_steps": self.cadence.get("logging"),
            "gpu": self.gpu.name if self.gpu else None,
            "memory": mem,
            "memory_problem": self.memory_problem,
            "assumptions": list(self.assumptions),
            "defaults": list(self.defaults),
            "supplied": [{"origin": o, "note": n} for o, n in self.supplied],
            "launch_context": self.context,
            "sharding": self.memory_inputs.sharding if self.memory_inputs else None,
            "num_gpus": self.schedule.gpus if self.schedule else None,
        }


def _storage(view: RunView, arch: Architecture | None, method: str, plan: Plan) -> str:
    if method == "qlora" or view.effective_on("quant.load_4bit"):
        qf = view.effective("quant.type_4bit")
        qtype = qf.value if qf is not None else None
        if qtype is None:
            plan.defaults.append("bnb_4bit_quant_type not set: bitsandbytes' own default fp4")
        return "nf4" if str(qtype or "fp4").lower() == "nf4" else "fp4"
    if view.effective_on("quant.load_8bit") or view.effective_value("quant.bits") == 8:
        return "int8"
    dtype = view.effective_value("model.dtype")
    if isinstance(dtype, str):
        word = dtype.strip().lower()
        if word == "auto" and arch is not None and arch.torch_dtype:
            word = arch.torch_dtype.lower()
        if word in _DTYPES:
            return _DTYPES[word]
    if dtype is None and method != "full" and not (arch is not None and arch.torch_dtype):
        return "bf16" if (view.effective_on("precision.bf16") or not view.effective_on("precision.fp16")) else "fp16"
    if dtype is not None and str(dtype).strip().lower() != "auto":
        plan.load_note = f"torch_dtype {dtype!r} not understood: weights loaded in fp32 assumed"
        plan.assumptions.append(plan.load_note)
        return "fp32"
    return _default_load_storage(arch, plan)


# --- the load dtype when the config names none (memory estimate input) --------------------------
# transformers 5.x from_pretrained turns dtype=None into "auto": the checkpoint's dtype from its
# config.json (transformers 5.24 modeling_utils.from_pretrained); 4.x loaded fp32
# (torch.get_default_dtype()). The references are pinned at 5.x, so the 5.x default applies.
LOAD_DEFAULT_VERSION = "transformers 5"


def _default_load_storage(arch: Architecture | None, plan: Plan) -> str:
    stored = _DTYPES.get(str(arch.torch_dtype).lower()) if arch is not None and arch.torch_dtype else None
    if stored is not None:
        plan.load_note = (f"no torch_dtype: weights loaded in the checkpoint's dtype {stored} "
                          f"({LOAD_DEFAULT_VERSION} default dtype='auto'; transformers 4 loaded fp32)")
        plan.defaults.append(plan.load_note)  # a defined default of the pinned release, not a guess
        return stored
    plan.load_note = ("no torch_dtype and the checkpoint's dtype unknown: weights loaded in fp32 assumed "
                      "(the torch default dtype)")
    plan.assumptions.append(plan.load_note)
    return "fp32"


def _sharding(view: RunView) -> str:
    """Sharding of a view that was not opened (``cfgcheck.run`` says it for opened runs)."""
    stage = view.effective_value("runtime.zero_stage")
    for attached in view.attached:
        stage = stage if stage is not None else attached.value("runtime.zero_stage")
    if isinstance(stage, int) and not isinstance(stage, bool) and stage in (0, 1, 2, 3):
        return f"zero{stage}"  # zero0: DeepSpeed without partitioning (still fp32 master weights)
    fsdp = view.value("runtime.fsdp")
    if isinstance(fsdp, str):
        if "full_shard" in fsdp or "hybrid_shard" in fsdp:
            return "fsdp_full"
        if "shard_grad_op" in fsdp:
            return "fsdp_grad_op"
    return "none"


def _mixed(view: RunView, storage: str, sharding: str, wants: Any = _UNREAD) -> str | None:
    """``wants``: what _wants_16bit says of the view, when the caller has asked it."""
    if wants is _UNREAD:
        wants = _wants_16bit(view)
    if wants is None:
        return None
    if storage == "fp32" or sharding.startswith("zero"):
        return wants  # fp32 master weights (autocast from fp32, or DeepSpeed's master copy)
    return None  # 16-bit weights trained directly: no master copy (measured, see knowledge.memory)


def _words(f) -> str:
    return f.note or f"{f.name} = {f.value}"


_TARGETS_AT = MemoryInputs._record_fields.index("lora_targets")


_ESTIMATE_CACHE: dict = {}  # memo of _estimate (a cache, bounded below)
# estimates kept, the oldest let go first: an estimate with its worded parts is about 1 KiB, and
# configs that share inputs (one recipe's runs) come close together; a 2,000-file corpus had 513
# distinct inputs among 688 estimates
ESTIMATES_KEPT = 256


def _estimate(inputs: MemoryInputs) -> MemoryBreakdown:
    """estimate_memory, once for the same inputs (configs of one recipe share them). A pure
    function of its inputs (the model's shapes among them), so the answer is kept across runs
    like the adapter counts of knowledge.models; an estimate that raises is not kept."""
    key = inputs
    targets = inputs.lora_targets
    if isinstance(targets, list):  # a written list: the same names (and their type) make the key
        fields = inputs.__getstate__()  # the fields in order
        key = (fields[:_TARGETS_AT] + (tuple(targets),) + fields[_TARGETS_AT + 1:], list)
    try:
        hit = _ESTIMATE_CACHE.get(key)
    except TypeError:  # something unhashable inside: work it out each time
        return estimate_memory(inputs)
    if hit is None:
        hit = estimate_memory(inputs)
        if len(_ESTIMATE_CACHE) >= ESTIMATES_KEPT:
            del _ESTIMATE_CACHE[next(iter(_ESTIMATE_CACHE))]  # the oldest kept
        _ESTIMATE_CACHE[key] = hit
    return hit


def model_of(view: RunView, file: str, cwd: Path | None, declared=()) -> Architecture | None:
    """The base model's architecture when it can be known offline (cached on the view)."""
    if view.model_found is not None:
        return view.model_found[0]
    ref = view.value("model.ref")
    arch = None
    if isinstance(ref, str) and ref.strip():
        folder = os.path.dirname(file) if file and not file.startswith("<") else None
        here = str(cwd) if cwd else os.getcwd()

        def resolve():
            parent = Path(file).parent if folder is not None else None
            return _models.resolve_model(ref.strip(), config_dir=parent, cwd=cwd or Path(here), declared=declared)

        try:  # the same reference from the same folder: looked up once per run (cfgcheck.memo)
            key = (ref.strip(), folder, here, declared)
            hash(key)
        except TypeError:
            arch = resolve()
        else:
            arch = remembered("resolve_model", key, resolve)
    view.model_found = (arch,)
    return arch


def derive_plan(view: RunView, arch: Architecture | None, *, gpu: Gpu | None, gpus: int | None,
                rows: int | None, describe: bool = True) -> Plan:
    """The derived run of an opened view (``cfgcheck.run.open_view``): launch context, linked
    files and runner defaults are read through ``view.effective``; ``gpus`` as the run resolved.

    ``describe=False``: only the memory estimate (``memory``, ``memory_problem``, ``memory_inputs``)
    and what it rests on are worked out the same way; the words and numbers that only describe the
    run (launch context, defaults used, learning rate, schedule intervals, the assumptions the
    estimate rests on beyond the sequence length and load dtype) are left out."""
    run = view.run
    ref = view.value("model.ref")
    plan = Plan(method=view.method, method_stated=view.method_stated,
                model_ref=ref if isinstance(ref, str) else None, arch=arch, gpu=gpu)
    if describe:
        if run is not None:
            plan.context = run.context_words()
        sched = derive_for(view, gpus=gpus, rows=rows)
        plan.schedule = sched
        _describe_defaults(view, plan, sched)
        n_gpus, per_device = sched.gpus, sched.per_device
    else:  # of the schedule the estimate reads only the per-device batch and the GPU count
        n_gpus, per_device = gpus or 1, per_device_for(view)
    seq_f = view.effective("data.seq_len")
    seq = seq_f.value if seq_f is not None else None
    if not isinstance(seq, int) or seq <= 0:
        seq, plan.seq_len_assumed = DEFAULT_SEQ_LEN, True
        plan.assumptions.append(f"sequence length {DEFAULT_SEQ_LEN} because the file names none "
                                f"(set max_length, or the runner's own sequence-length key)")
    plan.seq_len = seq
    if describe:
        _describe_run(view, plan, sched, seq)
    return _derive_memory(view, arch, plan, run, n_gpus, per_device, ref, describe)


def _describe_defaults(view: RunView, plan: Plan, sched: Schedule) -> None:
    aside = {f.name for f in view.out_of_range}  # written, but past any run's range
    for name in sched.defaults_used:
        if name in aside:  # written past any run's range: the default stands in, a guess
            plan.assumptions.append(f"{name} out of range, set aside: the trainer default")
        else:
            plan.defaults.append(f"{name} not set: the trainer default")
    for name in sorted(view.supplied):
        f = view.supplied[name]
        if f.origin == "default" and f.note:
            plan.defaults.append(f.note)
        elif f.note:
            plan.supplied.append((f.origin, f.note))


def _describe_run(view: RunView, plan: Plan, sched: Schedule, seq: int) -> None:
    if sched.effective_batch:
        plan.tokens_per_step = sched.effective_batch * seq
    lr = view.value("optim.lr")
    plan.learning_rate = float(lr) if isinstance(lr, (int, float)) and not isinstance(lr, bool) else None
    sch, kw = view.value("optim.scheduler"), view.value("optim.scheduler_kwargs")
    plan.scheduler = sch.strip() if isinstance(sch, str) and sch.strip() else None
    plan.scheduler_kwargs = dict(kw) if isinstance(kw, dict) else {}
    for what in ("eval", "save", "logging"):
        word = view.value(f"cadence.{what}_strategy")
        plan.strategies[what] = str(word).strip().lower() if isinstance(word, (str, bool)) else None
    rank, alpha = view.effective_value("adapter.rank"), view.effective_value("adapter.alpha")
    if view.is_adapter and isinstance(rank, int) and rank > 0 and isinstance(alpha, (int, float)):
        plan.adapter_scale = lora_scale(alpha, rank, view.is_on("adapter.rslora"))
        if plan.learning_rate is not None:
            plan.effective_lr = plan.learning_rate * plan.adapter_scale
    total = sched.total_steps
    if total:
        ws, wr = view.value("optim.warmup_steps"), view.value("optim.warmup_ratio")
        if isinstance(ws, (int, float)) and ws > 0 and math.isfinite(ws):
            plan.warmup_steps = resolve_interval(float(ws), total)
        elif isinstance(wr, (int, float)) and wr > 0 and math.isfinite(wr):
            plan.warmup_steps = math.ceil(total * wr)  # transformers get_warmup_steps (4.x)
        for what, name in (("eval", "cadence.eval_steps"), ("save", "cadence.save_steps"),
                           ("logging", "cadence.logging_steps")):
            v = view.value(name)
            if isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0 and math.isfinite(v):
                plan.cadence[what] = resolve_interval(float(v), total)


def no_estimate(view: RunView, arch: Architecture | None, ref: Any = _UNREAD) -> str | None:
    """Why there can be no memory estimate, known before any number is worked out (the plan's
    ``memory_problem`` then), or None. ``ref``: the view's model.ref when the caller has read it."""
    if arch is None:
        if ref is _UNREAD:
            ref = view.value("model.ref")
        return "model not known offline" + (f" ({ref!r})" if isinstance(ref, str) else " (no model named)")
    if view.method not in ("full", "lora", "qlora"):
        return "the training method is not known from this file"
    unmodelled = unmodelled_optimizer(view)
    if unmodelled:
        return f"optimizer not modelled by the estimate ({unmodelled})"
    return None


def _derive_memory(view: RunView, arch: Architecture | None, plan: Plan, run, gpus: int, per_device, ref,
                   describe: bool = True) -> Plan:
    problem = no_estimate(view, arch, ref)
    if problem is not None:
        plan.memory_problem = problem
        return plan
    try:
        plan.total_parameters = total_parameters(arch)
        inputs = memory_inputs(view, arch, plan, gpus=gpus, per_device=per_device)
        if inputs.sharding != "none" and (run is None or run.gpus is None):
            plan.gpus_assumed = True
            if describe:
                plan.assumptions.append(f"1 GPU because nothing names the GPU count, so {inputs.sharding} "
                                        f"shards nothing (pass --gpus N or --launch FILE)")
        # the words of what the estimate rests on (the GPU count, offloaded parameters, sharding
        # nothing names) change no number: only a described plan looks them up
        if describe:
            if _offload_params(view):
                plan.assumptions.append("the weights on the GPU, though the launch offloads parameters to CPU "
                                        "memory (not modelled: the estimate is an upper bound)")
            if inputs.sharding == "none" and not _sharding_known(view):
                plan.assumptions.append("no ZeRO/FSDP sharding because no launch context names it "
                                        "(pass --launch FILE, or --gpus 1 for a single-GPU run)")
        plan.memory_inputs = inputs
        plan.memory = _estimate(inputs)
        plan.trainable_parameters = plan.memory.trainable_parameters
        plan.total_parameters = plan.memory.total_parameters or plan.total_parameters
    except (UnsupportedFamily, ValueError) as exc:
        plan.memory_problem = str(exc)
    return plan


# recipe-runner switches for optimizers whose states the estimate does not model (GaLore projects
# gradients to a low rank, layer-wise variants update one layer at a time, BAdam trains one block
# at a time): an AdamW-based number would be wrong, so there is no estimate (LLaMA-Factory
# FinetuningArguments use_galore / use_apollo / use_badam ...)
_UNMODELLED_SWITCHES = ("use_galore", "use_apollo", "use_badam", "use_adam_mini", "use_muon")


def unmodelled_optimizer(view: RunView) -> str | None:
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    if data.keys().isdisjoint(_UNMODELLED_SWITCHES):
        return None
    for key in _UNMODELLED_SWITCHES:
        if data.get(key) is True:
            return f"{key}: true"
    return None  # optimizer names (optim: galore_adamw, ...): knowledge.memory says which it models


def _sharding_known(view: RunView) -> bool:
    """Whether anything says how the run shards: a launch context, the config's own DeepSpeed or
    FSDP settings, or a single GPU (nothing to shard across). Without one, an accelerate launch
    may still take ZeRO/FSDP from the machine's default accelerate config."""
    run = view.run
    if run is not None and (run.launch.known or (run.gpus == 1 and run.gpus_origin != "assumed")):
        return True
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    return any(view.get(n) is not None for n in ("runtime.deepspeed", "runtime.fsdp", "runtime.zero_stage",
                                                   "runtime.distributed")) or bool(view.attached) \
        or "fsdp" in data or "dist_config" in data


def _targets(view: RunView):
    targets = view.effective_value("adapter.targets")
    if isinstance(targets, str):
        if targets.strip().lower() in ALL_LINEAR_WORDS:
            return "all-linear"
        if "," in targets:  # a comma-separated list (LLaMA-Factory's lora_target)
            return [t.strip() for t in targets.split(",") if t.strip()]
    if isinstance(targets, list) and len(targets) == 1 and str(targets[0]).strip().lower() in ALL_LINEAR_WORDS:
        return "all-linear"
    return targets


def memory_inputs(view: RunView, arch: Architecture, plan: Plan, *, gpus: int,
                  per_device: Any = None) -> MemoryInputs:
    """What the estimate needs of a view. ``per_device``: the per-device batch as the schedule
    reads it (None: the plan's schedule says it)."""
    method = view.method
    storage = _storage(view, arch, method, plan)
    run = view.run
    sharding = run.sharding if run is not None else _sharding(view)
    targets = _targets(view)
    save = view.value("adapter.save_modules")
    if per_device is None and plan.schedule:
        per_device = plan.schedule.per_device
    pd = per_device if per_device else 1
    attention = view.value("model.attention")
    offload = bool(run is not None and run.offload_optimizer) or _offload_linked(view)
    wants = _wants_16bit(view)
    return MemoryInputs(
        arch=arch,
        method=method,
        base_storage=storage,
        double_quant=view.effective_on("quant.double"),
        optimizer=str(view.value("optim.name") or "adamw_torch"),
        mixed_precision=_mixed(view, storage, sharding, wants),
        micro_batch=int(pd),
        seq_len=int(plan.seq_len or DEFAULT_SEQ_LEN),
        gradient_checkpointing=view.effective_on("runtime.gradient_checkpointing"),
        fused_attention=not (isinstance(attention, str) and attention.lower() == "eager"),
        lora_rank=int(view.effective_value("adapter.rank") or 8),
        lora_targets=targets if targets is not None else None,
        modules_to_save=tuple([save] if isinstance(save, str) else (save or ())),
        num_gpus=max(1, gpus or 1),
        sharding=sharding,
        offload_optimizer=offload,
        # the forward runs under torch.autocast when the trainer's 16-bit flag is on (outside DeepSpeed)
        autocast=wants is not None,
        storage_note=plan.load_note,
    )


def _offload_params(view: RunView) -> bool:
    """ZeRO-3 parameter offload (offload_param.device cpu/nvme) or FSDP CPU offload of parameters."""
    run = view.run
    if run is not None and (run.launch.offload_params or run.launch.fsdp_offload):
        return True
    if own_fsdp(view)[1]:
        return True
    return _offload_linked(view, "offload_param")


def _offload_linked(view: RunView, what: str = "offload_optimizer") -> bool:
    """Whether a linked DeepSpeed file offloads ``what`` (offload_optimizer / offload_param)."""
    return any(_offloaded(_section(sub.doc.data, "zero_optimization", what)) for sub in view.attached)


def _wants_16bit(view: RunView) -> str | None:
    wants = "bf16" if view.effective_on("precision.bf16") else "fp16" if view.effective_on("precision.fp16") else None
    mixed = view.effective_value("precision.mixed")
    if wants is None and isinstance(mixed, str) and mixed.lower() in ("bf16", "fp16"):
        return mixed.lower()
    return wants


def fitting_changes(plan: Plan) -> list[tuple[str, MemoryBreakdown]]:
    if plan.memory_inputs is None or plan.capacity_bytes is None:
        return []
    return [(label, est) for label, _inp, est in changes_that_fit(plan.memory_inputs, plan.capacity_bytes)]

