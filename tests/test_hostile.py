"""Hostile and broken input: one clear input error per file (file, line, column, reason), exit 2,
the other files still linted, nothing constructed, nothing written, never a traceback.

Positions are checked against the reference readers where there is one (PyYAML's own error
marks, the standard library's json and codecs); the others were counted by hand in the fixture.
"""

from __future__ import annotations

import codecs
import hashlib
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from cfgcheck import engine, load
from cfgcheck.engine import Options

ROOT = Path(__file__).resolve().parents[1]
HOSTILE = ROOT / "fixtures" / "hostile"
CLEAN = ROOT / "fixtures" / "clean"
MARKER = Path("/tmp/cfgcheck-hostile-tag-ran")  # the path python-object-tag.yaml would touch

LINE = re.compile(r"^(?P<file>[^\n]+?):(?P<line>\d+):(?P<column>\d+): input error: (?P<reason>.+)$")


def run_cli(*args: str, cwd: Path = ROOT, timeout: int = 120) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "cfgcheck", *args], capture_output=True,
                          text=True, cwd=cwd, env=env, timeout=timeout)  # timeout: a hang guard


def problem(path: Path | str):
    report = engine.lint_file(path, Options())
    assert report.problem is not None, f"{path} was accepted"
    assert "\n" not in report.problem.reason
    return report.problem


def _yaml_mark(path: Path) -> tuple[int, int]:
    """Where PyYAML itself (the reference reader) places the error."""
    with pytest.raises(yaml.YAMLError) as info:
        yaml.safe_load(path.read_text(encoding="utf-8"))
    exc = info.value
    if isinstance(exc, yaml.reader.ReaderError):
        text = path.read_text(encoding="utf-8")
        before = text[: exc.position]
        return before.count("\n") + 1, len(before) - (before.rfind("\n") + 1) + 1
    mark = exc.problem_mark
    return mark.line + 1, mark.column + 1


def _json_mark(path: Path) -> tuple[int, int]:
    with pytest.raises(json.JSONDecodeError) as info:
        json.loads(path.read_text(encoding="utf-8"))
    return info.value.lineno, info.value.colno


# --------------------------------------------------------------------------- positions

@pytest.mark.parametrize("name,reason", [
    ("malformed.yaml", "mapping values are not allowed"),
    ("truncated.yaml", "unexpected end of stream"),
    ("control-character.yaml", "#x0007 is not allowed"),
])
def test_broken_yaml_is_placed_where_pyyaml_places_it(name, reason):
    p = problem(HOSTILE / name)
    assert reason in p.reason and p.reason.startswith("invalid YAML")
    assert (p.line, p.column) == _yaml_mark(HOSTILE / name)


@pytest.mark.parametrize("name,reason", [
    ("malformed.json", "Expecting property name"),
    ("truncated.json", "Expecting value"),
])
def test_broken_json_is_placed_where_the_json_module_places_it(name, reason):
    p = problem(HOSTILE / name)
    assert reason in p.reason and p.reason.startswith("invalid JSON")
    assert (p.line, p.column) == _json_mark(HOSTILE / name)


def test_invalid_utf8_names_the_byte_and_its_position():
    raw = (HOSTILE / "invalid-utf8.yaml").read_bytes()
    with pytest.raises(UnicodeDecodeError) as info:  # the codec is the reference for the offset
        raw.decode("utf-8")
    p = problem(HOSTILE / "invalid-utf8.yaml")
    assert f"byte 0x{raw[info.value.start]:02x} at offset {info.value.start}" in p.reason
    before = raw[: info.value.start].decode("utf-8")
    assert (p.line, p.column) == (before.count("\n") + 1, len(before.split("\n")[-1]) + 1)


@pytest.mark.parametrize("name", ["binary.yaml", "utf16-no-bom.yaml"])
def test_nul_bytes_are_refused(name):
    assert "NUL bytes" in problem(HOSTILE / name).reason


def test_alias_bomb_is_refused_past_the_documented_limit():
    p = problem(HOSTILE / "alias-bomb.yaml")
    assert f"more than {load.MAX_NODES:,} values" in p.reason
    assert p.line >= 4  # inside the aliased lists, which start on line 4 (counted by hand)


