"""Plain text: one GNU-style ``file:line:column: severity: message [rule]`` line per finding."""

from __future__ import annotations

from ..findings import Severity


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def summary_line(report, hidden_info: int = 0) -> str:
    errors = report.count(Severity.ERROR)
    warnings = report.count(Severity.WARNING)
    infos = report.count(Severity.INFO)
    parts = [f"{_plural(report.linted, 'config')} checked"]
    if report.skipped:
        parts.append(f"{report.skipped} skipped (not training configs)")
    if report.problems:
        parts.append(f"{len(report.problems)} unreadable")
    counts = f"{_plural(errors, 'error')}, {_plural(warnings, 'warning')}, {infos} info"
    line = "cfgcheck: " + ", ".join(parts) + f"; {counts}"
    if hidden_info:
        line += f" ({hidden_info} info not shown: --show info)"
    return line


def render(report, visible, *, hidden_info: int = 0, color: bool = False, **_) -> str:
    lines: list[str] = []
    for p in report.problems:
        lines.append(f"{p.file}:{p.line}:{p.column}: input error: {p.reason}")
    for f in visible:
        lines.append(f"{f.file}:{f.line}:{f.column}: {f.severity.word}: {f.message} [{f.rule}]")
        if f.hint:
            lines.append(f"    hint: {f.hint}")
    for e in report.internal:
        lines.append(f"{e.file}: internal error in rule {e.rule}: {e.error} (a bug in cfgcheck; "
                     "the other rules ran)")
    lines.append(summary_line(report, hidden_info))
    return "\n".join(lines) + "\n"
