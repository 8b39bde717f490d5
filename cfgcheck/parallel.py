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
list it inherited, through a pipe of its own; it sends each chunk's reports back, pickled, through
another, and this process reads them in its main thread when it wants them (``_ForkPool``: no
thread here, and none of the standard pools' modules, whose import alone took 20 to 45 ms
before the first chunk could go out). Forking a process that runs other
threads can copy a lock another thread holds; there (and on macOS and Windows, where fork is
unsafe or absent) workers come from a fork server that imported the engine once
(``forkserver``, preloaded, through ``concurrent.futures``), else are spawned, and are sent their
files; this process lints meanwhile.

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
# first, against about 0.2 ms a file of the benchmark corpus once files are linted in batches
# (engine.Batch). bench/run.py's threshold row, serial / --jobs 2 on 2 cores: 64 files 0.95-0.96
# (the pool slower), 128 files 1.01-1.02, 256 files 1.10 (bench/RESULTS.md, a582fed).
AUTO_FILES_PER_WORKER = 64

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
_LINT_CHUNK_CACHE: Callable[[list], list] | None = None


def _linted(lint_file: Callable[[str, Any], Any], lint_chunk: Callable[[list], list] | None,
            pairs: list[tuple[str, Any]]) -> list[Any]:
    """The reports of (file, options) PAIRS: by ``lint_chunk(pairs)`` when there is one (files
    linted together), else file by file."""
    if lint_chunk is not None:
        return [_strip(r) for r in lint_chunk(pairs)]
    return [_strip(lint_file(path, options)) for path, options in pairs]


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
    reports = _linted(_LINT_CACHE, _LINT_CHUNK_CACHE, _INHERITED_CACHE[start:end])
    return os.getpid(), time.process_time() - cpu, reports


def _lint_chunk(lint_file: Callable[[str, Any], Any], options: list[Any],
                files: list[tuple[str, int]], lint_chunk: Callable[[list], list] | None = None
                ) -> tuple[int, float, list[Any]]:
    """In a worker that inherited nothing: lint (file, index into options) pairs."""
    import time

    cpu = time.process_time()
    reports = _linted(lint_file, lint_chunk, [(path, options[i]) for path, i in files])
    return os.getpid(), time.process_time() - cpu, reports


class _PoolBroken(Exception):
    """A forked worker died, or what it sent back could not be read."""


_HEADER_SIZE = 16  # a task: two int64 (start, end); a result: two int64 (status, length)
_PIPE_BYTES = 1 << 20  # a result pipe's capacity asked for: a worker's results fit while this process lints


def _serve(tasks: int, results: int) -> None:
    """A forked worker: lint the ranges read from TASKS, send each chunk's result to RESULTS,
    until told to stop (a negative start) or TASKS ends."""
    import pickle

    from .pipes import read_exactly, write_all

    while True:
        header = read_exactly(tasks, _HEADER_SIZE)
        if header is None:
            return
        start, end = int.from_bytes(header[:8], "little", signed=True), int.from_bytes(header[8:], "little", signed=True)
        if start < 0:  # no more
            return
        try:
            blob, status = pickle.dumps(_lint_range(start, end), protocol=pickle.HIGHEST_PROTOCOL), 0
        except BaseException:  # noqa: BLE001 - interrupted, or a report that cannot be sent: this process lints it
            blob, status = b"", 1
        write_all(results, status.to_bytes(8, "little", signed=True) + len(blob).to_bytes(8, "little") + blob)
        if status:
            return


class _Pending:
    """A chunk sent to a forked worker: ``done()`` without waiting, ``result()`` waiting."""

    __slots__ = ("worker", "value", "ready")

    def __init__(self, worker: "_ForkedWorker"):
        self.worker = worker
        self.value: Any = None
        self.ready = False

    def done(self) -> bool:
        if not self.ready:
            try:
                self.worker.take_ready()
            except _PoolBroken:
                return True  # over: ``result()`` says how
        return self.ready

    def result(self) -> Any:
        while not self.ready:
            self.worker.take()
        return self.value

    def cancel(self) -> None:
        pass  # what a worker sends after it dies is never read


