"""GitHub Actions workflow commands: one ``::error``/``::warning``/``::notice`` line per finding.

The runner turns each line into an annotation on the file and line. Escaping follows the
documented workflow-command format: in the message ``%``, CR and LF become ``%25``, ``%0D``,
``%0A``; property values (file, title) also escape ``:`` and ``,`` as ``%3A`` and ``%2C``.
"""

from __future__ import annotations

from types import MappingProxyType


from ..findings import Severity, Tally, printable
from . import whole_output
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


class Writer:
    """GitHub output written file by file (see ``render.spool``): input errors, the findings
    shown, internal errors, then the summary line."""

    def __init__(self, **_) -> None:
        from .spool import Spool

        self.tally = Tally()
        self.hidden_info = 0
        self.problems, self.shown, self.internal = Spool(), Spool(), Spool()

    def add(self, fr, shown, *, hidden_info: int = 0, **_) -> None:
        self.tally.add(fr)
        self.hidden_info += hidden_info
        if fr.problem is not None:
            p = fr.problem
            self.problems.write(_line("error", p.file, p.line, p.column, "cfgcheck input error",
                                      printable(p.reason)) + "\n")
        for f in shown:
            self.finding(f)
        for e in fr.internal:
            self.internal.write(f"::error title={escape_property('cfgcheck internal error')}::"
                                + escape_data(printable(f"{e.file}: {e.where} failed: {e.error} (a bug in cfgcheck)"))
                                + "\n")

    def finding(self, f) -> None:
        # each piece printable on its own, so only cfgcheck's own line break separates them
        message = printable(f.message) + (f"\nhint: {printable(f.hint)}" if f.hint else "")
        self.shown.write(_line(COMMAND[f.severity], f.file, f.line, f.column, f"cfgcheck {f.rule}", message) + "\n")

    def finish(self, write) -> None:
        for spool in (self.problems, self.shown, self.internal):
            for piece in spool.read():
                write(piece)
        write(summary_line(self.tally, self.hidden_info) + "\n")

    def close(self) -> None:
        for spool in (self.problems, self.shown, self.internal):
            spool.close()


def render(report, visible, *, hidden_info: int = 0, **_) -> str:
    w = Writer()
    return whole_output(w, report, visible, hidden_info=hidden_info)
