"""Lint output written file by file: the same bytes as the whole document, no report kept.

The JSON and SARIF documents a run writes piece by piece are compared with the document built
whole and written by ``json.dumps`` (through ``findings.json_text``, as every JSON output is);
text and GitHub output keep their sections' order (every input error before the first finding,
whatever the files' order).
"""

from __future__ import annotations

import gc
import json
import os
import subprocess
import sys
import weakref
from pathlib import Path

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity, Tally, json_text
from cfgcheck.render import jsonitems, spool, writer
from cfgcheck.render.sarif import SCHEMA_URI, _result, _rule, uri
from cfgcheck.catalogue import load_catalogue

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT))
LORA = "model_name_or_path: tidewater/support-7b\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-5\n"
WAIVED = "lora_alpha: 8  # cfgcheck: waive lora-scale-below-one because the team chose it\nlora_r: 16\n"


def _folder(tmp_path: Path) -> Path:
    (tmp_path / "a-first.yaml").write_text(LORA)
    (tmp_path / "b-waived.yaml").write_text(WAIVED)
    (tmp_path / "c-skipped.yaml").write_text("jobs:\n  x: 1\nruns-on: linux\nsteps: []\n")
    (tmp_path / "d-deepspeed.json").write_text(
        '{"train_batch_size": 64, "train_micro_batch_size_per_gpu": 4, "gradient_accumulation_steps": 3}\n')
    (tmp_path / "z-broken.yaml").write_text("learning_rate: [2.0e-4\n")  # the last file
    return tmp_path


def _written(fmt: str, report, shown=lambda fr: fr.findings) -> str:
    w = writer(fmt)
    for fr in report.files:
        w.add(fr, shown(fr))
    out: list[str] = []
    w.finish(out.append)
    w.close()
    return "".join(out)


def test_json_written_piece_by_piece_is_the_whole_document(tmp_path):
    report = api.lint([_folder(tmp_path)], project=None)
    assert report.problems and any(fr.waived for fr in report.files) and report.findings
    t = Tally.of(report)
    doc = {
        "tool": "cfgcheck",
        "version": __import__("cfgcheck").__version__,
        "findings": [f.as_dict() for f in report.findings],
        "input_errors": [p.as_dict() for p in report.problems],
        "internal_errors": [e.as_dict() for e in report.internal],
        "files": [{"file": fr.file, "layout": fr.layout, "skipped": fr.skipped,
                   "unreadable": fr.problem is not None} for fr in report.files],
        "summary": {"checked": t.linted, "skipped": t.skipped, "unreadable": t.problems,
                    "errors": t.count(Severity.ERROR), "warnings": t.count(Severity.WARNING),
                    "info": t.count(Severity.INFO), "waived": t.waived, "baselined": t.baselined},
        "waived": [dict(f.as_dict(), reason=r, waived_by=k) for fr in report.files for f, r, k in fr.waived],
    }
    assert _written("json", report) == json_text(doc) + "\n"
    assert doc["summary"]["unreadable"] == 1 and doc["summary"]["waived"] == 1


def test_sarif_written_piece_by_piece_is_the_whole_document(tmp_path):
    report = api.lint([_folder(tmp_path)], project=None)
    catalogue = load_catalogue()
    rules = [catalogue[r] for r in sorted(catalogue)]
    index = {r.id: i for i, r in enumerate(rules)}
    results = [_result(f, index) for f in report.findings]
    results += [_result(f, index, {"kind": "inSource", "status": "accepted", "justification": reason})
                for fr in report.files for f, reason, _kind in fr.waived]
    notes = [{"level": "error", "message": {"text": f"input error: {p.reason}"},
              "locations": [{"physicalLocation": {"artifactLocation": {"uri": uri(p.file)},
                                                  "region": {"startLine": p.line, "startColumn": p.column}}}]}
             for p in report.problems]
    version = __import__("cfgcheck").__version__
    doc = {"$schema": SCHEMA_URI, "version": "2.1.0", "runs": [{
        "tool": {"driver": {"name": "cfgcheck", "version": version, "semanticVersion": version,
                            "rules": [_rule(r) for r in rules]}},
        "columnKind": "unicodeCodePoints",
        "invocations": [{"executionSuccessful": True, "toolExecutionNotifications": notes}],
        "results": results}]}
    assert _written("sarif", report) == json_text(doc) + "\n"


