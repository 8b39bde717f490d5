"""Linting many files over a pool of processes, results in the order the files were given.

The files are cut into contiguous chunks, about ``CHUNKS_PER_WORKER`` per worker and shrinking
towards the end (so the workers finish close together), and each worker lints a whole chunk and
sends its reports back in one message: one process round trip per chunk, not per file. A report comes back without its views (the typed views and documents are only
needed while the rules run, and pickling them would cost more than linting); everything else of
a report (findings, input problems, internal errors, layout, skipped reason) is the same as in a
serial run, and the reports are yielded in the files' order, so the output is byte for byte the
serial one.

How workers start: on Linux, when this process runs no other thread, they are forked after the
catalogue is parsed, the checks are imported and the first file is linted here (which builds the
tables the rules fill on first use), so a worker starts in about a millisecond with everything
ready and the chunks it is sent are only index ranges into the list it inherited. Forking a
process that runs other threads can copy a lock another thread holds; there (and on macOS and
Windows, where fork is unsafe or absent) workers come from a fork server that imported the
engine once (``forkserver``, preloaded), else are spawned, and are sent their files.

It knows nothing of the engine: the engine hands it the function that lints one file and the one
that prepares a set of options (parses the catalogue and imports the checks) before the workers
start, so imports point one way only. Nothing heavy is imported until a pool is wanted:
``worker_count`` is all a serial run touches.
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

CHUNKS_PER_WORKER = 4  # fewer: a slow chunk at the end idles the others; more: more round trips

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


def chunk_bounds(n: int, workers: int, per_worker: int = CHUNKS_PER_WORKER) -> list[tuple[int, int]]:
    """Contiguous [start, end) ranges covering 0..n, about ``per_worker`` per worker, the first
    three times the size of the last, shrinking evenly: a worker takes the next chunk when it is
    done, so the last chunks, small, leave the workers finishing close together."""
    count = max(1, min(n, workers * per_worker))
    if count == 1:
        return [(0, n)]
    weights = [3 - 2 * i / (count - 1) for i in range(count)]
    total = sum(weights)
    bounds, start, acc = [], 0, 0.0
    for i, w in enumerate(weights):
        acc += w
        end = n if i == count - 1 else max(start + 1, min(n - (count - 1 - i), round(n * acc / total)))
        bounds.append((start, end))
        start = end
    return bounds


def _strip(report: Any) -> Any:
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
    are done. ``lint_file(path, options)`` lints one file (a module-level function, so a worker can
    be handed it); ``prepare(options)`` runs once per distinct options before the workers start."""
    global _INHERITED_CACHE, _LINT_CACHE
    import time

    if not pairs:
        return
    started = time.process_time()
    distinct = list({id(o): o for _, o in pairs}.values())
    for options in distinct:
        prepare(options)  # parse the catalogue and import the checks before the workers start
    # the first file here: the tables rules build on first use are then built once, not per worker
    yield _strip(lint_file(*pairs[0]))
    rest = pairs[1:]
    if not rest:
        return
    workers = max(1, min(jobs, len(rest)))
    bounds = chunk_bounds(len(rest), workers)
    fork = _fork_is_safe()

    import gc
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    futures: list = []
    pool = None
    LAST_RUN_CACHE.clear()
    LAST_RUN_CACHE.update(here=time.process_time() - started, workers={})
    if fork:
        _INHERITED_CACHE, _LINT_CACHE = rest, lint_file
        gc.freeze()  # the workers' collector then leaves the inherited objects (and their pages) alone
    try:
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=_context(fork))
        if fork:
            futures = [pool.submit(_lint_range, a, b) for a, b in bounds]
        else:
            index = {id(o): i for i, o in enumerate(distinct)}
            futures = [pool.submit(_lint_chunk, lint_file, distinct,
                                   [(path, index[id(o)]) for path, o in rest[a:b]])
                       for a, b in bounds]
    except OSError:
        futures = []  # no processes to be had here (no semaphores, a process limit): serial
    finally:
        if fork:
            gc.unfreeze()
            _INHERITED_CACHE, _LINT_CACHE = None, None  # the workers have their copy
    try:
        for done, (a, b) in enumerate(bounds):
            try:
                pid, cpu, reports = futures[done].result() if futures else (0, 0.0, None)
            except BrokenProcessPool:  # a worker died (killed, out of memory)
                pid, cpu, reports = 0, 0.0, None
            if reports is None:  # the files not yet reported are linted here: still the serial output
                for f in futures:
                    f.cancel()
                for path, options in rest[a:]:
                    yield _strip(lint_file(path, options))
                return
            LAST_RUN_CACHE["workers"][pid] = LAST_RUN_CACHE["workers"].get(pid, 0.0) + cpu
            yield from reports
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
