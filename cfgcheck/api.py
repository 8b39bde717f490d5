"""The Python API: what the CLI calls, and what launch scripts and sweep generators can call.

``lint`` (files and folders), ``lint_text`` and ``lint_mapping`` return reports whose findings
are plain frozen records; ``guard`` lints and raises ``ConfigRejected`` listing every finding at
or above the gate, for a launch script that must not start a bad run.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

from ._records import guarded_repr
from . import engine
from .engine import Options
from .findings import FileReport, Report, Tally
from .findings import MAX_MAGNITUDE, Finding, OptionError, Severity, number_text
from .knowledge.hardware import find_gpu

EXIT_CLEAN = 0
EXIT_FINDINGS = 1
EXIT_INPUT = 2
EXIT_INTERNAL = 3


def given_options(*, gpu: str | None = None, gpus: int | None = None, rows: int | None = None,
                  only: Iterable[str] | None = None, skip: Iterable[str] | None = None,
                  severity: Mapping[str, str | Severity] | None = None,
                  thresholds: Mapping[str, Mapping[str, Any]] | None = None,
                  debug: bool | None = None, cwd: Path | None = None,
                  overrides: Iterable[str] | None = None,
                  installed: Iterable[str] | Mapping[str, str] | None = None,
                  launch: Iterable[str | Path] | None = None) -> dict[str, Any]:
    """The options a caller set explicitly, as engine values (None = not set).
    Raises UnknownGpu for a GPU name we do not know, OptionError for a bad severity (both are
    ValueErrors), ValueError for a launch file that does not exist."""
    for f in launch or ():
        if not Path(f).is_file():
            raise ValueError(f"launch file {f} not found (--launch takes an accelerate config or a DeepSpeed JSON)")
    for name, value in (("gpus", gpus), ("rows", rows)):
        if value is not None and (isinstance(value, bool) or not isinstance(value, int)
                                  or not 1 <= value <= MAX_MAGNITUDE):
            raise OptionError(f"{name} must be a whole number from 1 to {MAX_MAGNITUDE:,} (2**53), "
                              f"not {number_text(value) if isinstance(value, int) else repr(value)[:40]}")
    return {
        "gpu": find_gpu(gpu) if gpu else None,
        "gpus": gpus,
        "rows": rows,
        "only": frozenset(only) if only is not None else None,
        "skip": frozenset(skip) if skip is not None else None,
        "severity": ({r: s if isinstance(s, Severity) else Severity.parse(s) for r, s in severity.items()}
                     if severity else None),
        "thresholds": {r: dict(t) for r, t in thresholds.items()} if thresholds else None,
        "debug": debug,
        "cwd": cwd,
        "overrides": _checked_overrides(overrides),
        "versions": _installed(installed),
        "launch": tuple(str(p) for p in launch) if launch else None,
    }


def _checked_overrides(overrides: Iterable[str] | None) -> tuple[str, ...] | None:
    """key=value overrides as given; ValueError for one that is neither key=value nor ~key."""
    if not overrides:
        return None
    out = tuple(overrides)
    for item in out:
        text = item.strip()
        key = text[1:] if text.startswith("~") else text.partition("=")[0]
        if (not text.startswith("~") and "=" not in text) or not key.lstrip("+").strip():
            raise ValueError(f"override {item!r} is not KEY=VALUE (or ~KEY to remove a key)")
    return out


def _installed(items) -> dict[str, str] | None:
    """``installed=["trl==0.12.2"]`` (or a mapping) -> {library: version}; None when not given."""
    if not items:
        return None
    from .knowledge.pins import parse_installed

    return parse_installed(items)


def make_options(**options: Any) -> Options:
    """Options from plain values (see ``given_options``), with no project configuration."""
    return Options(**{k: v for k, v in given_options(**options).items() if v is not None})


def _project(project: Any, paths: list):
    """None, or the project for ``project`` = "auto" (search), a path, or a Project."""
    if project is None or project is False:
        return None
    if project == "auto":
        from .projectfile import find_file  # cfgcheck.project only when a project file is found

        found = find_file(paths[0] if paths else None)
        if found is None:
            return None
        from .project import load

        return load(found)
    from . import project as projectmod

    if isinstance(project, projectmod.Project):
        return project
    return projectmod.load(project)


def _targets(paths: list, project: Any, given: dict[str, Any], scripts: bool = False):
    """(files as (file, skip reason), options for a file, the project or None).

    Launch scripts (``.sh``) under the paths pair the configs they start with their launch
    context (``Options.script``); with ``scripts`` the scripts themselves are listed too."""
    from ._records import replaced
    from .load import CONFIG_SUFFIXES, walk_paths
    from .scriptfiles import SCRIPT_SUFFIXES, find_scripts, scripts_of

    proj = _project(project, paths)
    if proj is None:
        opts = Options(**{k: v for k, v in given.items() if v is not None})
        # one walk finds the configs and the launch scripts among them
        walked = walk_paths(paths, CONFIG_SUFFIXES + SCRIPT_SUFFIXES)
        files = [(f, None) for f, named in walked if named or f.lower().endswith(CONFIG_SUFFIXES)]
        found = scripts_of(walked)
        base = lambda file: opts  # noqa: E731
    else:
        roots = paths or [os.path.relpath(proj.root)]
        files = proj.expand(roots)
        base = lambda file: proj.options_for(file, given)  # noqa: E731
        found = find_scripts(roots)
    if found:
        from .scripts import pairings
    paired = pairings(found) if found else {}

    def options_for(file: str) -> Options:
        opts = base(file)
        if not paired:
            return opts
        sl = paired.get(os.path.normpath(os.path.abspath(file)))
        if sl is not None and opts.script is None:
            opts = replaced(opts, script=sl, script_linted=scripts)
        return opts

    if scripts and found:
        listed = {os.path.normpath(f) for f, _ in files}
        files = files + [(s, None) for s in found if os.path.normpath(s) not in listed]
    else:
        files = [(f, skip) for f, skip in files if not f.lower().endswith(SCRIPT_SUFFIXES)]
    return files, options_for, proj


def lint(paths: Iterable[str | Path] = (), *, project: Any = "auto",
         baseline: str | Path | bool | None = None,
         progress: Callable[[int, int], None] | None = None, jobs: int | str = 1,
         keep_views: bool = True, cache: Any = False,
         **options: Any) -> Report:
    """Lint files and folders.

    ``project``: "auto" (default) finds cfgcheck.yaml / [tool.cfgcheck] by walking up from the
    first path; a path reads that file; None ignores project files. Explicit ``options``
    (gpu, gpus, rows, only, skip, severity, thresholds) override the project's values.
    ``baseline``: a baseline file; findings it holds are left out (counted in ``baselined``).
    ``jobs``: lint over that many processes (same reports, same order); "auto": as many as the
    usable CPUs, serial for a short list of files. ``keep_views=False``:
    drop each file's parsed documents once its rules have run (memory stays flat).
    ``cache``: True keeps results in the user's cache folder (``$CFGCHECK_CACHE_DIR`` or the
    platform's), a path keeps them there (or a ``cache.Store``); a file whose stored result still holds is not linted
    again, and its report has no views (see cfgcheck/cache.py).
    None uses the project's ``baseline`` when that file exists; False uses none.
    Raises ``project.ProjectError`` / ``baseline.BaselineError`` for a bad project or baseline
    file, ``ValueError`` for a bad option value.

    ``lint_reports`` gives the same reports one at a time, holding none of them.
    """
    reports = lint_reports(paths, project=project, baseline=baseline, progress=progress, jobs=jobs,
                           keep_views=keep_views, cache=cache, **options)
    try:
        return Report(files=list(reports))
    finally:
        reports.close()


def lint_reports(paths: Iterable[str | Path] = (), *, project: Any = "auto",
                 baseline: str | Path | bool | None = None,
                 progress: Callable[[int, int], None] | None = None, jobs: int | str = 1,
                 keep_views: bool = True, cache: Any = False,
                 **options: Any) -> Iterator[FileReport]:
    """``lint``'s file reports in the files' order, each yielded as soon as it is ready (and the
    baseline has taken its findings), so a caller that writes each one and drops it keeps the
    memory of a run flat. Nothing is linted before the first ``next``; the option, project and
    baseline errors ``lint`` raises are raised there. Close it (or run it to the end) to end
    the run: the run's memo scope and the result cache are closed then."""
    from . import reads

    reads.forget()  # what an earlier run saw on disk (repository keys, pins) is looked at again
    paths = list(paths)
    files, options_for, proj = _targets(paths, project, given_options(**options), scripts=True)
    if proj is not None and baseline is None and proj.baseline is not None and proj.baseline.is_file():
        baseline = proj.baseline  # the project's baseline, unless the caller chose
    held = None
    if baseline is not None and baseline is not False:
        from . import baseline as baselinemod

        held = baselinemod.load(baseline).matcher()  # read before the first file is linted
    # jobs > 1: the files are linted over processes, reports still in this order
    store = None
    if cache is not False and cache is not None:
        from .cache import Store

        store = cache if isinstance(cache, Store) else Store(None if cache is True else cache)
    linted = engine.lint_files([(f, options_for(f)) for f, skip in files if not skip],
                               jobs=jobs, keep_views=keep_views, cache=store)
    try:
        total = len(files)
        for i, (file, skip) in enumerate(files, start=1):
            fr = FileReport(file=file, skipped=skip) if skip else next(linted)
            if held is not None:
                held.take(fr)
            if progress is not None:
                progress(i, total)
            yield fr
    finally:
        linted.close()  # ends the run's memo scope now, even when a caller's progress raised
        if store is not None:
            store.close()  # trims the cache folder when that is due


