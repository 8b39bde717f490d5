"""Check functions, one per catalogue rule. Each module of this package registers its checks
with ``@check``; the modules are found by listing the package, so a new module needs no entry
anywhere else.
"""

from __future__ import annotations

import functools
import importlib
import pkgutil
from typing import Callable

# rule id -> check: filled by the decorator as the modules load, so a cache of what the package
# holds (read once per process; tests may replace an entry)
_CHECKS_CACHE: dict[str, Callable] = {}


def check(rule_id: str) -> Callable[[Callable], Callable]:
    def register(fn: Callable) -> Callable:
        if rule_id in _CHECKS_CACHE:
            raise RuntimeError(f"two checks for rule {rule_id}")
        _CHECKS_CACHE[rule_id] = fn
        fn.rule_id = rule_id  # type: ignore[attr-defined]
        return fn

    return register


def check_modules() -> list[str]:
    """The modules of this package (sorted, so the import order never depends on the disk)."""
    return sorted(m.name for m in pkgutil.iter_modules(__path__) if not m.name.startswith("_"))


@functools.cache
def _load_modules() -> None:
    for name in check_modules():
        importlib.import_module(f"{__name__}.{name}")


def registered() -> dict[str, Callable]:
    """The checks registered so far, without importing any module (what a process holds)."""
    return _CHECKS_CACHE


def all_checks() -> dict[str, Callable]:
    _load_modules()
    return _CHECKS_CACHE
