"""Terminal behaviour of the CLI: colour rules, progress on stderr, quiet and summary modes, the
code frame, the gate, rule selection flags, machine formats, and shell completion."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from cfgcheck import cli
from cfgcheck.cli import app

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"
LORA = DEMO / "harborlight-support-lora.yaml"
runner = CliRunner()


def run(*args, **kw):
    return runner.invoke(app, [str(a) for a in args], **kw)


class FakeTty(io.StringIO):
    def isatty(self):
        return True


def test_colour_only_on_a_terminal_without_no_color(monkeypatch):
    # no-color.org: NO_COLOR present and not empty disables colour, whatever its value
    monkeypatch.delenv("NO_COLOR", raising=False)
    monkeypatch.delenv("TERM", raising=False)
    assert cli.color_wanted(FakeTty()) is True
    assert cli.color_wanted(io.StringIO()) is False  # piped
    monkeypatch.setenv("NO_COLOR", "1")
    assert cli.color_wanted(FakeTty()) is False
    monkeypatch.setenv("NO_COLOR", "")
    assert cli.color_wanted(FakeTty()) is True
    monkeypatch.setenv("TERM", "dumb")
    assert cli.color_wanted(FakeTty()) is False


def test_piped_output_has_no_colour_and_no_frame():
    r = run("lint", LORA)
    assert "\x1b[" not in r.stdout and " | " not in r.stdout


def test_code_frame_on_request():
    r = run("lint", LORA, "--frame")
    lines = r.stdout.splitlines()
    i = next(i for i, l in enumerate(lines) if "[lora-scale-below-one]" in l)
    # the value at column 13, as in the finding line, is set off; the comment stays outside
    assert lines[i + 1] == "    in line 5: lora_alpha: >>8<<              # half the rank: the adapter scale is 0.5"
    assert lines[i].split(":")[1:3] == ["5", "13"]


def test_progress_on_stderr():
    out = FakeTty()
    p = cli._Progress(out)
    for i in range(1, 4):
        p(i, 3)
    assert out.getvalue() == ""  # few files: no progress line
    for i in range(1, 41):
        p(i, 40)
    p.close()
    text = out.getvalue()
    assert text.startswith("\rcfgcheck: 1/40 files") and "\rcfgcheck: 40/40 files" in text
    assert text.endswith("\r\x1b[K")


def test_quiet_and_summary():
    r = run("lint", DEMO, "--quiet")
    assert r.exit_code == 1
    assert all(l.count(":") >= 3 and "hint:" not in l for l in r.stdout.splitlines())
    assert "configs checked" not in r.stdout
    clean = run("lint", ROOT / "fixtures" / "clean", "--quiet", "--gpu", "t4", "--rows", "1000")
    assert clean.exit_code == 0 and clean.stdout == ""
    s = run("lint", DEMO, "--summary")
    assert s.exit_code == 1 and len(s.stdout.splitlines()) == 1 and s.stdout.startswith("cfgcheck: 4 configs checked")
    assert run("lint", DEMO, "--summary", "--format", "json").exit_code == 2


def test_gate():
    assert run("lint", LORA, "--gate", "error", "--only", "lora-scale-below-one").exit_code == 0
    assert run("lint", LORA, "--gate", "warning", "--only", "lora-scale-below-one").exit_code == 1
    assert run("lint", LORA, "--gate", "error", "--severity", "lora-scale-below-one=error").exit_code == 1


def test_rule_selection_flags():
    r = run("lint", LORA, "--only", "lora-scale-below-one", "--format", "json")
    assert {f["rule"] for f in json.loads(r.stdout)["findings"]} == {"lora-scale-below-one"}
    r = run("lint", LORA, "--skip", "lora-scale-below-one", "--format", "json")
    assert "lora-scale-below-one" not in {f["rule"] for f in json.loads(r.stdout)["findings"]}
    r = run("lint", LORA, "--only", "lora-scale-below-on")
    assert r.exit_code == 2 and "did you mean lora-scale-below-one" in r.output
    r = run("lint", LORA, "--severity", "lora-scale-below-one")
    assert r.exit_code == 2 and "RULE=LEVEL" in r.output
    r = run("lint", LORA, "--severity", "lora-scale-below-one=fatal")
    assert r.exit_code == 2 and "unknown severity" in r.output


def test_machine_formats_from_the_cli():
    r = run("lint", DEMO, "--format", "sarif")
    doc = json.loads(r.stdout)
    assert r.exit_code == 1 and doc["version"] == "2.1.0" and doc["runs"][0]["results"]
    r = run("lint", DEMO, "--format", "github", "--gpu", "t4")
    assert any(l.startswith("::error file=") for l in r.stdout.splitlines())


def test_shell_completion_from_typer(tmp_path):
    # click's completion protocol (which typer uses): the program name picks the variable
    env = dict(os.environ, _CFGCHECK_COMPLETE="complete_bash", COMP_WORDS="cfgcheck lint --gpu a100-4",
               COMP_CWORD="3", PYTHONPATH=str(ROOT))
    code = "import sys; sys.argv[0] = 'cfgcheck'; from cfgcheck.cli import main; main()"
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=tmp_path)
    assert p.returncode == 0, p.stderr
    assert p.stdout.split() == ["a100-40gb", "a100-40g"]
    env.update(COMP_WORDS="cfgcheck lint --only duplicate", COMP_CWORD="3")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=tmp_path)
    assert p.stdout.split() == ["duplicate-key"]
    # --show-completion detects the shell it was started from: start it from bash (the trailing
    # "true" keeps bash from replacing itself with the program), wherever the test runs
    show = subprocess.run(["bash", "-c", '"$0" -c "$1" --show-completion; true', sys.executable, code],
                          capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)),
                          cwd=tmp_path)
    assert show.returncode == 0 and "_CFGCHECK_COMPLETE" in show.stdout and "complete" in show.stdout
