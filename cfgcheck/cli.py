"""Command line: the only module that reads argv, writes to the terminal or exits."""

from __future__ import annotations

import functools
import sys
from enum import Enum
from pathlib import Path
from typing import List, Optional

from . import __version__
from .cliparams import Argument, Option, Program, typer_app


class _Typer:
    """typer, imported on first use: the commands it runs use it, while a ``lint`` command line
    read by ``fastcli`` never loads it (typer costs more to start than a lint of one file)."""

    def __getattr__(self, name: str):
        import typer as module

        return getattr(module, name)


typer = _Typer()

# the commands are declared typer-free (cliparams); typer's app is made from them when needed
commands = Program(
    add_completion=True,
    no_args_is_help=True,
    help="cfgcheck: finds the mistakes in fine-tuning configs (LoRA, QLoRA, full, DeepSpeed) before the GPU run.",
    context_settings={"help_option_names": ["-h", "--help"]},
)


class Format(str, Enum):
    text = "text"
    json = "json"
    sarif = "sarif"
    github = "github"


class PlanFormat(str, Enum):
    text = "text"
    json = "json"


class Level(str, Enum):
    info = "info"
    warning = "warning"
    error = "error"


PROGRESS_MIN_FILES = 10  # fewer files than this finish before a progress line would help


def _version(value: bool) -> None:
    if value:
        typer.echo(f"cfgcheck {__version__}")
        raise typer.Exit()


def _complete_gpu(incomplete: str) -> list[str]:
    from .knowledge.hardware import ALIASES, GPUS

    return [n for n in sorted(GPUS) + sorted(ALIASES) if n.startswith(incomplete.lower())]


def _complete_rule(incomplete: str) -> list[str]:
    from .catalogue import load_catalogue

    return [r for r in sorted(load_catalogue()) if r.startswith(incomplete)]