def test_alias_bomb_stays_bounded_in_memory():
    # in a fresh process, so the figure is this load's alone; 10^9 values would need many GB
    # VmHWM is this process's own peak; ru_maxrss on Linux carries the parent's over exec
    code = ("import resource, re, sys; from pathlib import Path; from cfgcheck import engine; "
            f"r = engine.lint_file({str(HOSTILE / 'alias-bomb.yaml')!r}); "
            "assert r.problem is not None; "
            "s = Path('/proc/self/status'); m = s.exists() and re.search(r'VmHWM:\\s+(\\d+)', s.read_text()); "
            "print(m.group(1) if m else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)), timeout=120, check=True)
    peak_kib = int(out.stdout.split()[-1])
    # 200,000 values with their positions: well under 512 MiB (bound chosen by us, no source)
    assert peak_kib < 512 * 1024, peak_kib


def test_alias_cycle_is_refused():
    p = problem(HOSTILE / "alias-cycle.yaml")
    assert "cycle" in p.reason and (p.line, p.column) == (2, 7)  # the anchored list, by hand


@pytest.mark.parametrize("name,where", [
    ("deep-nesting.yaml", (3, 72)),  # the 65th "[" after "extra: " (column 8 + 64), by hand
    ("deep-nesting.json", (1, 99)),  # the 65th "[" after a 34-character prefix, by hand
])
def test_deep_nesting_is_refused_at_the_first_level_too_deep(name, where):
    p = problem(HOSTILE / name)
    assert f"nested more than {load.MAX_DEPTH} levels deep" in p.reason
    assert (p.line, p.column) == where


@pytest.mark.parametrize("text", ["[" * 200_000, "- " * 200_000 + "x\n",
                                  "".join(" " * i + "k:\n" for i in range(3000))])
def test_extreme_nesting_never_reaches_a_recursion_limit(text):
    with pytest.raises(load.LoadError) as info:
        load.load_text(text, "deep.yaml")
    assert f"nested more than {load.MAX_DEPTH} levels deep" in info.value.reason


def test_extreme_json_nesting_is_an_input_error():
    with pytest.raises(load.LoadError):
        load.load_text("[" * 200_000 + "]" * 200_000, "deep.json")


def test_huge_integer_is_an_input_error_not_a_crash():
    p = problem(HOSTILE / "huge-integer.yaml")
    assert "value cannot be read" in p.reason and (p.line, p.column) == (2, 12)  # by hand


def test_huge_integer_in_json_is_an_input_error_at_the_number():
    with pytest.raises(load.LoadError) as info:
        load.load_text('{"max_steps": ' + "9" * 5000 + "}", "big.json")
    assert (info.value.line, info.value.column) == (1, 15)  # after '{"max_steps": ', by hand


def test_json_infinity_is_refused_at_the_token_not_inside_a_string():
    # found by fuzzing: the position was 1:1; Infinity and NaN are not JSON (RFC 8259 sec. 6)
    text = '{\n  "note": "NaN Infinity",\n  "steps": [\n    Infinity\n  ]\n}'
    with pytest.raises(load.LoadError) as info:
        load.load_text(text, "ds.json")
    assert "Infinity is not valid JSON" in info.value.reason
    assert (info.value.line, info.value.column) == (4, 5)  # by hand


def test_oversize_file_is_refused_without_reading_it_all(tmp_path):
    big = tmp_path / "big.yaml"
    with open(big, "wb") as fh:
        fh.write(b"learning_rate: 2.0e-4\n")
        fh.truncate(load.MAX_FILE_BYTES + 1)
    p = problem(big)
    assert f"over the {load.MAX_FILE_BYTES:,}-byte limit" in p.reason


def test_oversize_bytes_are_refused_by_decode():
    with pytest.raises(load.LoadError):
        load.decode(b"a" * (load.MAX_FILE_BYTES + 1), "x.yaml")


def test_too_many_documents_are_refused():
    with pytest.raises(load.LoadError) as info:
        load.load_text("---\na: 1\n" * (load.MAX_DOCUMENTS + 1), "many.yaml")
    assert f"more than {load.MAX_DOCUMENTS:,} documents" in info.value.reason


def test_alias_bound_holds_across_documents():
    doc = "a: &a [" + ", ".join(["x"] * 100) + "]\nb: [" + ", ".join(["*a"] * 100) + "]\n"
    # one document: about 10,000 values, accepted; 30 of them in one stream: over the bound
    assert load.load_text(doc, "one.yaml")
    with pytest.raises(load.LoadError):
        load.load_text("---\n".join([doc] * 30), "stream.yaml")


# --------------------------------------------------------------------------- accepted, never constructed

def test_object_tags_never_construct(tmp_path):
    MARKER.unlink(missing_ok=True)
    path = HOSTILE / "python-object-tag.yaml"
    with pytest.raises(yaml.constructor.ConstructorError):  # the tag is real: a safe loader refuses it
        yaml.safe_load(path.read_text())
    report = engine.lint_file(path, Options())
    result = run_cli("lint", str(path), "--format", "json")
    assert not MARKER.exists(), "a tag was acted on"
    assert report.problem is None and report.layout == "trainer"
    doc = load.load_text(path.read_text(), str(path))[0]
    assert {t for _, t in doc.tags} == {"tag:yaml.org,2002:python/object/apply:os.system",
                                        "tag:yaml.org,2002:python/object/new:os.system",
                                        "tag:yaml.org,2002:python/name:os.system"}
    assert doc.data["callbacks"] == ["touch /tmp/cfgcheck-hostile-tag-ran"]  # plain data only
    assert "Traceback" not in result.stderr


def test_utf16_with_bom_lints_like_its_utf8_twin():
    raw = (HOSTILE / "utf16-bom.yaml").read_bytes()
    assert raw.startswith(codecs.BOM_UTF16_LE)
    text = raw[2:].decode("utf-16-le")
    a = engine.lint_file(HOSTILE / "utf16-bom.yaml", Options())
    b = engine.lint_text(text, str(HOSTILE / "utf16-bom.yaml"), Options())
    assert a.problem is None
    assert [(f.rule, f.line, f.column) for f in a.findings] == [(f.rule, f.line, f.column) for f in b.findings]
    assert ("lora-scale-below-one", 4) in [(f.rule, f.line) for f in a.findings]  # alpha 8 < r 16


def test_utf8_bom_json_lints_with_positions_after_the_mark():
    r = engine.lint_file(HOSTILE / "utf8-bom.json", Options())
    assert r.problem is None and r.layout == "peft-adapter"
    hit = [f for f in r.findings if f.rule == "lora-scale-below-one"]
    assert [(f.line, f.column) for f in hit] == [(5, 17)]  # "lora_alpha": 8 on line 5, by hand


@pytest.mark.parametrize("name", ["empty.yaml", "comments-only.yaml"])
def test_empty_and_comment_only_files_are_skipped_not_errors(name):
    r = engine.lint_file(HOSTILE / name, Options())
    assert r.problem is None and r.skipped == "empty document" and r.findings == []


def test_every_document_of_a_stream_is_linted():
    r = engine.lint_file(HOSTILE / "multi-document.yaml", Options())
    hits = [(f.document, f.line) for f in r.findings if f.rule == "lora-scale-below-one"]
    assert hits == [(0, 4)]  # first document: alpha 8 < r 16 (LoRA paper scale alpha/r); second: 32


# --------------------------------------------------------------------------- the file system

def test_broken_symlink(tmp_path):
    link = tmp_path / "gone.yaml"
    link.symlink_to(tmp_path / "missing.yaml")
    assert "broken symbolic link" in problem(link).reason


def test_missing_file(tmp_path):
    assert problem(tmp_path / "nowhere.yaml").reason == "no such file"


def test_fifo_is_not_read(tmp_path):
    fifo = tmp_path / "pipe.yaml"
    os.mkfifo(fifo)
    assert "not a regular file" in problem(fifo).reason  # opening it would block forever


def test_device_behind_a_symlink_is_not_read(tmp_path):
    link = tmp_path / "zero.yaml"
    link.symlink_to("/dev/zero")  # endless bytes
    assert "not a regular file" in problem(link).reason


def test_folder_named_like_a_config(tmp_path):
    (tmp_path / "odd.yaml").mkdir()
    assert problem(tmp_path / "odd.yaml").reason == "is a folder, not a file"
    assert engine.lint_paths([tmp_path], Options()).files == []  # walked: a folder, not a config


def test_permission_error_is_mapped(tmp_path, monkeypatch):
    target = tmp_path / "locked.yaml"
    target.write_text("learning_rate: 2.0e-4\n")
    real_open = os.open

    def refusing_open(path, *a, **kw):
        if Path(path) == target:
            raise PermissionError(13, "Permission denied", str(path))
        return real_open(path, *a, **kw)

    monkeypatch.setattr("os.open", refusing_open)  # the reader opens a file as os.open does
    assert problem(target).reason == "permission denied"


def _can_run_as_nobody() -> bool:
    if os.geteuid() != 0:
        return False
    try:
        subprocess.run([sys.executable, "-c", "import cfgcheck"], user=65534, group=65534,
                       cwd="/", env=dict(os.environ, PYTHONPATH=str(ROOT)), check=True,
                       capture_output=True, timeout=60)
    except (OSError, subprocess.SubprocessError):
        return False
    return True


def test_unreadable_file_really_denied(tmp_path):
    target = tmp_path / "locked.yaml"
    target.write_text("learning_rate: 2.0e-4\n")
    target.chmod(0)
    if os.geteuid() != 0:
        assert problem(target).reason == "permission denied"
        return
    # root reads mode-000 files; run the linter as an unprivileged user where that is possible
    if not _can_run_as_nobody():
        pytest.skip("running as root (mode 000 does not stop root) and the interpreter or the "
                    "checkout is not reachable by an unprivileged user; the mapping is covered "
                    "by test_permission_error_is_mapped")
    tmp_path.chmod(0o755)
    out = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(target)], user=65534,
                         group=65534, cwd="/", capture_output=True, text=True, timeout=60,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)))
    assert out.returncode == 2 and "permission denied" in out.stdout


