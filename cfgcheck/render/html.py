"""A self-contained HTML report: every linted config with its findings, its derived run and two
pictures (the learning rate over the steps with the cadence marks; the memory per GPU against the
card), as inline SVG. One file, no scripts, no network: fit for a CI artifact.

A pure function of the lint report and the derived runs; every text from a config is escaped.
"""

from __future__ import annotations

from html import escape

from .. import __version__
from ..plan import Plan
from .pictures import memory_segments, schedule_series
from .plan import render_plan

GB = 1e9
_W, _H, _PAD = 640, 200, 40

_STYLE = """
body{font-family:system-ui,sans-serif;margin:2em;max-width:60em;color:#222}
h1{font-size:1.4em} h2{font-size:1.1em;border-top:1px solid #ccc;padding-top:1em;word-break:break-all}
table{border-collapse:collapse;margin:.5em 0} td,th{border:1px solid #ddd;padding:.2em .5em;text-align:left;vertical-align:top}
.error{color:#b00020;font-weight:bold} .warning{color:#8a5300;font-weight:bold} .info{color:#205080}
pre{background:#f6f6f6;padding:.5em;overflow-x:auto} .muted{color:#777}
svg text{font-size:11px;font-family:system-ui,sans-serif}
"""


def _e(text: object) -> str:
    return escape(str(text).encode("utf-8", "backslashreplace").decode("utf-8"), quote=True)


def schedule_svg(plan: Plan) -> str:
    series, why = schedule_series(plan)
    if series is None:
        return f'<p class="muted">Learning rate not drawn: {_e(why)}</p>'
    c = series.curve
    total = c.total_steps
    top = max(c.values) or 1.0
    x = lambda step: _PAD + (_W - 2 * _PAD) * (step / max(1, total - 1))  # noqa: E731
    y = lambda v: _H - _PAD - (_H - 2 * _PAD) * (v / top)  # noqa: E731
    points = " ".join(f"{x(s):.1f},{y(v):.1f}" for s, v in zip(c.steps, c.values))
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{_W}" height="{_H + 60}" role="img" '
             f'aria-label="learning rate over {total} optimizer steps">',
             f'<line x1="{_PAD}" y1="{_H - _PAD}" x2="{_W - _PAD}" y2="{_H - _PAD}" stroke="#999"/>',
             f'<line x1="{_PAD}" y1="{_PAD}" x2="{_PAD}" y2="{_H - _PAD}" stroke="#999"/>']
    if c.ignored_warmup:
        parts.append(f'<rect class="ignored-warmup" x="{_PAD}" y="{_PAD}" width="{x(c.ignored_warmup) - _PAD:.1f}" '
                     f'height="{_H - 2 * _PAD}" fill="#f3d9a4" opacity="0.6"><title>{c.ignored_warmup} warm-up steps '
                     f'written, ignored by {c.kind}</title></rect>')
    parts.append(f'<polyline class="lr" fill="none" stroke="#3b6ea5" stroke-width="2" points="{points}"/>')
    for row, (label, colour) in enumerate((("eval", "#c44e52"), ("save", "#5a9e4b"), ("log", "#999"))):
        ys = _H - _PAD + 14 + row * 14
        parts.append(f'<text x="2" y="{ys + 4}">{label}</text>')
        for st in series.marks.get(label, [])[:2000]:
            parts.append(f'<line class="mark-{label}" x1="{x(st - 1):.1f}" y1="{ys - 5}" x2="{x(st - 1):.1f}" '
                         f'y2="{ys + 5}" stroke="{colour}"/>')
    peak = f"{c.base_lr * top:.3g}" if c.base_lr is not None else "peak"
    parts.append(f'<text x="2" y="{_PAD + 4}">{_e(peak)}</text><text x="{_PAD - 12}" y="{_H - _PAD + 4}">0</text>')
    parts.append(f'<text x="{_W - _PAD - 40}" y="{_PAD - 8}">{total:,} steps</text></svg>')
    caption = (f"{_e(series.scheduler_note)}; eval {_e(series.every.get('eval', ''))}, "
               f"save {_e(series.every.get('save', ''))}, log {_e(series.every.get('log', ''))}")
    notes = "".join(f"<li>{_e(n)}</li>" for n in c.notes)
    return (f'<figure class="schedule">{"".join(parts)}<figcaption>{caption}</figcaption></figure>'
            + (f"<ul>{notes}</ul>" if notes else ""))


