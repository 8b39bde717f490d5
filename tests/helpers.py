"""Small helpers: lint a text and get (rule, key, line) back."""

from __future__ import annotations

from cfgcheck import api
from cfgcheck.findings import Severity


def lint(text: str, name: str = "case.yaml", fmt: str | None = None, **options):
    return api.lint_text(text, name, fmt=fmt, **options)


def found(text: str, name: str = "case.yaml", fmt: str | None = None, min_severity=Severity.WARNING,
          **options) -> list[tuple[str, str]]:
    """(rule, key) of every finding at or above min_severity."""
    report = lint(text, name, fmt, **options)
    assert report.problem is None, report.problem
    return sorted((f.rule, f.key) for f in report.findings if f.severity >= min_severity)
