"""Linting many files over several processes, results in the order the files were given.

``--jobs N`` is N processes linting: this one and a pool of N - 1 workers. The files are cut into
small contiguous chunks (at most ``CHUNK_FILES``); the pool is kept a few chunks ahead of the
reports yielded, and whenever the next report in order is still being linted in a worker, this
process lints the next chunk nobody has taken (holding at most ``HELD_CHUNKS`` of its own ahead),
so no process waits while there is work and a slow worker only means this one lints more. One
round trip per chunk, not per file. A report comes back without its views (the typed views and
documents are only needed while the rules run, and pickling them would cost more than linting);
everything else of a report (findings, input problems, internal errors, layout, skipped reason)
is the same as in a serial run, and the reports are yielded in the files' order, so the output
is byte for byte the serial one. No more than a bounded window of reports is held at any time,
so a caller that writes each report as it comes keeps its memory flat.

How workers start: on Linux, when this process runs no other thread, they are forked once
this process has prepared the options (parsed the catalogue, imported the checks), which they
inherit instead of each doing it again (measured on 2 cores: forking before that preparation gave
a 1.5x speed-up, after it 1.9x), and before any file is linted; the tables the rules fill on first
use are built in each process. The chunks a forked worker is sent are only index ranges into the
list it inherited. Forking a process that runs other
threads can copy a lock another thread holds; there (and on macOS and Windows, where fork is
unsafe or absent) workers come from a fork server that imported the engine once
(``forkserver``, preloaded), else are spawned, and are sent their files; this process lints
meanwhile.

It knows nothing of the engine: the engine hands it the function that lints one file and the one
that prepares a set of options (parses the catalogue and imports the checks), so imports point
one way only. Nothing heavy is imported until a pool is wanted: ``worker_count`` is all a serial
run touches.
"""

from __future__ import annotations

import os
from typing import Any, Callable, Iterator

# ``--jobs auto`` gives each worker at least this many files, so a run of fewer than twice as many
# stays serial: a pool costs about 12 ms to start and stop on 2 cores (measured: forked pool of two,
# one empty chunk each), and each worker then builds the tables of the layouts and models it meets
# first (15-60 ms), against about 3 ms of CPU a file of the benchmark corpus. A pool of two breaks
# even near 30 files; at 64 it saves about a quarter of the serial time (bench/RESULTS.md).
AUTO_FILES_PER_WORKER = 32

# at most this many files a chunk: 15 to 150 ms of work (0.3 to 3 ms a file of the benchmark
# corpus on the machines measured), against about 0.4 ms of round trip. Measured on 2 cores over
# 2,000 files, --jobs 2 in one process: 16 files a chunk (8 held) 0.375 s, 48 (4 held) 0.346 s,
# 96 (2 held) 0.366 s, the serial run 0.509 s (medians of 7 interleaved runs); fewer chunks mean
# less managing of the pool here, more mean the processes end closer together.
CHUNK_FILES = 48
CHUNKS_PER_PROCESS = 4  # a short run: about this many chunks for each process, so all have work
POOL_AHEAD = 2  # chunks sent to each worker ahead of the reports yielded
HELD_CHUNKS = 4  # chunks this process lints ahead of the next one in order, at most (a busy machine can
# starve a worker: this process then goes on alone for a while)

_PRELOAD = ("cfgcheck.engine", "cfgcheck.checks")  # what a fork server imports once

# handed to forked workers, which inherit them (held only while a pool starts)
_INHERITED_CACHE: list[tuple[str, Any]] | None = None  # the pairs a forked worker reads by index
_LINT_CACHE: Callable[[str, Any], Any] | None = None


