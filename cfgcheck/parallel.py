"""Linting many files over a pool of processes, results in the order the files were given.

Each worker lints whole files; a file's report comes back without its views (the typed views
and documents are only needed while the rules run, and pickling them would cost more than
linting). Everything else of a report (findings, input problems, internal errors, layout,
skipped reason) is the same as in a serial run.
"""

from __future__ import annotations

import multiprocessing
import sys
from concurrent.futures import ProcessPoolExecutor
from typing import Iterator

from . import engine


def _lint_one(pair: tuple[str, engine.Options]) -> engine.FileReport:
    path, options = pair
    report = engine.lint_file(path, options)
    report.views = []
    return report


def _context():
    # fork starts a worker in a millisecond with the catalogue already parsed; elsewhere (macOS,
    # Windows) use the platform's default start method
    if sys.platform.startswith("linux"):
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context()


def lint_files_parallel(pairs: list[tuple[str, engine.Options]], jobs: int) -> Iterator[engine.FileReport]:
    """Reports for (file, options) pairs, in order, each yielded as soon as it and those before it are done."""
    if not pairs:
        return
    for options in {id(o): o for _, o in pairs}.values():
        engine.active_rules(options)  # parse the catalogue and import the checks before forking
    jobs = max(1, min(jobs, len(pairs)))
    chunk = max(1, len(pairs) // (jobs * 8))
    with ProcessPoolExecutor(max_workers=jobs, mp_context=_context()) as pool:
        yield from pool.map(_lint_one, pairs, chunksize=chunk)
