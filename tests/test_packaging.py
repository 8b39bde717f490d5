"""The wheel carries the rule catalogue, and an installed copy lints the demo fixtures."""

from __future__ import annotations

import os
import subprocess
import sys
import re
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    pytest.importorskip("hatchling", reason="hatchling (test extra) builds the wheel")
    out = tmp_path_factory.mktemp("wheel")
    p = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                        "-w", str(out), str(ROOT)], capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    (whl,) = out.glob("cfgcheck-*.whl")
    return whl


def _pyproject() -> dict:
    tomllib = pytest.importorskip("tomllib")
    return tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))


def test_wheel_contains_the_catalogue(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    rules = sorted(Path(n).name for n in names if n.startswith("cfgcheck/_catalogue/"))
    assert rules == sorted(p.name for p in (ROOT / "rules").glob("*.yaml"))
    assert "cfgcheck/cli.py" in names
    # every module of the package, its subpackages (fix/, render/, checks/, knowledge/) included
    modules = sorted(p.relative_to(ROOT).as_posix() for p in (ROOT / "cfgcheck").rglob("*.py"))
    assert "cfgcheck/fix/__init__.py" in modules and "cfgcheck/render/fixes.py" in modules
    assert [m for m in modules if m not in names] == []
    meta = next(n for n in names if n.endswith("METADATA"))
    text = zipfile.ZipFile(wheel).read(meta).decode()
    requires = sorted(l.split()[1].split(">")[0].split("=")[0].lower() for l in text.splitlines()
                      if l.startswith("Requires-Dist:") and "extra ==" not in l)
    declared = sorted(re.split(r"[<>=!~\[; ]", d, maxsplit=1)[0].lower().replace("_", "-")
                      for d in _pyproject()["project"]["dependencies"])
    assert requires == [r.replace("_", "-") for r in declared]
    # ruamel.yaml is a test-only reader: no module of the package imports it
    assert not any(r.startswith("ruamel") for r in requires)


def test_installed_wheel_lints_outside_the_checkout(wheel, tmp_path):
    target = tmp_path / "site"
    p = subprocess.run([sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--no-index",
                        "--target", str(target), str(wheel)], capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    env = dict(os.environ, PYTHONPATH=str(target), NO_COLOR="1")
    where = subprocess.run([sys.executable, "-c", "import cfgcheck.catalogue as c; print(c.catalogue_dir())"],
                           capture_output=True, text=True, env=env, cwd=tmp_path)
    assert where.stdout.strip() == str(target / "cfgcheck" / "_catalogue")
    run = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(ROOT / "fixtures" / "demo"),
                          "--gpu", "t4", "--rows", "1000"], capture_output=True, text=True, env=env, cwd=tmp_path)
    assert run.returncode == 1, run.stderr
    assert "lora-scale-below-one" in run.stdout and "Traceback" not in run.stderr
    # the fixer (a package of its own) runs from the installed copy too; --diff writes nothing
    fixed = subprocess.run([sys.executable, "-m", "cfgcheck", "fix", "--diff", str(ROOT / "fixtures" / "demo")],
                           capture_output=True, text=True, env=env, cwd=tmp_path)
    assert fixed.returncode == 0, fixed.stderr
    assert "(fixed)" in fixed.stdout and "would change" in fixed.stderr and "Traceback" not in fixed.stderr