class _ForkedWorker:
    """One process forked from this one, which has everything a lint needs: it gets index ranges
    through one pipe and sends each chunk's reports, pickled, through another, in the order it
    was sent them. Nothing but ``os`` is needed to start it: no thread in this process, no
    import of the standard pools (about 55 modules, 20 to 45 ms before the first chunk goes out)."""

    def __init__(self, close_in_child: list[int]):
        task_r, task_w = os.pipe()
        result_r, result_w = os.pipe()
        try:
            import fcntl

            fcntl.fcntl(result_w, getattr(fcntl, "F_SETPIPE_SZ", 1031), _PIPE_BYTES)
        except (ImportError, OSError):  # a smaller pipe: a worker may wait for this process to read
            pass
        try:
            pid = os.fork()
        except OSError:
            for fd in (task_r, task_w, result_r, result_w):
                os.close(fd)
            raise
        if pid == 0:  # the worker: never returns, never runs this process's exit handlers
            code = 0
            try:
                for fd in close_in_child + [task_w, result_r]:  # this process's ends, its and the other workers'
                    os.close(fd)
                _serve(task_r, result_w)
            except BaseException:  # noqa: BLE001 - this process sees the pipe end and lints the rest
                code = 1
            finally:
                os._exit(code)
        os.close(task_r)
        os.close(result_w)
        self.pid, self.tasks, self.results = pid, task_w, result_r
        self.waiting: list[_Pending] = []  # sent, in order, not yet read back
        self.dead = False
        self.ready_check: Any = None  # a poll object on the results, made when first needed

    def send(self, start: int, end: int) -> _Pending:
        if self.dead:
            raise _PoolBroken
        try:
            os.write(self.tasks, start.to_bytes(8, "little", signed=True) + end.to_bytes(8, "little", signed=True))
        except OSError:
            self.dead = True
            raise _PoolBroken from None
        pending = _Pending(self)
        self.waiting.append(pending)
        return pending

    def take_ready(self) -> None:
        """Read back the results already there, without waiting."""
        if self.ready_check is None:
            import select

            self.ready_check = select.poll()  # unlike select(), any descriptor number
            self.ready_check.register(self.results, select.POLLIN)
        while self.waiting and not self.dead and self.ready_check.poll(0):
            self.take()

    def take(self) -> None:
        """Read back the next result, waiting for it."""
        import pickle

        from .pipes import read_exactly

        if self.dead or not self.waiting:
            raise _PoolBroken
        header = read_exactly(self.results, _HEADER_SIZE)
        blob = None
        if header is not None and int.from_bytes(header[:8], "little", signed=True) == 0:
            blob = read_exactly(self.results, int.from_bytes(header[8:], "little"))
        if blob is None:
            self.dead = True
            raise _PoolBroken
        pending = self.waiting.pop(0)
        pending.value, pending.ready = pickle.loads(blob), True

    def stop(self) -> None:
        """End the worker: told there is no more (it leaves once its chunk is done), killed when
        results it owes will not be read (a run ended early), then waited for. It is told in
        so many bytes, not by the end of its pipe: a process forked after it (the cache's writer
        behind a run) holds a copy of this end of that pipe."""
        import signal

        if not self.dead:
            try:
                os.write(self.tasks, (-1).to_bytes(8, "little", signed=True) * 2)
            except OSError:
                pass
        os.close(self.tasks)
        if self.waiting and not self.dead:
            try:
                os.kill(self.pid, signal.SIGKILL)
            except OSError:
                pass
        os.close(self.results)
        try:
            os.waitpid(self.pid, 0)
        except OSError:
            pass


class _ForkPool:
    """Forked workers handed chunks in turn, the least busy first."""

    def __init__(self, workers: int):
        self.workers: list[_ForkedWorker] = []
        try:
            for _ in range(workers):
                self.workers.append(_ForkedWorker([fd for w in self.workers for fd in (w.tasks, w.results)]))
        except OSError:
            self.shutdown(wait=True, cancel_futures=True)
            raise

    def submit(self, start: int, end: int) -> _Pending:
        live = [w for w in self.workers if not w.dead]
        if not live:
            raise _PoolBroken
        return min(live, key=lambda w: len(w.waiting)).send(start, end)

    def shutdown(self, wait: bool = True, cancel_futures: bool = True) -> None:
        """As ``ProcessPoolExecutor.shutdown``: the workers end, the chunks not taken are dropped."""
        for worker in self.workers:
            worker.stop()
        self.workers = []


