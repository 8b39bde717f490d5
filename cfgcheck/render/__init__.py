"""Formatters: pure functions of (findings, run info) -> text. One module per format."""

from __future__ import annotations

import importlib

FORMATS = ("text", "json", "sarif", "github")


def render(fmt: str, report, visible, **kw) -> str:
    module = importlib.import_module(f"{__name__}.{fmt}")
    return module.render(report, visible, **kw)