def test_unlistable_folder_is_reported(tmp_path, monkeypatch):
    sub = tmp_path / "configs" / "private"
    sub.mkdir(parents=True)
    (tmp_path / "configs" / "run.yaml").write_text("learning_rate: 2.0e-4\nlora_r: 16\nlora_alpha: 8\n")
    real_scandir = os.scandir

    def refusing_scandir(path="."):
        if Path(path) == sub:
            raise PermissionError(13, "Permission denied", str(path))
        return real_scandir(path)

    monkeypatch.setattr(os, "scandir", refusing_scandir)
    report = engine.lint_paths([tmp_path / "configs"], Options())
    assert [(p.file, p.reason) for p in report.problems] == [
        (str(sub), "folder cannot be listed: Permission denied")]
    assert report.linted == 1  # the readable file beside it was still checked


def test_thousands_of_files_in_a_folder(tmp_path):
    n = 3000
    for i in range(n):
        (tmp_path / f"run-{i:04d}.yaml").write_text(
            f"model_name_or_path: tidewater/support-7b\nlora_r: 16\nlora_alpha: {8 if i % 2 else 32}\n"
            "learning_rate: 2.0e-4\n")
    (tmp_path / "run-0500.yaml").write_text("learning_rate: [2.0e-4\n")  # one broken among them
    report = engine.lint_paths([tmp_path], Options())
    assert len(report.files) == n
    assert [Path(p.file).name for p in report.problems] == ["run-0500.yaml"]
    assert report.linted == n - 1
    # odd files have alpha 8 < r 16 (LoRA paper: scale alpha/r = 0.5): one warning each
    assert sum(f.rule == "lora-scale-below-one" for f in report.findings) == n // 2


