"""What a lint run produces: findings (about the config) and input problems (about the file).

Both are frozen, keyword-only records. Findings are created in one place only,
``engine.make_finding``, from a catalogue record and the data a check reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum
from typing import Any, Mapping


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
            raise ValueError(f"unknown severity {text!r}: use error, warning or info") from None


@dataclass(frozen=True, kw_only=True)
class Edit:
    """One change a fix proposes: set the value at a key path, or insert a key."""

    path: tuple
    old: Any
    new: Any
    insert: bool = False  # True when the key does not exist yet
    after: tuple | None = None  # for an insertion: the sibling key path to place it after


@dataclass(frozen=True, kw_only=True)
class Fix:
    tier: str  # "keeps-meaning" (applied by default) | "changes-training" (only when asked)
    summary: str
    edits: tuple[Edit, ...]


@dataclass(frozen=True, kw_only=True)
class Related:
    """Another place the same cause is written (one cause, one finding)."""

    key: str
    line: int
    column: int


@dataclass(frozen=True, kw_only=True)
class Finding:
    rule: str
    severity: Severity
    file: str
    line: int
    column: int
    key: str  # dotted key path as written, "" for the whole document
    message: str
    hint: str
    data: Mapping[str, Any] = field(default_factory=dict)
    path: tuple = ()
    document: int = 0
    fix: Fix | None = None
    related: tuple[Related, ...] = ()  # other places of the same cause (located by the engine)

    def identity(self) -> tuple[str, str, str, str]:
        """Stable across line shifts: rule, file, key path and the values reported (data items
        that are line numbers, ``line`` or ``*_line``, are left out)."""
        import json  # only baselines ask; a lint run does not pay for the import

        values = json.dumps({k: v for k, v in self.data.items() if not _is_line(k)},
                            sort_keys=True, default=str)
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


@dataclass(frozen=True, kw_only=True)
class InputProblem:
    """The file could not be read as a config: not a finding about its values."""

    file: str
    line: int
    column: int
    reason: str

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "line": self.line, "column": self.column, "reason": self.reason}


@dataclass(frozen=True, kw_only=True)
class InternalError:
    """A rule raised: a bug in cfgcheck, reported apart from the findings."""

    file: str
    rule: str
    error: str

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "rule": self.rule, "error": self.error}
