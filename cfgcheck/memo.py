"""Answers worked out once per run: what lies around a config folder (the repository root, the
releases pinned beside it) and pure computations many configs share (a memory estimate).

A *run* is one ``engine.lint_files`` pass (or whatever opens a ``scope()``): inside it the files
on disk are taken as they were when it began, so two configs in one folder look the folder up
once. Outside a scope nothing is remembered and every call computes afresh, so a long-lived
process (the editor server, a test) never sees a folder as it was before it changed.
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Any, Callable, Hashable, Iterator

MAX_ENTRIES = 4096  # per kind of answer: a run over a huge tree stays bounded

_active: dict[str, dict] | None = None


@contextmanager
def scope() -> Iterator[None]:
    """Remember answers until the outermost scope ends."""
    global _active
    outer = _active
    if outer is None:
        _active = {}
    try:
        yield
    finally:
        if outer is None:
            _active = None


def remembered(kind: str, key: Hashable, compute: Callable[[], Any]) -> Any:
    """``compute()``, or the answer it gave for KEY earlier in this run."""
    memo = _active
    if memo is None:
        return compute()
    table = memo.get(kind)
    if table is None:
        table = memo[kind] = {}
    try:
        return table[key]
    except KeyError:
        pass
    value = compute()
    if len(table) >= MAX_ENTRIES:
        table.clear()
    table[key] = value
    return value
