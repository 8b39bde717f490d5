"""JSON: an object with ``findings`` (rule, severity, file, line, column, key, message, hint)."""

from __future__ import annotations

from .. import __version__
from ..findings import Severity, json_text


def render(report, visible, **_) -> str:
    doc = {
        "tool": "cfgcheck",
        "version": __version__,
        "findings": [f.as_dict() for f in visible],
        "input_errors": [p.as_dict() for p in report.problems],
        "internal_errors": [e.as_dict() for e in report.internal],
        "files": [
            {"file": fr.file, "layout": fr.layout, "skipped": fr.skipped,
             "unreadable": fr.problem is not None}
            for fr in report.files
        ],
        "summary": {
            "checked": report.linted,
            "skipped": report.skipped,
            "unreadable": len(report.problems),
            "errors": report.count(Severity.ERROR),
            "warnings": report.count(Severity.WARNING),
            "info": report.count(Severity.INFO),
            "waived": report.waived,
            "baselined": report.baselined,
        },
        "waived": [dict(f.as_dict(), reason=reason, waived_by=kind)
                   for fr in report.files for f, reason, kind in fr.waived],
    }
    return json_text(doc) + "\n"