def test_empty_lists_are_written_as_json_writes_them():
    report = api.Report()
    doc = json.loads(_written("json", report))
    assert doc["findings"] == [] and doc["files"] == [] and doc["summary"]["checked"] == 0
    assert '"findings": [],' in _written("json", report)


def test_text_and_github_put_every_input_error_before_the_first_finding(tmp_path):
    report = api.lint([_folder(tmp_path)], project=None)
    for fmt, error in (("text", "input error"), ("github", "cfgcheck input error")):
        lines = _written(fmt, report).splitlines()
        first_error = next(i for i, line in enumerate(lines) if error in line)
        first_finding = next(i for i, line in enumerate(lines) if "a-first.yaml" in line)
        assert first_error < first_finding, fmt
        assert lines[-1].startswith("cfgcheck: 3 configs checked")


def test_a_spool_past_its_memory_share_reads_back_the_same_text():
    s = spool.Spool()
    pieces = [f"line {i} \r\n \ud800 é {'x' * (i % 97)}\n" for i in range(5000)]  # a lone surrogate, CR
    for p in pieces:
        s.write(p)
    assert s._file is not None  # moved to a temporary file
    assert "".join(s.read()) == "".join(pieces)
    assert all(len(p) <= spool.READ_SIZE for p in s.read())
    s.close()


def test_lint_reports_keeps_no_report_it_has_given(tmp_path):
    for i in range(60):
        (tmp_path / f"c{i:02d}.yaml").write_text(LORA.replace("16", str(4 + i)))
    alive = []
    reports = api.lint_reports([tmp_path], project=None, keep_views=False)
    for fr in reports:
        alive.append(weakref.ref(fr))
        del fr
    gc.collect()
    assert len(alive) == 60
    assert sum(1 for r in alive if r() is not None) == 0


def test_cli_output_is_the_same_in_every_format_serial_and_parallel(tmp_path):
    folder = _folder(tmp_path)
    for i in range(70):  # past the size at which --jobs auto uses a pool on two CPUs
        (folder / f"m{i:02d}.yaml").write_text(LORA.replace("16", str(4 + i)))
    for fmt in ("text", "json", "sarif", "github"):
        runs = [subprocess.run([sys.executable, "-m", "cfgcheck", "lint", "--no-project", "--no-cache",
                                "--format", fmt, str(folder), *extra],
                               capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=300)
                for extra in ([], ["--jobs", "2"])]
        assert runs[0].stdout and runs[0].stdout == runs[1].stdout, fmt
        assert runs[0].returncode == runs[1].returncode == 2, fmt  # the broken file


# --------------------------------------------------------------------------- the items' own writer

from hypothesis import given, settings, strategies as st  # noqa: E402


class _Text(str):
    pass


_SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(), st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=8), st.sampled_from(["\ud800", "a\udfffb", "é\n\"\\\x00\x1f", _Text("sub")]),
    st.sampled_from([Severity.ERROR]),  # an int subclass, written as json.dumps writes it
)
_KEYS = st.one_of(st.text(max_size=6), st.integers(), st.floats(), st.booleans(), st.none(),
                  st.just("\ud801"))
_VALUES = st.recursive(_SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.tuples(inner, inner),
    st.dictionaries(_KEYS, inner, max_size=4)), max_leaves=20)


@settings(max_examples=400, deadline=None)
@given(_VALUES, st.sampled_from(["", "  ", "        "]))
def test_json_items_are_laid_out_as_the_standard_library_lays_them_out(value, pad):
    # reference: Python's json.dumps(indent=2, ensure_ascii=False), through findings.json_text
    assert jsonitems.indented(value, pad) == json_text(value).replace("\n", "\n" + pad)


def test_json_items_refuse_what_the_standard_library_refuses():
    for bad in ({"k": object()}, {(1, 2): "tuple key"}):
        for write in (lambda v: jsonitems.indented(v), json_text):
            try:
                write(bad)
            except TypeError:
                continue
            raise AssertionError(f"{bad!r} was written")


