"""The fixer's records: the tiers, a planned fix, what was applied, the result of fixing one file
and of a whole run, and the proof's failure. Every stage of the fixer shares them."""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from typing import Any, Iterable

from ..engine import Options
from ..findings import Edit, Finding, InputProblem, InternalError
from ..load import Source


KEEPS_MEANING = "keeps-meaning"
CHANGES_TRAINING = "changes-training"
TIERS = (KEEPS_MEANING, CHANGES_TRAINING)
BATCH_SPLIT = "--halve-batch"  # the label of the user-requested halving: the option, not a rule id


@dataclass(frozen=True)
class Applied:
    """One fix, as reported: which rule, where, what it changes, its tier."""

    rule: str
    key: str
    summary: str
    tier: str
    paths: tuple[str, ...] = ()  # the dotted key paths the fix sets or inserts

    def as_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "key": self.key, "summary": self.summary, "tier": self.tier,
                "paths": list(self.paths)}


@dataclass
class FileFix:
    """What fixing one file did (or would do)."""

    file: str
    old_text: str = ""
    new_text: str = ""
    applied: list[Applied] = field(default_factory=list)
    withheld: list[Applied] = field(default_factory=list)  # changes-training, not asked for
    notes: list[str] = field(default_factory=list)  # fixes that could not be made, and why
    problem: InputProblem | None = None  # the input does not parse: not fixing
    error: InternalError | None = None  # a proof failed (a bug in cfgcheck): nothing saved
    refused: str | None = None  # the write was refused (file changed on disk, cannot write)
    skipped: str | None = None  # not a training config
    written: bool = False
    links: tuple[str, ...] = ()  # real paths of the files this one links (DeepSpeed, accelerate)
    needs: tuple[tuple[str, str], ...] = ()  # (rule, flag): fixes that need a flag to be judged
    evidence: dict | None = None  # a failed proof: before, after, which check (for a bug report)
    evidence_file: str | None = None  # where the evidence was saved

    @property
    def changed(self) -> bool:
        """The fixed text differs (and, once written, the write was not refused)."""
        return (self.error is None and self.problem is None and self.refused is None
                and self.new_text != self.old_text)

    def diff(self) -> str:
        if not self.changed:
            return ""
        lines = difflib.unified_diff(
            self.old_text.splitlines(keepends=True), self.new_text.splitlines(keepends=True),
            fromfile=self.file, tofile=f"{self.file} (fixed)")
        out = []
        for line in lines:
            out.append(line if line.endswith("\n") else line + "\n\\ No newline at end of file\n")
        return "".join(out)


@dataclass
class FixReport:
    files: list[FileFix] = field(default_factory=list)

    @property
    def changed(self) -> list[FileFix]:
        return [f for f in self.files if f.changed]

    @property
    def problems(self) -> list[FileFix]:
        return [f for f in self.files if f.problem is not None]

    @property
    def errors(self) -> list[FileFix]:
        return [f for f in self.files if f.error is not None]

    @property
    def refused(self) -> list[FileFix]:
        return [f for f in self.files if f.refused is not None]


class ProofFailed(Exception):
    """A rewrite did not pass the safety proof: a bug in a fix, never the user's fault."""

    def __init__(self, reason: str, rules: Iterable[str] = ()):
        super().__init__(reason)
        self.reason = reason
        self.rules = tuple(rules)


class NewFinding(ProofFailed):
    """The rewrite is sound, but what it changes brings a finding of its own (e.g. more memory)."""


@dataclass
class _Planned:
    """A fix the plan proposes to make: from a finding, or the batch split the user asked for."""

    rule: str
    key: str
    summary: str
    tier: str
    edits: tuple[Edit, ...]
    document: int
    finding: Finding | None  # None for the batch split


@dataclass
class _Item:
    """A file of a fix run: its options, its result so far, and its source once read."""

    path: str
    options: Options
    result: FileFix
    src: Source | None = None
    real: str = ""
