#!/usr/bin/env python3
"""Write the tables of the docs that are made from the rule catalogue, so they cannot drift.

Each table sits between two marker comments in a Markdown file:

    <!-- generated: NAME (python tools/docs_tables.py) -->
    ...
    <!-- end of generated: NAME -->

``python tools/docs_tables.py`` rewrites every table; ``--check`` exits 1 and names the files whose
tables are out of date (the test suite runs the check).
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from cfgcheck.catalogue import load_catalogue  # noqa: E402

_NEEDS = {"gpu": "the GPU (`--gpu`)", "model": "the base model", "rows": "the row count (`--rows`)"}


def _cell(text: str) -> str:
    return " ".join(str(text).split()).replace("|", "\\|")


def rules_table() -> str:
    rows = ["| rule | severity | what it finds | judged only with |", "| --- | --- | --- | --- |"]
    for rule_id, rule in sorted(load_catalogue().items()):
        needs = ", ".join(_NEEDS.get(n, n) for n in rule.needs) or "-"
        rows.append(f"| `{rule_id}` | {rule.severity.word} | {_cell(rule.summary)} | {needs} |")
    return "\n".join(rows)


def fixes_table() -> str:
    rows = ["| rule | tier | fix |", "| --- | --- | --- |"]
    for rule_id, rule in sorted(load_catalogue().items()):
        if not rule.fix:
            continue
        what = rule.fix.get("details") or rule.fix.get("summary", "")
        rows.append(f"| `{rule_id}` | `{rule.fix['tier']}` | {_cell(what)} |")
    return "\n".join(rows)


def layouts_table() -> str:
    from cfgcheck.layouts import layouts_markdown

    return layouts_markdown().rstrip("\n")


TABLES = {"rules": rules_table, "fixes": fixes_table, "layouts": layouts_table}
FILES = {"docs/layouts-and-rules.md": ("rules", "layouts"), "docs/fixing.md": ("fixes",)}


def render(text: str, names: tuple[str, ...]) -> str:
    for name in names:
        pattern = re.compile(
            rf"(<!-- generated: {name} \(python tools/docs_tables.py\) -->\n)(.*?)(<!-- end of generated: {name} -->)",
            re.S)
        if not pattern.search(text):
            raise SystemExit(f"docs_tables: no markers for the {name} table")
        text = pattern.sub(lambda m: m.group(1) + TABLES[name]() + "\n" + m.group(3), text)
    return text


def main(argv: list[str]) -> int:
    check = "--check" in argv
    stale = []
    for rel, names in FILES.items():
        path = ROOT / rel
        old = path.read_text(encoding="utf-8")
        new = render(old, names)
        if new != old:
            stale.append(rel)
            if not check:
                path.write_text(new, encoding="utf-8")
    if check and stale:
        print("out of date (run python tools/docs_tables.py): " + ", ".join(stale))
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
