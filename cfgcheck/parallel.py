"""Linting many files over a pool of processes, results in the order the files were given.

Each worker lints whole files; a file's report comes back without its views (the typed views
and documents are only needed while the rules run, and pickling them would cost more than
linting). Everything else of a report (findings, input problems, internal errors, layout,
skipped reason) is the same as in a serial run.


It knows nothing of the engine: the engine hands it the function that lints one file and the one
that prepares a set of options (parses the catalogue and imports the checks) before the workers
fork, so imports point one way only.
"""

from __future__ import annotations

import functools
import multiprocessing
import sys
from concurrent.futures import ProcessPoolExecutor
from typing import Any, Callable, Iterator


def _lint_one(lint_file: Callable[[str, Any], Any], pair: tuple[str, Any]) -> Any:
    path, options = pair
    report = lint_file(path, options)
    report.views = []
    return report


def _context():
    # fork starts a worker in a millisecond with the catalogue already parsed; elsewhere (macOS,
    # Windows) use the platform's default start method
    if sys.platform.startswith("linux"):
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context()


def lint_files_parallel(pairs: list[tuple[str, Any]], jobs: int, *, lint_file: Callable[[str, Any], Any],
                        prepare: Callable[[Any], Any]) -> Iterator[Any]:
    """Reports for (file, options) pairs, in order, each yielded as soon as it and those before it
    are done. ``lint_file(path, options)`` lints one file (a module-level function, so a worker can
    be handed it); ``prepare(options)`` runs once per distinct options before the workers start."""
    if not pairs:
        return
    for options in {id(o): o for _, o in pairs}.values():
        prepare(options)  # parse the catalogue and import the checks before forking
    jobs = max(1, min(jobs, len(pairs)))
    chunk = max(1, len(pairs) // (jobs * 8))
    with ProcessPoolExecutor(max_workers=jobs, mp_context=_context()) as pool:
        yield from pool.map(functools.partial(_lint_one, lint_file), pairs, chunksize=chunk)