def usable_cpus() -> int:
    """The CPUs this process may run on (its affinity mask, which containers and ``taskset``
    narrow), else the machine's count."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def parse_jobs(text: str | int) -> int | str:
    """``auto`` or a whole number of processes, at least 1; ValueError otherwise."""
    if isinstance(text, int) and not isinstance(text, bool):
        value = text
    else:
        word = str(text).strip().lower()
        if word == "auto":
            return "auto"
        if not word.isdigit():
            raise ValueError(f"--jobs takes a number of processes or auto, not {text!r}")
        value = int(word)
    if value < 1:
        raise ValueError(f"--jobs takes a number of processes (1 or more) or auto, not {value}")
    return value


def worker_count(jobs: int | str, files: int) -> int:
    """How many processes lint ``files`` files: ``jobs`` as given (never more than the files), or
    for ``auto`` the usable CPUs but no more than one per AUTO_FILES_PER_WORKER files (so 1, serial,
    below twice that)."""
    if jobs == "auto":
        jobs = min(usable_cpus(), files // AUTO_FILES_PER_WORKER)
    return max(1, min(int(jobs), files))


def chunk_bounds(n: int, processes: int) -> list[tuple[int, int]]:
    """Contiguous [start, end) ranges covering 0..n in order, all of one size (the last may be
    smaller): at most CHUNK_FILES files, fewer when the run is short, so each process gets about
    CHUNKS_PER_PROCESS of them. Small chunks taken one at a time leave the processes finishing
    close together."""
    if n <= 0:
        return []
    size = max(1, min(CHUNK_FILES, n // max(1, processes * CHUNKS_PER_PROCESS)))
    return [(a, min(n, a + size)) for a in range(0, n, size)]


def _strip(report: Any) -> Any:
    for view in report.views:  # a view and its opened run refer to each other: freed at once
        view.run = None
    report.views = []
    return report


# The last parallel run's CPU seconds: "here" (this process until the pool started: preparing,
# the first file) and per worker process id (its chunks). bench/run.py reads it to tell the
# speed-up the work allows from what a busy machine let it have.
LAST_RUN_CACHE: dict[str, Any] = {}


def _lint_range(start: int, end: int) -> tuple[int, float, list[Any]]:
    """In a forked worker: lint the inherited pairs start..end -> (pid, CPU seconds, reports)."""
    import time

    assert _INHERITED_CACHE is not None and _LINT_CACHE is not None
    cpu = time.process_time()
    reports = [_strip(_LINT_CACHE(path, options)) for path, options in _INHERITED_CACHE[start:end]]
    return os.getpid(), time.process_time() - cpu, reports


def _lint_chunk(lint_file: Callable[[str, Any], Any], options: list[Any],
                files: list[tuple[str, int]]) -> tuple[int, float, list[Any]]:
    """In a worker that inherited nothing: lint (file, index into options) pairs."""
    import time

    cpu = time.process_time()
    reports = [_strip(lint_file(path, options[i])) for path, i in files]
    return os.getpid(), time.process_time() - cpu, reports


def _fork_is_safe() -> bool:
    import sys
    import threading

    return sys.platform.startswith("linux") and threading.active_count() == 1


def _context(fork: bool):
    import multiprocessing

    if fork:
        return multiprocessing.get_context("fork")
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(list(_PRELOAD))
        return ctx
    return multiprocessing.get_context("spawn")


def lint_files_parallel(pairs: list[tuple[str, Any]], jobs: int, *, lint_file: Callable[[str, Any], Any],
                        prepare: Callable[[Any], Any]) -> Iterator[Any]:
    """Reports for (file, options) pairs, in order, each yielded as soon as it and those before it
    are done, linted by ``jobs`` processes (this one included). ``lint_file(path, options)`` lints
    one file (a module-level function, so a worker can be handed it); ``prepare(options)`` runs
    once per distinct options in each process before its first file."""
    global _INHERITED_CACHE, _LINT_CACHE
    import time

    if not pairs:
        return
    started = time.process_time()
    distinct = list({id(o): o for _, o in pairs}.values())
    bounds = chunk_bounds(len(pairs), jobs)
    workers = max(0, min(jobs - 1, len(bounds) - 1))  # this process lints too
    fork = _fork_is_safe()

    import gc
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    pool = None
    LAST_RUN_CACHE.clear()
    LAST_RUN_CACHE.update(here=0.0, workers={})
    chunks: list[Any] = [None] * len(bounds)  # a Future, or the reports linted here ahead of order
    taken = 0  # chunks handed out (to the pool or to this process), in order
    in_pool = 0  # chunks sent to the pool and not yet yielded
    held = 0  # chunks linted here ahead of the one in order
    broken = True  # no pool to send to (none wanted, none to be had, or a worker died)
    index = {id(o): i for i, o in enumerate(distinct)}

    def send(i: int) -> Any:
        a, b = bounds[i]
        if fork:
            return pool.submit(_lint_range, a, b)
        return pool.submit(_lint_chunk, lint_file, distinct, [(path, index[id(o)]) for path, o in pairs[a:b]])

    prepared_first = bool(workers) and fork  # forked workers then inherit what prepare() builds
    if prepared_first:
        for options in distinct:
            prepare(options)  # parse the catalogue and import the checks
    if workers:
        if fork:
            _INHERITED_CACHE, _LINT_CACHE = pairs, lint_file
            gc.freeze()  # the workers' collector then leaves the inherited objects (and their pages) alone
        try:
            pool = ProcessPoolExecutor(max_workers=workers, mp_context=_context(fork))
            # the first chunks go out before this process lints anything: the workers start now
            while taken < len(bounds) - 1 and in_pool < workers * POOL_AHEAD:
                chunks[taken] = send(taken)
                taken += 1
                in_pool += 1
            broken = False
        except OSError:  # no processes to be had here (no semaphores, a process limit): serial
            pass
        finally:
            if fork:
                gc.unfreeze()
                _INHERITED_CACHE, _LINT_CACHE = None, None  # the workers have their copy
    LAST_RUN_CACHE["here"] = time.process_time() - started
    mine = time.process_time()
    if not prepared_first:  # a pool that is not forked prepares in each worker: this process meanwhile
        for options in distinct:
            prepare(options)

    def here(i: int) -> list[Any]:
        a, b = bounds[i]
        return [_strip(lint_file(path, options)) for path, options in pairs[a:b]]

    try:
        for order in range(len(bounds)):
            got = chunks[order]
            if isinstance(got, list):
                held -= 1
            while not isinstance(got, list):
                if got is None:  # nobody has it: lint it here
                    taken = max(taken, order + 1)
                    got = here(order)
                    continue
                if broken:  # sent to a pool that is gone
                    got, in_pool = here(order), in_pool - 1
                    continue
                if not got.done() and taken < len(bounds) and held < HELD_CHUNKS:
                    chunks[taken] = here(taken)  # a worker has this one: lint a later one meanwhile
                    taken += 1
                    held += 1
                    continue
                try:
                    pid, cpu, got = got.result()
                    LAST_RUN_CACHE["workers"][pid] = LAST_RUN_CACHE["workers"].get(pid, 0.0) + cpu
                    in_pool -= 1
                except BrokenProcessPool:  # a worker died (killed, out of memory): lint here
                    broken = True
                    for f in chunks:
                        if f is not None and not isinstance(f, list):
                            f.cancel()
            chunks[order] = None
            while not broken and taken < len(bounds) and in_pool < workers * POOL_AHEAD:
                chunks[taken] = send(taken)  # keep the pool a few chunks ahead
                taken += 1
                in_pool += 1
            yield from got
    finally:
        LAST_RUN_CACHE["workers"][os.getpid()] = time.process_time() - mine
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
