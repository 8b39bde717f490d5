"""Speed and memory benchmark for cfgcheck (a script, not a test).

    python bench/run.py [--files 2000] [--repeat 15] [--jobs N] [--keep DIR]

Generates a corpus of realistic training configs across the layouts cfgcheck reads (trainer
arguments flat and in sections, DeepSpeed JSON, PEFT adapter_config.json) into a temporary
folder and prints five figures:

  (a) cold start of `cfgcheck lint one.yaml` against `python -c "import yaml, typer"` (medians)
  (b) corpus throughput against a bare script that only parses the same files with PyYAML's C
      loader (yaml.load with CSafeLoader)
  (c) `--jobs N` speed-up on the cores present
  (d) fixer cost per file against a bare ruamel.yaml round-trip (when cfgcheck.fix exists)
  (e) peak memory (VmHWM, as ru_maxrss would give without the parent's) at 1/4, 1/2 and all
      of the corpus

Everything runs in fresh subprocesses of this interpreter with this checkout first on the path,
the way the installed `cfgcheck` script starts (bytecode written, as an installed package has it).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))  # this checkout, not an installed copy, for the in-process figure (d)
ENTRY = "import sys; from cfgcheck.cli import main; sys.exit(main())"  # what the console script runs

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
           ("deepspeed", ".json", _deepspeed, 2), ("peft-adapter", ".json", _peft_adapter, 1))


def make_corpus(folder: Path, n: int, shards: int = 4, seed: int = 7) -> list[Path]:
    """n configs across the layouts, in `shards` sub-folders of equal size; returns the sub-folders."""
    r = random.Random(seed)
    weights = [w for *_, w in LAYOUTS]
    subs = [folder / f"shard{i}" for i in range(shards)]
    for s in subs:
        s.mkdir(parents=True)
    for i in range(n):
        name, suffix, make, _ = r.choices(LAYOUTS, weights)[0]
        org, task = r.choice(ORGS), r.choice(TASKS)
        path = subs[i % shards] / f"{org}-{task}-{i:05d}-{name}{suffix}"
        path.write_text(make(r, org, task), encoding="utf-8")
    return subs


BARE = """
import sys, yaml
from pathlib import Path
n = 0
for root in sys.argv[1:]:
    for p in sorted(Path(root).rglob("*")):
        if p.suffix in (".yaml", ".yml", ".json"):
            yaml.load(p.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader)
            n += 1
