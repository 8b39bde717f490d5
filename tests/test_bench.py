"""bench/run.py runs end to end on a handful of files and prints a row for every figure
(no timing is asserted: the numbers depend on the machine)."""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT))


def _bench_module():
    spec = importlib.util.spec_from_file_location("cfgcheck_bench_run", ROOT / "bench" / "run.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # its dataclasses look their module up while being made
    try:
        spec.loader.exec_module(module)
    finally:
        sys.modules.pop(spec.name, None)
    return module


def test_quick_benchmark_prints_every_row(tmp_path):
    bench = _bench_module()
    out = subprocess.run([sys.executable, str(ROOT / "bench" / "run.py"), "--quick", "--files", "8",
                          "--keep", str(tmp_path / "b")], capture_output=True, text=True, cwd=ROOT, env=ENV,
                         timeout=600)
    assert out.returncode == 0, out.stderr
    rows = {line.split("|")[1].strip(): line for line in out.stdout.splitlines() if line.startswith("| ")}
    labels = [label for section in bench.SECTIONS for label in bench.LABELS[section]]
    assert len(labels) >= 17 and set(bench.LABELS) == set(bench.SECTIONS)
    for label in labels:
        assert label in rows, label
        cells = [c.strip() for c in rows[label].split("|")[1:-1]]
        assert len(cells) == 6 and all(cells), rows[label]
        assert "failed" not in cells[1], rows[label]
    has_cache = "--no-cache" in subprocess.run(
        [sys.executable, "-m", "cfgcheck", "lint", "--help"], capture_output=True, text=True, cwd=ROOT,
        env=ENV, timeout=120).stdout
    for label in bench.LABELS["cache"]:
        assert ("cache not available" in rows[label]) is not has_cache, rows[label]


def test_only_runs_the_sections_named(tmp_path):
    out = subprocess.run([sys.executable, str(ROOT / "bench" / "run.py"), "--quick", "--files", "4",
                          "--only", "corpus,script"], capture_output=True, text=True, cwd=ROOT, env=ENV,
                         timeout=300)
    assert out.returncode == 0, out.stderr
    bench = _bench_module()
    printed = {line.split("|")[1].strip() for line in out.stdout.splitlines() if line.startswith("| ")}
    assert printed - {"figure", "---"} == set(bench.LABELS["corpus"] + bench.LABELS["script"])


def test_an_unknown_section_is_refused():
    out = subprocess.run([sys.executable, str(ROOT / "bench" / "run.py"), "--only", "cold,speed"],
                         capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=120)
    assert out.returncode == 2 and "speed" in out.stderr
