#!/usr/bin/env python3
"""Growth curves: how lint and fix time grow with the size of their input (a script, not a test).

    python bench/growth.py [--quick | --tiny] [--json FILE]

Four curves, each over sizes a factor 10 (or 4) apart, each point the median of a few runs in
this process (the catalogue and imports are paid once, before the first point). The runs of a
curve go round its sizes in turn (smallest first, then largest first, ...), so a change in the
machine's speed falls on every size alike instead of on whichever size was measured in those
seconds; each run starts from a collected heap and is timed in CPU seconds of this process:

  keys      one trainer config with N keys (40 / 400 / 4,000 / 40,000), known keys under sections
  documents one YAML stream of N small configs (1 / 10 / 100 / 1,000)
  unknown   one config with N keys nobody accepts (100 / 1,000 / 10,000 / 100,000)
  files     N configs in a folder (500 / 2,000 / 8,000), lint only

For every curve it prints the time per point and the time per unit (per key, document, file);
linear growth keeps the time per unit flat, so the last column (time per unit at the largest size
over time per unit at the smallest) stays near 1. Fix is measured where it applies (keys,
documents: a fixable `1e-4` in every document). ``--json FILE`` also writes the points
(bench/run.py reads them for its linearity verdict); ``--tiny`` runs the two smallest sizes of
each curve once (a smoke run).
"""

from __future__ import annotations

import argparse
import gc
import json
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from cfgcheck import api  # noqa: E402
from cfgcheck.engine import Options, lint_text  # noqa: E402

KNOWN = ["learning_rate", "weight_decay", "adam_beta1", "adam_beta2", "adam_epsilon", "max_grad_norm",
         "num_train_epochs", "warmup_steps", "logging_steps", "save_steps", "eval_steps", "seed"]


def keys_config(n: int) -> str:
    lines = ["model_name_or_path: meta-llama/Llama-2-7b-hf", "learning_rate: 1e-4"]
    per = max(1, n // 40)
    for s in range(min(40, n)):
        lines.append(f"section_{s}:")
        for k in range(per):
            lines.append(f"  {KNOWN[k % len(KNOWN)]}_{k}: {k}")
    return "\n".join(lines) + "\n"


def documents_stream(n: int) -> str:
    doc = "learning_rate: 1e-4\nper_device_train_batch_size: 4\nnum_train_epochs: 1\n"
    return "---\n".join(doc for _ in range(n))


def unknown_config(n: int) -> str:
    return "learning_rate: 2.0e-5\n" + "".join(f"zq_setting_{i}_x: {i}\n" for i in range(n))


POINTS: list[dict] = []  # one record per curve: name, unit, sizes, lint and fix seconds


def _once(fn) -> float:
    """CPU seconds of one call of FN, from a collected heap (the garbage of the run before, of
    another size, is not charged to this one; whatever FN itself leaves to the collector is)."""
    gc.collect()
    t = time.process_time()
    fn()
    return time.process_time() - t


def _rounds(calls: list, repeat: int) -> list[float]:
    """The median CPU seconds of each of CALLS, run REPEAT times in rounds that go through all
    of them in turn, forwards then backwards."""
    times: list[list[float]] = [[] for _ in calls]
    for r in range(repeat):
        order = range(len(calls)) if r % 2 == 0 else range(len(calls) - 1, -1, -1)
        for i in order:
            times[i].append(_once(calls[i]))
    return [statistics.median(t) for t in times]


def _fix(text: str, name: str) -> None:
    from cfgcheck.fix import fix_text

    fix_text(text, name, Options())


def curve(label: str, sizes: list[int], make, *, unit: str, fix: bool, repeat: int) -> None:
    print(f"\n{label}:")
    print(f"  {'size':>9}  {'lint s':>8}  {'lint us/' + unit:>14}" + (f"  {'fix s':>8}  {'fix us/' + unit:>13}" if fix else ""))
    first = {}
    record = {"curve": label, "unit": unit, "sizes": sizes, "lint": [], "fix": []}
    POINTS.append(record)
    warm = make(sizes[0])  # the first run of a kind of file pays for its model lookups: not counted
    lint_text(warm, "g.yaml", Options())
    if fix:
        _fix(warm, "g.yaml")
    texts = [make(n) for n in sizes]
    record["lint"] = _rounds([lambda text=text: lint_text(text, "g.yaml", Options()) for text in texts], repeat)
    if fix:
        record["fix"] = _rounds([lambda text=text: _fix(text, "g.yaml") for text in texts], repeat)
    for i, n in enumerate(sizes):
        lt = record["lint"][i]
        row = f"  {n:>9,}  {lt:>8.3f}  {lt / n * 1e6:>14.1f}"
        first.setdefault("lint", lt / n)
        if fix:
            ft = record["fix"][i]
            row += f"  {ft:>8.3f}  {ft / n * 1e6:>13.1f}"
            first.setdefault("fix", ft / n)
        print(row)
    print(f"  per-{unit} time at {sizes[-1]:,} over at {sizes[0]:,}: lint {lt / sizes[-1] / first['lint']:.2f}"
          + (f", fix {ft / sizes[-1] / first['fix']:.2f}" if fix else "") + " (linear: about 1)")


def files_curve(sizes: list[int], repeat: int) -> None:
    print("\nfiles (lint of a folder, in this process):")
    first = None
    record = {"curve": "files in a folder", "unit": "file", "sizes": sizes, "lint": [], "fix": []}
    POINTS.append(record)
    folders = []
    try:
        for n in sizes:
            folder = Path(tempfile.mkdtemp(prefix="cfgcheck-growth-"))
            folders.append(folder)
            for i in range(n):
                (folder / f"run{i:05d}.yaml").write_text(
                    f"model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\nseed: {i}\n"
                    "per_device_train_batch_size: 4\ngradient_accumulation_steps: 2\n")
        record["lint"] = _rounds([lambda folder=folder: api.lint([folder], project=None, keep_views=False)
                                  for folder in folders], repeat)
    finally:
        for folder in folders:
            shutil.rmtree(folder, ignore_errors=True)
    for n, t in zip(sizes, record["lint"]):
        first = first or t / n
        print(f"  {n:>9,}  {t:>8.3f} s  {t / n * 1e6:>8.1f} us/file")
    print(f"  per-file time at {sizes[-1]:,} over at {sizes[0]:,}: {t / sizes[-1] / first:.2f} (linear: about 1)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller sizes, one run each")
    ap.add_argument("--tiny", action="store_true", help="the two smallest sizes, one run each")
    ap.add_argument("--json", type=Path, help="also write the points to this file")
    args = ap.parse_args()
    repeat = 1 if args.quick or args.tiny else 5
    lint_text("learning_rate: 1e-4\n", "warm.yaml", Options())  # imports and the catalogue, once
    count = 2 if args.tiny else 3 if args.quick else 4
    curve("keys per file", [40, 400, 4000, 40000][:count], keys_config, unit="key", fix=True, repeat=repeat)
    curve("documents per file", [1, 10, 100, 1000][:count], documents_stream, unit="doc", fix=True, repeat=repeat)
    curve("unknown keys", [100, 1000, 10000, 100000][:count], unknown_config, unit="key", fix=False, repeat=repeat)
    files_curve([20, 200] if args.tiny else [500, 2000] + ([8000] if count == 4 else []), repeat)
    if args.json:
        args.json.write_text(json.dumps(POINTS, indent=1) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
