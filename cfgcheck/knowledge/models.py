"""Model knowledge (minimal placeholder until the full catalogue lands): size written in a name."""

from __future__ import annotations

import re
from pathlib import Path

_SIZE = re.compile(r"(?<![0-9a-z.])(\d+(?:\.\d+)?)([bm])(?![a-z0-9])", re.I)


def size_from_name(ref: str) -> float | None:
    """Billions of parameters written in a model reference ("Llama-2-7b-hf" -> 7.0)."""
    name = ref.rsplit("/", 1)[-1]
    if re.search(r"\d+x\d+(?:\.\d+)?b", name, re.I):
        return None  # mixture-of-experts names give a product, not the parameter count
    hits = _SIZE.findall(name.replace("_", "-"))
    if not hits:
        return None
    number, unit = hits[0]
    value = float(number)
    return value if unit.lower() == "b" else value / 1000.0


def resolve_model(ref, *, config_dir: Path | None = None, cwd: Path | None = None,
                  hub_cache: Path | None = None):
    return None