def memory_svg(plan: Plan) -> str:
    m = plan.memory
    if m is None:
        return f'<p class="muted">Memory not drawn: {_e(plan.memory_problem or "no estimate")}</p>'
    cap = plan.capacity_bytes
    scale_to = max(m.total_bytes, cap or 0) or 1
    width = _W - 2 * _PAD
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{_W}" height="90" role="img" '
             f'aria-label="memory per GPU">']
    at = _PAD
    for name, size, _ch, colour in memory_segments(plan):
        w = width * size / scale_to
        parts.append(f'<rect class="segment" data-component="{_e(name)}" x="{at:.1f}" y="10" width="{w:.1f}" '
                     f'height="30" fill="{colour}"><title>{_e(name)}: {size / GB:.2f} GB</title></rect>')
        at += w
    if cap:
        cx = _PAD + width * cap / scale_to
        parts.append(f'<line class="capacity" x1="{cx:.1f}" y1="4" x2="{cx:.1f}" y2="46" stroke="#000" stroke-width="2"/>'
                     f'<text x="{max(0.0, cx - 60):.1f}" y="60">{_e(plan.gpu.label)} {cap / GB:.0f} GB</text>')
    parts.append("</svg>")
    legend = "".join(f'<li><span style="color:{c}">&#9632;</span> {_e(n)} {s / GB:.1f} GB</li>'
                     for n, s, _ch, c in memory_segments(plan))
    verdict = ("" if not cap else (" fits" if m.total_bytes <= cap else " does not fit"))
    return (f'<figure class="memory">{"".join(parts)}<figcaption>{m.total_bytes / GB:.1f} GB per GPU'
            f'{_e(verdict)}</figcaption><ul>{legend}</ul></figure>')


def render_report(report, runs: list[tuple[str, Plan]]) -> str:
    """``report``: the lint Report; ``runs``: (file, Plan) of the derived runs."""
    by_file: dict[str, list[Plan]] = {}
    for file, plan in runs:
        by_file.setdefault(file, []).append(plan)
    counts = {w: sum(1 for f in report.findings if f.severity.word == w) for w in ("error", "warning", "info")}
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
           f"<title>cfgcheck report</title><style>{_STYLE}</style></head><body>",
           f"<h1>cfgcheck report</h1><p>cfgcheck {_e(__version__)}: {report.linted} configs checked; "
           f'<span class="error">{counts["error"]} errors</span>, '
           f'<span class="warning">{counts["warning"]} warnings</span>, {counts["info"]} info.</p>']
    for p in report.problems:
        out.append(f'<p class="error">{_e(p.file)}:{p.line}:{p.column}: input error: {_e(p.reason)}</p>')
    for fr in report.files:
        if fr.problem or fr.skipped:
            continue
        out.append(f'<section class="config"><h2>{_e(fr.file)}</h2>')
        if fr.findings:
            out.append("<table class=\"findings\"><tr><th>severity</th><th>where</th><th>rule</th><th>finding</th></tr>")
            for f in fr.findings:
                out.append(f'<tr><td class="{f.severity.word}">{f.severity.word}</td><td>{f.line}:{f.column} '
                           f"<code>{_e(f.key or '(top level)')}</code></td><td><code>{_e(f.rule)}</code></td>"
                           f"<td>{_e(f.message)}<br><span class=\"muted\">hint: {_e(f.hint)}</span></td></tr>")
            out.append("</table>")
        else:
            out.append("<p>No findings.</p>")
        for plan in by_file.get(fr.file, []):
            out.append(f'<pre class="derived">{_e(render_plan(fr.file, plan))}</pre>')
            out.append(schedule_svg(plan))
            out.append(memory_svg(plan))
        out.append("</section>")
    out.append("</body></html>")
    return "\n".join(out) + "\n"
