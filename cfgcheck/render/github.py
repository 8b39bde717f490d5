"""GitHub Actions workflow commands: one ``::error``/``::warning``/``::notice`` line per finding.

The runner turns each line into an annotation on the file and line. Escaping follows the
documented workflow-command format: in the message ``%``, CR and LF become ``%25``, ``%0D``,
``%0A``; property values (file, title) also escape ``:`` and ``,`` as ``%3A`` and ``%2C``.
"""

from __future__ import annotations

from types import MappingProxyType


from ..findings import Severity, printable
from .text import summary_line

COMMAND = MappingProxyType({Severity.ERROR: "error", Severity.WARNING: "warning", Severity.INFO: "notice"})


def escape_data(text: str) -> str:
    """Escape a message (which may hold the line breaks cfgcheck puts there itself)."""
    return text.replace("%", "%25").replace("\r", "%0D").replace("\n", "%0A")


def escape_property(text: str) -> str:
    return escape_data(text).replace(":", "%3A").replace(",", "%2C")


def _line(command: str, file: str, line: int, column: int, title: str, message: str) -> str:
    # the file name is made printable first (as in text output), then escaped for the command
    props = (f"file={escape_property(printable(file))},line={line},col={column},"
             f"title={escape_property(title)}")
    return f"::{command} {props}::{escape_data(message)}"


def render(report, visible, *, hidden_info: int = 0, **_) -> str:
    lines = []
    for p in report.problems:
        lines.append(_line("error", p.file, p.line, p.column, "cfgcheck input error", printable(p.reason)))
    for f in visible:
        # each piece printable on its own, so only cfgcheck's own line break separates them
        message = printable(f.message) + (f"\nhint: {printable(f.hint)}" if f.hint else "")
        lines.append(_line(COMMAND[f.severity], f.file, f.line, f.column, f"cfgcheck {f.rule}", message))
    for e in report.internal:
        lines.append(f"::error title={escape_property('cfgcheck internal error')}::"
                     + escape_data(printable(f"{e.file}: {e.where} failed: {e.error} (a bug in cfgcheck)")))
    lines.append(summary_line(report, hidden_info))
    return "\n".join(lines) + "\n"
