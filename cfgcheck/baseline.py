"""Baselines: record today's findings so that later runs report only new ones.

A finding is matched by its identity (rule, file, key path, values; see ``Finding.identity``),
never by its line, so edits elsewhere in a file do not bring recorded findings back. Files are
recorded relative to the folder of the baseline file, so the baseline works from any working
folder and on any machine. Matching counts: if a file held a finding twice when recorded and
holds it three times now, one is new.
"""

from __future__ import annotations

import json
import os
import re
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from .findings import Report
from .findings import BaselineError, Finding, json_text, printable  # noqa: F401  (BaselineError: re-exported)

KIND = "cfgcheck-baseline"
VERSION = 1


def _rel(file: str, folder: Path) -> str:
    if file.startswith("<"):  # "<text>", "<mapping>": in-memory, no path
        return file
    full = os.path.abspath(file)
    try:
        return Path(os.path.relpath(full, folder)).as_posix()
    except ValueError:  # another drive on Windows
        return Path(full).as_posix()


def key_of(finding: Finding, folder: Path) -> tuple[str, str, str, str]:
    rule, file, key, values = finding.identity()
    return (rule, _rel(file, folder), key, values)


@dataclass
class Baseline:
    path: Path
    known: Counter

    def filter(self, report: Report) -> int:
        """Remove the findings the baseline holds from ``report``; returns how many."""
        held = self.matcher()
        return sum(held.take(fr) for fr in report.files)

    def matcher(self) -> "Matcher":
        """Takes the findings the baseline holds out of file reports given one at a time, in
        the run's order (as ``filter`` does for a whole report)."""
        return Matcher(self.path.parent, Counter(self.known))


class Matcher:
    def __init__(self, folder: Path, left: Counter):
        self.folder, self.left = folder, left

    def take(self, fr) -> int:
        """Remove from ``fr`` the findings still unmatched in the baseline; returns how many."""
        left, folder = self.left, self.folder
        kept = []
        hidden = 0
        for f in fr.findings:
            k = key_of(f, folder)
            if left[k] > 0:
                left[k] -= 1
                fr.baselined += 1
                hidden += 1
            else:
                kept.append(f)
        fr.findings = kept
        return hidden


MAX_BYTES = 32 * 1024 * 1024  # a baseline file; about 150,000 recorded findings
MAX_DEPTH = 16  # nesting of a baseline: the file's own levels and each finding's values


_TOO_DEEP = object()


def _deeper_than(doc, limit: int) -> bool:
    """Whether parsed JSON nests more than ``limit`` levels (no recursion; scalars not visited)."""
    stack = [(doc, 1)] if isinstance(doc, (dict, list)) else []
    while stack:
        value, depth = stack.pop()
        if depth > limit:
            return True
        for v in (value.values() if isinstance(value, dict) else value):
            if isinstance(v, (dict, list)):
                stack.append((v, depth + 1))
    return False


_VALUES = json.JSONEncoder(sort_keys=True, default=str)  # as Finding.identity() writes values


def _depth_within(text: str, limit: int) -> int | None:
    """The offset of the first bracket nested deeper than ``limit`` (strings skipped), else None.
    One pass, no recursion; used only to place the error once the file is known to be too deep."""
    depth = 0
    for m in _TOKENS.finditer(text):
        c = m.group()
        if c in "[{":
            depth += 1
            if depth > limit:
                return m.start()
        elif c in "]}":
            depth -= 1
    return None


_TOKENS = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"|[\[\]{}]')


def save(report: Report, path: str | Path) -> int:
    """Write every finding of ``report`` to ``path``; returns how many were written.
    Raises BaselineError when the file cannot be written (nothing is left half written)."""
    path = Path(os.path.abspath(path))
    folder = path.parent
    rows = []
    for f in report.findings:
        rule, file, key, values = key_of(f, folder)
        rows.append({"rule": rule, "file": file, "key": key, "values": json.loads(values),
                     "message": f.message})
    rows.sort(key=lambda r: (r["file"], r["rule"], r["key"], json.dumps(r["values"], sort_keys=True)))
    doc = {"kind": KIND, "version": VERSION, "findings": rows}
    text = json_text(doc) + "\n"  # a lone surrogate (a file name that is not UTF-8) escaped
    tmp = path.with_name(path.name + ".tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except OSError as exc:
        try:
            tmp.unlink()
        except OSError:
            pass
        raise BaselineError(str(path), f"cannot write: {exc.strerror or exc}") from None
    return len(rows)


def load(path: str | Path) -> Baseline:
    """Read a baseline; raises BaselineError (never anything else) for a file that is not one.
    Read through the same guarded reader as a config (no FIFO, device or endless file is read,
    at most MAX_BYTES), nesting checked before parsing."""
    from .load import LoadError, read_source

    path = Path(os.path.abspath(path))
    name = str(path)
    try:
        text = read_source(path, MAX_BYTES, "a baseline").text
    except LoadError as exc:
        if exc.reason == "no such file":
            raise BaselineError(name, "no such file (write one with --save-baseline)") from None
        raise BaselineError(name, exc.reason, exc.line, exc.column) from None
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise BaselineError(name, f"invalid JSON: {exc.msg}", exc.lineno, exc.colno) from None
    except RecursionError:  # the json module recurses per level and stops at the recursion limit
        doc = _TOO_DEEP
    except ValueError as exc:  # an integer too long to read, say
        raise BaselineError(name, f"invalid JSON: {str(exc).split(';')[0]}") from None
    if doc is _TOO_DEEP or _deeper_than(doc, MAX_DEPTH):
        deep = _depth_within(text, MAX_DEPTH) or 0  # only now: where it goes too deep
        line = text.count("\n", 0, deep) + 1
        raise BaselineError(name, f"nested more than {MAX_DEPTH} levels deep; not a cfgcheck baseline",
                            line, deep - (text.rfind("\n", 0, deep) + 1) + 1)
    if not isinstance(doc, dict) or doc.get("kind") != KIND:
        raise BaselineError(name, f"not a cfgcheck baseline (no \"kind\": \"{KIND}\")")
    if doc.get("version") != VERSION:
        shown = doc.get("version")
        shown = shown if isinstance(shown, (int, float)) and abs(shown) < 10**9 else type(shown).__name__
        raise BaselineError(name, f"baseline version {shown!r}; this cfgcheck reads version {VERSION}")
    rows = doc.get("findings", [])
    if not isinstance(rows, list):
        raise BaselineError(name, f"\"findings\" is {_kind(rows)}, not a list of findings")
    known: Counter = Counter()
    for i, row in enumerate(rows):
        if not isinstance(row, dict) or not all(isinstance(row.get(k), str) for k in ("rule", "file", "key")) \
                or "values" not in row:
            raise BaselineError(name, f"finding {i} lacks rule, file, key (texts) or values")
        try:
            values = _VALUES.encode(row["values"])
        except (TypeError, ValueError):
            raise BaselineError(name, f"finding {i}: its values cannot be compared") from None
        known[(row["rule"], row["file"], row["key"], values)] += 1
    return Baseline(path=path, known=known)


def _kind(value) -> str:
    return {dict: "a mapping", str: "a text", bool: "a boolean", type(None): "null"}.get(
        type(value), "a number" if isinstance(value, (int, float)) else type(value).__name__)
