"""The names a folder walk gives its files are those Python's pathlib gives the same files
(``str(Path(folder) / name)``), however the folder was written on the command line."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from cfgcheck.load import walk_paths


def _tree(base: Path) -> None:
    (base / "runs" / "a100" / "deep").mkdir(parents=True)
    (base / "runs" / ".hidden").mkdir()
    for rel in ("top.yaml", "runs/b.json", "runs/a.yml", "runs/notes.txt", "runs/a100/x.YAML",
                "runs/a100/deep/y.yaml", "runs/.hidden/z.yaml"):
        (base / rel).write_text("learning_rate: 2.0e-5\n")


def _by_pathlib(given: str | Path) -> list[tuple[str, bool]]:
    """What the walk is to give: each listed folder's files through pathlib, sorted, configs only,
    hidden folders left out."""
    out = []
    for root, dirs, files in os.walk(Path(given)):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        out += [(str(Path(root) / f), False) for f in sorted(files)
                if f.lower().endswith((".yaml", ".yml", ".json"))]
    return out


@pytest.mark.parametrize("given", [".", "./", "runs", "./runs", "runs/", "runs//a100", "./runs/../runs",
                                   "runs/./a100", "ABS", "ABS/runs/", "PATH"])
def test_walk_names_match_pathlib(tmp_path, monkeypatch, given):
    _tree(tmp_path)
    monkeypatch.chdir(tmp_path)
    arg: str | Path = given
    if given.startswith("ABS"):
        arg = str(tmp_path) + given[3:]
    elif given == "PATH":
        arg = Path("runs")
    got = walk_paths([arg])
    assert got == _by_pathlib(arg)
    assert len(got) >= 2 and all(not named for _f, named in got)
    assert not any(".hidden" in f or f.endswith(".txt") for f, _ in got)
    if given in (".", "./"):
        assert ("top.yaml", False) in got and ("runs/b.json", False) in got  # no "./" before the names


def test_the_root_folder_gets_one_separator(monkeypatch):
    # a walk from "/" must name "/etc/x.yaml", never "//etc/x.yaml"; checked on the name making
    # alone (walking the whole disk is not a test)
    roots = [("/", [], ["x.yaml"]), ("/etc", [], ["y.json"])]
    monkeypatch.setattr(os, "walk", lambda p, onerror=None: iter(roots))
    assert walk_paths([Path("/")]) == [("/x.yaml", False), ("/etc/y.json", False)]