def test_file_name_that_is_not_utf8_is_printed(tmp_path):
    name = os.fsdecode(b"caf\xe9.yaml")  # a Latin-1 name on a UTF-8 file system
    (tmp_path / name).write_text("learning_rate: [\n")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    result = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(tmp_path)],
                            capture_output=True, cwd=ROOT, env=env, timeout=120)
    assert result.returncode == 2 and b"Traceback" not in result.stderr
    # the name comes out as the bytes it has on disk (or escaped, where the terminal cannot)
    assert (b"caf\xe9.yaml:2:1: input error" in result.stdout
            or b"caf\\udce9.yaml:2:1: input error" in result.stdout), result.stdout


# --------------------------------------------------------------------------- the whole run

def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


@pytest.mark.parametrize("fmt", ["text", "json"])
def test_cli_reports_each_bad_file_once_and_lints_the_rest(fmt):
    before = _digest(HOSTILE)
    MARKER.unlink(missing_ok=True)
    result = run_cli("lint", "fixtures/hostile", "fixtures/clean", "--format", fmt)
    assert result.returncode == 2, result.stdout + result.stderr
    assert "Traceback" not in result.stderr + result.stdout
    assert _digest(HOSTILE) == before and not MARKER.exists()
    expected_bad = {
        "alias-bomb.yaml", "alias-cycle.yaml", "binary.yaml", "control-character.yaml",
        "deep-nesting.json", "deep-nesting.yaml", "huge-integer.yaml", "invalid-utf8.yaml",
        "malformed.json", "malformed.yaml", "truncated.json", "truncated.yaml", "utf16-no-bom.yaml",
    }
    if fmt == "json":
        data = json.loads(result.stdout)
        bad = [Path(e["file"]).name for e in data["input_errors"]]
        checked = {Path(f["file"]).name for f in data["files"] if not f["unreadable"] and not f["skipped"]}
    else:
        lines = [m for m in map(LINE.match, result.stdout.splitlines()) if m]
        bad = [Path(m["file"]).name for m in lines]
        assert all(int(m["line"]) >= 1 and int(m["column"]) >= 1 and m["reason"] for m in lines)
        checked = set()
        assert "6 configs checked" in result.stdout  # 4 hostile files that are fine + 2 clean ones
    assert sorted(bad) == sorted(expected_bad)  # each exactly once
    if fmt == "json":
        assert checked == {"multi-document.yaml", "python-object-tag.yaml", "utf16-bom.yaml",
                           "utf8-bom.json", "harborlight-support-lora.yaml", "larkspur-zero2.json"}
