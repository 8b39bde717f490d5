"""Formatters: pure functions of (findings, run info) -> text. One module per format."""

from __future__ import annotations

import importlib

FORMATS = ("text", "json", "sarif", "github")


def render(fmt: str, report, visible, **kw) -> str:
    module = importlib.import_module(f"{__name__}.{fmt}")
    return module.render(report, visible, **kw)


def writer(fmt: str, **kw):
    """The format's ``Writer``: ``add(file_report, shown, hidden_info=, frames=)`` for each file
    in order (after the baseline), then ``finish(write)`` writes the whole output and ``close()``
    drops what it held (see render/spool.py)."""
    module = importlib.import_module(f"{__name__}.{fmt}")
    return module.Writer(**kw)


def whole_output(w, report, visible, *, hidden_info: int = 0) -> str:
    """The output of writer W for a report kept whole (the API, ``report``): each file's record in
    order, then the visible findings; the writer closed."""
    for fr in report.files:
        w.add(fr, ())
    for f in visible:
        w.finding(f)
    if hidden_info:
        w.hidden_info = hidden_info
    out: list[str] = []
    try:
        w.finish(out.append)
    finally:
        w.close()
    return "".join(out)
