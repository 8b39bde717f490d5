"""What a lint run produces: findings (about the config), input problems (about the file), and
the per-file and whole-run reports that hold them.

Both are frozen, keyword-only records. Findings are created in one place only,
``engine.make_finding``, from a catalogue record and the data a check reported.
"""

from __future__ import annotations

import functools
import re
from enum import IntEnum
from types import MappingProxyType
from typing import Any, Mapping

from ._patterns import later
from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr


class OptionError(ValueError):
    """An option value given by the caller that cfgcheck cannot use (an input error, exit 2)."""


class Severity(IntEnum):
    INFO = 10
    WARNING = 20
    ERROR = 30

    @property
    def word(self) -> str:
        return self.name.lower()

    @classmethod
    def parse(cls, text: str) -> "Severity":
        try:
            return cls[str(text).strip().upper()]
        except KeyError:
            raise OptionError(f"unknown severity {text!r}: use error, warning or info") from None


# --------------------------------------------------------------------------- huge numbers

# The largest magnitude a setting may have and still be used: 2**53, beyond which a float (IEEE 754
# binary64, what Python and the libraries compute with) no longer holds every integer exactly.
# No count, size, rate or step of a training run comes near it. The view sets a value beyond it
# aside (reported once by value-outside-schema), so no rule does arithmetic on it.
MAX_MAGNITUDE = 2 ** 53


_INF = float("inf")


def too_large(value: Any) -> bool:
    """A finite number (not a boolean) beyond MAX_MAGNITUDE."""
    t = type(value)
    if t is int:
        return value > MAX_MAGNITUDE or value < -MAX_MAGNITUDE
    if t is float:  # NaN and infinities are values of their own, judged by the rules
        return (value > MAX_MAGNITUDE or value < -MAX_MAGNITUDE) and value != _INF and value != -_INF
    if t is str or t is bool or value is None:
        return False
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return False
    if isinstance(value, float) and (value != value or value in (_INF, -_INF)):
        return False
    return abs(value) > MAX_MAGNITUDE


def number_text(value: Any) -> str:
    """A number for a message, short whatever its size: a 5,000-digit integer (which Python
    refuses to print past 4,300 digits) as "a 5,000-digit number"."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10 ** 30:
        v = abs(value)
        digits = max(1, int((v.bit_length() - 1) * 0.30102999566398120))  # log10(2), a lower bound
        while v >= 10 ** digits:
            digits += 1
        return f"{'-' if value < 0 else ''}a {digits:,}-digit number"
    return repr(value) if isinstance(value, float) else str(value)


def _shown_data(value: Any) -> Any:
    """Finding data with every huge number replaced by its short text (JSON and templates cannot
    print a 5,000-digit integer, and nobody should read one); lists, tuples and dicts copied."""
    t = type(value)
    if t is str or t is bool or value is None:
        return value
    if t is int or t is float:
        return number_text(value) if too_large(value) else value
    if t is list:
        return [_shown_data(v) for v in value]
    if t is tuple:
        return tuple([_shown_data(v) for v in value])
    if t is dict:
        return {k: _shown_data(v) for k, v in value.items()}
    # subclasses of those types
    if too_large(value):
        return number_text(value)
    if isinstance(value, (list, tuple)):
        return type(value)(_shown_data(v) for v in value) if isinstance(value, list) else \
            tuple(_shown_data(v) for v in value)
    if isinstance(value, dict):
        return {k: _shown_data(v) for k, v in value.items()}
    return value


def shown_data(data: Mapping[str, Any]) -> dict[str, Any]:
    """A new dict of DATA's items, each value as ``_shown_data`` gives it."""
    out = {}
    for k, v in data.items():
        t = type(v)
        if t is str or t is bool or v is None or (t is int and -MAX_MAGNITUDE <= v <= MAX_MAGNITUDE):
            out[k] = v
        else:
            out[k] = _shown_data(v)
    return out


# --------------------------------------------------------------------------- shown text

