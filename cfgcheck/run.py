"""Opening a run: the one way from a config to everything the run will really have.

``open_view`` takes a view built from one document and attaches, in this order: the files it
links (a trainer's ``deepspeed: ds.json``), the launch context (``--launch FILE``, the project
file's ``launch`` per glob, a launch script that names the config), the runner's defaults
(``cfgcheck.defaults``), the GPU count from the command line or the project profile, and what
is assumed because nothing says it. ``lint`` (the engine), ``derive`` and ``fix`` (which lints
through the engine) all open runs here, so they judge the same run.

Every value that does not come from the file itself is a ``Field`` in ``view.supplied`` with its
``origin`` ("linked", "launch", "default", "flag", "assumed") and a ``note`` in words.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path
from types import MappingProxyType
from typing import Any

from ._records import guarded_repr
from . import compose, load as loadmod, reads
from .defaults import DEFAULTS, Default
from .load import LoadError
from .layouts import LAYOUTS
from .links import attach_linked
from .sweep import split_overrides
from .view import Field, RunView, build_view, detect_layout

_DISTRIBUTED_WORDS = MappingProxyType({"DEEPSPEED": "DeepSpeed", "FSDP": "FSDP", "MULTI_GPU": "data parallel (DDP)",
                      "NO": "one process", "MEGATRON_LM": "Megatron-LM", "XLA": "XLA"})


class LaunchContext:
    """How the run is started, from launch files and scripts. None: not said anywhere."""

    files: list[str]  # what was read, in order
    views: list[RunView]  # their views (DeepSpeed JSON, accelerate)
    problems: list[tuple[str, str]]  # (file, why it was not read)
    processes: int | None  # processes over all machines (= GPUs)
    processes_from: str  # in words
    machines: int | None
    distributed: str | None  # accelerate's distributed_type, e.g. "DEEPSPEED"
    zero_stage: int | None
    offload_optimizer: bool
    offload_params: bool
    fsdp: str | None  # "full_shard" | "shard_grad_op" | "hybrid_shard" | "no_shard"
    fsdp_offload: bool
    activation_checkpointing: bool | None
    mixed_precision: str | None  # "bf16" | "fp16" | "fp8" | "no"
    mixed_precision_from: str
    mixed_precision_deepspeed: bool  # from a DeepSpeed file (checked by its own rule)
    script: Any  # scripts.ScriptLaunch when a launch script names the config

    __slots__ = ('files', 'views', 'problems', 'processes', 'processes_from', 'machines', 'distributed', 'zero_stage', 'offload_optimizer', 'offload_params', 'fsdp', 'fsdp_offload', 'activation_checkpointing', 'mixed_precision', 'mixed_precision_from', 'mixed_precision_deepspeed', 'script')

    def __init__(self, files=None, views=None, problems=None, processes=None, processes_from="", machines=None, distributed=None, zero_stage=None, offload_optimizer=False, offload_params=False, fsdp=None, fsdp_offload=False, activation_checkpointing=None, mixed_precision=None, mixed_precision_from="", mixed_precision_deepspeed=False, script=None):
        self.files = [] if files is None else files
        self.views = [] if views is None else views
        self.problems = [] if problems is None else problems
        self.processes = processes
        self.processes_from = processes_from
        self.machines = machines
        self.distributed = distributed
        self.zero_stage = zero_stage
        self.offload_optimizer = offload_optimizer
        self.offload_params = offload_params
        self.fsdp = fsdp
        self.fsdp_offload = fsdp_offload
        self.activation_checkpointing = activation_checkpointing
        self.mixed_precision = mixed_precision
        self.mixed_precision_from = mixed_precision_from
        self.mixed_precision_deepspeed = mixed_precision_deepspeed
        self.script = script

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(files={self.files!r}, views={self.views!r}, problems={self.problems!r}, processes={self.processes!r}, processes_from={self.processes_from!r}, machines={self.machines!r}, distributed={self.distributed!r}, zero_stage={self.zero_stage!r}, offload_optimizer={self.offload_optimizer!r}, offload_params={self.offload_params!r}, fsdp={self.fsdp!r}, fsdp_offload={self.fsdp_offload!r}, activation_checkpointing={self.activation_checkpointing!r}, mixed_precision={self.mixed_precision!r}, mixed_precision_from={self.mixed_precision_from!r}, mixed_precision_deepspeed={self.mixed_precision_deepspeed!r}, script={self.script!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.files, self.views, self.problems, self.processes, self.processes_from, self.machines, self.distributed, self.zero_stage, self.offload_optimizer, self.offload_params, self.fsdp, self.fsdp_offload, self.activation_checkpointing, self.mixed_precision, self.mixed_precision_from, self.mixed_precision_deepspeed, self.script) == (other.files, other.views, other.problems, other.processes, other.processes_from, other.machines, other.distributed, other.zero_stage, other.offload_optimizer, other.offload_params, other.fsdp, other.fsdp_offload, other.activation_checkpointing, other.mixed_precision, other.mixed_precision_from, other.mixed_precision_deepspeed, other.script)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    @property
    def known(self) -> bool:
        return bool(self.files or self.script is not None)

    def describe(self) -> str:
        """The context in words, for messages and the plan."""
        parts = []
        if self.distributed:
            parts.append(_DISTRIBUTED_WORDS.get(self.distributed.upper(), self.distributed))
        if self.zero_stage is not None:
            parts.append(f"ZeRO-{self.zero_stage}" + (" with optimizer offload" if self.offload_optimizer else "")
                         + (" and parameter offload" if self.offload_params else ""))
        if self.fsdp:
            parts.append(f"FSDP {self.fsdp}" + (" with CPU offload" if self.fsdp_offload else ""))
        if self.mixed_precision:
            parts.append(f"mixed precision {self.mixed_precision}")
        where = ", ".join(self.files)
        if self.script is not None:
            where = ", ".join(x for x in (f"{self.script.file}:{self.script.line}", where) if x)
        return (", ".join(parts) or "no sharding stated") + (f" (from {where})" if where else "")


# --------------------------------------------------------------------------- launch files

def _section(data: Any, *names: str) -> dict:
    for n in names:
        if isinstance(data, dict) and isinstance(data.get(n), dict):
            data = data[n]
        else:
            return {}
    return data if isinstance(data, dict) else {}


def _offloaded(sec: dict) -> bool:
    dev = sec.get("device") if isinstance(sec, dict) else None
    return isinstance(dev, str) and dev.strip().lower() in ("cpu", "nvme")


def _fsdp_strategy(cfg: dict) -> str | None:
    s = cfg.get("fsdp_sharding_strategy")
    if isinstance(s, int):
        return {1: "full_shard", 2: "shard_grad_op", 3: "no_shard", 4: "hybrid_shard"}.get(s)
    if isinstance(s, str) and s.strip():
        word = s.strip().lower()
        return {"1": "full_shard", "2": "shard_grad_op", "3": "no_shard", "4": "hybrid_shard"}.get(word, word)
    # FSDP2 (fsdp_version: 2) says it with reshard_after_forward (accelerate 1.x)
    r = cfg.get("fsdp_reshard_after_forward")
    if isinstance(r, bool):
        return "full_shard" if r else "shard_grad_op"
    return "full_shard" if cfg else None


def _take_deepspeed(ctx: LaunchContext, view: RunView, name: str) -> None:
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    stage = view.value("runtime.zero_stage")
    if isinstance(stage, int) and ctx.zero_stage is None:
        ctx.zero_stage = stage
    zo = _section(data, "zero_optimization")
    ctx.offload_optimizer = ctx.offload_optimizer or _offloaded(zo.get("offload_optimizer"))
    ctx.offload_params = ctx.offload_params or _offloaded(zo.get("offload_param"))
    if ctx.mixed_precision is None:
        for word in ("bf16", "fp16"):
            f = view.get(f"precision.{word}")
            if f is not None and f.value is True:
                ctx.mixed_precision, ctx.mixed_precision_from = word, f"{name} {f.key}"
                ctx.mixed_precision_deepspeed = True
    ctx.distributed = ctx.distributed or "DEEPSPEED"


def _take_accelerate(ctx: LaunchContext, view: RunView, name: str) -> None:
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    dist = view.value("runtime.distributed")
    if isinstance(dist, str):
        ctx.distributed = dist.strip().upper()
    n = view.get("hardware.num_gpus")
    if n is not None and isinstance(n.value, int) and n.value > 0 and ctx.processes is None:
        ctx.processes, ctx.processes_from = n.value, f"{name} {n.key}"
    m = view.value("launch.num_machines")
    if isinstance(m, int) and m > 0:
        ctx.machines = m
    mp = view.get("precision.mixed")
    if mp is not None and isinstance(mp.value, str) and ctx.mixed_precision is None:
        ctx.mixed_precision, ctx.mixed_precision_from = mp.value.strip().lower(), f"{name} {mp.key}"
    ds = _section(data, "deepspeed_config")
    if ds:
        stage = ds.get("zero_stage")
        if isinstance(stage, int) and ctx.zero_stage is None:
            ctx.zero_stage = stage
        for key, attr in (("offload_optimizer_device", "offload_optimizer"), ("offload_param_device", "offload_params")):
            if isinstance(ds.get(key), str) and ds[key].strip().lower() in ("cpu", "nvme"):
                setattr(ctx, attr, True)
    fsdp = _section(data, "fsdp_config")
    if fsdp and (ctx.distributed or "FSDP") == "FSDP":
        ctx.fsdp = _fsdp_strategy(fsdp)
        ctx.fsdp_offload = fsdp.get("fsdp_offload_params") is True
        ac = fsdp.get("fsdp_activation_checkpointing")
        if isinstance(ac, bool):
            ctx.activation_checkpointing = ac
    for sub in view.attached:  # its deepspeed_config_file
        if sub.layout is not None and sub.layout.role == "engine":
            ctx.views.append(sub)
            _take_deepspeed(ctx, sub, sub.doc.name)


def read_launch(files: tuple[str, ...] | list[str], cwd: Path | None = None, script: Any = None) -> LaunchContext:
    """The launch context from launch files (accelerate configs, DeepSpeed JSON) and a script."""
    ctx = LaunchContext(script=script)
    if script is not None:
        for attr in ("processes", "machines", "mixed_precision", "zero_stage"):
            value = getattr(script, attr, None)
            if value is not None:
                setattr(ctx, attr, value)
        if script.processes is not None:
            ctx.processes_from = f"{script.file}:{script.line} ({script.processes_option})"
        if script.mixed_precision is not None:
            ctx.mixed_precision_from = f"{script.file}:{script.line} (--mixed_precision)"
        files = list(script.launch_files) + [f for f in files if f not in script.launch_files]
    for name in files:
        path = Path(name)
        if not path.is_absolute() and cwd is not None:
            reads.note_kind(path)
        if not path.is_absolute() and cwd is not None and not path.exists():
            path = cwd / path
        try:
            src, docs = loadmod.load_path(path)
        except LoadError as exc:
            ctx.problems.append((str(name), f"{name}:{exc.line}:{exc.column}: {exc.reason}"))
            continue
        view = build_view(docs[0]) if docs else None
        if view is None or view.layout is None or view.layout.role not in ("launch", "engine"):
            ctx.problems.append((str(name), f"{name} is not an accelerate config or a DeepSpeed file"))
            continue
        ctx.files.append(str(name))
        ctx.views.append(view)
        if view.layout.role == "engine":  # a DeepSpeed file
            _take_deepspeed(ctx, view, str(name))
        else:
            attach_linked(view, str(path), cwd)
            _take_accelerate(ctx, view, str(name))
    return ctx


# --------------------------------------------------------------------------- the opened run

class OpenedRun:
    view: RunView
    file: str
    cwd: Path | None
    launch: LaunchContext
    gpus: int | None  # GPUs in the whole job, when anything says it
    gpus_origin: str  # "flag" | "launch" | "written" | "assumed"
    gpus_from: str  # in words
    gpus_field: Field | None  # the config's own field when it is the source
    # (what, ours, theirs, where): the launch context and the config or flags disagree
    disagreements: list[tuple[str, Any, Any, str]]

    __slots__ = ('view', 'file', 'cwd', 'launch', 'gpus', 'gpus_origin', 'gpus_from', 'gpus_field', 'disagreements')

    def __init__(self, view, file, cwd, launch, gpus=None, gpus_origin="assumed", gpus_from="", gpus_field=None, disagreements=None):
        self.view = view
        self.file = file
        self.cwd = cwd
        self.launch = launch
        self.gpus = gpus
        self.gpus_origin = gpus_origin
        self.gpus_from = gpus_from
        self.gpus_field = gpus_field
        self.disagreements = [] if disagreements is None else disagreements

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(view={self.view!r}, file={self.file!r}, cwd={self.cwd!r}, launch={self.launch!r}, gpus={self.gpus!r}, gpus_origin={self.gpus_origin!r}, gpus_from={self.gpus_from!r}, gpus_field={self.gpus_field!r}, disagreements={self.disagreements!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.view, self.file, self.cwd, self.launch, self.gpus, self.gpus_origin, self.gpus_from, self.gpus_field, self.disagreements) == (other.view, other.file, other.cwd, other.launch, other.gpus, other.gpus_origin, other.gpus_from, other.gpus_field, other.disagreements)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    @property
    def offload_optimizer(self) -> bool:
        """Optimizer states (and master weights) live in CPU memory: ZeRO-Offload, or FSDP's CPU
        offload, which moves the optimizer step to the CPU."""
        return self.launch.offload_optimizer or self.launch.fsdp_offload or own_fsdp(self.view)[1]

    @property
    def sharding(self) -> str:
        """"none" | "zero1" | "zero2" | "zero3" | "fsdp_full" | "fsdp_grad_op" for the estimate."""
        stage = self.view.effective_value("runtime.zero_stage")
        if isinstance(stage, int) and not isinstance(stage, bool) and stage in (0, 1, 2, 3):
            return f"zero{stage}"  # zero0: DeepSpeed without partitioning
        fsdp = self.launch.fsdp
        if fsdp is None:
            fsdp = own_fsdp(self.view)[0]
        if isinstance(fsdp, str):
            f = fsdp.lower()
            if "full_shard" in f or "hybrid_shard" in f:
                return "fsdp_full"
            if "shard_grad_op" in f:
                return "fsdp_grad_op"
        return "none"

    def context_words(self) -> str:
        """Which launch context a verdict used, for messages and the plan."""
        g = self.gpus or 1
        gpus = f"{g} GPU{'s' if g != 1 else ''}"
        if self.gpus is None:
            gpus += " (no GPU count given: --gpus N or --launch FILE)"
        elif self.gpus_from:
            gpus += f" (from {self.gpus_from})"
        sharding = {"none": "no sharding", "zero0": "DeepSpeed stage 0 (no partitioning)", "zero1": "ZeRO-1", "zero2": "ZeRO-2", "zero3": "ZeRO-3",
                    "fsdp_full": "FSDP full shard", "fsdp_grad_op": "FSDP shard_grad_op"}[self.sharding]
        where = ""
        if self.launch.known:
            where = f"; launch context: {self.launch.describe()}"
        elif self.sharding != "none":
            where = "; sharding from the config's own DeepSpeed/FSDP settings"
        else:
            where = "; no launch context given (--launch FILE)"
        return f"{gpus}, {sharding}{where}"


def own_fsdp(view: RunView) -> tuple[str | None, bool]:
    """FSDP the config asks for itself: the trainer's ``fsdp: "full_shard auto_wrap"`` (or a list,
    as axolotl writes it) and its ``fsdp_config`` (FSDP2: ``fsdp_version: 2`` with
    ``reshard_after_forward``). -> (strategy words or None, CPU offload)."""
    data = view.doc.data if isinstance(view.doc.data, dict) else {}
    words = data.get("fsdp")
    cfg = data.get("fsdp_config") if isinstance(data.get("fsdp_config"), dict) else {}
    plain = {str(k).removeprefix("fsdp_"): v for k, v in cfg.items()}
    offload = plain.get("offload_params") is True
    if isinstance(words, list):
        words = " ".join(str(w) for w in words)
    if isinstance(words, str) and words.strip():
        return words.strip().lower(), offload
    if cfg and (data.get("fsdp_version") == 2 or "reshard_after_forward" in plain or "sharding_strategy" in plain):
        return _fsdp_strategy({"fsdp_" + k: v for k, v in plain.items()}), offload
    dist = data.get("dist_config")  # LLaMA-Factory v1: dist_config: {name: fsdp2} shards fully
    if isinstance(dist, dict) and isinstance(dist.get("name"), str) and "fsdp" in dist["name"].lower():
        return "full_shard", False
    return None, False


def _supply(view: RunView, name: str, value: Any, origin: str, note: str, *, auto: bool = False) -> None:
    if name in view.supplied:
        return
    view.supplied[name] = Field(name=name, value=value, path=(), written=value, auto=auto,
                                origin=origin, note=note)


_DEFAULTS_CACHE: dict[tuple, tuple[tuple, tuple[Default, ...]]] = {}


def _defaults_of(layout: Any) -> tuple[Default, ...]:
    """The runner defaults of LAYOUT: its table in ``DEFAULTS``, then its own constant ones."""
    key = (layout.defaults_table, id(layout.defaults))
    got = _DEFAULTS_CACHE.get(key)
    if got is None or got[0] is not layout.defaults:
        table = DEFAULTS.get(layout.defaults_table, ()) if layout.defaults_table else ()
        made = (*table, *(Default(name, value, note) for name, value, note in layout.defaults))
        if len(_DEFAULTS_CACHE) > 64:  # (the layouts are few; a replaced one shares its defaults)
            _DEFAULTS_CACHE.clear()
        got = _DEFAULTS_CACHE[key] = (layout.defaults, made)
    return got[1]


def _apply_defaults(view: RunView) -> None:
    layout = view.layout
    if layout is None:
        return
    fields = view.fields
    for d in _defaults_of(layout):
        f = fields.get(d.field)
        if f is not None and f.value is not None:
            continue
        if f is not None and f.auto and d.field != "precision.bf16" and d.field != "model.dtype":
            continue  # "auto": filled in at launch
        value = d.value(view) if callable(d.value) else d.value
        if value is None:
            continue
        if value == "derived":
            _supply(view, d.field, None, "default", d.note, auto=True)
        else:
            _supply(view, d.field, value, "default", d.note)


@functools.cache  # imported on first use, once: a relative import inside a function costs a lookup per call
def _repo_keys_module():
    from .knowledge import repo_keys

    return repo_keys


def _own_reader(view: RunView, file: str, options: Any = None) -> bool:
    """A trainer-style file whose repository parses its configs only into its own argument
    classes (no transformers or TRL class among them): TrainingArguments' defaults (batch 8,
    3 epochs, save every 500 steps) are not the run's, so the layout's runner holds none, and its
    word lists (transformers' optimizer and strategy names) are not the script's.
    Returns whether that is so."""
    if view.layout is None or not view.layout.trainer_defaults:
        return False
    keys_for = _repo_keys_module().keys_for
    readers = getattr(options, "readers", ()) or ()
    reader = getattr(getattr(options, "script", None), "reader", None)
    repo = keys_for(file, tuple(readers) + (reader,) if reader else tuple(readers))
    if repo is None or repo.reader_libraries is None or repo.reader_libraries:
        return False
    from ._records import replaced

    # nor are TrainingArguments' accepted words (optim names, strategies) the script's
    view.layout = replaced(view.layout, trainer_defaults=False, read_by_own_classes=True,
                           word_lists=frozenset())
    return True


def _experiment_method(view: RunView, file: str) -> None:
    """The method of a runner's experiment folder: the adapter its config file there names (its
    settings supplied as linked), or, with none, every weight trains (the runner's own rule)."""
    lay = view.layout
    if not lay.experiment_adapter or view.method is not None or file.startswith("<"):
        return
    folder = Path(file).absolute().parent
    if len(folder.parents) < 2 or folder.parents[1].name != lay.experiment_root:
        return
    adapter = folder / lay.experiment_adapter
    try:
        reads.note_kind(adapter)  # an adapter file appearing changes the method
        present = adapter.is_file()
        docs = loadmod.load_text(loadmod.read_source(adapter).text, str(adapter)) if present else []
    except (OSError, ValueError, LoadError):
        return  # unreadable: the method stays unknown (the adapter file is reported on its own)
    if not present:
        view.method, view.method_stated = "full", True
        return
    sub = build_view(docs[0]) if docs else None
    if sub is None or sub.layout is None or sub.layout.role != "adapter" or sub.method is None:
        return
    view.method, view.method_stated = sub.method, True
    for name in ("adapter.rank", "adapter.alpha", "adapter.rslora", "adapter.targets", "adapter.dora"):
        f = sub.get(name)
        if f is not None and f.value is not None:
            _supply(view, name, f.value, "linked", f"{f.key} in {adapter}")


def _apply_linked(view: RunView) -> None:
    for sub in view.attached:
        if sub.layout is None or sub.layout.role != "engine":
            continue
        stage = sub.get("runtime.zero_stage")
        if stage is not None and isinstance(stage.value, int) and not view.has("runtime.zero_stage"):
            _supply(view, "runtime.zero_stage", stage.value, "linked", f"zero_optimization.stage in {sub.doc.name}")


def _apply_launch(view: RunView, launch: LaunchContext) -> None:
    where = ", ".join(launch.files) or (launch.script.file if launch.script is not None else "")
    if launch.zero_stage is not None:
        _supply(view, "runtime.zero_stage", launch.zero_stage, "launch", f"ZeRO stage from {where}")
    if launch.activation_checkpointing is True:
        _supply(view, "runtime.gradient_checkpointing", True, "launch",
                f"fsdp_activation_checkpointing in {where}")
    mp = launch.mixed_precision
    if mp in ("bf16", "fp16"):
        _supply(view, "precision.mixed", mp, "launch", f"mixed precision {mp} from {launch.mixed_precision_from or where}")
    if launch.offload_optimizer:
        _supply(view, "runtime.offload_optimizer", True, "launch", f"optimizer offload in {where}")
    if launch.activation_checkpointing is True:  # FSDP's own checkpointing, beside the trainer's
        _supply(view, "runtime.fsdp_checkpointing", True, "launch", f"fsdp_activation_checkpointing in {where}")
    for sub in launch.views:  # what the launch file sets for the run of this config
        if sub.layout is None or sub.layout.role != "launch":
            continue
        for name in ("runtime.fsdp_wrap", "runtime.zero3_save_16bit"):
            f = sub.get(name)
            if f is not None and f.value is not None:
                _supply(view, name, f.value, "launch", f"{f.key} in {sub.doc.name}")
    for sub in launch.views:  # a DeepSpeed file the run is started with is checked like a linked one
        if sub.layout is not None and sub.layout.role == "engine" and sub not in view.attached \
                and all(a.doc.name != sub.doc.name for a in view.attached):
            view.attached.append(sub)


def _resolve_gpus(run: OpenedRun, options) -> None:
    view, launch = run.view, run.launch
    own = view.get("hardware.num_gpus")
    own_n = own.value if own is not None and isinstance(own.value, int) and own.value > 0 else None
    if own_n is not None:
        machines = view.value("hardware.num_machines", 1)
        own_n *= machines if isinstance(machines, int) and machines > 0 else 1
    flagged = getattr(options, "gpus", None)
    if flagged:
        run.gpus, run.gpus_origin = flagged, "flag"
        run.gpus_from = getattr(options, "gpus_from", "") or "--gpus"
        if launch.processes is not None and launch.processes != flagged:
            run.disagreements.append(("gpus", flagged, launch.processes, launch.processes_from))
        elif launch.processes is None and own_n is not None and own_n != flagged:
            run.disagreements.append(("gpus", flagged, own_n, ""))
        return
    if launch.processes is not None:
        run.gpus, run.gpus_origin, run.gpus_from = launch.processes, "launch", launch.processes_from
        if own_n is not None and own_n != launch.processes:
            run.disagreements.append(("gpus", launch.processes, own_n, ""))
        return
    if own_n is not None:
        run.gpus, run.gpus_origin, run.gpus_field = own_n, "written", own
        run.gpus_from = own.key


def _precision_disagreements(run: OpenedRun) -> None:
    view, launch = run.view, run.launch
    mp = launch.mixed_precision
    if mp not in ("bf16", "fp16", "no") or not launch.files and launch.script is None:
        return
    if launch.mixed_precision_deepspeed:
        return  # a DeepSpeed file's bf16/fp16: deepspeed-file-contradicts-config judges it
    for word in ("bf16", "fp16"):
        f = view.get(f"precision.{word}")
        if f is None or f.auto or not isinstance(f.value, bool):
            continue
        if f.value and mp != word:
            run.disagreements.append((f"precision.{word}", True, mp, launch.mixed_precision_from))
        elif not f.value and mp == word and not view.is_on("precision.bf16" if word == "fp16" else "precision.fp16"):
            pass  # the launcher's autocast turns it on: not a contradiction the runner refuses


def open_view(view: RunView, file: str, options: Any = None) -> OpenedRun:
    """Attach everything the run has to a view built from one document; returns the opened run."""
    cwd = getattr(options, "cwd", None)
    if view.run is not None:
        return view.run
    attach_linked(view, file, cwd)
    launch = read_launch(tuple(getattr(options, "launch", ()) or ()), cwd,
                         getattr(options, "script", None))
    run = OpenedRun(view=view, file=file, cwd=cwd, launch=launch)
    view.run = run
    if view.layout is None:
        return run
    own = _own_reader(view, file, options)
    _experiment_method(view, file)
    _apply_launch(view, launch)
    _apply_linked(view)
    if not own:  # the runner's defaults are those of classes the repository does not use
        _apply_defaults(view)
    _resolve_gpus(run, options)
    if run.gpus is not None and run.gpus_origin in ("flag", "launch"):
        view.supplied["hardware.num_gpus"] = Field(
            name="hardware.num_gpus", value=run.gpus, path=(), written=run.gpus,
            origin=run.gpus_origin, note=f"{run.gpus} GPUs from {run.gpus_from}")
    _precision_disagreements(run)
    return run


def script_layer(file: str, options: Any) -> Any:
    """The arguments of the launch script that starts FILE, when they override it (a document
    located at the script's lines), else None."""
    script = getattr(options, "script", None)
    if script is None or file.startswith("<"):
        return None
    if os.path.normpath(os.path.abspath(file)) not in script.configs:
        return None
    from .compose import override_value
    from .scripts import override_document

    return override_document(script, override_value)


def composed(doc: Any, file: str, options: Any) -> tuple[Any, str]:
    """(DOC composed with the files it names, the launch's ``key=value`` overrides and the
    arguments of the launch script that starts it; why a named file could not be read, or "").
    As written when there is nothing to compose, or when composing fails."""
    if file.startswith("<"):
        return doc, ""
    located = script_layer(file, options)
    # list-valued overrides make a sweep of runs (sweep.py): only the fixed ones compose here
    given = getattr(options, "overrides", ()) or ()
    overrides = tuple(split_overrides(tuple(given))[0]) if given else ()
    if overrides or located is not None or compose.composes(doc.data):
        try:
            doc = compose.compose(doc, file, overrides, located=located)
        except compose.ComposeError as exc:
            return doc, str(exc)
    return _over_runner_defaults(doc, file), ""


# layouts whose runner reads an experiment folder over its own defaults file
_EXPERIMENT_LAYOUTS = tuple(lay for lay in LAYOUTS if lay.experiment_root)
_EXPERIMENT_ROOTS = frozenset(lay.experiment_root for lay in _EXPERIMENT_LAYOUTS)


def _over_runner_defaults(doc: Any, file: str) -> Any:
    """DOC read over its runner's defaults file, when it is an experiment of such a runner."""
    if compose.experiment_root_of(os.path.abspath(file)) not in _EXPERIMENT_ROOTS:
        return doc  # in no runner's experiment folder
    for lay in _EXPERIMENT_LAYOUTS:
        base = compose.experiment_base(file, lay.experiment_root, lay.experiment_defaults)
        if base is None:
            continue
        try:  # an experiment may write a single setting: the composed run says what it is
            out = compose.compose_over_defaults(doc, file, base)
        except compose.ComposeError:
            continue  # the defaults file is not readable: it is reported on its own
        if detect_layout(out.data)[0] is lay:
            return out
    return doc


def open_documents(docs: list, file: str, options: Any = None, layout: str | None = None) -> list[OpenedRun]:
    """Every document of a file, composed and opened (skipped documents too, with
    ``view.skipped`` set)."""
    out = []
    for doc in docs:
        doc, _problem = composed(doc, file, options)
        view = build_view(doc, layout)
        if view.skipped:
            out.append(OpenedRun(view=view, file=file, cwd=getattr(options, "cwd", None), launch=LaunchContext()))
            continue
        out.append(open_view(view, file, options))
    return out


def open_path(path: str | Path, options: Any = None) -> list[OpenedRun]:
    """Read a file and open its runs. Raises LoadError for a file that cannot be read."""
    src, docs = loadmod.load_path(path)
    return open_documents(docs, str(path), options)
