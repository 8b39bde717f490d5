"""Plain text: one GNU-style ``file:line:column: severity: message [rule]`` line per finding.

Options (all off by default, so piped output stays plain): ``color`` (ANSI SGR colours),
``frames`` (file -> its lines: print the offending line, the value set off by ``>>`` ``<<``),
``mode`` ("full", "quiet": finding lines only, "summary": the summary line only).
"""

from __future__ import annotations

import re
from types import MappingProxyType

from ..findings import Severity, printable

_SGR = MappingProxyType({"error": "1;31", "warning": "1;33", "info": "1;36", "where": "1", "rule": "2",
        "hint": "32", "mark": "1;4", "summary": "1"})
MAX_FRAME = 120  # characters of a source line shown around the column


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _paint(text: str, what: str, color: bool) -> str:
    return f"\x1b[{_SGR[what]}m{text}\x1b[0m" if color and text else text


_UNREAD = re.compile(r"\(([\w-]+)\): not a format cfgcheck reads \(yet\)$")


def summary_line(report, hidden_info: int = 0) -> str:
    errors = report.count(Severity.ERROR)
    warnings = report.count(Severity.WARNING)
    infos = report.count(Severity.INFO)
    parts = [f"{_plural(report.linted, 'config')} checked"]
    files = getattr(report, "files", [])
    unread = sorted({m.group(1) for fr in files if fr.skipped and not fr.problem
                     and (m := _UNREAD.search(fr.skipped))})
    unread_count = sum(1 for fr in files if fr.skipped and not fr.problem and _UNREAD.search(fr.skipped))
    not_read = [fr for fr in files if fr.skipped and not fr.problem and fr.skipped.startswith("not read: ")]
    if report.skipped - unread_count - len(not_read):
        parts.append(f"{report.skipped - unread_count - len(not_read)} skipped (not training configs)")
    if not_read:  # valid input this version does not follow: named, with why
        named = "; ".join(f"{fr.file}: {fr.skipped[len('not read: '):]}" for fr in not_read[:3])
        parts.append(f"{len(not_read)} not read ({named}{'; ...' if len(not_read) > 3 else ''})")
    if unread_count:
        parts.append(f"{unread_count} not a format cfgcheck reads (yet): {', '.join(unread)}")
    if report.problems:
        parts.append(f"{len(report.problems)} unreadable")
    counts = f"{_plural(errors, 'error')}, {_plural(warnings, 'warning')}, {infos} info"
    line = "cfgcheck: " + ", ".join(parts) + f"; {counts}"
    extra = []
    if getattr(report, "waived", 0):
        extra.append(f"{report.waived} waived")
    if getattr(report, "baselined", 0):
        extra.append(f"{report.baselined} in the baseline")
    if extra:
        line += "; " + ", ".join(extra) + " (not counted)"
    if hidden_info:
        line += f" ({hidden_info} info not shown: --show info)"
    return line


def _printable(text: str) -> str:
    return "".join(c if c == "\t" or c.isprintable() else "?" for c in text)


def _value_end(src: str, start: int) -> int:
    """Where the written value that starts at ``start`` ends: a quoted scalar at its closing
    quote; in a flow mapping or list (or JSON) at the next separator; else before a comment."""
    if start >= len(src):
        return start
    q = src[start]
    if q in "\"'":
        i = start + 1
        while i < len(src):
            if src[i] == "\\" and q == '"':
                i += 2
                continue
            if src[i] == q:
                if q == "'" and src[i + 1:i + 2] == "'":  # '' inside a single-quoted scalar
                    i += 2
                    continue
                return i + 1
            i += 1
        return len(src)
    flow = "{" in src[:start] or "[" in src[:start]
    end = len(src)
    for stop in ((" #", ",", "}", "]") if flow else (" #",)):
        k = src.find(stop, start)
        if k != -1:
            end = min(end, k)
    while end > start and src[end - 1] in " \t":
        end -= 1
    return end


def frame(lines: list[str], line: int, column: int, color: bool = False) -> list[str]:
    """The source line, the value at ``column`` set off between ``>>`` and ``<<``; [] when the
    line is not there. A long line is cut to about MAX_FRAME characters around the value."""
    if not 1 <= line <= len(lines):
        return []
    src = _printable(lines[line - 1].rstrip("\r\n"))
    col = max(1, min(column, len(src) + 1)) - 1
    end = max(_value_end(src, col), col)
    head, value, tail = src[:col], src[col:end], src[end:]
    room = max(0, MAX_FRAME - len(value)) // 2
    if len(head) > room:
        head = "..." + head[len(head) - room:]
    if len(tail) > room:
        tail = tail[:room] + "..."
    if len(value) > MAX_FRAME:
        value = value[:MAX_FRAME] + "..."
    marked = _paint(f">>{value}<<", "mark", color)
    return [f"    in line {line}: {head}{marked}{tail}"]


def render(report, visible, *, hidden_info: int = 0, color: bool = False,
           frames: dict[str, list[str]] | None = None, mode: str = "full", **_) -> str:
    if mode == "summary":
        return summary_line(report, hidden_info) + "\n"
    lines: list[str] = []
    # every text that comes from a file (names, keys, values inside messages) goes through
    # printable(): a key holding a line break cannot print a line that looks like a finding
    for p in report.problems:
        lines.append(f"{_paint(f'{printable(p.file)}:{p.line}:{p.column}:', 'where', color)} "
                     f"{_paint('input error', 'error', color)}: {printable(p.reason)}")
    for f in visible:
        word = f.severity.word
        lines.append(f"{_paint(f'{printable(f.file)}:{f.line}:{f.column}:', 'where', color)} "
                     f"{_paint(word, word, color)}: {printable(f.message)} "
                     f"{_paint(f'[{f.rule}]', 'rule', color)}")
        if mode == "quiet":
            continue
        if frames is not None and f.file in frames:
            lines.extend(frame(frames[f.file], f.line, f.column, color))
        for r in getattr(f, "related", ()):
            lines.append(f"    also: {_paint(f'{f.file}:{r.line}:{r.column}:', 'where', color)} {r.key}")
        if f.hint:
            lines.append(f"    {_paint('hint', 'hint', color)}: {printable(f.hint)}")
        if isinstance(f.data.get("overrides"), str):  # a composed config: which file won
            lines.append(f"    composed: {printable(f.data['overrides'])}")
        if isinstance(f.data.get("sweep"), str):  # a sweep: which of its runs
            lines.append(f"    sweep: {printable(f.data['sweep'])}")
    for e in report.internal:
        rest = "the other rules ran" if e.rule else "the other files were checked"
        lines.append(f"{printable(e.file)}: internal error in {e.where}: {printable(e.error)} "
                     f"(a bug in cfgcheck; {rest})")
    if mode != "quiet":
        from .notes import lines as note_lines  # "not checked" notes, counted per run

        lines.extend(f"cfgcheck: {line}" for line in note_lines(report.findings))
        lines.append(_paint(summary_line(report, hidden_info), "summary", color))
    return "\n".join(lines) + "\n" if lines else ""
