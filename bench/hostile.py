"""Time and memory of cfgcheck on hostile input around the files (a script, not a test).

    python bench/hostile.py

Prints, for docs/robustness.md:

  (a) project globs: the pattern "**a" x 12 + "**c" against names of n a's that do not end in c,
      with cfgcheck's matcher and with the backtracking regular expression the same glob
      translates to (the regex only for small n, under a time cap);
      and the longest glob the project file accepts (1,000 characters of '**a', every position
      alive at every step) against a 4,096-character path
  (b) baselines: load time and peak memory of a 100,000-deep nesting (refused), of a baseline of
      100,000 findings (accepted) and of a /dev/zero link (refused)
  (c) huge numbers: lint time of a 400-digit lora_r and of a base-60 integer of 3,000 parts

Each figure is measured in a fresh subprocess of this interpreter (this checkout first on the
path); peak memory is the process's VmHWM (Linux), which ru_maxrss would report with the parent's.
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

PEAK = ("import re, resource; from pathlib import Path\n"
        "def peak_mib():\n"
        "    s = Path('/proc/self/status')\n"
        "    m = s.exists() and re.search(r'VmHWM:\\s+(\\d+)', s.read_text())\n"
        "    return (int(m.group(1)) if m else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) / 1024\n")


def run(code: str, timeout: float = 300) -> dict:
    """Run ``code`` (which prints one JSON line) in a fresh interpreter; None when over ``timeout``."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    try:
        out = subprocess.run([sys.executable, "-c", PEAK + textwrap.dedent(code)], capture_output=True,
                             text=True, env=env, timeout=timeout, check=True)
    except subprocess.TimeoutExpired:
        return {"timeout": timeout}
    return json.loads(out.stdout.strip().splitlines()[-1])


def globs() -> None:
    print("(a) project globs: '**a' x 12 + '**c' against n a's (no match)")
    for n in (16, 20, 24, 400, 4000):
        ours = run(f"""
            import json, time
            from cfgcheck.project import compile_glob
            g = compile_glob('**a' * 12 + '**c'); path = 'a' * {n} + 'b'
            t = time.perf_counter(); hit = g.match(path); dt = time.perf_counter() - t
            print(json.dumps({{"s": dt, "hit": hit, "mib": peak_mib()}}))""")
        line = f"    n={n:>5}: cfgcheck {ours['s'] * 1000:8.2f} ms (peak {ours['mib']:.0f} MiB)"
        if n <= 24:
            ref = run(f"""
                import json, re, time
                rx = re.compile('.*a' * 12 + '.*c' + r'\\Z'); path = 'a' * {n} + 'b'
                t = time.perf_counter(); rx.match(path); print(json.dumps({{"s": time.perf_counter() - t}}))""",
                      timeout=60)
            line += ("   backtracking regex: over 60 s" if "timeout" in ref
                     else f"   backtracking regex {ref['s'] * 1000:10.2f} ms")
        print(line)
    worst = run("""
        import json, time
        from cfgcheck.project import MAX_GLOB, compile_glob
        g = compile_glob(('**a' * MAX_GLOB)[:MAX_GLOB - 1] + 'c'); path = 'a' * 4096
        t = time.perf_counter(); g.match(path); print(json.dumps({"s": time.perf_counter() - t, "mib": peak_mib()}))""")
    print(f"    longest accepted glob (1,000 characters) against a 4,096-character path: "
          f"{worst['s'] * 1000:.0f} ms (peak {worst['mib']:.0f} MiB)")


def baselines(tmp: Path) -> None:
    print("(b) baselines")
    deep = tmp / "deep.json"
    deep.write_text('{"kind": "cfgcheck-baseline", "version": 1, "findings": '
                    + "[" * 100_000 + "]" * 100_000 + "}")
    rows = [{"rule": "lora-scale-below-one", "file": f"runs/r{i}.yaml", "key": "lora_alpha",
             "values": {"alpha": 8, "rank": 16, "scale": 0.5}, "message": "m"} for i in range(100_000)]
    big = tmp / "big.json"
    big.write_text(json.dumps({"kind": "cfgcheck-baseline", "version": 1, "findings": rows}, indent=2))
    zero = tmp / "zero.json"
    zero.symlink_to("/dev/zero")
    for label, path in (("100,000-deep nesting", deep), (f"100,000 findings ({big.stat().st_size / 2**20:.1f} MiB)", big),
                        ("a link to /dev/zero", zero)):
        r = run(f"""
            import json, time
            from cfgcheck import baseline
            t = time.perf_counter()
            try:
                baseline.load({str(path)!r}); what = "read"
            except baseline.BaselineError as exc:
                what = "refused: " + exc.reason[:60]
            print(json.dumps({{"s": time.perf_counter() - t, "mib": peak_mib(), "what": what}}))""")
        print(f"    {label:<34} {r['s'] * 1000:8.0f} ms, peak {r['mib']:5.0f} MiB  ({r['what']})")


def numbers(tmp: Path) -> None:
    print("(c) huge numbers (lint, whole process: start, catalogue, all rules)")
    head = "model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_alpha: 16\nlearning_rate: 2.0e-4\n"
    files = {"lora_r of 400 digits": head + "lora_r: " + "9" * 400 + "\n",
             "base-60 integer of 3,000 parts": head + "lora_r: 16\nper_device_train_batch_size: "
                                                + ":".join(["59"] * 3000) + "\n",
             "plain file (for comparison)": head + "lora_r: 16\n"}
    for label, text in files.items():
        p = tmp / "run.yaml"
        p.write_text(text)
        r = run(f"""
            import json, time
            t = time.perf_counter()
            from cfgcheck import engine
            from cfgcheck.knowledge.hardware import find_gpu
            rep = engine.lint_file({str(p)!r}, engine.Options(gpu=find_gpu("a100-80gb"), rows=1000))
            print(json.dumps({{"s": time.perf_counter() - t, "mib": peak_mib(), "internal": len(rep.internal)}}))""")
        print(f"    {label:<32} {r['s'] * 1000:6.0f} ms, peak {r['mib']:4.0f} MiB, rules that failed: {r['internal']}")


def main() -> None:
    print(f"python {platform.python_version()} on {platform.machine()}, {os.cpu_count()} CPUs")
    with tempfile.TemporaryDirectory() as d:
        globs()
        baselines(Path(d))
        numbers(Path(d))


if __name__ == "__main__":
    main()