print(n)
"""

# --------------------------------------------------------------------------- measuring

def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)  # as installed: bytecode (and the catalogue cache) kept
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


CPU: dict[str, float] = {}  # command label -> median CPU seconds (user + system, all processes)


def timed(cmd: list[str], repeat: int, cwd: Path = ROOT, label: str | None = None) -> float:
    import resource

    env = _env()
    runs, cpu = [], []
    for _ in range(repeat):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        start = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=cwd)
        runs.append(time.perf_counter() - start)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    if label:
        CPU[label] = statistics.median(cpu)
    return statistics.median(runs)


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
    out = subprocess.run([sys.executable, "-c", code], stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE, text=True, env=_env(), cwd=ROOT)
    return int(out.stderr.strip().split()[-1])


def machine() -> dict[str, str]:
    model = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    info = {"nproc": str(os.cpu_count()), "cpu": model, "python": platform.python_version(),
            "platform": platform.platform()}
    try:
        import yaml

        info["pyyaml"] = f"{yaml.__version__} (libyaml {'.'.join(map(str, yaml._yaml.get_version()))})"
    except (ImportError, AttributeError):
        pass
    return info


def load_average() -> str:
    try:
        return "load average %.2f %.2f %.2f" % os.getloadavg()
    except OSError:
        return "load average unknown"


def fixer_figure(files: list[Path], repeat: int) -> str:
    import importlib.util

    if importlib.util.find_spec("cfgcheck.fix") is None:
        return "not measured: no fixer yet (cfgcheck.fix is absent)"
    import importlib

    fix = importlib.import_module("cfgcheck.fix")
    fn = getattr(fix, "fix_text", None)
    if fn is None:
        return "not measured: cfgcheck.fix has no fix_text(text, name) to call"
    from io import StringIO

    from ruamel.yaml import YAML

    texts = [(str(p), p.read_text(encoding="utf-8")) for p in files if p.suffix == ".yaml"]

    def bare():
        y = YAML()
        for _, t in texts:
            out = StringIO()
            y.dump(y.load(t), out)

    def ours():
        for name, t in texts:
            fn(t, name)

    def best(f):
        runs = []
        for _ in range(max(3, repeat // 5)):
            s = time.perf_counter()
            f()
            runs.append(time.perf_counter() - s)
        return statistics.median(runs)

    b, o = best(bare), best(ours)
    per = len(texts) or 1
    return (f"{o / per * 1000:.2f} ms/file vs ruamel.yaml round-trip {b / per * 1000:.2f} ms/file: "
            f"ratio {o / b:.2f} ({len(texts)} YAML files)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--files", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=15, help="runs per cold-start median")
    ap.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    ap.add_argument("--keep", type=Path, help="write the corpus here and keep it")
    a = ap.parse_args()

    tmp = Path(tempfile.mkdtemp(prefix="cfgcheck-bench-")) if a.keep is None else a.keep
    try:
        shards = make_corpus(tmp / "corpus", a.files)
        files = sorted(p for s in shards for p in s.iterdir())
        one = next(p for p in files if p.name.endswith("trainer-flat.yaml"))
        py = sys.executable
        lint = [py, "-c", ENTRY, "lint"]
        subprocess.run(lint + [str(one)], capture_output=True, env=_env(), cwd=ROOT)  # warm: bytecode

        print(f"machine: {machine()}")
        print(f"    {load_average()} before")
        print(f"corpus: {len(files)} files in {tmp / 'corpus'}")
        floor = timed([py, "-c", "import yaml, typer"], a.repeat)
        cold = timed(lint + [str(one)], a.repeat)
        print(f"(a) cold start: lint one file {cold * 1000:.1f} ms vs import yaml, typer "
              f"{floor * 1000:.1f} ms: ratio {cold / floor:.2f} (target <= 1.3)")

        corpus_runs = max(3, a.repeat // 5)
        bare = timed([py, "-c", BARE, str(tmp / "corpus")], corpus_runs)
        serial = timed(lint + [str(tmp / "corpus")], corpus_runs, label="serial")
        print(f"(b) corpus: lint {serial:.2f} s ({len(files) / serial:.0f} files/s) vs bare CSafeLoader "
              f"parse {bare:.2f} s ({len(files) / bare:.0f} files/s): ratio {serial / bare:.2f} (target <= 1.5)")

        par = timed(lint + [str(tmp / "corpus"), "--jobs", str(a.jobs)], corpus_runs, label="parallel")
        print(f"(c) --jobs {a.jobs}: {par:.2f} s vs serial {serial:.2f} s: speed-up {serial / par:.2f} "
              f"on {os.cpu_count()} cores (ideal {a.jobs:.0f}); CPU time {CPU['parallel']:.2f} s vs "
              f"serial {CPU['serial']:.2f} s (the work added by the pool)")

        print(f"(d) fixer: {fixer_figure(files, a.repeat)}")

        sizes = []
        for k in (1, 2, 4):
            sub = [str(s) for s in shards[:k]]
            n = sum(1 for s in shards[:k] for _ in s.iterdir())
            sizes.append((n, peak_rss_kib(["lint", *sub])))
        base = peak_rss_kib(["lint", str(one)])
        mem = ", ".join(f"{n} files {kib / 1024:.1f} MiB" for n, kib in sizes)
        print(f"    {load_average()} after the timed runs (other work on the machine skews (a)-(c))")
        print(f"(e) peak memory: 1 file {base / 1024:.1f} MiB, {mem} "
              f"(growth from {sizes[0][0]} to {sizes[-1][0]} files: {(sizes[-1][1] - sizes[0][1]) / 1024:+.1f} MiB)")
    finally:
        if a.keep is None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
