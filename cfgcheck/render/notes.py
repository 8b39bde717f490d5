"""The "not checked" notes of a run, summarised: one line per rule and reason, with file counts.

A rule that lacks the GPU, the model or the row count says so once per file (an info finding
whose data holds ``judged: False``). Over a folder those notes repeat; the summary counts them
instead: "memory-exceeds-gpu not checked for 42 files: model not known offline (22 distinct
names)". The notes themselves stay findings (JSON carries them; text shows them with
``--show info``).
"""

from __future__ import annotations

import re
from typing import Any

from .._records import guarded_repr

_QUOTED = re.compile(r"'([^']*)'")
_DETAIL = re.compile(r"\s*\((?:[^()]*['/][^()]*|no model named)\)")


def is_note(finding) -> bool:
    """A "not checked" note (made by ``Context.cannot_judge``), not a finding about a value."""
    return finding.data.get("judged") is False


class NoteGroup:
    rule: str
    reason: str  # the reason without what differs per file (names, paths, feature lists)
    files: set[str]
    names: set[str]  # the distinct names the reasons quoted

    __slots__ = ('rule', 'reason', 'files', 'names')

    def __init__(self, rule, reason, files=None, names=None):
        self.rule = rule
        self.reason = reason
        self.files = set() if files is None else files
        self.names = set() if names is None else names

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(rule={self.rule!r}, reason={self.reason!r}, files={self.files!r}, names={self.names!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.rule, self.reason, self.files, self.names) == (other.rule, other.reason, other.files, other.names)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def _general(reason: str, data) -> tuple[str, list[str]]:
    """(the reason shared by every file, the names it quoted)."""
    names = _QUOTED.findall(reason)
    linked = data.get("linked")
    if isinstance(linked, str) and linked:
        names.append(linked)
        reason = " ".join(reason.replace(linked, "").split())
    # per-file detail: a parenthesis that quotes a name or shows a path, and what follows a ";"
    # (which features were not checked)
    reason = _DETAIL.sub("", reason)
    head = reason.split(";", 1)[0].strip()
    return (head or reason.strip()), names


GENERAL_CACHE_SIZE = 4096  # the distinct (reason, linked name) pairs a tally keeps worked out


class NoteTally:
    """The note groups of a run, kept as its findings go by (file by file)."""

    def __init__(self) -> None:
        self.groups: dict[tuple[str, str], NoteGroup] = {}
        # (reason, linked name) -> (general reason, the names it quoted): the same few reasons
        # come back file after file (a cache, bounded)
        self._general_cache: dict[tuple[str, Any], tuple[str, list[str]]] = {}

    def add(self, findings) -> None:
        groups = self.groups
        cache = self._general_cache
        for f in findings:
            data = f.data
            if data.get("judged") is not False:  # not a note (is_note)
                continue
            reason = str(data.get("reason", ""))
            linked = data.get("linked")
            if not isinstance(linked, str):
                linked = None  # _general looks only at a linked name that is text
            got = cache.get((reason, linked))
            if got is None:
                got = _general(reason, data)
                if len(cache) < GENERAL_CACHE_SIZE:
                    cache[(reason, linked)] = got
            general, names = got
            rule = f.rule
            g = groups.get((rule, general))
            if g is None:
                g = groups[(rule, general)] = NoteGroup(rule, general)
            g.files.add(f.file)
            if names:
                g.names.update(n for n in names if n)

    def summarise(self) -> list[NoteGroup]:
        """Note groups, most files first, then by rule and reason."""
        return sorted(self.groups.values(), key=lambda g: (-len(g.files), g.rule, g.reason))

    def lines(self) -> list[str]:
        """One text line per group."""
        out = []
        for g in self.summarise():
            n = len(g.files)
            names = f" ({len(g.names)} distinct name{'' if len(g.names) == 1 else 's'})" if g.names else ""
            out.append(f"not checked: {g.rule} for {n} file{'' if n == 1 else 's'}: {g.reason}{names}")
        return out


def summarise(findings) -> list[NoteGroup]:
    """Note groups, most files first, then by rule and reason."""
    tally = NoteTally()
    tally.add(findings)
    return tally.summarise()


def lines(findings) -> list[str]:
    """One text line per group."""
    tally = NoteTally()
    tally.add(findings)
    return tally.lines()
