"""Command line: the only module that reads argv, writes to the terminal or exits."""

from __future__ import annotations

import sys
from enum import Enum
from pathlib import Path
from typing import List, Optional

import typer

from . import __version__

app = typer.Typer(
    add_completion=True,
    no_args_is_help=True,
    help="cfgcheck: finds the mistakes in fine-tuning configs (LoRA, QLoRA, full, DeepSpeed) before the GPU run.",
    context_settings={"help_option_names": ["-h", "--help"]},
)


class Format(str, Enum):
    text = "text"
    json = "json"


class Level(str, Enum):
    info = "info"
    warning = "warning"
    error = "error"


def _version(value: bool) -> None:
    if value:
        typer.echo(f"cfgcheck {__version__}")
        raise typer.Exit()


@app.callback()
def main_options(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    pass


@app.command()
def lint(
    paths: List[Path] = typer.Argument(..., help="Config files or folders (YAML and JSON inside are checked)."),
    gpu: Optional[str] = typer.Option(None, "--gpu", help="The GPU the run will use, e.g. a100-80gb, t4 (see: cfgcheck gpus)."),
    gpus: Optional[int] = typer.Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = typer.Option(None, "--rows", min=1, help="Number of training rows, when the config does not say."),
    fmt: Format = typer.Option(Format.text, "--format", help="Output format."),
    show: Level = typer.Option(Level.warning, "--show", help="Lowest severity printed in text output."),
    debug: bool = typer.Option(False, "--debug", help="Re-raise an error inside a rule instead of reporting it."),
) -> None:
    """Check training configs and report what would waste the run."""
    from . import api
    from .findings import Severity
    from .knowledge.hardware import UnknownGpu
    from .render import render

    try:
        options = api.make_options(gpu=gpu, gpus=gpus, rows=rows, debug=debug)
    except UnknownGpu as exc:
        typer.echo(f"cfgcheck: {exc}", err=True)
        raise typer.Exit(api.EXIT_INPUT)
    from . import engine

    report = engine.lint_paths(paths, options)
    level = Severity.parse(show.value)
    if fmt is Format.json:
        out = render("json", report, report.findings)
    else:
        shown = api.visible(report.findings, level)
        hidden = sum(1 for f in report.findings if f.severity == Severity.INFO and f.severity < level)
        out = render("text", report, shown, hidden_info=hidden)
    sys.stdout.write(out)
    raise typer.Exit(api.exit_code(report))


@app.command()
def plan(
    paths: List[Path] = typer.Argument(..., help="Config files or folders."),
    gpu: Optional[str] = typer.Option(None, "--gpu", help="The GPU the run will use (see: cfgcheck gpus)."),
    gpus: Optional[int] = typer.Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = typer.Option(None, "--rows", min=1, help="Number of training rows."),
    fmt: Format = typer.Option(Format.text, "--format", help="Output format."),
) -> None:
    """Show the derived run: parameters, batch, steps and the memory estimate per GPU."""
    import json as _json

    from . import api
    from .knowledge.hardware import UnknownGpu

    try:
        result = api.plan(paths, gpu=gpu, gpus=gpus, rows=rows)
    except UnknownGpu as exc:
        typer.echo(f"cfgcheck: {exc}", err=True)
        raise typer.Exit(api.EXIT_INPUT)
    if fmt is Format.json:
        sys.stdout.write(_json.dumps({"plans": [dict(p.as_dict(), file=f) for f, p in result.plans],
                                      "input_errors": [e.as_dict() for e in result.problems]},
                                     indent=2) + "\n")
    else:
        from .render.plan import render_plan

        for e in result.problems:
            sys.stdout.write(f"{e.file}:{e.line}:{e.column}: input error: {e.reason}\n")
        sys.stdout.write("\n".join(render_plan(f, p) for f, p in result.plans))
    raise typer.Exit(api.EXIT_INPUT if result.problems else api.EXIT_CLEAN)


@app.command()
def fix(
    paths: List[Path] = typer.Argument(..., help="Config files or folders to fix in place."),
    diff: bool = typer.Option(False, "--diff", help="Print a unified diff of the fixes; write nothing."),
    no_write: bool = typer.Option(False, "--no-write", help="Write nothing; exit 1 when a fix would change a file (for CI and pre-commit)."),
    training: bool = typer.Option(False, "--allow-training-changes", help="Also apply fixes that change the training outcome (alpha, learning rate, precision, trainable modules, batch)."),
    halve_batch: bool = typer.Option(False, "--halve-batch", help="Halve the per-device batch and double gradient accumulation (same effective batch)."),
    gpu: Optional[str] = typer.Option(None, "--gpu", help="The GPU the run will use, e.g. a100-80gb, t4 (see: cfgcheck gpus)."),
    gpus: Optional[int] = typer.Option(None, "--gpus", min=1, help="Number of GPUs in the whole job."),
    rows: Optional[int] = typer.Option(None, "--rows", min=1, help="Number of training rows, when the config does not say."),
) -> None:
    """Rewrite the values rules can fix, in place, keeping every other byte; each rewrite is proven first."""
    from . import api
    from . import fix as fixmod
    from .knowledge.hardware import UnknownGpu

    try:
        options = api.make_options(gpu=gpu, gpus=gpus, rows=rows)
    except UnknownGpu as exc:
        typer.echo(f"cfgcheck: {exc}", err=True)
        raise typer.Exit(api.EXIT_INPUT)
    report = fixmod.fix_paths(paths, options, training=training, halve_batch=halve_batch,
                              write=not (diff or no_write))
    if diff:
        sys.stdout.write("".join(f.diff() for f in report.files))
    summary = fixmod.summary_text(report, dry=diff or no_write)
    (sys.stderr if diff else sys.stdout).write(summary)
    raise typer.Exit(api.fix_exit_code(report, no_write=no_write))


@app.command("rules")
def list_rules() -> None:
    """List every rule in the catalogue with its default severity, summary and first source."""
    from .catalogue import load_catalogue

    rules = load_catalogue()
    width = max(len(r) for r in rules)
    for rule in rules.values():
        typer.echo(f"{rule.id:<{width}}  {rule.severity.word:<7}  {rule.summary}")
        typer.echo(f"{'':<{width}}  source: {rule.sources[0]}"
                   + (f" (+{len(rule.sources) - 1} more: cfgcheck explain {rule.id})"
                      if len(rule.sources) > 1 else ""))


@app.command()
def explain(rule_id: str = typer.Argument(..., help="A rule id from `cfgcheck rules`.")) -> None:
    """Show one rule's catalogue entry: why, thresholds, sources, examples."""
    import difflib

    from .catalogue import load_catalogue

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


@app.command()
def schema(
    layout: Optional[str] = typer.Option(None, "--layout", help="A schema for config files of this layout (trainer, axolotl, llama-factory, torchtune, accelerate, deepspeed, peft-adapter, ...) instead of the typed view."),
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


@app.command()
def gpus() -> None:
    """List the GPU names --gpu accepts, with compute capability and memory."""
    from .knowledge.hardware import ALIASES, GPUS

    for g in GPUS.values():
        aliases = sorted(a for a, t in ALIASES.items() if t == g.name)
        extra = f"  (also: {', '.join(aliases)})" if aliases else ""
        typer.echo(f"{g.name:<10} {g.label:<18} cc {g.capability_text:<5} {g.memory_gb:>4.0f} GB{extra}")


def main() -> None:
    app()


if __name__ == "__main__":
    main()
