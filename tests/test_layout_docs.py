"""The layouts table in the docs is generated from the layout definitions and kept current."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

from cfgcheck.cli import app
from cfgcheck.layouts import FIELD_TYPES, LAYOUTS, UNREAD_FORMATS, layout_summary, layouts_markdown

DOC = Path(__file__).resolve().parents[1] / "docs" / "layouts-and-rules.md"
START = "<!-- generated: layouts (python tools/docs_tables.py) -->\n"
END = "<!-- end of generated: layouts -->"


def test_docs_layouts_table_is_current():
    text = DOC.read_text(encoding="utf-8")
    assert START in text and END in text
    block = text.split(START, 1)[1].split(END, 1)[0]
    assert block == layouts_markdown(), "regenerate the block: python tools/docs_tables.py"


def test_every_layout_and_unread_format_has_a_row():
    table = layouts_markdown()
    for lay in LAYOUTS:
        assert f"| `{lay.name}`: " in table
    for fmt in UNREAD_FORMATS:
        assert f"* `{fmt.name}`: " in table


def test_read_and_not_read_split_the_view_fields():
    for lay in LAYOUTS:
        s = layout_summary(lay)
        for name in FIELD_TYPES:
            head, _, tail = name.partition(".")
            word = tail or head
            in_read = word in s["reads"]
            in_not = word in s["not_read"]
            assert in_read or in_not, (lay.name, name)
        assert set(lay.fields) <= set(FIELD_TYPES), lay.name


def test_describe_lists_layouts():
    runner = CliRunner()
    out = runner.invoke(app, ["describe", "layouts"])
    assert out.exit_code == 0
    for lay in LAYOUTS:
        assert f"{lay.name}: {lay.title}" in out.output
    assert "not a format cfgcheck reads (yet)" in out.output
    one = runner.invoke(app, ["describe", "torchtune"])
    assert one.exit_code == 0 and "reads:" in one.output and "does not read:" in one.output
