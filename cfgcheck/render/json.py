"""JSON: an object with ``findings`` (rule, severity, file, line, column, key, message, hint)."""

from __future__ import annotations

from .. import __version__
from ..findings import Severity, Tally
from . import whole_output

_LISTS = ("findings", "input_errors", "internal_errors", "files", "waived")  # in the document's order


class Writer:
    """The JSON document written file by file (see ``render.spool``)."""

    def __init__(self, **_) -> None:
        from .jsonitems import JsonItems

        self.tally = Tally()
        self.lists = {name: JsonItems(indent=2) for name in _LISTS}

    def add(self, fr, shown, **_) -> None:
        self.tally.add(fr)
        lists = self.lists
        for f in shown:
            lists["findings"].add(f.as_dict())
        if fr.problem is not None:
            lists["input_errors"].add(fr.problem.as_dict())
        for e in fr.internal:
            lists["internal_errors"].add(e.as_dict())
        lists["files"].add({"file": fr.file, "layout": fr.layout, "skipped": fr.skipped,
                            "unreadable": fr.problem is not None})
        for f, reason, kind in fr.waived:
            lists["waived"].add(dict(f.as_dict(), reason=reason, waived_by=kind))

    def finding(self, f) -> None:
        self.lists["findings"].add(f.as_dict())

    def finish(self, write) -> None:
        from .jsonitems import json_document, spooled

        t = self.tally
        doc = {
            "tool": "cfgcheck",
            "version": __version__,
            "findings": spooled("findings"),
            "input_errors": spooled("input_errors"),
            "internal_errors": spooled("internal_errors"),
            "files": spooled("files"),
            "summary": {
                "checked": t.linted,
                "skipped": t.skipped,
                "unreadable": t.problems,
                "errors": t.count(Severity.ERROR),
                "warnings": t.count(Severity.WARNING),
                "info": t.count(Severity.INFO),
                "waived": t.waived,
                "baselined": t.baselined,
            },
            "waived": spooled("waived"),
        }
        json_document(doc, {name: [items] for name, items in self.lists.items()}, write)

    def close(self) -> None:
        for items in self.lists.values():
            items.close()


def render(report, visible, **_) -> str:
    w = Writer()
    return whole_output(w, report, visible)
