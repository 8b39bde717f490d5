"""Which TRL trainer a trainer-style file is written for, guessed from the keys only some
trainers accept.

The key lists (``known_keys.json``) name the class that declares each key, not the classes that
inherit it, so configs are grouped into families of trainers that share their keys by
inheritance or by design (TRL sources: NashMDConfig and XPOConfig extend OnlineDPOConfig,
GKDConfig extends SFTConfig, the GRPO variants extend GRPOConfig; RLOOConfig was an on-policy
PPO-style config before TRL 0.19 and a GRPO-style one after). A key is evidence for a family
when every class that declares it belongs to that family.
"""

from __future__ import annotations

from functools import lru_cache
from types import MappingProxyType

from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr

FAMILIES: MappingProxyType[str, frozenset[str]] = MappingProxyType({
    "SFT": frozenset({"SFTConfig", "IterativeSFTConfig", "GKDConfig"}),
    "offline preference (DPO, KTO, ORPO, CPO, BCO)": frozenset(
        {"DPOConfig", "CPOConfig", "ORPOConfig", "KTOConfig", "BCOConfig", "TPOConfig", "A2POConfig"}),
    "online preference (OnlineDPO, XPO, NashMD, GKD)": frozenset(
        {"OnlineDPOConfig", "NashMDConfig", "XPOConfig", "GKDConfig"}),
    "GRPO-style (GRPO, RLOO and their variants)": frozenset(
        {"GRPOConfig", "RLOOConfig", "AsyncGRPOConfig", "GFPOConfig", "GRPOWithReplayBufferConfig",
         "GMPOConfig", "PAPOConfig", "DPPOConfig", "MiniLLMConfig", "GOLDConfig", "DistillationConfig",
         "AsyncDistillationConfig", "ServerDistillationConfig", "IWOPDConfig", "SDFTConfig",
         "SDPOConfig", "SSDConfig", "SelfDistillationConfig", "ExampleSDFTConfig", "ExampleSDPOConfig"}),
    "PPO": frozenset({"PPOConfig", "PPOv2Config", "OnPolicyConfig", "OnpolicyRuntimeConfig", "RLOOConfig"}),
    "reward modelling": frozenset({"RewardConfig", "PRMConfig"}),
})


def _families_of(owners) -> frozenset[str]:
    names = {o.split(".", 1)[1] for o in owners if o.startswith("trl.")}
    return frozenset(f for f, members in FAMILIES.items() if names & members)


def _trainer_classes(owners) -> list[str]:
    return sorted(o.split(".", 1)[1] for o in owners
                  if o.startswith("trl.") and any(o.split(".", 1)[1] in m for m in FAMILIES.values()))


class Guess:
    family: str | None  # the family the keys point to, None when they do not agree
    evidence: tuple[str, ...]  # the keys that point to it
    # keys no class of that family declares: (key, the classes that do)
    strangers: tuple[tuple[str, tuple[str, ...]], ...]

    __slots__ = ('family', 'evidence', 'strangers')

    def __init__(self, family, evidence, strangers):
        _setattr(self, 'family', family)
        _setattr(self, 'evidence', evidence)
        _setattr(self, 'strangers', strangers)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(family={self.family!r}, evidence={self.evidence!r}, strangers={self.strangers!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.family, self.evidence, self.strangers) == (other.family, other.evidence, other.strangers)
        return NotImplemented

    def __hash__(self):
        return hash((self.family, self.evidence, self.strangers))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.family, self.evidence, self.strangers)

    __setstate__ = _frozen_setstate


@lru_cache(maxsize=8192)  # the key tables are fixed for the process; a corpus repeats its keys
def _evidence(key: str) -> tuple[frozenset[str], tuple[str, ...]] | None:
    """(families, trainer classes) a top-level KEY points to, or None when it is no evidence."""
    from .keys import lookup

    info = lookup(key)
    if info is None or any(not o.startswith("trl.") for o in info.owners):
        return None  # unknown, or a TrainingArguments key every TRL config inherits
    fams = _families_of(info.owners)
    classes = _trainer_classes(info.owners)
    if not fams or len(classes) < len([o for o in info.owners if o.startswith("trl.")]):
        return None  # also declared by a script or model argument class: parsed beside the trainer
    return fams, tuple(classes)


def guess(keys) -> Guess:
    """The trainer family of a file from its top-level keys."""
    per_key: dict[str, frozenset[str]] = {}
    owners_of: dict[str, tuple] = {}
    for key in keys:
        if not isinstance(key, str):
            continue
        got = _evidence(key)
        if got is None:
            continue
        per_key[key], owners_of[key] = got
    counts: dict[str, list[str]] = {}
    for key, fams in per_key.items():
        if len(fams) == 1:
            counts.setdefault(next(iter(fams)), []).append(key)
    if not counts:
        return Guess(None, (), ())
    ranked = sorted(counts.items(), key=lambda kv: (-len(kv[1]), kv[0]))
    if len(ranked) > 1 and len(ranked[0][1]) == len(ranked[1][1]):
        return Guess(None, (), ())
    family, evidence = ranked[0]
    strangers = tuple((k, owners_of[k]) for k, fams in per_key.items() if family not in fams)
    return Guess(family, tuple(sorted(evidence)), strangers)