def lint_text(text: str, name: str = "<text>", *, fmt: str | None = None, project: Any = None,
              **options: Any) -> FileReport:
    """Lint a config held in a string. ``name`` is used in findings (and, with a project, to
    pick the hardware profile)."""
    proj = _project(project, [name] if not name.startswith("<") else [])
    given = given_options(**options)
    if proj is not None:
        opts = proj.options_for(name, given)
    else:
        opts = Options(**{k: v for k, v in given.items() if v is not None})
    return engine.lint_text(text, name, opts, fmt=fmt)


def lint_mapping(data: Mapping, name: str = "<mapping>", **options: Any) -> FileReport:
    """Lint an in-memory config (e.g. one point of a generated sweep)."""
    import json

    text = json.dumps(data, indent=2, default=str)
    return lint_text(text, name, fmt="json", **options)


def fix(paths: Iterable[str | Path], *, training: bool = False, halve_batch: int = 0,
        write: bool = True, project: Any = "auto", **options: Any):
    """Fix files and folders; returns a ``fix.FixReport`` (see docs/fixing.md). The project file's
    hardware profiles, rule selection and waivers apply as they do for ``lint``. ``halve_batch``
    counts halvings (True is one)."""
    from . import fix as fixmod

    files, options_for, _proj = _targets(list(paths), project, given_options(**options))
    return fixmod.fix_files([(f, options_for(f)) for f, skip in files if not skip],
                            training=training, halve_batch=halve_batch, write=write)


