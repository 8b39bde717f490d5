"""JSON: an object with ``findings`` (rule, severity, file, line, column, key, message, hint)."""

from __future__ import annotations

from types import MappingProxyType

from .. import __version__
from ..findings import Severity, Tally
from . import whole_output
from .jsonitems import _int_text, _string, data_text, text_of

_LISTS = ("findings", "input_errors", "internal_errors", "files", "waived")  # in the document's order


_WORD = MappingProxyType({s: s.word for s in Severity})


def finding_text(f, pad: str) -> str:
    """``jsonitems.indented(f.as_dict(), pad)`` (less its escaping of lone surrogates), written
    straight from the finding's fields: most of what a JSON output writes."""
    p = pad + "  "
    s = ",\n" + p  # between two members
    fix = f.fix
    severity = f.severity
    rule, file, key, message, hint, line, column = f.rule, f.file, f.key, f.message, f.hint, f.line, f.column
    # one f-string: no list to build and join, nothing for the garbage collector to track
    text = (f'{{\n{p}"rule": {_string(rule) if type(rule) is str else text_of(rule, p)}'
            f'{s}"severity": {_string(_WORD[severity]) if severity in _WORD else text_of(severity.word, p)}'
            f'{s}"file": {_string(file) if type(file) is str else text_of(file, p)}'
            f'{s}"line": {_int_text(line) if type(line) is int else text_of(line, p)}'
            f'{s}"column": {_int_text(column) if type(column) is int else text_of(column, p)}'
            f'{s}"key": {_string(key) if type(key) is str else text_of(key, p)}'
            f'{s}"message": {_string(message) if type(message) is str else text_of(message, p)}'
            f'{s}"hint": {_string(hint) if type(hint) is str else text_of(hint, p)}'
            f'{s}"data": {data_text(f.data, p)}'
            f'{s}"fixable": {text_of(fix.tier, p) if fix else "null"}')
    if f.related:
        text += s + '"related": ' + text_of([{"key": r.key, "line": r.line, "column": r.column}
                                            for r in f.related], p)
    return f"{text}\n{pad}}}"


class Writer:
    """The JSON document written file by file (see ``render.spool``)."""

    def __init__(self, **_) -> None:
        from .jsonitems import JsonItems

        self.tally = Tally()
        self.lists = {name: JsonItems(indent=2) for name in _LISTS}

    def add(self, fr, shown, **_) -> None:
        self.tally.add(fr)
        lists = self.lists
        findings = lists["findings"]
        pad = findings.pad
        for f in shown:
            findings.add_text(finding_text(f, pad))
        if fr.problem is not None:
            lists["input_errors"].add(fr.problem.as_dict())
        for e in fr.internal:
            lists["internal_errors"].add(e.as_dict())
        lists["files"].add({"file": fr.file, "layout": fr.layout, "skipped": fr.skipped,
                            "unreadable": fr.problem is not None})
        for f, reason, kind in fr.waived:
            lists["waived"].add(dict(f.as_dict(), reason=reason, waived_by=kind))

    def finding(self, f) -> None:
        findings = self.lists["findings"]
        findings.add_text(finding_text(f, findings.pad))

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