_NAMED = MappingProxyType({"\n": "\\n", "\r": "\\r", "\t": "\\t"})


def printable(text: str) -> str:
    """Text for a line-based output (text, GitHub annotations, plan): every character that is not
    printable (line breaks, escape codes, bidirectional controls, the lone surrogates of a file
    name that is not UTF-8) as a backslash escape, so a key or a file name can never start a
    line of its own or move the cursor. Printable text, non-ASCII letters and backslashes
    included, is kept as it is."""
    if text.isprintable():
        return text
    out = []
    for c in text:
        if c.isprintable():
            out.append(c)
        elif c in _NAMED:
            out.append(_NAMED[c])
        else:
            n = ord(c)
            out.append(f"\\x{n:02x}" if n < 0x100 else f"\\u{n:04x}" if n < 0x10000 else f"\\U{n:08x}")
    return "".join(out)


_SURROGATE = later("[\ud800-\udfff]")


def json_text(doc: Any, indent: int | None = 2) -> str:
    """JSON that any UTF-8 writer can write: non-ASCII text kept readable, but a lone surrogate
    (a file name that is not UTF-8, a JSON key written as "\\ud800") as its \\uXXXX escape, which
    reads back as the same string. Used by every JSON output and by baselines."""
    import json

    return escape_surrogates(json.dumps(doc, indent=indent, ensure_ascii=False))


def escape_surrogates(text: str) -> str:
    """JSON text with each lone surrogate as its \\uXXXX escape (see ``json_text``)."""
    return _SURROGATE.sub(_surrogate_escape, text)


def _surrogate_escape(m: re.Match) -> str:
    return f"\\u{ord(m.group()):04x}"


class Edit:
    """One change a fix proposes: set the value at a key path, or insert a key."""

    path: tuple
    old: Any
    new: Any
    insert: bool  # True when the key does not exist yet
    after: tuple | None  # for an insertion: the sibling key path to place it after

    __slots__ = ('path', 'old', 'new', 'insert', 'after')

    def __init__(self, *, path, old, new, insert=False, after=None):
        _setattr(self, 'path', path)
        _setattr(self, 'old', old)
        _setattr(self, 'new', new)
        _setattr(self, 'insert', insert)
        _setattr(self, 'after', after)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(path={self.path!r}, old={self.old!r}, new={self.new!r}, insert={self.insert!r}, after={self.after!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.path, self.old, self.new, self.insert, self.after) == (other.path, other.old, other.new, other.insert, other.after)
        return NotImplemented

    def __hash__(self):
        return hash((self.path, self.old, self.new, self.insert, self.after))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.path, self.old, self.new, self.insert, self.after)

    __setstate__ = _frozen_setstate


class Fix:
    tier: str  # "keeps-meaning" (applied by default) | "changes-training" (only when asked)
    summary: str
    edits: tuple[Edit, ...]

    __slots__ = ('tier', 'summary', 'edits')

    def __init__(self, *, tier, summary, edits):
        _setattr(self, 'tier', tier)
        _setattr(self, 'summary', summary)
        _setattr(self, 'edits', edits)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(tier={self.tier!r}, summary={self.summary!r}, edits={self.edits!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.tier, self.summary, self.edits) == (other.tier, other.summary, other.edits)
        return NotImplemented

    def __hash__(self):
        return hash((self.tier, self.summary, self.edits))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.tier, self.summary, self.edits)

    __setstate__ = _frozen_setstate


class Related:
    """Another place the same cause is written (one cause, one finding)."""

    key: str
    line: int
    column: int

    __slots__ = ('key', 'line', 'column')

    def __init__(self, *, key, line, column):
        _setattr(self, 'key', key)
        _setattr(self, 'line', line)
        _setattr(self, 'column', column)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(key={self.key!r}, line={self.line!r}, column={self.column!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.key, self.line, self.column) == (other.key, other.line, other.column)
        return NotImplemented

    def __hash__(self):
        return hash((self.key, self.line, self.column))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.key, self.line, self.column)

    __setstate__ = _frozen_setstate