def _odd_findings() -> list:
    from cfgcheck.findings import Edit, Finding, Fix, Related

    fix = Fix(tier="keeps-meaning", summary="set it", edits=(Edit(path=("a",), old=1, new=2),))
    datas = [{}, {"value": 3, "rate": 2.5e-5, "off": None, "on": True, "names": ["x", "é"]},
             {"nested": {"k": (1, 2.0), "m": {5: [None, {"e": float("nan")}]}}, "set": {"only"},
              "inf": float("inf"), "level": Severity.ERROR, "text": _Text("sub"), "odd": "\ud800"},
             {"line": 4, "first_line": 2, "gpu": object()}]
    out = []
    for i, data in enumerate(datas):
        out.append(Finding(rule="rule-x", severity=list(Severity)[i % 3], file=f"dir/f\udcff{i}.yaml",
                           line=i + 1, column=2, key="a.b" if i % 2 else "", message="m \"q\" \\ é",
                           hint="" if i == 1 else "do\nthis", data=data, path=("a", "b"),
                           fix=fix if i % 2 else None,
                           related=(Related(key="c", line=9, column=1),) if i >= 2 else ()))
    return out


def test_json_findings_and_sarif_results_are_their_records_laid_out():
    # written straight from a finding, they are the text of the record built whole
    from cfgcheck.findings import escape_surrogates
    from cfgcheck.render.json import finding_text
    from cfgcheck.render.sarif import result_text

    found = api.lint([ROOT / "fixtures"], project=None).findings
    assert len(found) > 100
    catalogue = load_catalogue()
    index = {r: i for i, r in enumerate(sorted(catalogue))}
    for f in found + _odd_findings():
        for pad in ("    ", "        "):
            assert escape_surrogates(finding_text(f, pad)) == jsonitems.indented(f.as_dict(), pad)
            assert escape_surrogates(result_text(f, index, pad)) == jsonitems.indented(_result(f, index), pad)
    odd = _odd_findings()[2]
    assert '"set": "{\'only\'}"' in finding_text(odd, "")  # a set as its text, as as_dict has it
    assert "\\udcff" in jsonitems.indented(odd.as_dict())  # a lone surrogate escaped


def test_a_spool_spills_to_an_unnamed_file_without_importing_tempfile(tmp_path):
    """Where the system makes unnamed files (Linux), a spool moves to one in the temporary folder
    (TMPDIR first, as tempfile chooses) with no import of tempfile; nothing is left in the folder."""
    if not spool._UNNAMED:
        pytest.skip("no unnamed files on this system")
    code = ("import sys; from cfgcheck.render import spool; s = spool.Spool()\n"
            "for i in range(3000): s.write(f'line {i} \\ud800 ' + 'x' * 40 + '\\n')\n"
            "assert s._file is not None\n"
            "import os; where = os.readlink(f'/proc/self/fd/{s._file.fileno()}')\n"
            "text = ''.join(s.read()); s.close()\n"
            "assert text.count('\\n') == 3000 and 'line 2999 \\ud800' in text\n"
            "print('tempfile' in sys.modules); print(where)")
    env = dict(os.environ, TMPDIR=str(tmp_path), PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    imported, where = out.stdout.strip().splitlines()
    assert imported == "False"
    assert where.startswith(str(tmp_path) + "/") and where.endswith("(deleted)")  # in TMPDIR, no name
    assert list(tmp_path.iterdir()) == []  # nothing to clean up


@pytest.mark.parametrize("how", ["no unnamed files", "temporary folder missing"])
def test_a_spool_spills_where_no_unnamed_file_can_be_made(tmp_path, monkeypatch, how):
    if how == "no unnamed files":
        monkeypatch.setattr(spool, "_UNNAMED", 0)
    else:
        monkeypatch.setenv("TMPDIR", str(tmp_path / "missing"))
    s = spool.Spool()
    pieces = [f"{i} é {'y' * (i % 53)}\n" for i in range(4000)]
    for p in pieces:
        s.write(p)
    assert s._file is not None
    assert "".join(s.read()) == "".join(pieces)
    s.close()
