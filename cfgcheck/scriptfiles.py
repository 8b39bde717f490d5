"""Which files are launch scripts, by their names alone (``scripts`` reads them).

A lint asks this of every path; reading a script needs the shell reader, which a run without
scripts never loads.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable

from .load import walk_paths

SCRIPT_SUFFIXES = (".sh", ".bash")


def find_scripts(paths: Iterable[str | Path]) -> list[str]:
    """Shell scripts named or inside the folders (hidden folders skipped), sorted."""
    return scripts_of(walk_paths(paths, SCRIPT_SUFFIXES))


def scripts_of(walked: list[tuple[str, bool]]) -> list[str]:
    """``find_scripts`` of what ``walk_paths`` found with the script suffixes among its own."""
    return [f for f, named in walked
            if f.lower().endswith(SCRIPT_SUFFIXES) and (not named or os.path.isfile(f))]