class _FindingFields:
    """The fields of a Finding, free to set: ``new_finding`` fills one and makes it a Finding
    (same layout), which is several times quicker than a frozen record's ``__init__``."""

    __slots__ = ('rule', 'severity', 'file', 'line', 'column', 'key', 'message', 'hint', 'data', 'path', 'document', 'fix', 'related')


class Finding(_FindingFields):
    rule: str
    severity: Severity
    file: str
    line: int
    column: int
    key: str  # dotted key path as written, "" for the whole document
    message: str
    hint: str
    data: Mapping[str, Any]
    path: tuple
    document: int
    fix: Fix | None
    related: tuple[Related, ...]  # other places of the same cause (located by the engine)

    __slots__ = ()  # the fields are _FindingFields' slots
    _record_fields = _FindingFields.__slots__

    def __init__(self, *, rule, severity, file, line, column, key, message, hint, data=None, path=(), document=0, fix=None, related=()):
        _setattr(self, 'rule', rule)
        _setattr(self, 'severity', severity)
        _setattr(self, 'file', file)
        _setattr(self, 'line', line)
        _setattr(self, 'column', column)
        _setattr(self, 'key', key)
        _setattr(self, 'message', message)
        _setattr(self, 'hint', hint)
        _setattr(self, 'data', {} if data is None else data)
        _setattr(self, 'path', path)
        _setattr(self, 'document', document)
        _setattr(self, 'fix', fix)
        _setattr(self, 'related', related)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(rule={self.rule!r}, severity={self.severity!r}, file={self.file!r}, line={self.line!r}, column={self.column!r}, key={self.key!r}, message={self.message!r}, hint={self.hint!r}, data={self.data!r}, path={self.path!r}, document={self.document!r}, fix={self.fix!r}, related={self.related!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.rule, self.severity, self.file, self.line, self.column, self.key, self.message, self.hint, self.data, self.path, self.document, self.fix, self.related) == (other.rule, other.severity, other.file, other.line, other.column, other.key, other.message, other.hint, other.data, other.path, other.document, other.fix, other.related)
        return NotImplemented

    def __hash__(self):
        return hash((self.rule, self.severity, self.file, self.line, self.column, self.key, self.message, self.hint, self.data, self.path, self.document, self.fix, self.related))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.rule, self.severity, self.file, self.line, self.column, self.key, self.message, self.hint, self.data, self.path, self.document, self.fix, self.related)

    def __setstate__(self, state):
        # unpacked into the slots while the object is briefly a _FindingFields (same layout, free
        # to set): about a fifth of the time of one object.__setattr__ per field (a cached run's
        # reports and a worker's are unpickled finding by finding)
        _setattr(self, "__class__", _FindingFields)
        (self.rule, self.severity, self.file, self.line, self.column, self.key, self.message,
         self.hint, self.data, self.path, self.document, self.fix, self.related) = state
        _setattr(self, "__class__", Finding)

    def identity(self) -> tuple[str, str, str, str]:
        """Stable across line shifts: rule, file, key path and the values reported (data items
        that are line numbers, ``line`` or ``*_line``, are left out)."""
        values = _identity_encoder()({k: v for k, v in self.data.items()
                                      if k != "line" and not k.endswith("_line")})  # not _is_line
        return (self.rule, self.file, self.key, values)

    def as_dict(self) -> dict[str, Any]:
        out = {
            "rule": self.rule,
            "severity": self.severity.word,
            "file": self.file,
            "line": self.line,
            "column": self.column,
            "key": self.key,
            "message": self.message,
            "hint": self.hint,
            "data": {k: _plain(v) for k, v in self.data.items()},
            "fixable": self.fix.tier if self.fix else None,
        }
        if self.related:
            out["related"] = [{"key": r.key, "line": r.line, "column": r.column} for r in self.related]
        return out


_new_fields = _FindingFields.__new__


