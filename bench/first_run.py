"""Where a first (uncached) run spends its time: interleaved medians against the parse floors.

    python bench/first_run.py [--files 2000] [--repeat 5] [--cold 21] [--profile lint|fix|derive]

Generates bench/run.py's corpus, then runs each command once per round, round after round (so a
change in the machine's load falls on every command alike), and prints the medians with their
spread and the ratios:

  cold start   `cfgcheck lint one.yaml`  vs  python -c "import yaml, typer"
  lint         `cfgcheck lint corpus/`   vs  a yaml.load(CSafeLoader) loop, a yaml.compose
               (CSafeLoader) loop, and a jsonschema loop validating each file against
               `cfgcheck schema` (validator built once)
  fix --diff   and `derive` over the corpus  vs  the compose loop

``--profile CMD`` runs CMD over the corpus under cProfile in this process and prints the top
functions by their own time and by cumulative time. Bytecode is written, as an installed package
has it (PYTHONDONTWRITEBYTECODE is removed for the subprocesses).
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

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

from run import ENTRY, load_average, make_corpus  # noqa: E402  (bench/run.py)

LOAD = """
import sys, yaml
from pathlib import Path
for root in sys.argv[1:]:
    for p in sorted(Path(root).rglob("*")):
        if p.suffix in (".yaml", ".yml", ".json"):
            yaml.load(p.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader)
"""

COMPOSE = """
import sys, yaml
from pathlib import Path
for root in sys.argv[1:]:
    for p in sorted(Path(root).rglob("*")):
        if p.suffix in (".yaml", ".yml", ".json"):
            list(yaml.compose_all(p.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader))
"""

SCHEMA = """
import json, sys, yaml, jsonschema
from pathlib import Path
schema = json.loads(Path(sys.argv[1]).read_text())
check = jsonschema.validators.validator_for(schema)(schema)
bad = 0
for root in sys.argv[2:]:
    for p in sorted(Path(root).rglob("*")):
        if p.suffix in (".yaml", ".yml", ".json"):
            data = yaml.load(p.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader)
            bad += sum(1 for _ in check.iter_errors(data))
print(bad)
"""


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def rounds(commands: dict[str, list[str]], repeat: int) -> dict[str, list[float]]:
    env = _env()
    times: dict[str, list[float]] = {k: [] for k in commands}
    for _ in range(repeat):
        for label, cmd in commands.items():
            start = time.perf_counter()
            subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=ROOT)
            times[label].append(time.perf_counter() - start)
    return times


def show(times: dict[str, list[float]], pairs: list[tuple[str, str, str]], unit: float, name: str) -> None:
    med = {k: statistics.median(v) for k, v in times.items()}
    for k, v in times.items():
        print(f"  {k:14} median {med[k] * unit:9.1f} {name}  (min {min(v) * unit:.1f}, max {max(v) * unit:.1f})")
    for a, b, target in pairs:
        print(f"  {a} / {b} = {med[a] / med[b]:.2f}   (target {target})")


def profile(cmd: str, corpus: Path, top: int) -> None:
    import cProfile
    import io
    import pstats

    from cfgcheck.cli import main

    args = {"lint": ["lint", str(corpus), "--format", "json"],
            "fix": ["fix", "--diff", str(corpus)],
            "derive": ["derive", str(corpus), "--format", "json"]}[cmd]
    sys.argv = ["cfgcheck", *args]
    out, err = sys.stdout, sys.stderr
    prof = cProfile.Profile()
    sys.stdout = sys.stderr = io.StringIO()
    try:
        prof.enable()
        try:
            main()
        except SystemExit:
            pass
        prof.disable()
    finally:
        sys.stdout, sys.stderr = out, err
    stats = pstats.Stats(prof)
    stats.sort_stats("tottime").print_stats(top)
    stats.sort_stats("cumulative").print_stats(top)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--files", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=5, help="rounds over the corpus commands")
    ap.add_argument("--cold", type=int, default=21, help="rounds of the cold-start pair")
    ap.add_argument("--corpus", type=Path, help="use this corpus folder instead of generating one")
    ap.add_argument("--profile", choices=("lint", "fix", "derive"))
    ap.add_argument("--top", type=int, default=30)
    ap.add_argument("--only", choices=("cold", "lint", "fix", "derive"), action="append")
    a = ap.parse_args()

    tmp = Path(tempfile.mkdtemp(prefix="cfgcheck-first-run-"))
    try:
        corpus = a.corpus or tmp / "corpus"
        if a.corpus is None:
            make_corpus(corpus, a.files)
        files = sorted(p for p in corpus.rglob("*") if p.is_file())
        one = next(p for p in files if p.name.endswith("trainer-flat.yaml"))
        if a.profile:
            profile(a.profile, corpus, a.top)
            return
        py = sys.executable
        cli = [py, "-c", ENTRY]
        schema = tmp / "schema.json"
        schema.write_text(subprocess.run(cli + ["schema"], capture_output=True, text=True, env=_env(),
                                         cwd=ROOT).stdout)
        subprocess.run(cli + ["lint", str(one)], capture_output=True, env=_env(), cwd=ROOT)  # bytecode
        only = set(a.only or ("cold", "lint", "fix", "derive"))
        print(f"{len(files)} files; {load_average()} before")
        if "cold" in only:
            print("cold start (ms):")
            t = rounds({"import": [py, "-c", "import yaml, typer"], "lint one": cli + ["lint", str(one)]},
                       a.cold)
            show(t, [("lint one", "import", "<= 1.3")], 1000, "ms")
        corpus_cmds = {"load loop": [py, "-c", LOAD, str(corpus)],
                       "compose loop": [py, "-c", COMPOSE, str(corpus)],
                       "schema loop": [py, "-c", SCHEMA, str(schema), str(corpus)]}
        pairs = []
        if "lint" in only:
            corpus_cmds["lint"] = cli + ["lint", str(corpus)]
            pairs += [("lint", "load loop", "<= 1.5"), ("lint", "compose loop", "-"),
                      ("lint", "schema loop", "< 1")]
        if "fix" in only:
            corpus_cmds["fix --diff"] = cli + ["fix", "--diff", str(corpus)]
            pairs.append(("fix --diff", "compose loop", "<= 3"))
        if "derive" in only:
            corpus_cmds["derive"] = cli + ["derive", str(corpus)]
            pairs.append(("derive", "compose loop", "<= 2"))
        if pairs:
            print("corpus (s):")
            show(rounds(corpus_cmds, a.repeat), pairs, 1, "s")
        print(f"{load_average()} after")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
