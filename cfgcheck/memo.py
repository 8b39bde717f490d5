"""Answers worked out once per run: what lies around a config folder (the repository root, the
releases pinned beside it) and pure computations many configs share (a memory estimate).

A *run* is one ``engine.lint_files`` pass (or whatever opens a ``scope()``): inside it the files
on disk are taken as they were when it began, so two configs in one folder look the folder up
once. Outside a scope nothing is remembered and every call computes afresh, so a long-lived
process (the editor server, a test) never sees a folder as it was before it changed.

An answer that looked at the disk keeps the facts it noted (reads.py), and every later caller in
the run gets them replayed into its own record: the result cache then knows that the second
config of a folder rests on the same files as the first.
"""

from __future__ import annotations

import gc
from contextlib import contextmanager
from typing import Any, Callable, Hashable, Iterator

from . import reads

MAX_ENTRIES = 4096  # per kind of answer: a run over a huge tree stays bounded

_active_cache: dict[str, dict] | None = None


class _CollectorPaused:
    """The context manager ``collector_paused()`` returns (a class: entered once a file, where a
    generator's would cost more than the pause itself)."""

    __slots__ = ("was_on",)

    def __enter__(self) -> None:
        self.was_on = gc.isenabled()
        if self.was_on:
            gc.disable()

    def __exit__(self, *exc: object) -> None:
        if self.was_on:
            gc.enable()


def collector_paused() -> _CollectorPaused:
    """Python's cycle collector paused while one file is read and checked, as it was before
    afterwards. The documents, views and findings of a file are a large, growing set of objects
    that stay alive until its report is made; each collection pass walks all of them again, so
    with the collector running a file of 100,000 keys spent about half its time in it and the
    time grew faster than the file. A file's objects hold few reference cycles; those there are
    are collected once the collector runs again. A caller that turned the collector off keeps
    it off."""
    return _CollectorPaused()


@contextmanager
def scope() -> Iterator[None]:
    """Remember answers until the outermost scope ends."""
    global _active_cache
    outer = _active_cache
    if outer is None:
        _active_cache = {}
    try:
        yield
    finally:
        if outer is None:
            _active_cache = None


def remembered(kind: str, key: Hashable, compute: Callable[[], Any]) -> Any:
    """``compute()``, or the answer it gave for KEY earlier in this run."""
    memo = _active_cache
    if memo is None:
        return compute()
    table = memo.get(kind)
    if table is None:
        table = memo[kind] = {}
    got = table.get(key)
    wanted = reads.active_record() is not None
    if got is None or (wanted and got[1] is None):
        # worked out with its facts noted only when a record is kept (a run with the result
        # cache): without one, nothing would read them
        if wanted:
            with reads.recording() as facts:
                value = compute()
            got = (value, tuple(facts.items()))
        else:
            got = (compute(), None)
        if len(table) >= MAX_ENTRIES:
            table.clear()
        table[key] = got
    if wanted:
        reads.replay(got[1])
    return got[0]