def new_finding(rule, severity, file, line, column, key, message, hint, data, path=(), document=0,
                fix=None, related=()) -> Finding:
    """``Finding(...)`` with its fields in order (DATA is not copied): how the engine makes one."""
    f = _new_fields(_FindingFields)
    f.rule = rule
    f.severity = severity
    f.file = file
    f.line = line
    f.column = column
    f.key = key
    f.message = message
    f.hint = hint
    f.data = data
    f.path = path
    f.document = document
    f.fix = fix
    f.related = related
    f.__class__ = Finding
    return f


@functools.cache
def _identity_encoder():
    """``json.dumps(..., sort_keys=True, default=str)`` as one encoder made once (baselines and
    SARIF fingerprints ask for it per finding; a lint in text does not import json for it)."""
    import json

    return json.JSONEncoder(sort_keys=True, default=str).encode


def _is_line(name: str) -> bool:
    return name == "line" or name.endswith("_line")


def _plain(value: Any) -> Any:
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    return str(value)


class InputProblem:
    """The file could not be read as a config: not a finding about its values."""

    file: str
    line: int
    column: int
    reason: str

    __slots__ = ('file', 'line', 'column', 'reason')

    def __init__(self, *, file, line, column, reason):
        _setattr(self, 'file', file)
        _setattr(self, 'line', line)
        _setattr(self, 'column', column)
        _setattr(self, 'reason', reason)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(file={self.file!r}, line={self.line!r}, column={self.column!r}, reason={self.reason!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.file, self.line, self.column, self.reason) == (other.file, other.line, other.column, other.reason)
        return NotImplemented

    def __hash__(self):
        return hash((self.file, self.line, self.column, self.reason))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.file, self.line, self.column, self.reason)

    __setstate__ = _frozen_setstate

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "line": self.line, "column": self.column, "reason": self.reason}


class InternalError:
    """A rule raised, or cfgcheck itself failed on a file outside any rule (``rule`` None):
    a bug in cfgcheck, reported apart from the findings."""

    file: str
    rule: str | None
    error: str

    __slots__ = ('file', 'rule', 'error')

    def __init__(self, *, file, rule, error):
        _setattr(self, 'file', file)
        _setattr(self, 'rule', rule)
        _setattr(self, 'error', error)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(file={self.file!r}, rule={self.rule!r}, error={self.error!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.file, self.rule, self.error) == (other.file, other.rule, other.error)
        return NotImplemented

    def __hash__(self):
        return hash((self.file, self.rule, self.error))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.file, self.rule, self.error)

    __setstate__ = _frozen_setstate

    @property
    def where(self) -> str:
        """``rule X`` or ``cfgcheck`` (outside the rules), for messages."""
        return f"rule {self.rule}" if self.rule else "cfgcheck outside the rules"

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "rule": self.rule, "error": self.error}


# --------------------------------------------------------------------------- results of a lint

