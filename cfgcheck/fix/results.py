"""The fixer's records: the tiers, a planned fix, what was applied, the result of fixing one file
and of a whole run, and the proof's failure. Every stage of the fixer shares them."""

from __future__ import annotations

import difflib
from typing import Any, Iterable

from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr
from ..engine import Options
from ..findings import Edit, Finding, InputProblem, InternalError
from ..load import Source


KEEPS_MEANING = "keeps-meaning"
CHANGES_TRAINING = "changes-training"
TIERS = (KEEPS_MEANING, CHANGES_TRAINING)
BATCH_SPLIT = "--halve-batch"  # the label of the user-requested halving: the option, not a rule id


class Applied:
    """One fix, as reported: which rule, where, what it changes, its tier."""

    rule: str
    key: str
    summary: str
    tier: str
    paths: tuple[str, ...]  # the dotted key paths the fix sets or inserts

    __slots__ = ('rule', 'key', 'summary', 'tier', 'paths',)

    def __init__(self, rule, key, summary, tier, paths=()):
        _setattr(self, 'rule', rule)
        _setattr(self, 'key', key)
        _setattr(self, 'summary', summary)
        _setattr(self, 'tier', tier)
        _setattr(self, 'paths', paths)

    def __repr__(self):
        return f"{type(self).__qualname__}(rule={self.rule!r}, key={self.key!r}, summary={self.summary!r}, tier={self.tier!r}, paths={self.paths!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.rule, self.key, self.summary, self.tier, self.paths) == (other.rule, other.key, other.summary, other.tier, other.paths)
        return NotImplemented

    def __hash__(self):
        return hash((self.rule, self.key, self.summary, self.tier, self.paths))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.rule, self.key, self.summary, self.tier, self.paths)

    __setstate__ = _frozen_setstate

    def as_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "key": self.key, "summary": self.summary, "tier": self.tier,
                "paths": list(self.paths)}


class FileFix:
    """What fixing one file did (or would do)."""

    file: str
    old_text: str
    new_text: str
    applied: list[Applied]
    withheld: list[Applied]  # changes-training, not asked for
    notes: list[str]  # fixes that could not be made, and why
    problem: InputProblem | None  # the input does not parse: not fixing
    error: InternalError | None  # a proof failed (a bug in cfgcheck): nothing saved
    refused: str | None  # the write was refused (file changed on disk, cannot write)
    skipped: str | None  # not a training config
    written: bool
    links: tuple[str, ...]  # real paths of the files this one links (DeepSpeed, accelerate)
    needs: tuple[tuple[str, str], ...]  # (rule, flag): fixes that need a flag to be judged
    evidence: dict | None  # a failed proof: before, after, which check (for a bug report)
    evidence_file: str | None  # where the evidence was saved

    __slots__ = ('file', 'old_text', 'new_text', 'applied', 'withheld', 'notes', 'problem', 'error', 'refused', 'skipped', 'written', 'links', 'needs', 'evidence', 'evidence_file',)

    def __init__(self, file, old_text="", new_text="", applied=None, withheld=None, notes=None, problem=None, error=None, refused=None, skipped=None, written=False, links=(), needs=(), evidence=None, evidence_file=None):
        self.file = file
        self.old_text = old_text
        self.new_text = new_text
        self.applied = [] if applied is None else applied
        self.withheld = [] if withheld is None else withheld
        self.notes = [] if notes is None else notes
        self.problem = problem
        self.error = error
        self.refused = refused
        self.skipped = skipped
        self.written = written
        self.links = links
        self.needs = needs
        self.evidence = evidence
        self.evidence_file = evidence_file

    def __repr__(self):
        return f"{type(self).__qualname__}(file={self.file!r}, old_text={self.old_text!r}, new_text={self.new_text!r}, applied={self.applied!r}, withheld={self.withheld!r}, notes={self.notes!r}, problem={self.problem!r}, error={self.error!r}, refused={self.refused!r}, skipped={self.skipped!r}, written={self.written!r}, links={self.links!r}, needs={self.needs!r}, evidence={self.evidence!r}, evidence_file={self.evidence_file!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.file, self.old_text, self.new_text, self.applied, self.withheld, self.notes, self.problem, self.error, self.refused, self.skipped, self.written, self.links, self.needs, self.evidence, self.evidence_file) == (other.file, other.old_text, other.new_text, other.applied, other.withheld, other.notes, other.problem, other.error, other.refused, other.skipped, other.written, other.links, other.needs, other.evidence, other.evidence_file)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

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


class FixReport:
    """The files of a fix run."""

    files: list[FileFix]

    __slots__ = ('files',)

    def __init__(self, files=None):
        self.files = [] if files is None else files

    def __repr__(self):
        return f"{type(self).__qualname__}(files={self.files!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.files,) == (other.files,)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

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


class _Planned:
    """A fix the plan proposes to make: from a finding, or the batch split the user asked for."""

    rule: str
    key: str
    summary: str
    tier: str
    edits: tuple[Edit, ...]
    document: int
    finding: Finding | None  # None for the batch split

    __slots__ = ('rule', 'key', 'summary', 'tier', 'edits', 'document', 'finding',)

    def __init__(self, rule, key, summary, tier, edits, document, finding):
        self.rule = rule
        self.key = key
        self.summary = summary
        self.tier = tier
        self.edits = edits
        self.document = document
        self.finding = finding

    def __repr__(self):
        return f"{type(self).__qualname__}(rule={self.rule!r}, key={self.key!r}, summary={self.summary!r}, tier={self.tier!r}, edits={self.edits!r}, document={self.document!r}, finding={self.finding!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.rule, self.key, self.summary, self.tier, self.edits, self.document, self.finding) == (other.rule, other.key, other.summary, other.tier, other.edits, other.document, other.finding)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


class _Item:
    """A file of a fix run: its options, its result so far, and its source once read."""

    path: str
    options: Options
    result: FileFix
    src: Source | None
    real: str

    __slots__ = ('path', 'options', 'result', 'src', 'real',)

    def __init__(self, path, options, result, src=None, real=""):
        self.path = path
        self.options = options
        self.result = result
        self.src = src
        self.real = real

    def __repr__(self):
        return f"{type(self).__qualname__}(path={self.path!r}, options={self.options!r}, result={self.result!r}, src={self.src!r}, real={self.real!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.path, self.options, self.result, self.src, self.real) == (other.path, other.options, other.result, other.src, other.real)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key