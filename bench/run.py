"""Speed and memory benchmark for cfgcheck: every figure a ratio measured in the same run.

    python bench/run.py [--files 2000] [--repeat 7] [--only cold,corpus,...] [--quick] [--keep DIR]

Generates a corpus of realistic training configs across the layouts cfgcheck reads (trainer
arguments flat and in sections, DeepSpeed JSON, PEFT adapter_config.json) and prints one table
row per figure. Each row times cfgcheck and the thing it is compared with (a floor: what the
same files cost at least; or a peer: what a user would write instead) in the same run,
alternating them run by run (A B, B A, A B, ...) so that a change in the machine's load falls
on both; the ratio is taken per pair of runs and shown as the median with the minimum and
maximum over the pairs.

Sections (``--only`` takes a comma-separated list of them; default: all):

  cold       `cfgcheck lint one.yaml` / `python -c "import yaml, typer"`
  corpus     `cfgcheck lint` over the corpus / a bare loop of yaml.load(CSafeLoader), and / a loop
             of yaml.compose with the C loader (parse only)
  peer       the corpus / a jsonschema loop validating each file against cfgcheck's own schemas
             (`cfgcheck schema --layout ...`, each validator built once; bench/peer_jsonschema.py)
  script     the corpus / a hand script of three rules over the C loader (bench/peer_script.py)
  jobs       serial / `--jobs 2` and serial / `--jobs auto` (the speed-up), and the CPU time the
             pool adds
  allowed    serial CPU / the CPU critical path of `--jobs 2` (this process until the pool starts,
             then the busiest worker): the speed-up idle cores would give, whatever the load; and
             the speed-up the machine gives two copies of a pure-Python loop (its ceiling)
  threshold  serial / `--jobs 2` over small runs (16 .. 256 files): where a pool starts to pay
  fix        `cfgcheck fix --diff` over the corpus / the C compose loop
  derive     `cfgcheck derive` over the corpus / the C compose loop
  cache      an unchanged corpus linted again (the cache warm) / a sha256 pass over the files,
             and / the uncached run (needs `lint --no-cache`; "cache not available" without it)
  memory     peak memory (VmHWM) linting 1 file and 1/4, 1 and 4 times the corpus
  growth     bench/growth.py's curves (keys per file, documents, unknown keys, files) with a
             linearity verdict: the time ratio per 10x size over the largest step

Everything runs in fresh subprocesses of this interpreter with this checkout first on the path,
the way the installed `cfgcheck` script starts (bytecode written, as an installed package has it),
with a cache folder of its own (XDG_CACHE_HOME and CFGCHECK_CACHE_DIR in a temporary folder) and
without project files.
When `lint --no-cache` exists, every uncached figure passes it.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import random
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BENCH = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT))  # this checkout, not an installed copy
ENTRY = "import sys; from cfgcheck.cli import main; sys.exit(main())"  # what the console script runs
PY = sys.executable

SECTIONS = ("cold", "corpus", "peer", "script", "jobs", "allowed", "threshold", "fix", "derive", "cache",
            "memory", "growth")

# the row labels, in the order printed (tests check that a quick run prints every one)
LABELS = {
    "cold": ["cold start: lint one.yaml / import yaml, typer"],
    "corpus": ["corpus: lint / yaml.load(CSafeLoader) loop", "corpus: lint / C compose loop"],
    "peer": ["corpus: lint / jsonschema loop (our schemas)"],
    "script": ["corpus: lint / hand script, three rules"],
    "jobs": ["speed-up: serial / --jobs 2", "speed-up: serial / --jobs auto",
             "speed-up: serial / --jobs 2, the 4N files of the memory figure"],
    "allowed": ["speed-up the work allows (CPU critical path), --jobs 2",
                "speed-up the machine gives two processes (a pure-Python loop, alone / two at once)",
                "speed-up the machine gives two serial lints of the corpus (alone / two at once)"],
    "threshold": ["pool threshold: serial / --jobs 2 by run size"],
    "fix": ["fix --diff over the corpus / C compose loop"],
    "derive": ["derive over the corpus / C compose loop"],
    "cache": ["unchanged corpus linted again / sha256 pass", "unchanged corpus linted again / uncached run",
              "first run into an empty cache (entries written) / uncached run",
              "one file of the corpus changed, linted again / uncached run"],
    "memory": ["peak memory by number of files"],
    "growth": ["growth: keys per file", "growth: documents per file", "growth: unknown keys",
               "growth: files in a folder"],
}

# --------------------------------------------------------------------------- the corpus

ORGS = ["tidewater", "fjordline", "harborlight", "copperleaf", "larkspur", "quillmoor", "saltmarsh"]
TASKS = ["support-bot", "ticket-router", "contract-summary", "sql-helper", "triage", "faq-answers"]
MODELS = ["{org}/base-7b", "{org}/base-1b", "meta-llama/Llama-2-7b-hf", "mistralai/Mistral-7B-v0.1",
          "Qwen/Qwen2.5-0.5B", "./checkpoints/{org}-base"]


def _trainer_flat(r: random.Random, org: str, task: str) -> str:
    rank = r.choice([4, 8, 16, 32, 64])
    alpha = r.choice([rank // 2, rank, 2 * rank, 16])
    lines = [
        f"# {org.title()} fine-tunes {task} ({r.choice(['LoRA', 'QLoRA', 'full'])})",
        f"model_name_or_path: {r.choice(MODELS).format(org=org)}",
        f"output_dir: out/{org}-{task}",
        f"learning_rate: {r.choice(['2.0e-4', '1e-4', '5e-5', '3.0e-5', '1.0e-5'])}",
        f"per_device_train_batch_size: {r.choice([1, 2, 4, 8, 16])}",
        f"gradient_accumulation_steps: {r.choice([1, 2, 4, 8])}",
        f"num_train_epochs: {r.choice([1, 2, 3])}",
        f"lr_scheduler_type: {r.choice(['cosine', 'linear', 'constant_with_warmup'])}",
        f"warmup_ratio: {r.choice([0.03, 0.05, 0.1])}",
        f"logging_steps: {r.choice([10, 25, 50])}",
        f"save_steps: {r.choice([200, 500, 1000])}",
        f"eval_strategy: {r.choice(['steps', 'epoch', 'no'])}",
        f"eval_steps: {r.choice([100, 250, 500])}",
        f"bf16: {r.choice(['true', 'false'])}",
        f"fp16: {r.choice(['false', 'false', 'true'])}",
        f"gradient_checkpointing: {r.choice(['true', 'false'])}",
        f"max_seq_length: {r.choice([512, 1024, 2048, 4096])}",
    ]
    if r.random() < 0.7:
        lines += [
            "use_peft: true",
            f"lora_r: {rank}",
            f"lora_alpha: {alpha}",
            f"lora_dropout: {r.choice([0.0, 0.05, 0.1])}",
            "lora_target_modules:",
            *[f"  - {m}" for m in r.sample(["q_proj", "k_proj", "v_proj", "o_proj", "gate_proj", "up_proj"], 3)],
        ]
        if r.random() < 0.4:
            lines += ["load_in_4bit: true", "bnb_4bit_quant_type: nf4", "bnb_4bit_compute_dtype: bfloat16"]
    return "\n".join(lines) + "\n"


def _trainer_nested(r: random.Random, org: str, task: str) -> str:
    rank = r.choice([8, 16, 32])
    return (
        f"# {org.title()}: {task}, sections per concern\n"
        "model:\n"
        f"  model_name_or_path: {r.choice(MODELS).format(org=org)}\n"
        f"  torch_dtype: {r.choice(['bfloat16', 'float16'])}\n"
        "lora:\n"
        f"  r: {rank}\n"
        f"  alpha: {r.choice([rank // 2, 2 * rank])}\n"
        f"  dropout: 0.05\n"
        "  target_modules: [q_proj, v_proj]\n"
        "training:\n"
        f"  learning_rate: {r.choice(['2.0e-4', '1e-4', '5.0e-5'])}\n"
        f"  per_device_train_batch_size: {r.choice([2, 4, 8])}\n"
        f"  gradient_accumulation_steps: {r.choice([2, 4, 8])}\n"
        f"  num_train_epochs: {r.choice([1, 3])}\n"
        f"  max_steps: {r.choice([-1, 500, 2000])}\n"
        f"  save_steps: {r.choice([250, 5000])}\n"
        f"  bf16: {r.choice(['true', 'false'])}\n"
        "data:\n"
        f"  max_seq_length: {r.choice([1024, 2048])}\n"
        f"  chat_template: {r.choice(['chatml', 'llama-2'])}\n"
        "hardware:\n"
        f"  num_gpus: {r.choice([1, 2, 4, 8])}\n"
    )


def _deepspeed(r: random.Random, org: str, task: str) -> str:
    micro, accum, gpus = r.choice([1, 2, 4, 8]), r.choice([1, 2, 4]), r.choice([1, 2, 4, 8])
    total = micro * accum * gpus if r.random() < 0.8 else micro * accum * gpus * 2
    doc = {
        "train_batch_size": total if r.random() < 0.7 else "auto",
        "train_micro_batch_size_per_gpu": micro,
        "gradient_accumulation_steps": accum,
        "gradient_clipping": 1.0,
        "steps_per_print": 100,
        "wall_clock_breakdown": False,
        "bf16": {"enabled": r.choice([True, False, "auto"])},
        "fp16": {"enabled": r.choice([False, "auto"]), "loss_scale": 0, "initial_scale_power": 16},
        "optimizer": {"type": "AdamW", "params": {"lr": r.choice([2e-5, 1e-4, "auto"]),
                                                  "betas": [0.9, 0.999], "eps": 1e-8,
                                                  "weight_decay": 0.0}},
        "scheduler": {"type": "WarmupDecayLR", "params": {"warmup_num_steps": 100,
                                                          "total_num_steps": "auto"}},
        "zero_optimization": {"stage": r.choice([1, 2, 3]), "overlap_comm": True,
                              "contiguous_gradients": True, "reduce_bucket_size": 5e8,
                              "offload_optimizer": {"device": r.choice(["none", "cpu"])}},
    }
    return json.dumps(doc, indent=2) + "\n"


def _peft_adapter(r: random.Random, org: str, task: str) -> str:
    rank = r.choice([8, 16, 32, 64])
    doc = {
        "peft_type": "LORA",
        "task_type": "CAUSAL_LM",
        "base_model_name_or_path": r.choice(MODELS).format(org=org),
        "r": rank,
        "lora_alpha": r.choice([rank // 2, rank, 2 * rank]),
        "lora_dropout": 0.05,
        "target_modules": r.sample(["q_proj", "k_proj", "v_proj", "o_proj"], 2),
        "bias": "none",
        "fan_in_fan_out": False,
        "inference_mode": True,
        "use_rslora": r.random() < 0.2,
        "init_lora_weights": True,
        "modules_to_save": None,
    }
    return json.dumps(doc, indent=2) + "\n"


LAYOUTS = (("trainer-flat", ".yaml", _trainer_flat, 4), ("trainer-nested", ".yaml", _trainer_nested, 2),
           ("deepspeed", ".json", _deepspeed, 2), ("adapter", ".json", _peft_adapter, 1))


def make_corpus(folder: Path, n: int, shards: int = 4, seed: int = 7) -> list[Path]:
    """n configs across the layouts, in `shards` sub-folders of equal size; returns the sub-folders."""
    r = random.Random(seed)
    weights = [w for *_, w in LAYOUTS]
    subs = [folder / f"shard{i:02d}" for i in range(shards)]
    for s in subs:
        s.mkdir(parents=True)
    for i in range(n):
        name, suffix, make, _ = r.choices(LAYOUTS, weights)[0]
        org, task = r.choice(ORGS), r.choice(TASKS)
        path = subs[i % shards] / f"{org}-{task}-{i:05d}-{name}{suffix}"
        path.write_text(make(r, org, task), encoding="utf-8")
    return subs


# --------------------------------------------------------------------------- measuring

ENV: dict[str, str] = {}


def _env(cache: Path) -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)  # as installed: bytecode (and the catalogue cache) kept
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["XDG_CACHE_HOME"] = str(cache)  # a cache folder of the benchmark's own
    env["CFGCHECK_CACHE_DIR"] = str(cache / "cfgcheck")
    env.pop("NO_COLOR", None)
    return env


def run_once(cmd: list[str]) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the process and its children)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV, cwd=ROOT)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime


@dataclass
class Race:
    wall: dict[str, list[float]] = field(default_factory=dict)
    cpu: dict[str, list[float]] = field(default_factory=dict)

    def median(self, name: str) -> float:
        return statistics.median(self.wall[name])

    def ratios(self, a: str, b: str) -> list[float]:
        return [x / y for x, y in zip(self.wall[a], self.wall[b]) if y > 0]


WARM = True  # one unmeasured run of each command first (--quick: none)


def race(commands: dict[str, list[str]], repeat: int, warm: bool = True) -> Race:
    """Each command ``repeat`` times, interleaved and alternating in order (A B C, C B A, ...),
    after one unmeasured run of each (bytecode, the page cache)."""
    if warm and WARM:
        for cmd in commands.values():
            run_once(cmd)
    out = Race()
    names = list(commands)
    for r in range(repeat):
        for name in names if r % 2 == 0 else names[::-1]:
            wall, cpu = run_once(commands[name])
            out.wall.setdefault(name, []).append(wall)
            out.cpu.setdefault(name, []).append(cpu)
    return out


def spread(values: list[float], digits: int = 2) -> str:
    if not values:
        return "-"
    med = statistics.median(values)
    if len(values) == 1:
        return f"{med:.{digits}f}"
    return f"{med:.{digits}f} [{min(values):.{digits}f}–{max(values):.{digits}f}]"


def seconds(t: float) -> str:
    return f"{t * 1000:.0f} ms" if t < 1 else f"{t:.2f} s"


def row(label: str, ours: str, base: str, ratio: str, target: str, verdict: str) -> None:
    print(f"| {label} | {ours} | {base} | {ratio} | {target} | {verdict} |", flush=True)


def at_most(ratios: list[float], target: float) -> str:
    med = statistics.median(ratios)
    return "met" if med <= target else f"missed ({med / target:.1f}x over)"


def at_least(ratios: list[float], target: float) -> str:
    med = statistics.median(ratios)
    return "met" if med >= target else f"missed ({med / target:.0%} of it)"


def has_option(command: str, spelling: str) -> bool:
    """Whether the typer declaration of ``cfgcheck COMMAND`` carries an option spelled so."""
    import inspect

    from cfgcheck import cli

    fn = getattr(cli, command, None)
    if fn is None:
        return False
    for param in inspect.signature(fn).parameters.values():
        for decl in getattr(param.default, "param_decls", None) or ():
            if spelling in (d.strip() for d in decl.split("/")):
                return True
    return False


def peak_rss_kib(args: list[str]) -> int:
    code = ("import resource, sys\n"
            f"sys.argv = ['cfgcheck'] + {args!r}\n"
            "from cfgcheck.cli import main\n"
            "try:\n    main()\nexcept SystemExit:\n    pass\n"
            "import re\n"
            "from pathlib import Path\n"
            "s = Path('/proc/self/status')\n"
            "m = s.exists() and re.search(r'VmHWM:\\s+(\\d+)', s.read_text())\n"
            "peak = int(m.group(1)) if m else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
            "sys.stderr.write(str(peak))\n")
    out = subprocess.run([PY, "-c", code], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                         text=True, env=ENV, cwd=ROOT)
    return int(out.stderr.strip().split()[-1])


def machine() -> str:
    model = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    from cfgcheck.parallel import usable_cpus

    parts = [f"{os.cpu_count()} CPUs ({usable_cpus()} usable)", model, f"Python {platform.python_version()}",
             platform.platform()]
    try:
        import yaml

        parts.append(f"PyYAML {yaml.__version__} (libyaml {'.'.join(map(str, yaml._yaml.get_version()))})")
    except (ImportError, AttributeError):
        pass
    return ", ".join(parts)


def load_average() -> str:
    try:
        return "%.2f %.2f %.2f" % os.getloadavg()
    except OSError:
        return "unknown"


def commit() -> str:
    try:
        out = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True,
                             cwd=ROOT, timeout=10)
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"],
                               capture_output=True, text=True, cwd=ROOT, timeout=10).stdout.strip()
        return out.stdout.strip() + (" (with uncommitted changes)" if dirty else "")
    except (OSError, subprocess.SubprocessError):
        return "unknown"


# --------------------------------------------------------------------------- the sections

@dataclass
class Bench:
    tmp: Path
    corpus: list[str]  # the corpus folders (N files)
    shards: list[Path]  # 16 folders of N/4 files each (the memory figure's 4N files)
    one: Path
    files: int
    repeat: int
    quick: bool
    no_cache: list[str]  # ["--no-cache"] when lint has it
    growth: str = "full"  # sizes of the growth curves
    uncached: dict[str, float] = field(default_factory=dict)  # median of the uncached corpus lint

    def cfg(self, *args: str) -> list[str]:
        return [PY, "-c", ENTRY, *args]

    def lint(self, *args: str) -> list[str]:
        return self.cfg("lint", "--no-project", *self.no_cache, *args)

    def floor(self, mode: str, *paths: str) -> list[str]:
        return [PY, str(BENCH / "floors.py"), mode, *paths]


def sec_cold(b: Bench) -> None:
    r = race({"lint": b.lint(str(b.one)), "floor": [PY, "-c", "import yaml, typer"]}, b.repeat * 3)
    rs = r.ratios("lint", "floor")
    row(LABELS["cold"][0], seconds(r.median("lint")), seconds(r.median("floor")), spread(rs), "≤ 1.3",
        at_most(rs, 1.3))


def sec_corpus(b: Bench) -> None:
    r = race({"lint": b.lint(*b.corpus), "load": b.floor("load", *b.corpus),
              "compose": b.floor("compose", *b.corpus)}, b.repeat)
    b.uncached["lint"] = r.median("lint")
    rs = r.ratios("lint", "load")
    n = b.files
    row(LABELS["corpus"][0], f"{seconds(r.median('lint'))} ({n / r.median('lint'):.0f} files/s)",
        f"{seconds(r.median('load'))} ({n / r.median('load'):.0f} files/s)", spread(rs), "≤ 1.5", at_most(rs, 1.5))
    rs = r.ratios("lint", "compose")
    row(LABELS["corpus"][1], seconds(r.median("lint")), seconds(r.median("compose")), spread(rs), "-", "-")


def sec_peer(b: Bench) -> None:
    schemas = b.tmp / "schemas"
    schemas.mkdir(exist_ok=True)
    for layout in ("trainer", "deepspeed", "peft-adapter"):
        out = subprocess.run(b.cfg("schema", "--layout", layout), capture_output=True, text=True, env=ENV,
                             cwd=ROOT, check=True).stdout
        (schemas / f"{layout}.json").write_text(out, encoding="utf-8")
    r = race({"lint": b.lint(*b.corpus), "peer": [PY, str(BENCH / "peer_jsonschema.py"), str(schemas), *b.corpus]},
             b.repeat)
    rs = r.ratios("lint", "peer")
    row(LABELS["peer"][0], seconds(r.median("lint")), seconds(r.median("peer")), spread(rs), "< 1 (faster)",
        "met" if statistics.median(rs) < 1 else f"missed ({statistics.median(rs):.1f}x slower)")


def sec_script(b: Bench) -> None:
    r = race({"lint": b.lint(*b.corpus), "peer": [PY, str(BENCH / "peer_script.py"), *b.corpus]}, b.repeat)
    rs = r.ratios("lint", "peer")
    row(LABELS["script"][0], seconds(r.median("lint")), seconds(r.median("peer")), spread(rs), "≤ 1.5",
        at_most(rs, 1.5))


def sec_jobs(b: Bench) -> None:
    from cfgcheck.parallel import usable_cpus, worker_count

    cpus = usable_cpus()

    def speedup(label: str, r: Race, name: str, workers: int) -> None:
        rs = [s / p for s, p in zip(r.wall["serial"], r.wall[name])]
        added = statistics.median(r.cpu[name]) / statistics.median(r.cpu["serial"])
        ideal = min(workers, cpus)
        target = f"≥ {0.9 * ideal:.1f}" if ideal > 1 else "-"
        verdict = at_least(rs, 0.9 * ideal) if ideal > 1 else "serial here (one usable CPU or a short run)"
        row(label, f"{seconds(r.median(name))} ({workers} process{'es' if workers > 1 else ''}; CPU {added:.2f}x serial's)",
            seconds(r.median("serial")), spread(rs), target, verdict)

    r = race({"serial": b.lint(*b.corpus), "two": b.lint("--jobs", "2", *b.corpus),
              "auto": b.lint("--jobs", "auto", *b.corpus)}, b.repeat)
    speedup(LABELS["jobs"][0], r, "two", 2)
    speedup(LABELS["jobs"][1], r, "auto", worker_count("auto", b.files))
    # the same over four times the files: what a run pays once (start-up, the first use of each
    # table in each process, the last chunks) weighs less in a longer run
    everything = [str(s) for s in b.shards]
    speedup(LABELS["jobs"][2], race({"serial": b.lint(*everything), "two": b.lint("--jobs", "2", *everything)},
                                    b.repeat), "two", 2)


ALLOWED = """
import json, sys, time
from cfgcheck import engine, parallel
opts = engine.Options()
pairs = [(f, opts) for f in engine.expand_paths(sys.argv[2:])]
cpu = time.process_time()
for _report in engine.lint_files(pairs, jobs=int(sys.argv[1]), keep_views=False):
    pass