class FileReport:
    file: str
    findings: list[Finding]
    problem: InputProblem | None
    skipped: str | None
    layout: str | None
    internal: list[InternalError]
    views: list  # the typed views (view.RunView) the rules judged
    waived: list[tuple[Finding, str, str]]  # (finding, reason, "comment" | "project")
    baselined: int  # findings hidden because the baseline holds them
    compose_problem: str | None  # why a composed config could not be put together

    def __init__(self, file, findings=None, problem=None, skipped=None, layout=None, internal=None, views=None, waived=None, baselined=0, compose_problem=None):
        self.file = file
        self.findings = [] if findings is None else findings
        self.problem = problem
        self.skipped = skipped
        self.layout = layout
        self.internal = [] if internal is None else internal
        self.views = [] if views is None else views
        self.waived = [] if waived is None else waived
        self.baselined = baselined
        self.compose_problem = compose_problem

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(file={self.file!r}, findings={self.findings!r}, problem={self.problem!r}, skipped={self.skipped!r}, layout={self.layout!r}, internal={self.internal!r}, views={self.views!r}, waived={self.waived!r}, baselined={self.baselined!r}, compose_problem={self.compose_problem!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.file, self.findings, self.problem, self.skipped, self.layout, self.internal, self.views, self.waived, self.baselined, self.compose_problem) == (other.file, other.findings, other.problem, other.skipped, other.layout, other.internal, other.views, other.waived, other.baselined, other.compose_problem)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


_UNREAD = later(r"\(([\w-]+)\): not a format cfgcheck reads \(yet\)$")
NOT_READ = "not read: "  # how a skipped reason starts for valid input this version does not follow
NOT_READ_NAMED = 3  # files a summary names among those not read


class Tally:
    """The counts a run's summary and exit status rest on, kept as the file reports go by, so a
    run that writes each report as it arrives keeps none of them (``add`` each report once,
    after the baseline has taken its findings)."""

    __slots__ = ("linted", "skipped", "problems", "internal", "waived", "baselined", "severities",
                 "unread", "unread_count", "not_read", "not_read_count")

    def __init__(self) -> None:
        self.linted = self.skipped = self.problems = self.internal = 0
        self.waived = self.baselined = 0
        self.severities: dict[Severity, int] = {}
        self.unread: set[str] = set()  # the formats named "not a format cfgcheck reads (yet)"
        self.unread_count = 0
        self.not_read: list[tuple[str, str]] = []  # the first NOT_READ_NAMED (file, why)
        self.not_read_count = 0

    @classmethod
    def of(cls, report: "Report") -> "Tally":
        tally = cls()
        for fr in report.files:
            tally.add(fr)
        return tally

    def add(self, fr: "FileReport") -> None:
        if fr.problem:
            self.problems += 1
        elif fr.skipped:
            self.skipped += 1
            m = _UNREAD.search(fr.skipped)
            if m:
                self.unread.add(m.group(1))
                self.unread_count += 1
            if fr.skipped.startswith(NOT_READ):
                self.not_read_count += 1
                if len(self.not_read) < NOT_READ_NAMED:
                    self.not_read.append((fr.file, fr.skipped[len(NOT_READ):]))
        else:
            self.linted += 1
        self.internal += len(fr.internal)
        self.waived += len(fr.waived)
        self.baselined += fr.baselined
        counts = self.severities
        for f in fr.findings:
            counts[f.severity] = counts.get(f.severity, 0) + 1

    def count(self, severity: Severity) -> int:
        return self.severities.get(severity, 0)

    def at_least(self, severity: Severity) -> int:
        """Findings at ``severity`` or above."""
        return sum(n for s, n in self.severities.items() if s >= severity)


class Report:
    files: list[FileReport]

    def __init__(self, files=None):
        self.files = [] if files is None else files

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(files={self.files!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.files,) == (other.files,)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    def tally(self) -> Tally:
        return Tally.of(self)

    @property
    def findings(self) -> list[Finding]:
        return [f for fr in self.files for f in fr.findings]

    @property
    def problems(self) -> list[InputProblem]:
        return [fr.problem for fr in self.files if fr.problem]

    @property
    def internal(self) -> list[InternalError]:
        return [e for fr in self.files for e in fr.internal]

    @property
    def linted(self) -> int:
        return sum(1 for fr in self.files if not fr.problem and not fr.skipped)

    @property
    def skipped(self) -> int:
        return sum(1 for fr in self.files if fr.skipped and not fr.problem)

    def count(self, severity: Severity) -> int:
        return sum(1 for f in self.findings if f.severity == severity)

    @property
    def waived(self) -> int:
        return sum(len(fr.waived) for fr in self.files)

    @property
    def baselined(self) -> int:
        return sum(fr.baselined for fr in self.files)


class BaselineError(Exception):
    """A baseline file that cannot be used (raised by cfgcheck.baseline), with its position."""

    def __init__(self, file: str, reason: str, line: int = 1, column: int = 1):
        self.file, self.reason, self.line, self.column = file, reason, line, column
        super().__init__(f"{printable(file)}:{line}:{column}: baseline: {printable(reason)}")
