"""Check functions, one per catalogue rule. Each module registers its checks with ``@check``."""

from __future__ import annotations

import importlib
from typing import Callable

CHECKS: dict[str, Callable] = {}

# The modules that hold checks; listed once so the engine loads them all.
MODULES = ("loader", "adapter", "learning_rate", "chat_format", "precision", "batch", "memory",
           "warmup", "evaluation", "targets", "quant", "sequence", "runtime", "ranges",
           "unknown_keys", "launch", "waivers")


def check(rule_id: str) -> Callable[[Callable], Callable]:
    def register(fn: Callable) -> Callable:
        if rule_id in CHECKS:
            raise RuntimeError(f"two checks for rule {rule_id}")
        CHECKS[rule_id] = fn
        fn.rule_id = rule_id  # type: ignore[attr-defined]
        return fn

    return register


_loaded = False


def all_checks() -> dict[str, Callable]:
    global _loaded
    if not _loaded:
        for name in MODULES:
            importlib.import_module(f"{__name__}.{name}")
        _loaded = True
    return CHECKS
