#!/usr/bin/env python3
"""Growth curves: how lint and fix time grow with the size of their input (a script, not a test).

    python bench/growth.py [--quick | --tiny] [--json FILE]

Four curves, each over sizes a factor 10 (or 4) apart, each point the median of a few runs in
this process (the catalogue and imports are paid once, before the first point):

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


def _median(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


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
    for n in sizes:
        text = make(n)
        lt = _median(lambda: lint_text(text, "g.yaml", Options()), repeat)
        row = f"  {n:>9,}  {lt:>8.3f}  {lt / n * 1e6:>14.1f}"
        record["lint"].append(lt)
        first.setdefault("lint", lt / n)
        if fix:
            ft = _median(lambda: _fix(text, "g.yaml"), max(1, repeat // 2))
            row += f"  {ft:>8.3f}  {ft / n * 1e6:>13.1f}"
            record["fix"].append(ft)
            first.setdefault("fix", ft / n)
        print(row)
    print(f"  per-{unit} time at {sizes[-1]:,} over at {sizes[0]:,}: lint {lt / sizes[-1] / first['lint']:.2f}"
          + (f", fix {ft / sizes[-1] / first['fix']:.2f}" if fix else "") + " (linear: about 1)")


def files_curve(sizes: list[int], repeat: int) -> None:
    print("\nfiles (lint of a folder, in this process):")
    first = None
    record = {"curve": "files in a folder", "unit": "file", "sizes": sizes, "lint": [], "fix": []}
    POINTS.append(record)
    for n in sizes:
        folder = Path(tempfile.mkdtemp(prefix="cfgcheck-growth-"))
        for i in range(n):
            (folder / f"run{i:05d}.yaml").write_text(
                f"model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\nseed: {i}\n"
                "per_device_train_batch_size: 4\ngradient_accumulation_steps: 2\n")
        try:
            t = _median(lambda: api.lint([folder], project=None, keep_views=False), repeat)
        finally:
            shutil.rmtree(folder, ignore_errors=True)
        record["lint"].append(t)
        first = first or t / n
        print(f"  {n:>9,}  {t:>8.3f} s  {t / n * 1e6:>8.1f} us/file")
    print(f"  per-file time at {sizes[-1]:,} over at {sizes[0]:,}: {t / sizes[-1] / first:.2f} (linear: about 1)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller sizes, one run each")
    ap.add_argument("--tiny", action="store_true", help="the two smallest sizes, one run each")
    ap.add_argument("--json", type=Path, help="also write the points to this file")
    args = ap.parse_args()
    repeat = 1 if args.quick or args.tiny else 3
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
