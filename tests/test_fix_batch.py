"""The fixer's first lint (by the rules that propose fixes) runs over a window of files together
(fix._first_passes, an engine.Batch): each file gets exactly the fix it gets linted alone."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from cfgcheck import api, engine, fix
from cfgcheck import fix as fixmod
from cfgcheck.checks import all_checks

from .conftest import SHARED
from .test_fix_rules_first import _shown

ROOT = Path(__file__).resolve().parents[1]
PUBLIC = SHARED / "corpus" / "public"

# invented configs: the text shapes the first passes leave to the file's own lint (a byte-order
# mark, old Mac line ends, mixed line ends), CRLF line ends they take, a file of two documents, a
# waiver, a broken file
WRITTEN = {
    "bom.yaml": "\ufeffmodel_name_or_path: saltmarsh/base-1b\nlearning_rate: 1e-4\nlora_r: 8\nlora_alpha: 4\n",
    "mac.yaml": "model_name_or_path: saltmarsh/base-1b\rlearning_rate: 1e-4\rlora_r: 8\rlora_alpha: 16\r",
    "crlf.yaml": "model_name_or_path: saltmarsh/base-1b\r\nlearning_rate: 1e-4\r\nlora_r: 8\r\nlora_alpha: 16\r\n",
    "mixed.yaml": "model_name_or_path: saltmarsh/base-1b\r\nlearning_rate: 1e-4\rlora_r: 8\n",
    "two-docs.yaml": "model_name_or_path: saltmarsh/base-1b\nlearning_rate: 1e-4\nlora_r: 8\nlora_alpha: 4\n"
                     "---\nmodel_name_or_path: saltmarsh/base-1b\nlearning_rate: 5e-5\nbf16: true\nfp16: true\n",
    "waived.yaml": "model_name_or_path: saltmarsh/base-1b\n"
                   "learning_rate: 1e-4  # cfgcheck: waive yaml-version-dependent-value because we read YAML 1.2\n"
                   "lora_r: 16\nlora_alpha: 8\n",
    "plain.yaml": "model_name_or_path: saltmarsh/base-1b\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
                  "learning_rate: 5e-5\nper_device_train_batch_size: 4\n",
    "broken.yaml": "a: [1, 2\n",
    "empty.yaml": "",
}


def _files(tmp_path: Path) -> list[str]:
    for name, text in WRITTEN.items():
        with open(tmp_path / name, "w", encoding="utf-8", newline="") as f:
            f.write(text)
    out = sorted(p for p in (ROOT / "fixtures").rglob("*") if p.suffix in (".yaml", ".yml", ".json"))
    if PUBLIC.is_dir():
        out += sorted(p for p in PUBLIC.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
    return [str(p) for p in out] + [str(tmp_path / name) for name in WRITTEN]


def _alone(monkeypatch, pairs, training):
    """Each file fixed with no first passes made for it: its own first lint, file by file."""
    with monkeypatch.context() as m:
        m.setattr(fixmod, "_first_passes", lambda window, read: [None] * len(window))
        return fix.fix_files(pairs, training=training, write=False)


@pytest.mark.parametrize("batch_files", [1, 3, 32])
@pytest.mark.parametrize("training", [False, True], ids=["keeps-meaning", "all-tiers"])
def test_files_fixed_together_get_the_fix_each_gets_alone(tmp_path, monkeypatch, batch_files, training):
    monkeypatch.setattr(engine, "BATCH_FILES", batch_files)
    options = api.make_options(gpu="t4", rows=1000)
    pairs = [(f, options) for f in _files(tmp_path)]
    together = fix.fix_files(pairs, training=training, write=False)
    alone = _alone(monkeypatch, pairs, training)
    assert [_shown(r) for r in together.files] == [_shown(r) for r in alone.files]
    shown = {os.path.basename(r.file): r for r in together.files}
    assert all(shown[n].changed for n in ("plain.yaml", "bom.yaml", "mac.yaml", "crlf.yaml"))
    assert shown["crlf.yaml"].new_text.count("\r\n") == 4  # its line ends kept
    assert shown["broken.yaml"].problem is not None
    assert any("mix of CR and LF" in n for n in shown["mixed.yaml"].notes)


def test_the_first_passes_lint_the_plain_files_of_a_window_and_leave_the_others(tmp_path):
    crlf = tmp_path / "crlf.yaml"
    crlf.write_bytes(WRITTEN["crlf.yaml"].encode())
    files = [str(p) for p in sorted((ROOT / "fixtures" / "fix").glob("*.in.*"))][:5] + [str(crlf)]
    assert len(files) == 6
    window = [(f, engine.Options()) for f in files]
    read = [fixmod._read(f) for f in files]
    got = fixmod._first_passes(window, read)
    assert all(g is not None for g in got)
    for (docs, report), f in zip(got, files):
        assert report.file == f and [v.doc for v in report.views] == docs
        assert not report.internal
    # the rules that ran are the fixing rules alone
    fixing = fixmod._fixing_options(engine.Options()).only
    assert {x.rule for _d, r in got for x in r.findings} <= fixing
    # a window with options that run only fixing rules, or nothing readable: nothing made
    only = engine.Options(only=frozenset({"yaml-version-dependent-value"}))
    assert fixmod._first_passes([(files[0], only)], [read[0]]) == [None]
    missing = fixmod._read(str(ROOT / "fixtures" / "no-such-file.yaml"))
    assert fixmod._first_passes([(files[0], engine.Options())], [missing]) == [None]


def test_a_window_holds_no_more_text_than_a_batch(tmp_path, monkeypatch):
    """Past BATCH_TEXT characters, a window's files are linted each by itself (their documents
    are not held); what each gets is the same."""
    pairs = [(f, engine.Options()) for f in _files(tmp_path)]
    made = []
    real = fixmod._first_passes

    def counted(window, read):
        out = real(window, read)
        made.append(sum(g is not None for g in out))
        return out

    monkeypatch.setattr(fixmod, "_first_passes", counted)
    monkeypatch.setattr(engine, "BATCH_TEXT", 1)  # the first file of a window fills it
    small = fix.fix_files(pairs, write=False)
    assert made and max(made) == 1
    made.clear()
    monkeypatch.setattr(engine, "BATCH_TEXT", 1 << 30)
    big = fix.fix_files(pairs, write=False)
    assert max(made) > 10
    assert [_shown(r) for r in small.files] == [_shown(r) for r in big.files]


def test_a_fixing_rule_that_fails_on_one_file_of_a_window_spares_the_others(tmp_path, monkeypatch):
    real = all_checks()["lora-scale-below-one"]

    def fails_on_one(ctx):
        if os.path.basename(ctx.file) == "plain.yaml":
            raise RuntimeError("a bug in the rule")
        return real(ctx)

    monkeypatch.setitem(all_checks(), "lora-scale-below-one", fails_on_one)
    options = api.make_options(gpu="t4", rows=1000)
    pairs = [(f, options) for f in _files(tmp_path)]
    together = fix.fix_files(pairs, training=True, write=False)
    alone = _alone(monkeypatch, pairs, True)
    assert [_shown(r) for r in together.files] == [_shown(r) for r in alone.files]
    failed = [r for r in together.files if r.error is not None]
    assert [os.path.basename(r.file) for r in failed] == ["plain.yaml"]
    assert failed[0].error.rule == "lora-scale-below-one"
    assert any(a.rule == "lora-scale-below-one" for r in together.files for a in r.applied)  # the others ran it
