"""Plain text: one GNU-style ``file:line:column: severity: message [rule]`` line per finding.

Options (all off by default, so piped output stays plain): ``color`` (ANSI SGR colours),
``frames`` (file -> its lines: print the offending line, the value set off by ``>>`` ``<<``),
``mode`` ("full", "quiet": finding lines only, "summary": the summary line only).
"""

from __future__ import annotations

from types import MappingProxyType

from ..findings import NOT_READ_NAMED, Severity, Tally, printable
from . import whole_output

_SGR = MappingProxyType({"error": "1;31", "warning": "1;33", "info": "1;36", "where": "1", "rule": "2",
        "hint": "32", "mark": "1;4", "summary": "1"})
_WORD = MappingProxyType({s: s.word for s in Severity})
MAX_FRAME = 120  # characters of a source line shown around the column


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _paint(text: str, what: str, color: bool) -> str:
    return f"\x1b[{_SGR[what]}m{text}\x1b[0m" if color and text else text


def summary_line(report, hidden_info: int = 0) -> str:
    """The last line of a run: counts of what was checked, skipped and found. ``report``: a
    ``findings.Report`` or the ``findings.Tally`` of a run written as it went."""
    tally = report if isinstance(report, Tally) else Tally.of(report)
    errors = tally.count(Severity.ERROR)
    warnings = tally.count(Severity.WARNING)
    infos = tally.count(Severity.INFO)
    parts = [f"{_plural(tally.linted, 'config')} checked"]
    unread_count, not_read = tally.unread_count, tally.not_read_count
    if tally.skipped - unread_count - not_read:
        parts.append(f"{tally.skipped - unread_count - not_read} skipped (not training configs)")
    if not_read:  # valid input this version does not follow: named, with why
        named = "; ".join(f"{file}: {why}" for file, why in tally.not_read[:NOT_READ_NAMED])
        parts.append(f"{not_read} not read ({named}{'; ...' if not_read > NOT_READ_NAMED else ''})")
    if unread_count:
        parts.append(f"{unread_count} not a format cfgcheck reads (yet): {', '.join(sorted(tally.unread))}")
    if tally.problems:
        parts.append(f"{tally.problems} unreadable")
    counts = f"{_plural(errors, 'error')}, {_plural(warnings, 'warning')}, {infos} info"
    line = "cfgcheck: " + ", ".join(parts) + f"; {counts}"
    extra = []
    if tally.waived:
        extra.append(f"{tally.waived} waived")
    if tally.baselined:
        extra.append(f"{tally.baselined} in the baseline")
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


class Writer:
    """Text output written file by file (see ``render.spool``): input errors, then the findings
    shown, then internal errors, the "not checked" notes and the summary line."""

    def __init__(self, *, color: bool = False, frames: dict[str, list[str]] | None = None,
                 mode: str = "full", **_) -> None:
        from .notes import NoteTally
        from .spool import Spool

        self.color, self.frames, self.mode = color, frames, mode
        self.tally = Tally()
        self.notes = NoteTally()
        self.hidden_info = 0
        self.problems, self.shown, self.internal = Spool(), Spool(), Spool()

    def add(self, fr, shown, *, hidden_info: int = 0, frames: dict[str, list[str]] | None = None) -> None:
        """One file's report (its findings after the baseline) and the findings of it to print;
        ``frames``: the lines of the files those findings are in (else the writer's own)."""
        self.tally.add(fr)
        self.hidden_info += hidden_info
        if self.mode == "summary":
            return
        color = self.color
        if fr.problem is not None:
            p = fr.problem
            self.problems.write(f"{_paint(f'{printable(p.file)}:{p.line}:{p.column}:', 'where', color)} "
                                f"{_paint('input error', 'error', color)}: {printable(p.reason)}\n")
        for f in shown:
            self.finding(f, frames)
        for e in fr.internal:
            rest = "the other rules ran" if e.rule else "the other files were checked"
            self.internal.write(f"{printable(e.file)}: internal error in {e.where}: {printable(e.error)} "
                                f"(a bug in cfgcheck; {rest})\n")
        if self.mode != "quiet":
            self.notes.add(fr.findings)

    def finding(self, f, frames: dict[str, list[str]] | None = None) -> None:
        # every text that comes from a file (names, keys, values inside messages) goes through
        # printable(): a key holding a line break cannot print a line that looks like a finding
        mode = self.mode
        if mode == "summary":
            return
        color = self.color
        severity = f.severity
        word = _WORD[severity] if severity in _WORD else severity.word
        if color:
            text = (f"{_paint(f'{printable(f.file)}:{f.line}:{f.column}:', 'where', color)} "
                    f"{_paint(word, word, color)}: {printable(f.message)} "
                    f"{_paint(f'[{f.rule}]', 'rule', color)}")
        else:  # _paint leaves the text as it is
            text = f"{printable(f.file)}:{f.line}:{f.column}: {word}: {printable(f.message)} [{f.rule}]"
        if mode != "quiet":
            lines = [text]
            frames = frames if frames is not None else self.frames
            if frames is not None and f.file in frames:
                lines.extend(frame(frames[f.file], f.line, f.column, color))
            for r in getattr(f, "related", ()):
                lines.append(f"    also: {_paint(f'{f.file}:{r.line}:{r.column}:', 'where', color)} {r.key}")
            if f.hint:
                lines.append(f"    {_paint('hint', 'hint', color)}: {printable(f.hint)}")
            data = f.data
            composed = data.get("overrides")
            if isinstance(composed, str):  # a composed config: which file won
                lines.append(f"    composed: {printable(composed)}")
            sweep = data.get("sweep")
            if isinstance(sweep, str):  # a sweep: which of its runs
                lines.append(f"    sweep: {printable(sweep)}")
            text = "\n".join(lines)
        self.shown.write(text + "\n")

    def finish(self, write) -> None:
        """Write the whole output with ``write(text)`` (called with pieces)."""
        if self.mode == "summary":
            write(summary_line(self.tally, self.hidden_info) + "\n")
            return
        for spool in (self.problems, self.shown, self.internal):
            for piece in spool.read():
                write(piece)
        if self.mode != "quiet":
            tail = [f"cfgcheck: {line}" for line in self.notes.lines()]
            tail.append(_paint(summary_line(self.tally, self.hidden_info), "summary", self.color))
            write("\n".join(tail) + "\n")

    def close(self) -> None:
        for spool in (self.problems, self.shown, self.internal):
            spool.close()


def render(report, visible, *, hidden_info: int = 0, color: bool = False,
           frames: dict[str, list[str]] | None = None, mode: str = "full", **_) -> str:
    w = Writer(color=color, frames=frames, mode=mode)
    return whole_output(w, report, visible, hidden_info=hidden_info)
