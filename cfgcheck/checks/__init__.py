"""Check functions, one per catalogue rule. Each module of this package registers its checks
with ``@check``; the modules are found by listing the package, so a new module needs no entry
anywhere else.
"""

from __future__ import annotations

import functools
import importlib
import os
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
    """The modules of this package (sorted, so the import order never depends on the disk): its
    ``.py`` files and sub-packages, read from the folder (``pkgutil.iter_modules`` would import
    ``inspect``, a large part of a one-file lint's start)."""
    names = set()
    for folder in __path__:
        for entry in os.scandir(folder):
            name = entry.name
            if name.startswith("_") or "." in name.removesuffix(".py"):
                continue
            if name.endswith(".py") and entry.is_file():
                names.add(name[:-3])
            elif entry.is_dir() and os.path.isfile(os.path.join(entry.path, "__init__.py")):
                names.add(name)
    return sorted(names)


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
