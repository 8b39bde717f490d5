"""Check functions, one per catalogue rule. Each module of this package registers its checks
with ``@check``; the modules are found by listing the package, so a new module needs no entry
anywhere else.

A check may declare what it needs to have anything to say about a view, so the engine passes
over the views that lack it without calling the check:

* ``when=(requirement, ...)``: every requirement must hold. A requirement is a view field name
  (``"adapter.rank"``) or a tuple of names, one of which is enough (``("quant.load_4bit",
  "quant.bits")``). A field holds when the view has it at all: written (``view.fields``, whatever
  its value) or supplied by the run (``view.supplied``: a linked or launch file, a runner
  default, an assumption);
* ``methods=(...)``: the training methods (``view.method``) the check can say anything about,
  e.g. ``ADAPTER``.

A declaration is a promise that the check reports nothing -- no finding, no "not checked" note --
on a view that lacks it; ``tests/test_check_needs.py`` holds every declaration to it. A check
that also looks at linked files (``view.attached``), the document itself (duplicates, YAML
ambiguities) or the launch context declares nothing unless a field of the view gates all of it.
"""

from __future__ import annotations

import functools
import importlib
import os
from typing import Callable

class Table(dict):
    """A dict that counts its changes (``version``), so a table worked out from it (the
    engine's rules to run per kind of view) knows when an entry was added, replaced or removed."""

    __slots__ = ("version",)

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.version = 0

    def __setitem__(self, key, value):
        self.version += 1
        super().__setitem__(key, value)

    def __delitem__(self, key):
        self.version += 1
        super().__delitem__(key)

    def __ior__(self, other):
        self.version += 1
        return super().__ior__(other)

    def pop(self, *args):
        self.version += 1
        return super().pop(*args)

    def popitem(self):
        self.version += 1
        return super().popitem()

    def setdefault(self, key, default=None):
        self.version += 1
        return super().setdefault(key, default)

    def update(self, *args, **kwargs):
        self.version += 1
        super().update(*args, **kwargs)

    def clear(self):
        self.version += 1
        super().clear()


# rule id -> check: filled by the decorator as the modules load, so a cache of what the package
# holds (read once per process; tests may replace an entry)
_CHECKS_CACHE: Table = Table()
# rule id -> what its check declared it needs (``Needs``): filled by the decorator with the above
_NEEDS_CACHE: Table = Table()

ADAPTER = ("lora", "qlora")  # the adapter methods (``RunView.is_adapter``)


class Needs:
    """What a check needs to have anything to say about a view (see the module's words)."""

    check: Callable  # the function that declared it: a replaced check (tests) declares nothing
    groups: tuple[frozenset[str], ...]  # each: the view fields one of which must be there
    methods: frozenset | None  # the view methods it can speak of; None: any

    __slots__ = ("check", "groups", "methods")

    def __init__(self, check, groups, methods=None):
        self.check = check
        self.groups = groups
        self.methods = methods

    def __repr__(self):
        return f"{type(self).__qualname__}(check={self.check!r}, groups={self.groups!r}, methods={self.methods!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.check, self.groups, self.methods) == (other.check, other.groups, other.methods)
        return NotImplemented

    __hash__ = None  # compared by value, never a key

    @property
    def fields(self) -> frozenset[str]:
        """Every view field the declaration names."""
        return frozenset().union(*self.groups)

    def met(self, method, present) -> bool:
        """Whether a view of METHOD whose fields and supplied values are PRESENT (a set of
        names) has what the check needs."""
        if self.methods is not None and method not in self.methods:
            return False
        for group in self.groups:
            if present.isdisjoint(group):
                return False
        return True


def check(rule_id: str, *, when: tuple = (), methods: tuple | None = None) -> Callable[[Callable], Callable]:
    """Register FN as the check of RULE_ID; ``when`` and ``methods``: what it needs (above)."""
    groups = tuple(frozenset((req,) if isinstance(req, str) else req) for req in when)
    if any(not group for group in groups):
        raise RuntimeError(f"{rule_id}: an empty requirement can never hold")

    def register(fn: Callable) -> Callable:
        if rule_id in _CHECKS_CACHE:
            raise RuntimeError(f"two checks for rule {rule_id}")
        _CHECKS_CACHE[rule_id] = fn
        fn.rule_id = rule_id  # type: ignore[attr-defined]
        if groups or methods is not None:
            _NEEDS_CACHE[rule_id] = Needs(fn, groups, frozenset(methods) if methods is not None else None)
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


def declared() -> dict[str, Needs]:
    """Rule id -> what its check declared it needs, for the checks registered so far."""
    return _NEEDS_CACHE


def all_checks() -> dict[str, Callable]:
    _load_modules()
    return _CHECKS_CACHE
