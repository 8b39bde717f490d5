"""Check functions, one per catalogue rule. Each module of this package registers its checks
with ``@check``; the modules are found by listing the package, so a new module needs no entry
anywhere else.
"""

from __future__ import annotations

import importlib
import pkgutil
from typing import Callable

CHECKS: dict[str, Callable] = {}  # rule id -> check: filled by the decorator as modules load


def check(rule_id: str) -> Callable[[Callable], Callable]:
    def register(fn: Callable) -> Callable:
        if rule_id in CHECKS:
            raise RuntimeError(f"two checks for rule {rule_id}")
        CHECKS[rule_id] = fn
        fn.rule_id = rule_id  # type: ignore[attr-defined]
        return fn

    return register


def check_modules() -> list[str]:
    """The modules of this package (sorted, so the import order never depends on the disk)."""
    return sorted(m.name for m in pkgutil.iter_modules(__path__) if not m.name.startswith("_"))


_loaded = False


def all_checks() -> dict[str, Callable]:
    global _loaded
    if not _loaded:
        for name in check_modules():
            importlib.import_module(f"{__name__}.{name}")
        _loaded = True
    return CHECKS