if sys.argv[1] == "1":
    print(json.dumps([time.process_time() - cpu]))
else:
    print(json.dumps([parallel.LAST_RUN_CACHE["here"], max(parallel.LAST_RUN_CACHE["workers"].values())]))
"""


def sec_allowed(b: Bench) -> None:
    """Serial CPU over the parallel run's critical path in CPU (this process up to the pool's
    start, then the busiest worker), each in a fresh process: the speed-up two idle cores would
    give, whatever the load."""
    label = LABELS["allowed"][0]
    runs = []
    for r in range(b.repeat):
        pair = []
        for jobs in ("1", "2") if r % 2 == 0 else ("2", "1"):
            out = subprocess.run([PY, "-c", ALLOWED, jobs, *b.corpus], capture_output=True, text=True,
                                 env=ENV, cwd=ROOT)
            if out.returncode != 0:
                row(label, "failed", "-", "-", "≥ 1.8", (out.stderr.strip().splitlines() or ["no output"])[-1])
                return
            pair.append((jobs, json.loads(out.stdout.strip().splitlines()[-1])))
        got = dict(pair)
        runs.append((got["1"][0], *got["2"]))
    rs = [s / (h + w) for s, h, w in runs]
    med = statistics.median
    row(label, f"CPU {med([h for _, h, _ in runs]):.2f} s here + {med([w for *_, w in runs]):.2f} s "
        "busiest worker", f"serial CPU {med([s for s, *_ in runs]):.2f} s", spread(rs), "≥ 1.8", at_least(rs, 1.8))
    _ceiling(b)


SPIN = "x = 0\nfor i in range(int(__import__('sys').argv[1])): x += i\n"


def _together(cmd: list[str], repeat: int) -> tuple[list[float], list[float]]:
    """Wall seconds of CMD run alone and of two copies of it started at once, alternating."""
    alone, both = [], []
    for r in range(repeat):
        for which in ("alone", "both") if r % 2 == 0 else ("both", "alone"):
            start = time.perf_counter()
            procs = [subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV, cwd=ROOT)
                     for _ in range(1 if which == "alone" else 2)]
            for proc in procs:
                proc.wait()
            (alone if which == "alone" else both).append(time.perf_counter() - start)
    return alone, both


def _ceiling(b: Bench) -> None:
    """What this machine gives two processes that share nothing: a command run alone, then two
    copies at once; two runs' worth of work over the wall time of the two together. On two idle
    cores it is near 2; where the host shares its cores (hyperthreads, other guests) or its
    caches and memory, it is lower, and no --jobs 2 figure can pass the lint's own. Two commands:
    a pure-Python loop (CPU alone) and the serial lint of the corpus (its memory traffic too)."""
    n = str(200_000 if b.quick else 8_000_000)  # about 0.5 s of one core
    for label, cmd in ((LABELS["allowed"][1], [PY, "-c", SPIN, n]), (LABELS["allowed"][2], b.lint(*b.corpus))):
        alone, both = _together(cmd, b.repeat)
        rs = [2 * a / w for a, w in zip(alone, both)]
        row(label, f"two at once {seconds(statistics.median(both))}", f"one alone {seconds(statistics.median(alone))}",
            spread(rs), "-", "the ceiling of every --jobs 2 figure on this machine")


def sec_threshold(b: Bench) -> None:
    sizes = [4, 8] if b.quick else [16, 32, 64, 128, 256]
    files = sorted(p for s in b.shards for p in s.iterdir())
    parts = []
    for n in sizes:
        folder = b.tmp / f"small{n}"
        if not folder.exists():
            folder.mkdir()
            for p in files[:n]:
                shutil.copy(p, folder / p.name)
        r = race({"serial": b.lint(str(folder)), "two": b.lint("--jobs", "2", str(folder))}, b.repeat)
        rs = [s / p for s, p in zip(r.wall["serial"], r.wall["two"])]
        parts.append(f"{n}: {spread(rs)}")
    from cfgcheck.parallel import AUTO_FILES_PER_WORKER

    row(LABELS["threshold"][0], "; ".join(parts), "-", "(files: speed-up)", "> 1 above the threshold",
        f"--jobs auto stays serial below {2 * AUTO_FILES_PER_WORKER} files")


def sec_fix(b: Bench) -> None:
    r = race({"fix": b.cfg("fix", "--no-project", "--diff", *b.corpus), "compose": b.floor("compose", *b.corpus)},
             b.repeat)
    rs = r.ratios("fix", "compose")
    row(LABELS["fix"][0], seconds(r.median("fix")), seconds(r.median("compose")), spread(rs), "≤ 3", at_most(rs, 3))


def sec_derive(b: Bench) -> None:
    r = race({"derive": b.cfg("derive", "--no-project", *b.corpus), "compose": b.floor("compose", *b.corpus)},
             b.repeat)
    rs = r.ratios("derive", "compose")
    row(LABELS["derive"][0], seconds(r.median("derive")), seconds(r.median("compose")), spread(rs), "≤ 2",
        at_most(rs, 2))


def sec_cache(b: Bench) -> None:
    if not b.no_cache:
        for label in LABELS["cache"]:
            row(label, "cache not available", "-", "-", "≤ 2 (sha256)", "cache not available (no lint --no-cache)")
        return
    warm = b.cfg("lint", "--no-project", *b.corpus)
    run_once(warm)  # fills the cache
    r = race({"warm": warm, "sha": b.floor("sha256", *b.corpus), "uncached": b.lint(*b.corpus)}, b.repeat,
             warm=False)
    rs = r.ratios("warm", "sha")
    row(LABELS["cache"][0], seconds(r.median("warm")), seconds(r.median("sha")), spread(rs), "≤ 2", at_most(rs, 2))
    rs = r.ratios("warm", "uncached")
    row(LABELS["cache"][1], seconds(r.median("warm")), seconds(r.median("uncached")), spread(rs), "-", "-")
    # the first run a user or a CI job without a kept cache folder pays: every entry written
    empty = b.tmp / "empty-cache"
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(empty))
    first, plain = [], []
    for i in range(b.repeat):
        for which in ("first", "plain") if i % 2 == 0 else ("plain", "first"):
            shutil.rmtree(empty, ignore_errors=True)
            cmd = warm if which == "first" else b.lint(*b.corpus)
            start = time.perf_counter()
            subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=ROOT)
            (first if which == "first" else plain).append(time.perf_counter() - start)
    rs = [a / p for a, p in zip(first, plain)]
    row(LABELS["cache"][2], seconds(statistics.median(first)), seconds(statistics.median(plain)), spread(rs), "-",
        "what writing the entries costs on this disk")
    # a commit that touches one config: the run's record no longer holds, every other file's
    # entry does (the pre-commit hook's and a CI gate's usual case)
    changed = sorted(p for folder in b.corpus for p in Path(folder).rglob("*") if p.is_file())[0]
    original = changed.read_bytes()
    edited, plain = [], []
    try:
        run_once(warm)
        for i in range(b.repeat):
            for which in ("edited", "plain") if i % 2 == 0 else ("plain", "edited"):
                if which == "edited":
                    changed.write_bytes(original + f"\n# edit {i}\n".encode())
                    cmd = warm
                else:
                    cmd = b.lint(*b.corpus)
                start = time.perf_counter()
                subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV, cwd=ROOT)
                (edited if which == "edited" else plain).append(time.perf_counter() - start)
    finally:
        changed.write_bytes(original)
    rs = [a / p for a, p in zip(edited, plain)]
    row(LABELS["cache"][3], seconds(statistics.median(edited)), seconds(statistics.median(plain)), spread(rs), "-",
        "the other files' entries reused")


def sec_memory(b: Bench) -> None:
    points = [(1, peak_rss_kib(["lint", "--no-project", *b.no_cache, str(b.one)]))]
    for k in (1, 4, 16):
        sub = [str(s) for s in b.shards[:k]]
        n = sum(1 for s in b.shards[:k] for _ in s.iterdir())
        points.append((n, peak_rss_kib(["lint", "--no-project", *b.no_cache, *sub])))
    (n0, k0), (n1, k1) = points[1], points[-1]
    per_file = (k1 - k0) / max(1, n1 - n0)
    text = " / ".join(f"{n:,}: {kib / 1024:.1f} MiB" for n, kib in points)
    row(LABELS["memory"][0], text, f"1 file: {points[0][1] / 1024:.1f} MiB",
        f"{points[-1][1] / points[1][1]:.2f} ({n1:,} / {n0:,} files)", "flat",
        f"{per_file:+.2f} KiB per file" + (" (flat)" if abs(per_file) < 1 else ""))


def sec_growth(b: Bench) -> None:
    out = b.tmp / "growth.json"
    cmd = [PY, str(BENCH / "growth.py"), "--json", str(out)] + {"tiny": ["--tiny"], "quick": ["--quick"]}.get(b.growth, [])
    proc = subprocess.run(cmd, capture_output=True, text=True, env=ENV, cwd=ROOT)
    if proc.returncode != 0 or not out.exists():
        for label in LABELS["growth"]:
            row(label, "failed", "-", "-", "linear", proc.stderr.strip().splitlines()[-1:] or "no output")
        return
    curves = {c["curve"]: c for c in json.loads(out.read_text(encoding="utf-8"))}
    for label in LABELS["growth"]:
        c = curves.get(label.split(": ", 1)[1])
        if c is None:
            row(label, "not measured", "-", "-", "linear", "-")
            continue
        sizes = c["sizes"]
        parts, verdicts = [], []
        for what in ("lint", "fix"):
            t = c[what]
            if len(t) < 2:
                continue
            # time ratio per 10x size over each step (linear: 10, quadratic: 100)
            steps = [(t[i + 1] / t[i]) ** (1 / math.log10(sizes[i + 1] / sizes[i]))
                     for i in range(len(t) - 1) if t[i] > 0]
            parts.append(f"{what} " + ", ".join(f"{s:.1f}" for s in steps))
            last = steps[-1]
            verdicts.append(f"{what} {'linear' if last <= 13 else 'superlinear'}")
        times = "; ".join(f"{w} " + " / ".join(seconds(x) for x in c[w]) for w in ("lint", "fix") if c[w])
        row(label, times, " / ".join(f"{s:,}" for s in sizes), "per 10x: " + "; ".join(parts), "10 (linear)",
            ", ".join(verdicts) + " (largest step)")


RUNNERS = {"cold": sec_cold, "corpus": sec_corpus, "peer": sec_peer, "script": sec_script, "jobs": sec_jobs,
           "allowed": sec_allowed,
           "threshold": sec_threshold, "fix": sec_fix, "derive": sec_derive, "cache": sec_cache,
           "memory": sec_memory, "growth": sec_growth}


def main(argv: list[str] | None = None) -> None:
    global ENV, WARM
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter,
                                 epilog=__doc__.split("\n\n", 2)[2])
    ap.add_argument("--files", type=int, default=None, help="configs in the corpus (default 2000; --quick: 16)")
    ap.add_argument("--repeat", type=int, default=None,
                    help="measured runs of each command per row (default 7, cold start 3x that; --quick: 1)")
    ap.add_argument("--only", default=",".join(SECTIONS), help="sections to run, comma-separated: " + ", ".join(SECTIONS))
    ap.add_argument("--quick", action="store_true", help="a handful of files, one run each, tiny growth curves")
    ap.add_argument("--growth", choices=("tiny", "quick", "full"), default=None,
                    help="sizes of the growth curves (default full; --quick: tiny)")
    ap.add_argument("--keep", type=Path, help="write the corpus here and keep it")
    a = ap.parse_args(argv)
    only = [s.strip() for s in a.only.split(",") if s.strip()]
    unknown = [s for s in only if s not in RUNNERS]
    if unknown:
        ap.error(f"unknown section(s) {', '.join(unknown)}; choose from {', '.join(SECTIONS)}")
    files = a.files or (16 if a.quick else 2000)
    repeat = a.repeat or (1 if a.quick else 7)
    WARM = not a.quick

    if a.keep is not None and a.keep.exists():
        ap.error(f"--keep {a.keep}: the folder exists (the corpus is written afresh)")
    tmp = Path(tempfile.mkdtemp(prefix="cfgcheck-bench-")) if a.keep is None else a.keep
    try:
        ENV = _env(tmp / "cache")
        # 16 shards of files/4: the first 4 are the corpus, all 16 the memory figure's largest run
        shards = make_corpus(tmp / "corpus", files * 4, shards=16)
        corpus = [str(s) for s in shards[:4]]
        one = next(p for s in shards for p in sorted(s.iterdir()) if p.name.endswith("trainer-flat.yaml"))
        no_cache = ["--no-cache"] if has_option("lint", "--no-cache") else []
        b = Bench(tmp=tmp, corpus=corpus, shards=shards, one=one, files=files, repeat=repeat, quick=a.quick,
                  no_cache=no_cache, growth=a.growth or ("tiny" if a.quick else "full"))
        print(f"cfgcheck benchmark: commit {commit()}, {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}")
        print(f"machine: {machine()}")
        print(f"corpus: {files:,} files ({', '.join(n for n, *_ in LAYOUTS)}) in {tmp / 'corpus'}; "
              f"{repeat} measured runs per command, interleaved; ratio: median [min–max] over the pairs of runs")
        print(f"cache: {'lint --no-cache for the uncached figures' if no_cache else 'not available (no lint --no-cache)'}")
        print(f"load average before: {load_average()}\n")
        row("figure", "cfgcheck", "floor or peer", "ratio", "target", "verdict")
        print("| --- | --- | --- | --- | --- | --- |")
        for name in SECTIONS:
            if name in only:
                RUNNERS[name](b)
        print(f"\nload average after: {load_average()} (other work on the machine moves every wall-clock figure)")
    finally:
        if a.keep is None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
