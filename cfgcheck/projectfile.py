"""Finding the project file (cfgcheck.yaml, or pyproject.toml with a [tool.cfgcheck] table) and
the error a wrong one raises. Reading it is ``cfgcheck.project``'s work; a lint with no project
file only needs the search, so this module is small and imports little.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

from ._patterns import later
from .findings import printable

YAML_NAME = "cfgcheck.yaml"
TOML_NAME = "pyproject.toml"


class ProjectError(Exception):
    """The project configuration is wrong: one or more (file, line, column, reason)."""

    def __init__(self, problems: list[tuple[str, int, int, str]]):
        self.problems = sorted(((f, line, col, _short(r)) for f, line, col, r in problems),
                               key=lambda p: (p[1], p[2]))
        super().__init__("\n".join(f"{printable(f)}:{line}:{col}: project config: {printable(r)}"
                                   for f, line, col, r in self.problems))


def _short(reason: str, limit: int = 300) -> str:
    return reason if len(reason) <= limit else reason[:limit - 3] + "..."


def find_file(start: str | Path | None = None) -> Path | None:
    """The nearest cfgcheck.yaml, or pyproject.toml with a [tool.cfgcheck] table, walking up from
    ``start`` to the repository root (a folder holding .git) or the filesystem root."""
    from . import reads  # the result cache re-checks what the search looked at

    here = Path(os.path.abspath(start or os.getcwd()))
    reads.note_kind(here)
    if not here.is_dir():
        here = here.parent
    for folder in (here, *here.parents):
        yaml_file = folder / YAML_NAME
        toml_file = folder / TOML_NAME
        reads.note_kind(yaml_file)
        reads.note_file(toml_file)
        reads.note_kind(folder / ".git")
        has_table = toml_file.is_file() and _mentions_table(toml_file)
        if yaml_file.is_file():
            if has_table:
                raise ProjectError([(str(toml_file), 1, 1,
                                     f"both {YAML_NAME} and [tool.cfgcheck] in {TOML_NAME} are "
                                     f"in {folder}; keep one")])
            return yaml_file
        if has_table:
            return toml_file
        if (folder / ".git").exists():
            return None
    return None


_TABLE_LINE = later(r"^\s*\[\[?\s*tool\s*\.\s*cfgcheck\s*[\].]", re.M)


def _mentions_table(path: Path) -> bool:
    from .load import LoadError, read_source

    try:
        text = read_source(path).text  # guarded: never a FIFO, a device or an endless file
    except LoadError:
        return False
    return bool(_TABLE_LINE.search(text)) or bool(
        re.search(r"^\s*\[\s*tool\s*\]\s*$(?:(?!^\s*\[).)*^\s*cfgcheck\s*[.=]", text, re.M | re.S))

