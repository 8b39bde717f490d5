"""A hand-written check a user might keep instead of a tool: three rules over PyYAML's C loader.

    python bench/peer_script.py FOLDER...

bench/run.py times cfgcheck against it. It reads each config, flattens one level of sections,
and checks LoRA alpha / r below 1, a DeepSpeed batch that is not micro batch x accumulation x
GPUs, and bf16 and fp16 both on. No positions, no layouts, no fixes.
"""
import sys
from pathlib import Path

import yaml


def flat(doc):
    out = dict(doc)
    for v in doc.values():
        if isinstance(v, dict):
            out.update(v)
    return out


def check(path, doc):
    c = flat(doc) if isinstance(doc, dict) else {}
    r, alpha = c.get("lora_r", c.get("r")), c.get("lora_alpha", c.get("alpha"))
    if isinstance(r, int) and isinstance(alpha, (int, float)) and r > 0 and alpha / r < 1:
        print(f"{path}: LoRA scale alpha/r = {alpha}/{r} is below 1")
    total, micro = c.get("train_batch_size"), c.get("train_micro_batch_size_per_gpu")
    accum = c.get("gradient_accumulation_steps", 1)
    if all(isinstance(v, int) for v in (total, micro, accum)) and total % (micro * accum):
        print(f"{path}: train_batch_size {total} is not a multiple of {micro} x {accum}")
    on = [k for k in ("bf16", "fp16") if c.get(k) is True or (isinstance(c.get(k), dict) and c[k].get("enabled") is True)]
    if len(on) == 2:
        print(f"{path}: bf16 and fp16 are both on")


for root in sys.argv[1:]:
    for p in sorted(Path(root).rglob("*")):
        if p.suffix in (".yaml", ".yml", ".json"):
            check(p, yaml.load(p.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader))
