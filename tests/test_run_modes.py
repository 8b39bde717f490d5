"""A rule that raises is an internal error apart from the findings; --jobs gives the serial output;
the direct start path reads a command line exactly as typer does or leaves it to typer."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from cfgcheck import api, cli, cliparams, engine, fastcli
from cfgcheck.checks import all_checks
from cfgcheck.engine import Options
from cfgcheck.findings import Severity
from cfgcheck.render import FORMATS, render

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT))
LORA = "model_name_or_path: tidewater/support-7b\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-5\n"


@pytest.fixture
def broken_rule(monkeypatch):
    checks = all_checks()

    def explode(ctx):
        raise ZeroDivisionError("boom")

    monkeypatch.setitem(checks, "global-batch-mismatch", explode)
    return "global-batch-mismatch"


def test_a_failing_rule_is_one_internal_error_and_the_others_run(broken_rule, tmp_path):
    (tmp_path / "run.yaml").write_text(LORA)
    report = engine.lint_paths([tmp_path], Options())
    assert [(e.rule, Path(e.file).name) for e in report.internal] == [(broken_rule, "run.yaml")]
    assert "ZeroDivisionError: boom" in report.internal[0].error
    warned = [f.rule for f in report.findings if f.severity >= Severity.WARNING]
    assert warned == ["lora-scale-below-one"]  # alpha 8 < r 16 at 2e-5: effective step 1e-5, below the published recipes
    assert report.problems == []
    assert api.exit_code(report) == api.EXIT_INTERNAL
    text = render("text", report, report.findings)
    assert f"internal error in rule {broken_rule}" in text and "Traceback" not in text


def test_debug_re_raises(broken_rule, tmp_path):
    (tmp_path / "run.yaml").write_text(LORA)
    with pytest.raises(ZeroDivisionError):
        engine.lint_paths([tmp_path], Options(debug=True))


def test_cli_exit_3_for_internal_error(broken_rule, tmp_path, monkeypatch, capsys):
    (tmp_path / "run.yaml").write_text(LORA)
    monkeypatch.setattr(sys, "argv", ["cfgcheck", "lint", str(tmp_path)])
    with pytest.raises(SystemExit) as info:
        cli.main()
    assert info.value.code == 3
    assert f"internal error in rule {broken_rule}" in capsys.readouterr().out


def _corpus(folder: Path) -> None:
    for i in range(40):
        if i % 7 == 3:
            (folder / f"c{i:02d}.yaml").write_text("learning_rate: [2.0e-4\n")  # broken
        elif i % 5 == 0:
            (folder / f"c{i:02d}.json").write_text(
                '{"train_batch_size": 64, "train_micro_batch_size_per_gpu": 4, '
                '"gradient_accumulation_steps": %d, "zero_optimization": {"stage": 2}}\n' % (i % 3 + 1))
        else:
            (folder / f"c{i:02d}.yaml").write_text(LORA.replace("8", str(4 + i)))


@pytest.mark.parametrize("fmt", FORMATS)
def test_jobs_output_is_identical_to_serial(tmp_path, fmt):
    _corpus(tmp_path)
    opts = api.make_options(gpus=8)
    serial = engine.lint_paths([tmp_path], opts)
    parallel = engine.lint_paths([tmp_path], opts, jobs=2)
    assert render(fmt, parallel, parallel.findings) == render(fmt, serial, serial.findings)
    assert len(serial.problems) == 6 and serial.findings  # the corpus holds both kinds


def test_cli_jobs_same_bytes_and_exit(tmp_path):
    _corpus(tmp_path)
    runs = [subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(tmp_path), *extra],
                           capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=120)
            for extra in ([], ["--jobs", "2"], ["-j", "3"], ["--jobs", "auto"])]
    assert {r.stdout for r in runs} == {runs[0].stdout}
    assert {r.returncode for r in runs} == {2}


# --------------------------------------------------------------------------- the direct start path

def test_direct_path_reads_options_like_typer():
    kw = fastcli.parse(["a.yaml", "--gpu", "t4", "--rows=1000", "-j", "2", "b.yaml", "--debug"], cli.lint)
    assert kw["paths"] == [Path("a.yaml"), Path("b.yaml")]
    assert (kw["gpu"], kw["rows"], kw["jobs"], kw["debug"]) == ("t4", 1000, "2", True)  # --jobs: N or auto
    assert kw["fmt"] is cli.Format.text and kw["show"] is None and kw["gpus"] is None
    kw = fastcli.parse(["--only", "a", "--only", "b", "--no-frame", "-q"], cli.lint)
    assert (kw["only"], kw["frame"], kw["quiet"], kw["paths"], kw["skip"]) == (["a", "b"], False, True, None, None)


def test_plain_lint_command_lines_take_the_direct_path():
    # if a new lint option uses something the direct path cannot read (a callback, an envvar...),
    # every lint start pays for typer's set-up again: teach fastcli.parse that option
    for argv in (["lint", "configs/"], ["lint"], ["lint", "a.yaml", "--format", "json", "--frame"],
                 ["lint", "a.yaml", "--no-cache"]):
        assert fastcli.direct_arguments(argv, "lint", cli.lint) is not None, argv


@pytest.mark.parametrize("argv", [
    ["--help"], ["a.yaml", "-h"], ["a.yaml", "--gpus", "0"], ["a.yaml", "--format", "xml"],
    ["a.yaml", "--no-such-option"], ["a.yaml", "--rows"], ["a.yaml", "--rows", "many"],
    ["a.yaml", "--debug=yes"], ["a.yaml", "--gpu", "t4", "--gpu", "a100"],
])
def test_direct_path_leaves_the_rest_to_typer(argv):
    with pytest.raises(fastcli._Decline):
        fastcli.parse(argv, cli.lint)
    assert fastcli.direct_arguments(["lint", *argv], "lint", cli.lint) is None


def _typer_reading(command: str) -> dict:
    """What typer's command (made from the declarations) reads: spelling -> (parameter, how,
    default, min, max, choices); the positional argument under "ARGUMENT"."""
    import enum
    import typing

    import typer.main

    group = typer.main.get_command(cli.app)
    out = {}
    for p in group.commands[command].params:
        base = p.type_descriptor.annotation
        base = (typing.get_args(base) or [base])[0]
        choices = sorted(e.value for e in base) if isinstance(base, type) and issubclass(base, enum.Enum) else None
        default = p.default.value if isinstance(p.default, enum.Enum) else p.default
        if p.param_type_name == "argument":
            default = ... if p.required else default  # a required argument, as declared
            out["ARGUMENT"] = (p.name, "list" if p.nargs == -1 else "value", default, None, None, choices)
            continue
        for spelling in p.opts:
            how = ("count" if getattr(p, "count", False) else
                   ("on" if p.secondary_opts else "flag") if p.is_flag else "list" if p.multiple else "value")
            out[spelling] = (p.name, how, default, p.min, p.max, choices)
        for spelling in p.secondary_opts:
            out[spelling] = (p.name, "off", default, p.min, p.max, choices)
    return out


def _direct_reading(fn) -> dict:
    """The same, as the direct path reads the declarations."""
    import enum

    options, argument = fastcli._spec(fn)

    def described(name, kind, info, how):
        choices = sorted(e.value for e in kind) if issubclass(kind, enum.Enum) else None
        default = info.default.value if isinstance(info.default, enum.Enum) else info.default
        low = info.settings.get("min", 0 if how == "count" else None)  # a count is never below 0
        return (name, how, default, low, info.settings.get("max"), choices)

    out = {spelling: described(*entry) for spelling, entry in options.items()}
    if argument is not None:
        out["ARGUMENT"] = described(*argument, "list")
    return out


def test_typer_and_the_direct_path_read_the_same_lint_options():
    typer_side = _typer_reading("lint")
    assert _direct_reading(cli.lint) == typer_side
    # the table holds what it should: limits, choices, flags, lists and the default format
    assert typer_side["--gpus"][3] == 1 and typer_side["--format"][5] == ["github", "json", "sarif", "text"]
    assert typer_side["--no-frame"][1] == "off" and typer_side["-q"][1] == "flag"
    assert typer_side["--only"][1] == "list" and typer_side["--format"][2] == "text"
    assert typer_side["ARGUMENT"][:3] == ("paths", "list", None)


@pytest.mark.parametrize("command", ["derive", "fix"])
def test_typer_and_the_direct_path_read_the_same_derive_and_fix_options(command):
    typer_side = _typer_reading(command)
    assert _direct_reading(getattr(cli, command)) == typer_side
    assert typer_side["ARGUMENT"][:3] == ("paths", "list", ...)
    if command == "fix":
        assert typer_side["--halve-batch"][1:3] == ("count", 0)
    else:
        assert typer_side["--no-pictures"][1] == "off" and typer_side["--format"][5] == ["json", "text"]


def test_plain_derive_and_fix_command_lines_take_the_direct_path():
    # derive and fix over a corpus would pay typer's set-up (pydantic included) on every start
    for argv in (["derive", "configs/"], ["derive", "a.yaml", "--format", "json", "--no-pictures"],
                 ["fix", "--diff", "configs/"], ["fix", "a.yaml", "--no-write", "--launch", "ds.json"]):
        assert fastcli.direct_arguments(argv, argv[0], getattr(cli, argv[0])) is not None, argv
    kw = fastcli.direct_arguments(["fix", "a.yaml", "--halve-batch", "--allow-training-changes",
                                   "--halve-batch"], "fix", cli.fix)
    assert kw["halve_batch"] == 2 and kw["training"] is True and kw["paths"] == [Path("a.yaml")]
    assert fastcli.direct_arguments(["fix", "a.yaml"], "fix", cli.fix)["halve_batch"] == 0
    for argv in (["fix", "a.yaml", "--halve-batch=2"], ["fix"], ["derive", "a.yaml", "--format", "xml"]):
        assert fastcli.direct_arguments(argv, argv[0], getattr(cli, argv[0])) is None, argv


def test_typer_receives_every_setting_of_a_declaration():
    import inspect

    from typer.models import OptionInfo

    from cfgcheck.cliparams import _typer_callable

    made = inspect.signature(_typer_callable(cli.lint)).parameters
    declared = dict(cliparams.parameters(cli.lint))
    assert list(made) == list(declared)
    for name, info in declared.items():
        if info.argument:
            continue
        option = made[name].default
        assert isinstance(option, OptionInfo) and option.default == info.default, name
        assert tuple(option.param_decls) == info.param_decls, name
        for setting, value in info.settings.items():
            assert getattr(option, setting) == value, (name, setting)


def test_other_commands_go_to_typer():
    assert fastcli.direct_arguments(["rules"], "lint", cli.lint) is None
    assert fastcli.direct_arguments(["derive", "a.yaml"], "lint", cli.lint) is None
    assert fastcli.direct_arguments([], "lint", cli.lint) is None


@pytest.mark.parametrize("args", [
    ["fixtures/demo"],
    ["fixtures/demo", "--format", "json", "--gpu", "t4", "--rows", "1000"],
    ["fixtures/demo", "--show", "info", "--gpus", "8"],
    ["fixtures/clean", "fixtures/hostile/malformed.yaml"],
    ["fixtures/demo", "--only", "lora-scale-below-one", "--only", "bf16-and-fp16-both-on", "--no-project"],
    ["fixtures/demo", "--no-frame", "-q", "--skip", "memory-exceeds-gpu"],
    ["fixtures/demo", "--format", "github", "--gate", "error", "-j", "2"],
    ["fixtures/demo", "--format", "sarif", "--no-cache"],
    ["fixtures/demo", "--jobs", "auto"],
    ["fixtures/demo", "--jobs", "0"],
])
def test_direct_path_prints_what_typer_prints(args):
    direct = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", *args], capture_output=True,
                            text=True, cwd=ROOT, env=ENV, timeout=120)
    via_typer = subprocess.run([sys.executable, "-c", "from cfgcheck.cli import app; app()", "lint",
                                *args], capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=120)
    assert (direct.returncode, direct.stdout, direct.stderr) == (
        via_typer.returncode, via_typer.stdout, via_typer.stderr)


@pytest.mark.parametrize("args", [
    ["derive", "fixtures/demo"],
    ["derive", "fixtures/demo", "--format", "json", "--gpu", "t4", "--rows", "1000"],
    ["derive", "fixtures/demo", "--no-pictures", "--gpus", "8", "--no-project"],
    ["derive", "fixtures/hostile/malformed.yaml", "fixtures/demo"],
    ["derive", "fixtures/demo", "--gpu", "no-such-card"],
    ["fix", "--diff", "fixtures/demo"],
    ["fix", "--no-write", "fixtures/demo", "--allow-training-changes", "--halve-batch", "--halve-batch"],
    ["fix", "--diff", "fixtures/demo", "--gpu", "t4", "--halve-batch", "--no-project"],
])
def test_direct_derive_and_fix_print_what_typer_prints(args):
    direct = subprocess.run([sys.executable, "-m", "cfgcheck", *args], capture_output=True,
                            text=True, cwd=ROOT, env=ENV, timeout=120)
    via_typer = subprocess.run([sys.executable, "-c", "from cfgcheck.cli import app; app()", *args],
                               capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=120)
    assert (direct.returncode, direct.stdout, direct.stderr) == (
        via_typer.returncode, via_typer.stdout, via_typer.stderr)


def test_dropping_views_keeps_every_finding(tmp_path):
    _corpus(tmp_path)
    kept = engine.lint_paths([tmp_path], Options())
    dropped = engine.lint_paths([tmp_path], Options(), keep_views=False)
    assert all(fr.views == [] for fr in dropped.files) and any(fr.views for fr in kept.files)
    assert render("json", dropped, dropped.findings) == render("json", kept, kept.findings)


def test_lint_never_imports_the_fixer_the_schema_engine_or_typers_adapters():
    code = ("import sys\nsys.argv = ['cfgcheck', 'lint', 'fixtures/demo', 'fixtures/clean']\n"
            "from cfgcheck.cli import main\ntry:\n    main()\nexcept SystemExit:\n    pass\n"
            "heavy = sorted(m for m in sys.modules if m.split('.')[0] in ('jsonschema', 'ruamel', 'pydantic')"
            " or m == 'cfgcheck.fix')\nsys.stderr.write(repr(heavy))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                         env=ENV, timeout=120)
    assert out.stderr.strip().splitlines()[-1] == "[]", out.stderr


# Modules that linting one plain YAML file (no project file, no launch script, no sweep, a GPU
# name that is known or none) has no use for; each one left out is start-up time saved.
_NOT_ON_THE_LINT_PATH = (
    "cfgcheck.fix",  # the fixer
    "cfgcheck.project",  # reading a project file: only when one is found
    "cfgcheck.baseline",  # only with --baseline / --save-baseline or a project's baseline
    "jsonschema", "ruamel", "pydantic",  # the schema engine, the round-trip reader, typer's adapters
    "tomllib",  # pyproject.toml is read only when it has a [tool.cfgcheck] table or pins
    "bashlex",  # launch scripts are parsed only when there are some
    "random",  # sampling a sweep too large to lint whole
    "typer", "click", "rich", "shellingham",  # the command line framework: fastcli reads plain lint lines
    "subprocess", "platform",  # nothing on the lint path starts a process or asks for the platform
    "cfgcheck.scripts",  # the shell reader: only when a launch script is there (scriptfiles tells)
    "cfgcheck.knowledge.chat_tokens",  # token tables: only for a file that names tokens or a template
    "traceback",  # only to record a bug
    "dataclasses", "inspect",  # records are written out by hand (cfgcheck/_records.py): no generated code
)


def test_linting_one_plain_yaml_file_imports_nothing_it_does_not_use(tmp_path):
    (tmp_path / ".git").mkdir()  # the search for a project file stops here
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-4\n"
                   "per_device_train_batch_size: 4\nnum_train_epochs: 1\nuse_peft: true\n"
                   "lora_r: 16\nlora_alpha: 32\n", encoding="utf-8")
    out = _lint_in_a_fresh_process(tmp_path, [str(cfg)], _NOT_ON_THE_LINT_PATH, ENV)
    assert out.stderr.strip().splitlines()[-1] == "loaded: [] lint: True", out.stderr


def _lint_in_a_fresh_process(cwd, args: list, names, env: dict) -> subprocess.CompletedProcess:
    """``cfgcheck lint ARGS`` in a fresh interpreter, which then writes on its last stderr line
    the modules of NAMES it loaded (a name or a package of one) and whether the lint ran."""
    code = ("import sys\n"
            f"sys.argv = ['cfgcheck', 'lint', *{args!r}]\n"
            "from cfgcheck.cli import main\ntry:\n    main()\nexcept SystemExit:\n    pass\n"
            f"names = {tuple(names)!r}\n"
            "loaded = sorted(m for m in sys.modules if m in names or m.split('.')[0] in names)\n"
            "sys.stderr.write('\\nloaded: ' + repr(loaded) + ' lint: ' + repr('cfgcheck.engine' in sys.modules))\n")
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=cwd,
                          env=env, timeout=120)


@pytest.mark.skipif(sys.platform != "linux", reason="the cache folder is worked out by hand on Linux only")
@pytest.mark.parametrize("extra, absent", [
    ([], ("platformdirs", "tempfile", "shutil")),  # the user's cache folder found without platformdirs
    # a YAML file needs no JSON reader; with the cache off nothing is hashed (hashlib loads
    # OpenSSL), and the kept tables are read with the C unpickler alone
    (["--no-cache"], ("platformdirs", "tempfile", "shutil", "json", "hashlib", "_hashlib", "pickle")),
])
def test_linting_one_yaml_file_in_the_default_cache_folder_imports_no_platform_library(tmp_path, extra, absent):
    (tmp_path / ".git").mkdir()
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-4\nlora_r: 16\n",
                   encoding="utf-8")
    env = {k: v for k, v in ENV.items() if k not in ("CFGCHECK_CACHE_DIR", "XDG_CACHE_HOME")}
    env["HOME"] = str(tmp_path / "home")
    out = _lint_in_a_fresh_process(tmp_path, [*extra, str(cfg)], absent, env)
    assert out.stderr.strip().splitlines()[-1] == "loaded: [] lint: True", out.stderr
    if not extra:  # the run used the cache folder platformdirs names
        assert (tmp_path / "home" / ".cache" / "cfgcheck").is_dir()


@pytest.mark.parametrize("command", [["derive", "--rows", "5000"], ["fix", "--diff"], ["lint", "--no-cache", "--show", "info"]])
def test_derive_fix_diff_and_a_long_lint_import_no_generated_records_nor_temporary_files(tmp_path, command):
    """derive (its pictures: a learning-rate curve and a memory bar), fix --diff (which writes
    nothing) and a lint whose text output is long enough to leave memory (render/spool.py: an
    unnamed file) import neither dataclasses/inspect nor tempfile and what it pulls in."""
    (tmp_path / ".git").mkdir()
    for i in range(150):
        (tmp_path / f"run{i:03d}.yaml").write_text(
            "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1e-4\n"
            f"per_device_train_batch_size: {1 + i % 4}\nnum_train_epochs: 1\nlora_r: 16\n"
            "lora_alpha: 32\nlr_scheduler_type: cosine\nwarmup_steps: 10\n", encoding="utf-8")
    names = ("dataclasses", "inspect", "tempfile", "shutil", "random", "typer")
    code = ("import sys\n"
            f"sys.argv = ['cfgcheck', *{command!r}, '--no-project', {str(tmp_path)!r}]\n"
            "from cfgcheck.cli import main\ntry:\n    main()\nexcept SystemExit:\n    pass\n"
            f"names = {names!r}\n"
            "loaded = sorted(m for m in sys.modules if m in names or m.split('.')[0] in names)\n"
            "sys.stderr.write('\\nloaded: ' + repr(loaded))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path,
                         env=ENV, timeout=120)
    assert out.stderr.strip().splitlines()[-1] == "loaded: []", out.stderr
    if command[0] == "derive":
        assert out.stdout.count("learning rate over ") == 150 and "not drawn" not in out.stdout
    elif command[0] == "fix":
        assert out.stdout.count("+learning_rate: 1.0e-4") == 150
    else:
        from cfgcheck.render import spool

        assert len(out.stdout) > spool.MEMORY_LIMIT  # the findings went through a file
        assert out.stdout.count("[yaml-version-dependent-value]") == 150