def _fork_is_safe() -> bool:
    import sys

    threading = sys.modules.get("threading")  # never imported: no thread was started through it
    return sys.platform.startswith("linux") and (threading is None or threading.active_count() == 1)


def _context():
    """Where workers come from when this process does not fork them itself."""
    import multiprocessing

    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(list(_PRELOAD))
        return ctx
    return multiprocessing.get_context("spawn")


def lint_files_parallel(pairs: list[tuple[str, Any]], jobs: int, *, lint_file: Callable[[str, Any], Any],
                        prepare: Callable[[Any], Any],
                        lint_chunk: Callable[[list], list] | None = None) -> Iterator[Any]:
    """Reports for (file, options) pairs, in order, each yielded as soon as it and those before it
    are done, linted by ``jobs`` processes (this one included). ``lint_file(path, options)`` lints
    one file (a module-level function, so a worker can be handed it); ``lint_chunk(pairs)``,
    when given, lints a chunk's pairs together instead (their reports, in order);
    ``prepare(options)`` runs once per distinct options in each process before its first file."""
    global _INHERITED_CACHE, _LINT_CACHE, _LINT_CHUNK_CACHE
    import time

    if not pairs:
        return
    started = time.process_time()
    distinct = list({id(o): o for _, o in pairs}.values())
    bounds = chunk_bounds(len(pairs), jobs)
    workers = max(0, min(jobs - 1, len(bounds) - 1))  # this process lints too
    fork = _fork_is_safe()

    import gc

    if fork:
        pool_broken: tuple[type[BaseException], ...] = (_PoolBroken,)
    else:
        from concurrent.futures.process import BrokenProcessPool

        pool_broken = (BrokenProcessPool,)
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
            return pool.submit(a, b)
        return pool.submit(_lint_chunk, lint_file, distinct, [(path, index[id(o)]) for path, o in pairs[a:b]],
                           lint_chunk)

    prepared_first = bool(workers) and fork  # forked workers then inherit what prepare() builds
    if prepared_first:
        for options in distinct:
            prepare(options)  # parse the catalogue and import the checks
    if workers:
        if fork:
            _INHERITED_CACHE, _LINT_CACHE, _LINT_CHUNK_CACHE = pairs, lint_file, lint_chunk
            gc.freeze()  # the workers' collector then leaves the inherited objects (and their pages) alone
        try:
            if fork:
                pool = _ForkPool(workers)
            else:
                from concurrent.futures import ProcessPoolExecutor

                pool = ProcessPoolExecutor(max_workers=workers, mp_context=_context())
            # the first chunks go out before this process lints anything: the workers start now
            while taken < len(bounds) - 1 and in_pool < workers * POOL_AHEAD:
                chunks[taken] = send(taken)
                taken += 1
                in_pool += 1
            broken = False
        except (OSError, _PoolBroken):  # no processes to be had here (no semaphores, a process limit): serial
            if pool is not None:
                pool.shutdown(wait=True, cancel_futures=True)
            pool = None
            in_pool = 0
            chunks[:taken] = [None] * taken
            taken = 0
        finally:
            if fork:
                gc.unfreeze()
                _INHERITED_CACHE, _LINT_CACHE, _LINT_CHUNK_CACHE = None, None, None  # the workers have their copy
    LAST_RUN_CACHE["here"] = time.process_time() - started
    mine = time.process_time()
    if not prepared_first:  # a pool that is not forked prepares in each worker: this process meanwhile
        for options in distinct:
            prepare(options)

    def here(i: int) -> list[Any]:
        a, b = bounds[i]
        return _linted(lint_file, lint_chunk, pairs[a:b])

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
                except pool_broken:  # a worker died (killed, out of memory): lint here
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
