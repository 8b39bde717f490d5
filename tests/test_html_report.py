"""The HTML report: one self-contained file with findings, derived runs and pictures."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

from typer.testing import CliRunner

from cfgcheck.cli import app

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.attrs: list[tuple[str, dict]] = []
        self.stack: list[str] = []
        self.text: list[str] = []
        self.balanced = True
        self.void = {"meta", "br", "line", "rect", "polyline"}

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.append((tag, dict(attrs)))
        if tag not in self.void:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        if tag in self.void:
            return
        if not self.stack or self.stack.pop() != tag:
            self.balanced = False

    def handle_data(self, data):
        self.text.append(data)


def _report(tmp_path, *args):
    out = tmp_path / "report.html"
    r = CliRunner().invoke(app, ["report", *map(str, args), "--out", str(out), "--no-project"])
    assert r.exit_code == 0, r.output
    page = _Page()
    html = out.read_text(encoding="utf-8")
    page.feed(html)
    return html, page


def test_report_renders_the_demo_configs_with_findings_runs_and_pictures(tmp_path):
    html, page = _report(tmp_path, DEMO, "--gpu", "t4", "--rows", "1000")
    assert page.balanced and not page.stack
    configs = sorted(p.name for p in DEMO.iterdir() if p.suffix in (".yaml", ".json"))
    text = "".join(page.text)
    for name in configs:
        assert name in text
    assert page.tags.count("section") >= 1
    assert "lora-scale-below-one" in text  # the demo LoRA recipe's finding
    assert any(t == "polyline" and a.get("class") == "lr" for t, a in page.attrs)  # a learning-rate curve
    assert any(t == "line" and a.get("class") == "capacity" for t, a in page.attrs)  # the T4's 16 GB mark
    assert any(t == "rect" and a.get("data-component") == "weights" for t, a in page.attrs)


def test_report_is_self_contained(tmp_path):
    html, page = _report(tmp_path, DEMO)
    assert "<script" not in html
    for _tag, attrs in page.attrs:  # nothing loaded from elsewhere
        for name in ("src", "href"):
            assert name not in attrs
    assert not re.search(r"url\(|@import", html)


def test_report_escapes_what_a_config_writes(tmp_path):
    cfg = tmp_path / "<b>odd name & co.yaml"
    cfg.write_text('learning_rate: 2.0e-5\n"<script>alert(1)</script>": 1\n')
    html, page = _report(tmp_path, cfg)
    assert "<script>" not in html and "&lt;script&gt;" in html
    assert "&lt;b&gt;odd name &amp; co.yaml" in html