@commands.callback()
def main_options(
    version: bool = Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    pass


def color_wanted(stream) -> bool:
    """Colour only on a terminal, and never when NO_COLOR is set to anything non-empty."""
    import os

    if os.environ.get("NO_COLOR"):
        return False
    if os.environ.get("TERM") == "dumb":
        return False
    isatty = getattr(stream, "isatty", None)
    return bool(isatty and isatty())


class _Progress:
    """'cfgcheck: 12/40 files' on stderr, rewritten in place, erased at the end."""

    def __init__(self, stream):
        self.stream = stream
        self.shown = False
        self.last = 0.0

    def __call__(self, done: int, total: int) -> None:
        import time

        if total < PROGRESS_MIN_FILES:
            return
        now = time.monotonic()
        if done < total and now - self.last < 0.1:
            return
        self.last = now
        self.stream.write(f"\rcfgcheck: {done}/{total} files")
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            self.stream.write("\r\x1b[K")
            self.stream.flush()


def _fail(message: str, code: int) -> None:
    _write_err(message + "\n")
    raise SystemExit(code)


def _input_errors() -> tuple:
    """The exceptions that mean "your input is wrong" (exit 2); anything else is our bug (exit 3)."""
    from .findings import BaselineError
    from .findings import OptionError
    from .knowledge.hardware import UnknownGpu
    from .projectfile import ProjectError

    return (UnknownGpu, OptionError, ProjectError, BaselineError)


def _input_message(exc: Exception) -> str:
    """A project or baseline error is already its own file:line:column: lines."""
    from .findings import BaselineError
    from .findings import printable
    from .projectfile import ProjectError

    if isinstance(exc, (ProjectError, BaselineError)):
        return str(exc)
    return f"cfgcheck: {printable(str(exc))}"


def _typer_way_out(exc: Exception) -> bool:
    """typer.Exit or typer.Abort (only a command typer runs can raise them)."""
    module = sys.modules.get("typer")
    return module is not None and isinstance(exc, (module.Exit, module.Abort))


def _crash_boundary(command):
    """Around a command: a bug anywhere outside a rule (or a file's own boundary in the engine)
    ends as an internal error, exit 3, one line, never a traceback unless --debug asks."""
    import functools

    @functools.wraps(command)
    def guarded(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except Exception as exc:
            if _typer_way_out(exc) or kwargs.get("debug"):  # typer.Exit / Abort: the command's own way out
                raise
            from .engine import internal_error
            from .findings import printable

            e = internal_error("", None, exc)
            hint = "run again with --debug for the traceback" if "debug" in kwargs else "please report it"
            _write_err(f"cfgcheck: internal error: {printable(e.error)} (a bug in cfgcheck; {hint})\n")
            raise SystemExit(3) from None

    return guarded


def _severity_pairs(pairs: list[str]) -> dict[str, str]:
    out = {}
    for item in pairs:
        rule, sep, level = item.partition("=")
        if not sep or not rule.strip() or not level.strip():
            _fail(f"cfgcheck: --severity expects RULE=LEVEL (e.g. lora-scale-below-one=error), got {item!r}", 2)
        out[rule.strip()] = level.strip()
    return out


def _unknown_rules(names) -> None:
    if not names:
        return  # nothing to look up: the catalogue is not read (a cached run may need none of it)
    import difflib

    from .catalogue import load_catalogue

    rules = load_catalogue()
    for name in names:
        if name not in rules:
            near = difflib.get_close_matches(name, list(rules), n=1, cutoff=0.6)
            _fail(f"cfgcheck: no rule {name!r}" + (f"; did you mean {near[0]}?" if near else " (see: cfgcheck rules)"), 2)


def _frames(report, shown) -> dict[str, list[str]]:
    """Each file that has a finding shown, read once, as lines."""
    from .load import LoadError, read_source

    out: dict[str, list[str]] = {}
    for f in shown:
        if f.file in out or f.file.startswith("<"):
            continue
        try:
            out[f.file] = read_source(f.file).text.splitlines()
        except LoadError:
            out[f.file] = []
    return out


@commands.command()
@_crash_boundary
def lint(
    paths: Optional[List[Path]] = Argument(
        None, help="Config files or folders (YAML and JSON inside are checked). "
                   "Default: the project's configs (from the project root), else the working folder."),
    gpu: Optional[str] = Option(None, "--gpu", autocompletion=_complete_gpu,
                                      help="The GPU the run will use, e.g. a100-80gb, t4 (see: cfgcheck gpus)."),
    gpus: Optional[int] = Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = Option(None, "--rows", min=1, help="Number of training rows, when the config does not say."),
    installed: Optional[List[str]] = Option(None, "--installed", metavar="LIBRARY==VERSION",
                                                  help="A library release the run uses, e.g. trl==0.12.2 (repeat for several; wins over the pins found beside the config)."),
    launch: Optional[List[Path]] = Option(None, "--launch", metavar="FILE", help="An accelerate config or DeepSpeed JSON the run is started with (repeat for several): GPUs, sharding, offload and mixed precision come from it."),
    only: Optional[List[str]] = Option(None, "--only", autocompletion=_complete_rule,
                                             help="Run only this rule (repeat for several)."),
    skip: Optional[List[str]] = Option(None, "--skip", autocompletion=_complete_rule,
                                                  help="Do not run this rule (repeat for several)."),
    severity: Optional[List[str]] = Option(None, "--severity", metavar="RULE=LEVEL",
                                                 help="Report a rule at another severity, e.g. lora-scale-below-one=error."),
    fmt: Format = Option(Format.text, "--format", help="Output format: text, json, sarif (SARIF 2.1.0) or github (workflow-command annotations)."),
    show: Optional[Level] = Option(None, "--show", help="Lowest severity printed in text and github output (default: warning)."),
    gate: Optional[Level] = Option(None, "--gate", help="Lowest severity that makes the exit status 1 (default: warning)."),
    project: Optional[Path] = Option(None, "--project", help="Project file to use instead of searching for cfgcheck.yaml / pyproject.toml."),
    no_project: bool = Option(False, "--no-project", help="Ignore project files."),
    baseline: Optional[Path] = Option(None, "--baseline", help="Leave out the findings recorded in this baseline file."),
    save_baseline: Optional[Path] = Option(None, "--save-baseline", help="Record the current findings in this file and exit 0."),
    quiet: bool = Option(False, "--quiet", "-q", help="Text output: only the finding lines, nothing when clean."),
    summary: bool = Option(False, "--summary", help="Text output: only the summary line."),
    frame: Optional[bool] = Option(None, "--frame/--no-frame", help="Text output: print the offending line with its value set off by >> << (default: on a terminal)."),
    debug: bool = Option(False, "--debug", help="Re-raise an error inside a rule instead of reporting it."),
    jobs: str = Option("1", "--jobs", "-j", metavar="N|auto",
                             help="Lint files in N processes, or auto: one per usable CPU (a short run stays serial). Output order stays the same."),
    override: Optional[List[str]] = Option(None, "--override", metavar="KEY=VALUE",
                                                 help="A key=value override the launch passes to the config's loader (repeatable), applied over the composed config."),
    sarif_not_checked: bool = Option(False, "--sarif-not-checked",
                                           help="SARIF output: also carry the 'not checked' notes (rules that lacked the GPU, model or row count); left out by default."),
    no_cache: bool = Option(False, "--no-cache",
                                  help="Lint every file afresh and leave the result cache alone. By default a file whose bytes, linked files, options and cfgcheck release are unchanged reuses its stored result (folder: $CFGCHECK_CACHE_DIR, else the user cache folder)."),
) -> None:
    """Check training configs and report what would waste the run."""
    arguments = dict(locals())
    from .cache import lint_from_cache  # an unchanged run is answered here, importing little else

    run = lint_from_cache(arguments, _Progress(sys.stderr) if not (quiet or summary)
                          and sys.stderr.isatty() else None)
    if run.code is not None:
        raise SystemExit(run.code)
    from . import api
    from .findings import BaselineError
    from .findings import OptionError, Severity, printable
    from .knowledge.hardware import UnknownGpu
    from .projectfile import ProjectError

    if quiet and summary:
        _fail("cfgcheck: --quiet and --summary exclude each other", 2)
    if (quiet or summary) and fmt is not Format.text:
        _fail("cfgcheck: --quiet and --summary apply to text output only", 2)
    if project is not None and no_project:
        _fail("cfgcheck: --project and --no-project exclude each other", 2)
    if baseline is not None and save_baseline is not None:
        _fail("cfgcheck: --baseline and --save-baseline exclude each other", 2)
    from .parallel import parse_jobs

    try:
        workers = parse_jobs(jobs)
    except ValueError as exc:
        _fail(f"cfgcheck: {exc}", 2)
    _unknown_rules(list(only or []) + list(skip or []))
    levels = _severity_pairs(severity or [])
    _unknown_rules(levels)
    chosen = {
        "gpu": gpu, "gpus": gpus, "rows": rows, "debug": debug or None, "launch": launch or None,
        "only": only or None, "skip": skip or None, "severity": levels or None,
        "overrides": override or None,
        "installed": installed or None,
    }
    progress = None
    if not (quiet or summary) and sys.stderr.isatty():
        progress = _Progress(sys.stderr)
    try:
        proj = None
        if not no_project:
            if project:
                from .project import load as load_project

                proj = load_project(project)
            else:
                from .projectfile import find_file  # cfgcheck.project only when a file is found

                found = find_file(paths[0] if paths else None)
                if found is not None:
                    from .project import load as load_project

                    proj = load_project(found)
        if not paths and proj is None:
            paths = [Path(".")]  # no project file: the working folder
        if save_baseline is not None:  # the baseline records every finding: the whole report is kept
            report = api.lint(paths or [], project=proj, progress=progress, jobs=workers, keep_views=False,
                              baseline=False, cache=not no_cache, **chosen)
        else:
            out = _lint_output(api.lint_reports(paths or [], project=proj, progress=progress, jobs=workers,
                                                keep_views=False, baseline=baseline, cache=not no_cache,
                                                **chosen),
                               fmt=fmt, proj=proj, show=show, frame=frame, quiet=quiet, summary=summary,
                               sarif_not_checked=sarif_not_checked)
    except (UnknownGpu, OptionError) as exc:
        _fail(f"cfgcheck: {printable(str(exc))}", api.EXIT_INPUT)
    except (ProjectError, BaselineError) as exc:
        _fail(str(exc), api.EXIT_INPUT)
    finally:
        if progress is not None:
            progress.close()

    if save_baseline is not None:
        from .baseline import save

        try:
            n = save(report, save_baseline)
        except BaselineError as exc:
            _fail(str(exc), api.EXIT_INPUT)
        _write_err(f"cfgcheck: recorded {n} finding{'s' if n != 1 else ''} in "
                   f"{printable(str(save_baseline))}\n")
        for p in report.problems:
            _write_err(f"{printable(p.file)}:{p.line}:{p.column}: input error: {printable(p.reason)}\n")
        for e in report.internal:
            _write_err(f"{printable(e.file)}: internal error in {e.where}: {printable(e.error)} "
                       "(a bug in cfgcheck)\n")
        raise SystemExit(api.EXIT_INPUT if report.problems else
                         api.EXIT_INTERNAL if report.internal else api.EXIT_CLEAN)

    fail_on = Severity.parse((gate.value if gate else None) or (proj.gate.word if proj and proj.gate else "warning"))
    try:
        out.finish(_write_piece)
    finally:
        out.close()
    sys.stdout.flush()
    raise SystemExit(run.done(api.exit_code(out.tally, fail_on)))


WRITE_BATCH = 64  # file reports handed to the output writer together


def _lint_output(reports, *, fmt, proj, show, frame, quiet, summary, sarif_not_checked):
    """The lint's output writer, given each file report as it comes (none is kept): the reports
    go into the format's sections (render/spool.py), the summary and exit status come from
    counts. Returns the writer, its output not yet written."""
    from . import api
    from .findings import Severity
    from .render import writer

    level = Severity.parse((show.value if show else None) or (proj.show.word if proj and proj.show else "warning"))
    want_frame = False
    if fmt is Format.sarif:
        from .render.notes import is_note  # code-scanning views list every result: notes only when asked

        out = writer("sarif")
        pick = (lambda fr: fr.findings) if sarif_not_checked else \
            (lambda fr: [f for f in fr.findings if not is_note(f)])
    elif fmt is Format.json:
        out = writer("json")
        pick = lambda fr: fr.findings  # noqa: E731
    else:
        pick = lambda fr: api.visible(fr.findings, level)  # noqa: E731
        if fmt is Format.github:
            out = writer("github")
        else:
            want_frame = (frame if frame is not None else bool(sys.stdout.isatty())) and not (quiet or summary)
            out = writer("text", color=color_wanted(sys.stdout),
                         mode="quiet" if quiet else "summary" if summary else "full")
    hides_info = level > Severity.INFO
    info = Severity.INFO

    def write(batch: list) -> None:
        for fr in batch:
            shown = pick(fr)
            hidden = sum(1 for f in fr.findings if f.severity == info) if hides_info else 0
            out.add(fr, shown, hidden_info=hidden, frames=_frames(None, shown) if want_frame else None)

    try:
        # the reports go to the writer a few dozen at a time: its code and tables stay in the
        # processor's caches between two findings instead of being pushed out by each file's
        # lint (a third less time writing); memory stays flat
        batch: list = []
        for fr in reports:
            batch.append(fr)
            if len(batch) >= WRITE_BATCH:
                write(batch)
                batch = []
        write(batch)
    except BaseException:
        out.close()
        raise
    finally:
        reports.close()
    return out


def _write_piece(out: str) -> None:
    """Like _write, flushed once at the end (the output comes in pieces)."""
    _emit(sys.stdout, out, flush=False)


@commands.command("derive")
@_crash_boundary
def derive(
    paths: List[Path] = Argument(..., help="Config files or folders."),
    gpu: Optional[str] = Option(None, "--gpu", help="The GPU the run will use (see: cfgcheck gpus)."),
    gpus: Optional[int] = Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = Option(None, "--rows", min=1, help="Number of training rows."),
    launch: Optional[List[Path]] = Option(None, "--launch", metavar="FILE", help="An accelerate config or DeepSpeed JSON the run is started with (repeat for several): GPUs, sharding, offload and mixed precision come from it."),
    fmt: PlanFormat = Option(PlanFormat.text, "--format", help="Output format."),
    no_project: bool = Option(False, "--no-project", help="Ignore project files (their hardware profiles)."),
    pictures: bool = Option(True, "--pictures/--no-pictures", help="Text output: draw the learning rate over the steps (with evaluation, checkpoint and logging marks) and the memory per GPU as a bar."),
) -> None:
    """Show the derived run: parameters, batch, steps and the memory estimate per GPU."""
    from . import api
    from .findings import printable

    try:
        result = api.derive(paths, gpu=gpu, gpus=gpus, rows=rows, launch=launch or None,
                            project=None if no_project else "auto")
    except _input_errors() as exc:  # an unknown GPU name, a bad project file
        _fail(_input_message(exc), api.EXIT_INPUT)
    if fmt is PlanFormat.json:
        from .render.jsonitems import indented  # json_text's layout, without the pure-Python encoder

        _write(indented({"runs": [dict(p.as_dict(), file=f) for f, p in result.runs],
                         "input_errors": [e.as_dict() for e in result.problems],
                         "internal_errors": [e.as_dict() for e in result.internal]}) + "\n")
    else:
        from .render.plan import render_plan

        out = [f"{printable(e.file)}:{e.line}:{e.column}: input error: {printable(e.reason)}\n"
               for e in result.problems]
        out += [f"{printable(e.file)}: internal error in {e.where}: {printable(e.error)} "
                "(a bug in cfgcheck; the other files were derived)\n" for e in result.internal]
        if pictures:
            from .render.pictures import pictures as draw

            out.append("\n".join(render_plan(f, p) + "\n" + draw(p) for f, p in result.runs))
        else:
            out.append("\n".join(render_plan(f, p) for f, p in result.runs))
        _write("".join(out))
    raise SystemExit(api.EXIT_INPUT if result.problems else
                     api.EXIT_INTERNAL if result.internal else api.EXIT_CLEAN)


@commands.command()
@_crash_boundary
def fix(
    paths: List[Path] = Argument(..., help="Config files or folders to fix in place."),
    diff: bool = Option(False, "--diff", help="Print a unified diff of the fixes; write nothing."),
    no_write: bool = Option(False, "--no-write", help="Write nothing; exit 1 when a fix would change a file (for CI and pre-commit)."),
    training: bool = Option(False, "--allow-training-changes", help="Also apply fixes that change the training outcome (alpha, learning rate, precision, trainable modules, batch)."),
    halve_batch: int = Option(0, "--halve-batch", count=True, help="Halve the per-device batch and double gradient accumulation (same effective batch); repeat to halve again (-> a quarter, ...)."),
    gpu: Optional[str] = Option(None, "--gpu", help="The GPU the run will use, e.g. a100-80gb, t4 (see: cfgcheck gpus)."),
    gpus: Optional[int] = Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = Option(None, "--rows", min=1, help="Number of training rows, when the config does not say."),
    launch: Optional[List[Path]] = Option(None, "--launch", metavar="FILE", help="An accelerate config or DeepSpeed JSON the run is started with (repeat for several): GPUs, sharding, offload and mixed precision come from it."),
    no_project: bool = Option(False, "--no-project", help="Ignore project files (hardware profiles, rule selection, waivers)."),
) -> None:
    """Rewrite the values rules can fix, in place, keeping every other byte; each rewrite is proven first."""
    from . import api
    from .findings import printable
    from .render.fixes import summary_text

    try:
        report = api.fix(paths, training=training, halve_batch=halve_batch,
                         write=not (diff or no_write), project=None if no_project else "auto",
                         gpu=gpu, gpus=gpus, rows=rows, launch=launch or None)
    except _input_errors() as exc:  # an unknown GPU name, a bad project file
        _fail(_input_message(exc), api.EXIT_INPUT)
    if diff:
        sys.stdout.write("".join(f.diff() for f in report.files))
    summary = summary_text(report, dry=diff or no_write)
    (sys.stderr if diff else sys.stdout).write(summary)
    raise SystemExit(api.fix_exit_code(report, no_write=no_write))


def _emit(stream, out: str, *, flush: bool = True) -> None:
    """Write OUT to STREAM, escaping what its encoding cannot show (odd file names, lone
    surrogates). STREAM is passed at the call: the run being recorded may have replaced it."""
    try:
        stream.write(out)
    except UnicodeEncodeError:
        stream.flush()
        stream.buffer.write(out.encode(stream.encoding or "utf-8", errors="backslashreplace"))
    if flush:
        stream.flush()


def _write_err(out: str) -> None:
    """Like _write, on stderr."""
    _emit(sys.stderr, out)


def _write(out: str) -> None:
    """Print, escaping what the terminal's encoding cannot show."""
    _emit(sys.stdout, out)


@commands.command("report")
@_crash_boundary
def report_html(
    paths: List[Path] = Argument(..., help="Config files or folders."),
    out: Path = Option(Path("cfgcheck-report.html"), "--out", "-o", help="The HTML file to write."),
    gpu: Optional[str] = Option(None, "--gpu", autocompletion=_complete_gpu, help="The GPU the run will use (see: cfgcheck gpus)."),
    gpus: Optional[int] = Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = Option(None, "--rows", min=1, help="Number of training rows, when the config does not say."),
    launch: Optional[List[Path]] = Option(None, "--launch", metavar="FILE", help="An accelerate config or DeepSpeed JSON the run is started with (repeat for several)."),
    no_project: bool = Option(False, "--no-project", help="Ignore project files."),
) -> None:
    """Write one self-contained HTML file: each config's findings, its derived run and two pictures."""
    import os
    import tempfile

    from . import api
    from .render.html import render_report

    project = None if no_project else "auto"
    try:
        report = api.lint(paths, project=project, gpu=gpu, gpus=gpus, rows=rows, launch=launch or None)
        runs = api.derive(paths, project=project, gpu=gpu, gpus=gpus, rows=rows, launch=launch or None).runs
    except _input_errors() as exc:  # an unknown GPU name, a bad project or baseline file
        _fail(_input_message(exc), api.EXIT_INPUT)
    page = render_report(report, runs)
    target = out.resolve()
    try:
        fd, tmp = tempfile.mkstemp(prefix=".cfgcheck-report-", suffix=".tmp", dir=str(target.parent))
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(page)
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)  # as a plain new file would be (mkstemp makes it 0600)
        os.replace(tmp, target)
    except OSError as exc:
        _fail(f"cfgcheck: cannot write {out}: {exc.strerror or exc}", api.EXIT_INPUT)
    typer.echo(f"cfgcheck: wrote {out} ({report.linted} configs, {len(report.findings)} findings)", err=True)
    raise typer.Exit(api.EXIT_INPUT if report.problems else
                     api.EXIT_INTERNAL if report.internal else api.EXIT_CLEAN)


@commands.command("editor-server")
def editor_server() -> None:
    """Run the language server for editors over stdio (findings as you type, fixes, hover, completion)."""
    try:
        import lsprotocol  # noqa: F401
        import pygls  # noqa: F401
    except ImportError:
        _fail("cfgcheck: the editor server needs pygls: pip install 'cfgcheck[editor]'", 2)
    from .editor import serve

    serve()


@commands.command("rules")
def list_rules() -> None:
    """List every rule in the catalogue with its default severity, summary and first source."""
    from .catalogue import load_catalogue

    rules = load_catalogue()
    width = max(len(r) for r in rules)
    for rule in rules.values():
        typer.echo(f"{rule.id:<{width}}  {rule.severity.word:<7}  {rule.summary}")
        typer.echo(f"{'':<{width}}  source: {rule.sources[0]}"
                   + (f" (+{len(rule.sources) - 1} more: cfgcheck describe {rule.id})"
                      if len(rule.sources) > 1 else ""))


def _describe_layouts(names: list[str]) -> None:
    from .layouts import BY_NAME, UNREAD_FORMATS, layout_summary

    for name in names:
        s = layout_summary(BY_NAME[name])
        typer.echo(f"{s['name']}: {s['title']}\n  recognised by: {s['recognised']}\n"
                   f"  sections: {s['sections']}\n  reads: {s['reads']}\n  does not read: {s['not_read']}\n")
    if len(names) > 1:
        typer.echo("Recognised but not read (not a format cfgcheck reads (yet)):")
        for fmt in UNREAD_FORMATS:
            typer.echo(f"  {fmt.name}: {fmt.title}")


@commands.command()
def describe(rule_id: str = Argument(..., help="A rule id from `cfgcheck rules`, a layout name, or `layouts` for every layout.")) -> None:
    """Show one rule's catalogue entry (why, thresholds, sources, examples), or what a layout reads."""
    import difflib

    from .catalogue import load_catalogue
    from .layouts import BY_NAME, LAYOUTS

    if rule_id == "layouts" or rule_id in BY_NAME:
        _describe_layouts([lay.name for lay in LAYOUTS] if rule_id == "layouts" else [rule_id])
        return
    rules = load_catalogue()
    rule = rules.get(rule_id)
    if rule is None:
        near = difflib.get_close_matches(rule_id, list(rules), n=3, cutoff=0.3)
        typer.echo(f"cfgcheck: no rule {rule_id!r}" + (f"; did you mean {', '.join(near)}?" if near else ""), err=True)
        raise typer.Exit(2)
    typer.echo(f"{rule.id} ({rule.severity.word})\n  {rule.summary}\n")
    typer.echo("Why:\n  " + rule.rationale.replace("\n", "\n  ") + "\n")
    if rule.thresholds:
        typer.echo("Thresholds:")
        for name, t in rule.thresholds.items():
            value = t.get("value") if isinstance(t, dict) else t
            source = t.get("source") if isinstance(t, dict) else None
            typer.echo(f"  {name}: {value}" + (f"\n    source: {source}" if source else ""))
        typer.echo("")
    typer.echo("Sources:")
    for s in rule.sources:
        typer.echo(f"  - {s}")
    if rule.fix:
        typer.echo(f"\nFix ({rule.fix.get('tier')}): {rule.fix.get('summary')}")
    for kind in ("bad", "good"):
        for ex in rule.examples.get(kind, []):
            typer.echo(f"\nExample ({kind}):")
            typer.echo("  " + ex["text"].rstrip("\n").replace("\n", "\n  "))


@commands.command()
def schema(
    layout: Optional[str] = Option(None, "--layout", help="A schema for config files of this layout (trainer, axolotl, llama-factory, torchtune, accelerate, deepspeed, peft-adapter, ...) instead of the typed view."),
) -> None:
    """Print the JSON Schema of the typed view (or of one layout's config files) for editors."""
    from . import schema as schemamod

    if layout is None:
        sys.stdout.write(schemamod.dumps(schemamod.view_schema()))
        return
    if layout not in schemamod.layout_names():
        typer.echo(f"cfgcheck: no layout {layout!r}; known: {', '.join(schemamod.layout_names())}", err=True)
        raise typer.Exit(2)
    sys.stdout.write(schemamod.dumps(schemamod.layout_schema(layout)))


def _project_here():
    """The project configuration found from the working folder, or None (a broken one is reported)."""
    from . import project as projectmod

    try:
        found = projectmod.find_file(None)
        return projectmod.load(found) if found else None
    except projectmod.ProjectError as exc:
        for f, line, col, reason in exc.problems:
            typer.echo(f"{f}:{line}:{col}: project config: {reason}", err=True)
        raise typer.Exit(2)


@commands.command()
def gpus() -> None:
    """List the GPU names --gpu accepts, with compute capability, memory and where each entry comes from."""
    from .knowledge.hardware import ALIASES, GPUS

    proj = _project_here()
    declared = list(proj.gpu_types.values()) if proj else []
    for g in [*declared, *GPUS.values()]:
        aliases = sorted(a for a, t in ALIASES.items() if t == g.name) if g not in declared else []
        extra = f"  (also: {', '.join(aliases)})" if aliases else ""
        typer.echo(f"{g.name:<10} {g.label:<18} cc {g.capability_text:<5} {g.memory_gb:>4.0f} GB{extra}  [{g.source}]")


@commands.command()
def models(
    family: Optional[str] = Option(None, "--family", help="Only this model family (transformers model_type)."),
    ids: bool = Option(False, "--ids", help="Also list every other id that names the same shape."),
    modules: bool = Option(False, "--modules", help="Also list the module names LoRA can target, per layer."),
) -> None:
    """List the models known offline: the project's own, then the bundled catalogue, with their sources."""
    from .knowledge.models import catalogue_entries, linear_modules, total_parameters

    def size(n: int) -> str:
        return f"{n / 1e9:.2f}B" if n >= 1e9 else f"{n / 1e6:.0f}M"

    proj = _project_here()
    for ref, arch in (proj.models if proj else ()):
        if family and arch.family != family:
            continue
        typer.echo(f"{ref:<46} {arch.family:<12} {size(total_parameters(arch)):>8}  "
                   f"context {arch.max_position_embeddings or '-'}  [{arch.source}]")
    for e in catalogue_entries():
        a = e.arch
        if family and a.family != family:
            continue
        moe = f", {a.num_experts} experts / {a.experts_per_token} active" if a.is_moe else ""
        published = (f"; published {size(e.published_total)}: {e.published_source}" if e.published_total
                     else f"; {e.published_source}" if e.published_source else "")
        typer.echo(f"{e.id:<46} {a.family:<12} {size(total_parameters(a)):>8}  context {a.max_position_embeddings}"
                   f"{moe}  {a.torch_dtype}  [shapes: {e.source}{published}]")
        if ids and e.aliases:
            typer.echo(f"{'':<4}also: {', '.join(e.aliases)}")
        if modules:
            typer.echo(f"{'':<4}modules: {', '.join(linear_modules(a))}")


@functools.lru_cache(maxsize=None)
def _app():
    return typer_app(commands)


def __getattr__(name: str):
    if name == "app":  # typer's app (tests, completion): made on first use
        return _app()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def main() -> None:
    from .fastcli import direct_arguments
    from .memo import scope

    with scope():  # one command is one run: a folder's surroundings are looked up once
        argv = sys.argv[1:]
        # plain `lint`, `derive` and `fix` lines skip typer
        command = {"lint": lint, "derive": derive, "fix": fix}.get(argv[0] if argv else "")
        kwargs = direct_arguments(argv, argv[0], command) if command is not None else None
        if kwargs is not None:
            try:
                command(**kwargs)  # ends in SystemExit with the exit status
            except Exception as exc:
                if not _typer_way_out(exc):
                    raise
                sys.exit(getattr(exc, "exit_code", 1))  # a typer.Exit raised on this path too
            sys.exit(0)
        _app()()


if __name__ == "__main__":
    main()
