"""GPU names -> compute capability and memory, with where each number comes from.

Compute capability: NVIDIA, "CUDA GPU Compute Capability" (developer.nvidia.com/cuda-gpus) and its
legacy page. Memory: vendor product specifications; entries marked "from memory" were not checked
against a primary source.
"""

from __future__ import annotations

from types import MappingProxyType

from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr

GIB = 1024**3
GB = 1000**3


class Gpu:
    name: str  # canonical id, e.g. "a100-80gb"
    label: str  # what people call it
    capability: tuple[int, int]
    memory_bytes: int
    source: str

    __slots__ = ('name', 'label', 'capability', 'memory_bytes', 'source')

    # the fields in order: the result cache keys the record by them, ``replaced`` copies them
    _record_fields = ('name', 'label', 'capability', 'memory_bytes', 'source')

    def __init__(self, name, label, capability, memory_bytes, source):
        _setattr(self, 'name', name)
        _setattr(self, 'label', label)
        _setattr(self, 'capability', capability)
        _setattr(self, 'memory_bytes', memory_bytes)
        _setattr(self, 'source', source)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, label={self.label!r}, capability={self.capability!r}, memory_bytes={self.memory_bytes!r}, source={self.source!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.label, self.capability, self.memory_bytes, self.source) == (other.name, other.label, other.capability, other.memory_bytes, other.source)
        return NotImplemented

    def __hash__(self):
        return hash((self.name, self.label, self.capability, self.memory_bytes, self.source))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.name, self.label, self.capability, self.memory_bytes, self.source)

    __setstate__ = _frozen_setstate

    @property
    def capability_text(self) -> str:
        return f"{self.capability[0]}.{self.capability[1]}"

    @property
    def memory_gb(self) -> float:
        return self.memory_bytes / GB

    def supports(self, feature: str) -> bool:
        return self.capability >= FEATURE_MIN_CAPABILITY[feature][0]


# Feature gates: minimum compute capability and the published source for each.
FEATURE_MIN_CAPABILITY: MappingProxyType[str, tuple[tuple[int, int], str]] = MappingProxyType({
    "bf16": ((8, 0), "NVIDIA Transformer Engine support matrix: BF16 requires compute capability 8.0 or higher"),
    "tf32": ((8, 0), "transformers is_torch_tf32_available(): device major >= 8 (Ampere)"),
    "fp8": ((8, 9), "NVIDIA Transformer Engine support matrix: FP8 requires compute capability 8.9 or higher"),
    "flash_attention_2": ((8, 0), "flash-attention README: FlashAttention-2 supports Ampere, Ada or Hopper GPUs"),
})

_CC = "NVIDIA CUDA GPU compute capability table"
_GPUS = (
    Gpu("p100", "Tesla P100 16GB", (6, 0), 16 * GB, f"{_CC} (legacy page); memory from memory"),
    Gpu("v100-16gb", "Tesla V100 16GB", (7, 0), 16 * GB, f"{_CC} (legacy page); V100 16/32 GB spec"),
    Gpu("v100-32gb", "Tesla V100 32GB", (7, 0), 32 * GB, f"{_CC} (legacy page); V100 16/32 GB spec"),
    Gpu("t4", "Tesla T4", (7, 5), 16 * GB, f"{_CC}; 16 GB GDDR6 (cloud GPU documentation)"),
    Gpu("a10", "A10", (8, 6), 24 * GB, f"{_CC}; 24 GB from memory"),
    Gpu("a10g", "A10G (AWS G5)", (8, 6), 24 * GB, "third-party GPU catalogue (8.6); AWS G5 instance table (24 GB)"),
    Gpu("a100-40gb", "A100 40GB", (8, 0), 40 * GB, f"{_CC}; A100 40/80 GB spec"),
    Gpu("a100-80gb", "A100 80GB", (8, 0), 80 * GB, f"{_CC}; A100 40/80 GB spec"),
    Gpu("l4", "L4", (8, 9), 24 * GB, f"{_CC}; 24 GB GDDR6 (cloud GPU documentation)"),
    Gpu("l40s", "L40S", (8, 9), 48 * GB, f"{_CC}; 48 GB from memory"),
    Gpu("rtx-3090", "GeForce RTX 3090", (8, 6), 24 * GB, f"{_CC}; 24 GB GDDR6X spec"),
    Gpu("rtx-4090", "GeForce RTX 4090", (8, 9), 24 * GB, f"{_CC}; 24 GB spec"),
    Gpu("a6000", "RTX A6000", (8, 6), 48 * GB, f"{_CC}; 48 GB spec"),
    Gpu("h100", "H100 80GB (SXM)", (9, 0), 80 * GB, f"{_CC}; 80 GB HBM3 (SXM)"),
    Gpu("h200", "H200 141GB", (9, 0), 141 * GB, f"{_CC}; 141 GB HBM3e (MLPerf system description)"),
    Gpu("b200", "B200 180GB", (10, 0), 180 * GB, f"{_CC}; 180 GB HBM3e (MLPerf system description)"),
)

GPUS: MappingProxyType[str, Gpu] = MappingProxyType({g.name: g for g in _GPUS})

ALIASES: MappingProxyType[str, str] = MappingProxyType({
    "v100": "v100-16gb",
    "tesla-t4": "t4",
    "a100": "a100-80gb",
    "a100-40g": "a100-40gb",
    "a100-80g": "a100-80gb",
    "a100-sxm4-80gb": "a100-80gb",
    "a100-pcie-40gb": "a100-40gb",
    "3090": "rtx-3090",
    "4090": "rtx-4090",
    "rtx3090": "rtx-3090",
    "rtx4090": "rtx-4090",
    "rtx-a6000": "a6000",
    "h100-80gb": "h100",
    "h100-sxm": "h100",
    "h200-141gb": "h200",
})


class UnknownGpu(ValueError):
    def __init__(self, name: str):
        import difflib  # only a GPU name that is not known pays for it

        self.name = name
        self.suggestions = difflib.get_close_matches(
            _normal(name), sorted(GPUS) + sorted(ALIASES), n=3, cutoff=0.4
        )
        near = ", ".join(self.suggestions) if self.suggestions else ", ".join(sorted(GPUS))
        super().__init__(f"unknown GPU {name!r}; nearest known: {near}")


def _normal(name: str) -> str:
    n = name.strip().lower().replace("_", "-").replace(" ", "-")
    for prefix in ("nvidia-", "tesla-", "geforce-"):
        if n.startswith(prefix) and n[len(prefix):]:
            n = n[len(prefix):]
    return n


def find_gpu(name: str) -> Gpu:
    """Look a GPU up by id or alias; raises UnknownGpu with the nearest names."""
    n = _normal(name)
    if n in GPUS:
        return GPUS[n]
    if n in ALIASES:
        return GPUS[ALIASES[n]]
    raise UnknownGpu(name)


def declared_gpu(data: dict, project_file: str) -> Gpu:
    """A GPU the project file declares (name, memory in GB, compute capability "X.Y", optional label)."""
    major, minor = (int(x) for x in str(data["capability"]).split("."))
    return Gpu(
        name=str(data["name"]).strip(),
        label=str(data.get("label") or data["name"]).strip(),
        capability=(major, minor),
        memory_bytes=int(float(data["memory_gb"]) * GB),
        source=f"declared in {project_file}",
    )
