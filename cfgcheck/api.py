"""The Python API: what the CLI calls, and what launch scripts and sweep generators can call."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

from . import engine
from .engine import FileReport, Options, Report
from .findings import Finding, Severity
from .knowledge.hardware import find_gpu

EXIT_CLEAN = 0
EXIT_FINDINGS = 1
EXIT_INPUT = 2
EXIT_INTERNAL = 3


def make_options(*, gpu: str | None = None, gpus: int | None = None, rows: int | None = None,
                 select: Iterable[str] | None = None, ignore: Iterable[str] = (),
                 debug: bool = False, cwd: Path | None = None) -> Options:
    """Options from plain values; raises ValueError (UnknownGpu) for a GPU name we do not know."""
    return Options(
        gpu=find_gpu(gpu) if gpu else None,
        gpus=gpus,
        rows=rows,
        select=frozenset(select) if select is not None else None,
        ignore=frozenset(ignore),
        debug=debug,
        cwd=cwd,
    )


def lint(paths: Iterable[str | Path], **options: Any) -> Report:
    """Lint files and folders."""
    return engine.lint_paths(paths, make_options(**options))


def lint_text(text: str, name: str = "<text>", *, fmt: str | None = None, **options: Any) -> FileReport:
    return engine.lint_text(text, name, make_options(**options), fmt=fmt)


def lint_mapping(data: dict, name: str = "<mapping>", **options: Any) -> FileReport:
    """Lint an in-memory config (e.g. one point of a generated sweep)."""
    text = json.dumps(data, indent=2, default=str)
    return engine.lint_text(text, name, make_options(**options), fmt="json")


def fix(paths: Iterable[str | Path], *, training: bool = False, halve_batch: bool = False,
        write: bool = True, **options: Any):
    """Fix files and folders; returns a ``fix.FixReport`` (see docs/fixing.md)."""
    from . import fix as fixmod

    return fixmod.fix_paths(paths, make_options(**options), training=training,
                            halve_batch=halve_batch, write=write)


def fix_exit_code(report, *, no_write: bool = False) -> int:
    if report.problems or report.refused:
        return EXIT_INPUT
    if report.errors:
        return EXIT_INTERNAL
    if no_write and report.changed:
        return EXIT_FINDINGS
    return EXIT_CLEAN


def exit_code(report: Report, fail_on: Severity = Severity.WARNING) -> int:
    if report.problems:
        return EXIT_INPUT
    if report.internal:
        return EXIT_INTERNAL
    if any(f.severity >= fail_on for f in report.findings):
        return EXIT_FINDINGS
    return EXIT_CLEAN


def visible(findings: Iterable[Finding], show: Severity) -> list[Finding]:
    return [f for f in findings if f.severity >= show]


@dataclass
class PlanResult:
    plans: list = field(default_factory=list)  # (file, Plan)
    problems: list = field(default_factory=list)


def plan(paths: Iterable[str | Path], **options: Any) -> PlanResult:
    """The derived run of each training config (skipped files are left out)."""
    from .load import LoadError, load_path
    from .findings import InputProblem
    from .plan import derive_plan, model_of
    from .view import build_view

    opts = make_options(**options)
    out = PlanResult()
    for file in engine.expand_paths(paths):
        try:
            _src, docs = load_path(file)
        except LoadError as exc:
            out.problems.append(InputProblem(file=file, line=exc.line, column=exc.column, reason=exc.reason))
            continue
        for doc in docs:
            view = build_view(doc)
            if view.skipped:
                continue
            arch = model_of(view, file, opts.cwd)
            out.plans.append((file, derive_plan(view, arch, gpu=opts.gpu, gpus=opts.gpus, rows=opts.rows)))
    return out
