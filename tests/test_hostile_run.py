"""Hostile input around the files themselves: project globs and project files, linked DeepSpeed
paths, baselines, names and keys that hold line breaks or bytes that are not UTF-8, numbers past
any run's range, and the crash boundary that keeps a bug on one file from hiding the others.

Every case ends in a clear line (input error: exit 2; a bug of ours: exit 3), never a traceback,
and the other files' findings stay. Subprocess timeouts are hang guards, not speed checks.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cfgcheck import api, baseline as baselinemod, engine, findings, project as projectmod
from cfgcheck.engine import Options
from cfgcheck.findings import MAX_MAGNITUDE, printable
from cfgcheck.knowledge.hardware import find_gpu
from cfgcheck.load import load_text
from cfgcheck.project import ProjectError, compile_glob
from cfgcheck.view import build_view

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT))

LORA = "model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-5\n"  # lr x scale 1e-5: below the published recipes


def cli(*args: str, cwd: Path = ROOT, code: str | None = None) -> subprocess.CompletedProcess:
    """``cfgcheck ARGS``; ``code`` runs first in the same process (to inject a failure)."""
    prog = (code or "") + "\nimport sys\nfrom cfgcheck.cli import main\nsys.argv = ['cfgcheck', *sys.argv[1:]]\nmain()\n"
    return subprocess.run([sys.executable, "-c", prog, *args], capture_output=True, cwd=cwd,
                          env=ENV, timeout=120)  # timeout: a hang guard


def text_of(result: subprocess.CompletedProcess) -> str:
    return (result.stdout + result.stderr).decode("utf-8", "backslashreplace")


def no_traceback(result: subprocess.CompletedProcess) -> None:
    out = text_of(result)
    assert "Traceback" not in out and "Warning:" not in out, out


# --------------------------------------------------------------------------- project globs

def _reference_regex(pattern: str) -> re.Pattern:
    """The documented glob meaning written as a regular expression (fine for short patterns;
    the backtracking it allows is why cfgcheck does not match this way)."""
    out, i = "", 0
    while i < len(pattern):
        if pattern.startswith("**/", i):
            out, i = out + "(?:.*/)?", i + 3
        elif pattern.startswith("**", i):
            out, i = out + ".*", i + 2
        elif pattern[i] == "*":
            out, i = out + "[^/]*", i + 1
        elif pattern[i] == "?":
            out, i = out + "[^/]", i + 1
        else:
            out, i = out + re.escape(pattern[i]), i + 1
    if pattern.endswith("/"):
        out += ".*"
    return re.compile(out + r"\Z")


@settings(max_examples=300, deadline=None)
@given(st.text("ab/*?", max_size=8), st.text("ab/", max_size=8))
def test_glob_matches_what_its_documented_meaning_matches(pattern, path):
    assert compile_glob(pattern).match(path) == bool(_reference_regex(pattern).match(path))


@pytest.mark.parametrize("pattern,path,hit", [
    ("[[:alpha:]]x.yaml", "bx.yaml", True), ("[[:alpha:]]x.yaml", "1x.yaml", False),
    ("[!a-c].yaml", "d.yaml", True), ("[!a-c].yaml", "b.yaml", False),
    ("[^a-c].yaml", "b.yaml", False), ("[]x].yaml", "].yaml", True),
    ("runs/**/*.json", "runs/a/b/c.json", True), ("runs/**/*.json", "runs/c.json", True),
    ("runs/**/*.json", "runsx/c.json", False), ("runs/t4/", "runs/t4/a/b.yaml", True),
])
def test_glob_sets_and_folders(pattern, path, hit):
    assert compile_glob(pattern).match(path) is hit


def test_glob_of_many_double_stars_finishes(tmp_path):
    # each "**a" can match a run of a's in many ways: a backtracking matcher takes exponential
    # time on a long name of a's that does not end in c
    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text('configs: ["' + "**a" * 12 + '**c.yaml"]\n')
    (tmp_path / ("a" * 60 + "b.yaml")).write_text(LORA)
    (tmp_path / "runs").mkdir()
    (tmp_path / "runs" / ("a" * 30 + "c.yaml")).write_text(LORA)
    assert compile_glob("**a" * 12 + "**c").match("a" * 400 + "b") is False
    assert compile_glob("**a" * 12 + "**c").match("a" * 400 + "c") is True
    result = cli("lint", "-q", cwd=tmp_path)
    no_traceback(result)
    lines = text_of(result).splitlines()
    assert result.returncode == 1 and lines and all(("a" * 30 + "c.yaml") in ln for ln in lines)


# --------------------------------------------------------------------------- project files

@pytest.mark.parametrize("text,where,words", [
    ('configs: ["[z-a].yaml"]\n', (1, 11), "runs backwards"),
    ('configs: ["[[:alpha:]].yaml", "[[:nope:]]"]\n', (1, 31), "unknown character class [:nope:]"),
    ('configs: ["[ab"]\n', (1, 11), "not closed"),
    ("1: a\nfoo: b\n", (1, 1), "unknown key 1"),
    ('profiles:\n  - paths: "[b-a]"\n    gpu: t4\n', (2, 12), "profiles[0].paths"),
    ("waive:\n  - rule: lora-scale-below-one\n    files: ['[x']\n    reason: r\n", (3, 13), "not closed"),
    ("severity: {1: error}\n", (1, 11), "severity"),
    ("configs: ['" + "x" * 1500 + "']\n", (1, 11), "the limit is 1,000"),
])
def test_invalid_project_file_gives_positioned_lines(tmp_path, text, where, words):
    path = tmp_path / "cfgcheck.yaml"
    path.write_text(text)
    with pytest.raises(ProjectError) as info:
        projectmod.load(path)
    assert any((p[1], p[2]) == where and words in p[3] for p in info.value.problems), info.value.problems
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(LORA)
    result = subprocess.run([sys.executable, "-W", "error", "-m", "cfgcheck", "lint"],
                            capture_output=True, cwd=tmp_path, env=ENV, timeout=120)
    no_traceback(result)
    assert result.returncode == 2
    assert all(": project config: " in ln for ln in result.stderr.decode().splitlines()), result.stderr


def test_project_file_that_is_a_fifo_or_a_device_is_not_read(tmp_path):
    fifo = tmp_path / "fifo.yaml"
    os.mkfifo(fifo)  # opening it would block until a writer comes
    zero = tmp_path / "zero.yaml"
    zero.symlink_to("/dev/zero")  # endless bytes
    for path in (fifo, zero):
        with pytest.raises(ProjectError, match="not a regular file"):
            projectmod.load(path)
    (tmp_path / "run.yaml").write_text(LORA)
    result = cli("lint", "--project", str(fifo), str(tmp_path / "run.yaml"))
    no_traceback(result)
    assert result.returncode == 2 and b"project config: cannot read" in result.stderr


# --------------------------------------------------------------------------- linked DeepSpeed paths

HOSTILE_LINKS = {
    "a name too long for the file system": ("deepspeed: " + "x" * 300 + ".json\n", "too long"),
    "a user that does not exist": ("deepspeed: ~nosuchuser-cfgcheck/ds.json\n", "no user 'nosuchuser-cfgcheck'"),
    "a NUL character": ('deepspeed: "ds\\0.json"\n', "NUL character"),
}


def _pair(tmp_path: Path, body: str) -> tuple[Path, Path]:
    good = tmp_path / "good.yaml"
    good.write_text(LORA)
    bad = tmp_path / "linked.yaml"
    bad.write_text("learning_rate: 2.0e-4\nper_device_train_batch_size: 4\n" + body)
    return good, bad


def _reported(report: findings.Report, file: Path, words: str) -> None:
    assert report.internal == [] and report.problems == []
    mine = [f for f in report.findings if f.file == str(file)]
    assert any(f.rule == "deepspeed-file-contradicts-config" and words in f.message for f in mine), \
        [f.message for f in mine]
    others = [f.rule for f in report.findings if f.file != str(file)]
    assert "lora-scale-below-one" in others  # the other file's finding stays (alpha 8 < r 16)


def test_deepspeed_path_to_a_fifo_or_a_device_is_not_opened(tmp_path):
    os.mkfifo(tmp_path / "pipe.json")  # opening it would block until a writer comes
    (tmp_path / "zero.json").symlink_to("/dev/zero")  # endless bytes
    for target in ("pipe.json", "zero.json"):
        good, bad = _pair(tmp_path, f"deepspeed: {target}\n")
        _reported(engine.lint_paths([good, bad], Options()), bad, "not a regular file")


@pytest.mark.parametrize("case", sorted(HOSTILE_LINKS))
@pytest.mark.parametrize("jobs", [1, 2])
def test_hostile_deepspeed_path_is_reported_for_its_file(tmp_path, case, jobs):
    body, words = HOSTILE_LINKS[case]
    good, bad = _pair(tmp_path, body)
    report = engine.lint_paths([good, bad], Options(), jobs=jobs)
    _reported(report, bad, words)


def test_hostile_accelerate_deepspeed_file_is_reported(tmp_path):
    good = tmp_path / "good.yaml"
    good.write_text(LORA)
    acc = tmp_path / "launch.yaml"
    acc.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 2\n"
                   "deepspeed_config:\n  deepspeed_config_file: ~nosuchuser-cfgcheck/ds.json\n")
    report = engine.lint_paths([good, acc], Options())
    _reported(report, acc, "no user")


def test_deepspeed_path_in_a_folder_that_cannot_be_searched(tmp_path, monkeypatch):
    good, bad = _pair(tmp_path, "deepspeed: locked/ds.json\n")
    (tmp_path / "locked").mkdir()
    (tmp_path / "locked" / "ds.json").write_text("{}")
    real = Path.is_file

    def refusing(self):  # what stat() says under a folder without search permission (root is exempt)
        if self.parent.name == "locked":
            raise PermissionError(13, "Permission denied", str(self))
        return real(self)

    monkeypatch.setattr(Path, "is_file", refusing)
    report = engine.lint_paths([good, bad], Options())
    _reported(report, bad, "Permission denied")


@pytest.mark.parametrize("case", sorted(HOSTILE_LINKS))
def test_fix_goes_on_past_a_hostile_deepspeed_path(tmp_path, case):
    good, bad = _pair(tmp_path, HOSTILE_LINKS[case][0])
    before = bad.read_bytes()
    report = api.fix([good, bad], project=None, training=True)
    assert report.errors == [] and report.problems == []
    assert api.fix_exit_code(report) == api.EXIT_CLEAN
    assert bad.read_bytes() == before  # nothing there to fix
    assert b"lora_alpha: 16" in good.read_bytes()  # the other file was fixed (alpha = r: scale alpha/r = 1)


# --------------------------------------------------------------------------- baselines

def _bad_baselines(tmp_path: Path) -> dict[str, Path]:
    out = {}
    for name, text in {
        "findings is a number": '{"kind": "cfgcheck-baseline", "version": 1, "findings": 5}',
        "nested 100,000 deep": '{"kind": "cfgcheck-baseline", "version": 1, "findings": '
                               + "[" * 100_000 + "]" * 100_000 + "}",
        "a row that is a text": '{"kind": "cfgcheck-baseline", "version": 1, "findings": ["x"]}',
        "a rule that is a mapping": '{"kind": "cfgcheck-baseline", "version": 1, "findings": '
                                    '[{"rule": {}, "file": "a", "key": "k", "values": {}}]}',
        "a huge version": '{"kind": "cfgcheck-baseline", "version": ' + "9" * 4000 + "}",
        "an integer too long to read": '{"kind": "cfgcheck-baseline", "version": ' + "9" * 5000 + "}",
        "not UTF-8": b'{"kind": "\xff"}',
    }.items():
        p = tmp_path / f"{len(out)}.json"
        p.write_bytes(text if isinstance(text, bytes) else text.encode())
        out[name] = p
    fifo = tmp_path / "fifo.json"
    os.mkfifo(fifo)
    out["a FIFO"] = fifo  # opening it would block until a writer comes
    zero = tmp_path / "zero.json"
    zero.symlink_to("/dev/zero")  # endless bytes
    out["a link to /dev/zero"] = zero
    return out


def test_hostile_baseline_is_an_input_error(tmp_path):
    for name, path in _bad_baselines(tmp_path).items():
        with pytest.raises(baselinemod.BaselineError) as info:
            baselinemod.load(path)
        assert "\n" not in str(info.value), name
        assert re.match(r".+:\d+:\d+: baseline: \S", str(info.value)), (name, str(info.value))


@pytest.mark.parametrize("which", ["a FIFO", "nested 100,000 deep", "findings is a number"])
def test_hostile_baseline_on_the_command_line(tmp_path, which):
    path = _bad_baselines(tmp_path)[which]
    (tmp_path / "run.yaml").write_text(LORA)
    result = cli("lint", "--no-project", "--baseline", str(path), str(tmp_path / "run.yaml"))
    no_traceback(result)
    assert result.returncode == 2 and b": baseline: " in result.stderr


def test_baseline_nested_past_the_limit_is_refused_where_it_goes_too_deep(tmp_path):
    path = tmp_path / "b.json"
    path.write_text('{"kind": "cfgcheck-baseline",\n "x": ' + "[" * 40 + "]" * 40 + "}")
    with pytest.raises(baselinemod.BaselineError) as info:
        baselinemod.load(path)
    # the opening brace is level 1, so the 16th "[" (column 7 + 15 on line 2) is level 17
    assert (info.value.line, info.value.column) == (2, 7 + 15)


def test_baseline_that_cannot_be_written_is_an_input_error(tmp_path):
    (tmp_path / "run.yaml").write_text(LORA)
    (tmp_path / "out.json").mkdir()  # a folder where the file should go
    result = cli("lint", "--no-project", "--save-baseline", str(tmp_path / "out.json"),
                 str(tmp_path / "run.yaml"))
    no_traceback(result)
    assert result.returncode == 2 and b"cannot write" in result.stderr
    assert list(tmp_path.glob("*.tmp")) == []


# --------------------------------------------------------------------------- names and keys

SURROGATE_KEY = '{"learning_rate": 2e-4, "lora_\\ud800x": 1, "per_device_train_batch_size": 4}'


def _odd_folder(tmp_path: Path) -> Path:
    folder = tmp_path / "cfg"
    folder.mkdir()
    (folder / os.fsdecode(b"caf\xe9.yaml")).write_text(LORA)  # a Latin-1 name on a UTF-8 file system
    (folder / "keys.json").write_text(SURROGATE_KEY)
    return folder


@pytest.mark.parametrize("fmt", ["text", "json", "sarif", "github"])
def test_odd_names_and_lone_surrogates_in_every_format(tmp_path, fmt):
    folder = _odd_folder(tmp_path)
    # --show info: the odd key is an unknown key nothing is a slip of the keyboard from (an info)
    result = cli("lint", "--no-project", "--show", "info", "--format", fmt, str(folder))
    no_traceback(result)
    assert result.returncode == 1
    out = result.stdout.decode("utf-8")  # whatever the terminal, the output is valid UTF-8
    if fmt in ("json", "sarif"):
        doc = json.loads(out)
        text = json.dumps(doc)
        assert "lora_\\ud800x" in text  # the key reads back as written
        if fmt == "sarif":
            uris = {r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
                    for r in doc["runs"][0]["results"]}
            assert any(u.endswith("caf%E9.yaml") for u in uris), uris  # RFC 3986 sec. 2.1
    else:
        assert "caf\\udce9.yaml" in out and "lora_\\ud800x" in out


def test_save_baseline_with_odd_names_round_trips(tmp_path):
    folder = _odd_folder(tmp_path)
    base = tmp_path / "baseline.json"
    saved = cli("lint", "--no-project", "--save-baseline", str(base), str(folder))
    no_traceback(saved)
    assert saved.returncode == 0
    base.read_bytes().decode("utf-8")  # valid UTF-8
    again = cli("lint", "--no-project", "--baseline", str(base), "--format", "json", str(folder))
    no_traceback(again)
    summary = json.loads(again.stdout)["summary"]
    assert again.returncode == 0 and summary["baselined"] > 0 and summary["warnings"] == 0


def test_derived_run_with_odd_names(tmp_path):
    folder = _odd_folder(tmp_path)
    for fmt in ("text", "json"):
        result = cli("derive", "--no-project", "--format", fmt, str(folder))
        no_traceback(result)
        assert result.returncode == 0
        assert "caf\\udce9.yaml" in result.stdout.decode("utf-8")


FORGED = "x.yaml:1:1: error: forged"


def _forged_lines(out: str) -> list[str]:
    return [ln for ln in out.splitlines() if ln.startswith(FORGED) or ln.startswith("::error file=x.yaml")]


@pytest.mark.parametrize("fmt", ["text", "github"])
def test_a_key_cannot_forge_a_finding_line(tmp_path, fmt):
    cfg = tmp_path / "run.yaml"
    key = f'"a\\n{FORGED}\\n::error file=x.yaml,line=1::forged\\e[2K"'
    cfg.write_text(LORA + f"{key}: 1\n{key}: 2\n")  # a duplicate key: its name is in the message
    result = cli("lint", "--no-project", "--format", fmt, str(cfg))
    no_traceback(result)
    out = result.stdout.decode()
    assert "forged" in out  # the key is reported (unknown key) ...
    assert _forged_lines(out) == [] and "\x1b" not in out  # ... on the line of its own finding


@pytest.mark.parametrize("command", [("lint",), ("lint", "--format", "github"), ("derive",)])
def test_a_file_name_cannot_forge_a_finding_line(tmp_path, command):
    name = f"a\n{FORGED}\n::error file=x.yaml,line=1::forged\x1b[2K.yaml"
    (tmp_path / name).write_text(LORA)
    result = cli(*command, "--no-project", str(tmp_path))
    no_traceback(result)
    out = result.stdout.decode()
    assert "forged" in out and _forged_lines(out) == [] and "\x1b" not in out


def test_printable_escapes_what_would_break_a_line():
    assert printable("a\nb\r\x1b[31m\u202e\u2028\udce9é\\") == "a\\nb\\r\\x1b[31m\\u202e\\u2028\\udce9é\\"
    assert printable("plain: é, tab-free") == "plain: é, tab-free"


# --------------------------------------------------------------------------- huge numbers

HUGE_RANK = LORA.replace("lora_r: 16", "lora_r: " + "9" * 400)
BASE60 = LORA.replace("learning_rate: 2.0e-5", "learning_rate: 2.0e-5\nper_device_train_batch_size: "
                      + ":".join(["59"] * 3000))


@pytest.mark.parametrize("text,key", [(HUGE_RANK, "lora_r"), (BASE60, "per_device_train_batch_size")])
def test_huge_number_is_out_of_range_and_no_rule_fails(text, key):
    report = engine.lint_text(text, "run.yaml", Options(gpu=find_gpu("a100-80gb"), rows=1000))
    assert report.internal == []
    hits = [f for f in report.findings if f.rule == "value-outside-schema" and f.key == key]
    assert len(hits) == 1 and "-digit number" in hits[0].message
    from cfgcheck.render import render

    for fmt in ("json", "sarif"):
        json.loads(render(fmt, findings.Report(files=[report]), report.findings))


def test_base60_number_is_shown_short_in_its_own_finding():
    report = engine.lint_text(BASE60, "run.yaml", Options())
    hit = [f for f in report.findings if f.rule == "yaml-version-dependent-value"
           and f.key == "per_device_train_batch_size"]
    assert len(hit) == 1 and "-digit number" in hit[0].message


def test_the_range_ends_at_two_to_the_53():
    # IEEE 754 binary64 holds every integer up to 2**53 exactly
    for name, key, value, usable in (
            ("optim.max_steps", "max_steps", MAX_MAGNITUDE, True),
            ("optim.max_steps", "max_steps", MAX_MAGNITUDE + 1, False),
            ("optim.max_steps", "max_steps", -(MAX_MAGNITUDE + 1), False),
            ("optim.grad_clip", "max_grad_norm", 1.0e+300, False),
            ("optim.grad_clip", "max_grad_norm", 1.0e+15, True)):
        view = build_view(load_text(f"learning_rate: 2.0e-4\n{key}: {value}\n", "r.yaml")[0])
        f = view.get(name)
        assert (f.value is not None) is usable, value
        assert (f in view.out_of_range) is not usable


def test_derived_run_of_a_huge_rank(tmp_path):
    (tmp_path / "run.yaml").write_text(HUGE_RANK)
    result = api.derive([tmp_path / "run.yaml"], project=None, gpu="a100-80gb", rows=1000)
    assert result.internal == [] and len(result.runs) == 1
    out = cli("derive", "--no-project", str(tmp_path / "run.yaml"))
    no_traceback(out)
    assert out.returncode == 0
    (tmp_path / "b60.yaml").write_text(BASE60)
    plan = api.derive([tmp_path / "b60.yaml"], project=None).runs[0][1]
    assert "batch.per_device out of range, set aside: the trainer default" in plan.assumptions


# --------------------------------------------------------------------------- hints

@pytest.mark.parametrize("text,key,word", [
    ("learning_rate: 2.0e-4\nsave_strategy: no\n", "save_strategy", "no"),
    ("learning_rate: 2.0e-4\neval_strategy: no\n", "eval_strategy", "no"),
    ("compute_environment: LOCAL_MACHINE\ndistributed_type: NO\nnum_processes: 1\n", "distributed_type", "NO"),
    ("compute_environment: LOCAL_MACHINE\ndistributed_type: MULTI_GPU\nmixed_precision: no\n", "mixed_precision", "no"),
])
def test_hint_for_a_text_setting_says_to_quote_the_word(text, key, word):
    hit = [f for f in engine.lint_text(text, "run.yaml", Options()).findings
           if f.rule == "yaml-version-dependent-value" and f.key == key]
    assert len(hit) == 1
    assert f'"{word}"' in hit[0].hint and "false" not in hit[0].hint and "true" not in hit[0].hint
    assert hit[0].fix is None  # quoting changes what PyYAML readers get: not a meaning-keeping fix


def test_hint_for_a_boolean_setting_says_the_boolean():
    hit = [f for f in engine.lint_text("learning_rate: 2.0e-4\nbf16: yes\n", "r.yaml", Options()).findings
           if f.rule == "yaml-version-dependent-value"]
    assert hit[0].hint == "write true" and hit[0].fix.tier == "keeps-meaning"


def test_hint_for_an_untyped_setting_gives_both_and_changes_nothing():
    hit = [f for f in engine.lint_text("learning_rate: 2.0e-4\nmy_team_switch: off\n", "r.yaml", Options()).findings
           if f.rule == "yaml-version-dependent-value"]
    assert '"off" in quotes' in hit[0].hint and "false" in hit[0].hint and hit[0].fix is None


def test_accepted_words_that_yaml_reads_as_booleans_are_quoted():
    hit = [f for f in engine.lint_text("learning_rate: 2.0e-4\nsave_strategy: nope\n", "r.yaml", Options()).findings
           if f.rule == "value-outside-schema"]
    assert 'did you mean "no"?' in hit[0].hint and '"no", steps' in hit[0].hint


def test_eval_strategy_hint_quotes_no():
    text = ("model_name_or_path: acme/tiny-7b\nstage: sft\nfinetuning_type: lora\ncutoff_len: 1024\n"
            "template: default\neval_strategy: steps\neval_steps: 100\n")
    hit = [f for f in engine.lint_text(text, "r.yaml", Options()).findings
           if f.rule == "eval-strategy-without-eval-data"]
    assert 'eval_strategy: "no"' in hit[0].hint


# --------------------------------------------------------------------------- the crash boundary

def _inject(target: str, exc: str) -> str:
    """Code that makes ``module.function`` raise ``exc`` for files named a.yaml only."""
    module, func = target.rsplit(".", 1)
    return (f"import importlib\nm = importlib.import_module({module!r})\nreal = m.{func}\n"
            "def boom(*a, **k):\n"
            "    if any('a.yaml' in str(x) for x in list(a) + list(k.values())):\n"
            f"        raise {exc}('injected')\n"
            "    return real(*a, **k)\n"
            f"m.{func} = boom\n")


# (engine._apply_waivers: the engine's step after a view's rules, file by file or in a batch)
@pytest.mark.parametrize("target", ["cfgcheck.links.attach_linked", "cfgcheck.load.read_source",
                                    "cfgcheck.load.load_text", "cfgcheck.engine._apply_waivers",
                                    "cfgcheck.engine.build_view", "cfgcheck.run.open_view"])
@pytest.mark.parametrize("exc", ["ValueError", "RuntimeError", "KeyError"])
def test_a_bug_outside_the_rules_is_exit_3_and_the_other_files_stay(tmp_path, target, exc):
    (tmp_path / "a.yaml").write_text(LORA)
    (tmp_path / "b.yaml").write_text(LORA)
    for jobs in ("1", "2"):
        result = cli("lint", "--no-project", "-j", jobs, "a.yaml", "b.yaml", cwd=tmp_path,
                     code=_inject(target, exc))
        no_traceback(result)
        out = result.stdout.decode()
        assert result.returncode == 3, (target, text_of(result))
        assert "a.yaml: internal error in cfgcheck outside the rules" in out
        assert "b.yaml:4:13: warning:" in out  # the other file's finding (alpha 8 < r 16)


def test_a_bug_outside_the_rules_is_in_json_with_no_rule(tmp_path):
    (tmp_path / "a.yaml").write_text(LORA)
    result = cli("lint", "--no-project", "--format", "json", "a.yaml", cwd=tmp_path,
                 code=_inject("cfgcheck.links.attach_linked", "ValueError"))
    assert result.returncode == 3
    errors = json.loads(result.stdout)["internal_errors"]
    assert [(e["file"], e["rule"]) for e in errors] == [("a.yaml", None)]


@pytest.mark.parametrize("command", ["lint", "derive", "fix"])
def test_a_bug_in_the_command_itself_is_exit_3(tmp_path, command):
    (tmp_path / "a.yaml").write_text(LORA)
    target = {"lint": "cfgcheck.render.writer", "derive": "cfgcheck.api.derive", "fix": "cfgcheck.api.fix"}[command]
    code = (f"import cfgcheck.render, cfgcheck.api\nimport {target.rsplit('.', 1)[0]} as m\n"
            f"def boom(*a, **k): raise ValueError('injected')\nm.{target.rsplit('.', 1)[1]} = boom\n")
    result = cli(command, "--no-project", "a.yaml", cwd=tmp_path, code=code)
    no_traceback(result)
    assert result.returncode == 3 and b"cfgcheck: internal error: ValueError: injected" in result.stderr


def test_debug_lets_a_bug_outside_the_rules_through(tmp_path):
    (tmp_path / "a.yaml").write_text(LORA)
    result = cli("lint", "--no-project", "--debug", "a.yaml", cwd=tmp_path,
                 code=_inject("cfgcheck.links.attach_linked", "ValueError"))
    assert result.returncode not in (0, 2, 3) and b"Traceback" in result.stderr


@pytest.mark.parametrize("args,words", [
    (("--severity", "lora-scale-below-one=bogus"), b"unknown severity"),
    (("--gpu", "no-such-gpu"), b"no-such-gpu"),
])
def test_bad_option_values_stay_input_errors(tmp_path, args, words):
    (tmp_path / "a.yaml").write_text(LORA)
    result = cli("lint", "--no-project", *args, "a.yaml", cwd=tmp_path)
    no_traceback(result)
    assert result.returncode == 2 and words in result.stderr


@pytest.mark.parametrize("flag,value", [("--gpus", str(10 ** 400)), ("--rows", str(2 ** 54))])
def test_flag_numbers_past_the_range_are_input_errors(tmp_path, flag, value):
    (tmp_path / "a.yaml").write_text(LORA)
    for command in ("lint", "derive"):
        result = cli(command, "--no-project", "--gpu", "t4", flag, value, "a.yaml", cwd=tmp_path)
        no_traceback(result)
        assert result.returncode == 2 and b"must be a whole number from 1 to" in result.stderr


def test_flag_numbers_at_the_end_of_the_range_make_no_rule_fail():
    text = "\n".join(f"{k}: {MAX_MAGNITUDE}" for k in (
        "lora_r", "lora_alpha", "per_device_train_batch_size", "gradient_accumulation_steps",
        "max_seq_length", "num_train_epochs", "warmup_steps", "save_steps", "eval_steps"))
    text = "model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlearning_rate: 2.0e-4\n" + text + "\n"
    report = api.lint_text(text, "run.yaml", gpu="t4", gpus=MAX_MAGNITUDE, rows=MAX_MAGNITUDE)
    assert report.internal == []


def test_project_profile_numbers_past_the_range_are_refused(tmp_path):
    path = tmp_path / "cfgcheck.yaml"
    path.write_text("profiles:\n  - paths: '**'\n    gpus: " + "9" * 30 + "\n")
    with pytest.raises(ProjectError) as info:
        projectmod.load(path)
    assert [(p[1], p[2]) for p in info.value.problems] == [(3, 11)] and "maximum" in info.value.problems[0][3]
