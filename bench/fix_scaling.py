"""Fixer cost on inputs that used to grow quadratically (a script, not a test).

    python bench/fix_scaling.py [--checkout DIR]

Runs `cfgcheck fix --diff` (writes nothing) in a fresh subprocess on two generated files and
prints wall time and peak memory (VmHWM of the child), beside `cfgcheck lint` on the same file:

  * 20,000 comment lines after a two-key config (one fix);
  * 999 small documents in one stream (one fix each, 89 KB).

``--checkout`` measures another checkout (e.g. the state before a change) with the same files.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DOC = "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2e-5\nnum_train_epochs: 1\n"


def _files(folder: Path) -> dict[str, Path]:
    comments = folder / "comments.yaml"
    comments.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2e-5\n"
                        + "#\n" * 20000)
    docs = folder / "documents.yaml"
    docs.write_text("---\n".join(DOC for _ in range(999)))
    return {"20,000 comment lines": comments, "999 documents": docs}


def _run(checkout: Path, path: Path, timeout: float, command: str = "fix") -> tuple[str, str]:
    env = dict(os.environ, PYTHONPATH=str(checkout))
    args = "'fix', '--diff'" if command == "fix" else "'lint'"
    code = (f"import resource, sys, runpy; sys.argv = ['cfgcheck', {args}, sys.argv[1]];\n"
            "try:\n    runpy.run_module('cfgcheck', run_name='__main__')\n"
            "except SystemExit:\n    pass\n"
            "print('HWM', open('/proc/self/status').read().split('VmHWM:')[1].split()[0], file=sys.stderr)")
    t0 = time.perf_counter()
    try:
        out = subprocess.run([sys.executable, "-c", code, str(path)], env=env, capture_output=True,
                             cwd=path.parent,
                             text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return f"> {timeout:.0f} s (stopped)", "-"
    wall = time.perf_counter() - t0
    hwm = next((l.split()[1] for l in out.stderr.splitlines() if l.startswith("HWM")), "?")
    return f"{wall:.2f} s", f"{int(hwm) / 1024:.1f} MiB" if hwm.isdigit() else hwm


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--checkout", type=Path, default=ROOT)
    ap.add_argument("--timeout", type=float, default=600)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        for label, path in _files(Path(tmp)).items():
            wall, mem = _run(args.checkout, path, args.timeout)
            lwall, lmem = _run(args.checkout, path, args.timeout, "lint")
            print(f"{label:24} fix {wall:>20}  peak {mem:>10}   (lint: {lwall}, peak {lmem})")
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    return 0


if __name__ == "__main__":
    sys.exit(main())
