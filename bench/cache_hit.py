"""The lint result cache measured (a script, not a test).

    python bench/cache_hit.py [--files 2000] [--repeat 3]

On a generated corpus (bench/run.py's make_corpus) in a temporary folder, interleaved, each in a
fresh process: the first `cfgcheck lint` (empty cache), the second one (every file served from
the cache), the same with `--summary` (output left aside), a plain sha256 pass over the files,
and the import of the command line and the API alone. Prints the medians, every run, the ratios
and the load average (the machine may be shared: compare ratios from one run only).
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import ROOT, _env, make_corpus  # noqa: E402

SHA = """
import hashlib, os, sys
for here, dirs, files in os.walk(sys.argv[1]):
    dirs.sort()
    for f in sorted(files):
        with open(os.path.join(here, f), "rb") as fh:
            hashlib.sha256(fh.read()).hexdigest()
"""


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--files", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="cfgcheck-cache-bench-"))
    try:
        corpus = work / "corpus"
        make_corpus(corpus, args.files)
        env = dict(_env(), CFGCHECK_CACHE_DIR=str(work / "cache"), NO_COLOR="1")
        lint = [sys.executable, "-m", "cfgcheck", "lint", str(corpus), "--no-project"]
        runs: dict[str, list[float]] = {k: [] for k in ("first", "second", "second --summary",
                                                        "sha256 pass", "import cli + api")}

        def t(label: str, cmd: list[str]) -> None:
            start = time.perf_counter()
            subprocess.run(cmd, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            runs[label].append(time.perf_counter() - start)

        for _ in range(args.repeat):
            shutil.rmtree(work / "cache", ignore_errors=True)
            t("first", lint)
            t("sha256 pass", [sys.executable, "-c", SHA, str(corpus)])
            t("second", lint)
            t("sha256 pass", [sys.executable, "-c", SHA, str(corpus)])
            t("second --summary", lint + ["--summary"])
            t("import cli + api", [sys.executable, "-c", "import cfgcheck.cli, cfgcheck.api"])
        med = {k: statistics.median(v) for k, v in runs.items()}
        for k, v in runs.items():
            print(f"{k:18s} median {med[k]:7.3f} s   runs {' '.join(f'{x:.3f}' for x in v)}")
        print(f"second / first            {med['second'] / med['first']:.3f}")
        print(f"second / sha256 pass      {med['second'] / med['sha256 pass']:.2f}")
        print(f"second --summary / sha256 {med['second --summary'] / med['sha256 pass']:.2f}")
        print(f"import alone / sha256     {med['import cli + api'] / med['sha256 pass']:.2f}")
        print("load average", " ".join(f"{x:.2f}" for x in os.getloadavg()))
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