def fix_exit_code(report, *, no_write: bool = False) -> int:
    if report.problems or report.refused:
        return EXIT_INPUT
    if report.errors:
        return EXIT_INTERNAL
    if no_write and report.changed:
        return EXIT_FINDINGS
    return EXIT_CLEAN


def exit_code(report: Report | Tally, fail_on: Severity = Severity.WARNING) -> int:
    """0 clean, 1 a finding at or above ``fail_on``, 2 an unreadable file, 3 a rule failed.
    ``report``: a Report, or the Tally of a run whose reports were written as they came."""
    tally = report if isinstance(report, Tally) else report.tally()
    if tally.problems:
        return EXIT_INPUT
    if tally.internal:
        return EXIT_INTERNAL
    if tally.at_least(fail_on):
        return EXIT_FINDINGS
    return EXIT_CLEAN


def visible(findings: Iterable[Finding], show: Severity) -> list[Finding]:
    return [f for f in findings if f.severity >= show]


class DeriveResult:
    runs: list  # (file, Plan)
    problems: list
    internal: list  # a bug in cfgcheck on one file (exit 3)

    __slots__ = ('runs', 'problems', 'internal')

    def __init__(self, runs=None, problems=None, internal=None):
        self.runs = [] if runs is None else runs
        self.problems = [] if problems is None else problems
        self.internal = [] if internal is None else internal

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(runs={self.runs!r}, problems={self.problems!r}, internal={self.internal!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.runs, self.problems, self.internal) == (other.runs, other.problems, other.internal)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def derive(paths: Iterable[str | Path], *, project: Any = "auto", **options: Any) -> DeriveResult:
    """The derived run of each training config (skipped files are left out). Runs are opened
    the way ``lint`` opens them (``cfgcheck.run``): linked files, launch context, runner
    defaults, the project file's hardware profiles and launch files."""
    from . import memo
    from .findings import InputProblem
    from .load import LoadError
    from .plan import derive_plan, model_of
    from .run import open_path

    files, options_for, _proj = _targets(list(paths), project, given_options(**options))
    out = DeriveResult()
    with memo.scope():  # one run, as lint's: a folder's surroundings and model lookups once
        for file, skip in files:
            if skip:
                continue
            opts = options_for(file)
            try:  # the crash boundary of one file: the other files are still derived
                try:
                    runs = open_path(file, opts)
                except LoadError as exc:
                    out.problems.append(InputProblem(file=file, line=exc.line, column=exc.column,
                                                     reason=exc.reason))
                    continue
                for run in runs:
                    view = run.view
                    if view.skipped:
                        continue
                    arch = model_of(view, file, opts.cwd, declared=opts.models)
                    out.runs.append((file, derive_plan(view, arch, gpu=opts.gpu, gpus=run.gpus, rows=opts.rows)))
                engine.let_go(run.view for run in runs)  # a plan keeps no view
            except Exception as exc:
                if opts.debug:
                    raise
                out.internal.append(engine.internal_error(file, None, exc))
    return out


# --------------------------------------------------------------------------- the guard

class ConfigRejected(Exception):
    """A config a launch script must not start: carries the findings and input problems."""

    def __init__(self, findings: list[Finding], problems: list, internal: list, gate: Severity):
        self.findings = findings
        self.problems = problems
        self.internal = internal
        self.gate = gate
        lines = []
        for p in problems:
            lines.append(f"  {p.file}:{p.line}:{p.column}: input error: {p.reason}")
        for e in internal:
            lines.append(f"  {e.file}: internal error in {e.where}: {e.error}")
        for f in findings:
            where = (f"{f.file} at {f.key or '(top level)'}" if f.file.startswith("<")
                     else f"{f.file}:{f.line}:{f.column}")  # an in-memory mapping has no lines
            lines.append(f"  {where}: {f.severity.word}: {f.message} [{f.rule}]")
            if f.hint:
                lines.append(f"      hint: {f.hint}")
        n = len(findings) + len(problems) + len(internal)
        head = f"cfgcheck rejected the config: {n} problem{'s' if n != 1 else ''} at {gate.word} or above"
        super().__init__(head + "\n" + "\n".join(lines))


def guard(target: Any, *, gate: str | Severity = Severity.ERROR, name: str | None = None,
          **options: Any) -> list[Finding]:
    """Lint ``target`` and raise ``ConfigRejected`` if anything at or above ``gate`` is found.

    ``target``: a mapping (one config of a sweep), or a path / list of paths. Unreadable files
    and failing rules always reject. Returns the findings below the gate (for logging).
    """
    level = gate if isinstance(gate, Severity) else Severity.parse(gate)
    if isinstance(target, Mapping):
        fr = lint_mapping(target, name or "<mapping>", **options)
        report = Report(files=[fr])
    else:
        paths = [target] if isinstance(target, (str, Path)) else list(target)
        report = lint(paths, **options)
    blocking = [f for f in report.findings if f.severity >= level]
    if blocking or report.problems or report.internal:
        raise ConfigRejected(blocking, report.problems, report.internal, level)
    return [f for f in report.findings if f.severity < level]
