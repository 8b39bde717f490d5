"""Files linted together (engine.Batch: rules rule by rule across a batch of views) get exactly
the reports they get linted one by one."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from cfgcheck import checks, engine, memo
from cfgcheck.engine import Options

ROOT = Path(__file__).resolve().parents[1]


def _summary(report):
    return (report.file, report.layout, report.skipped, report.compose_problem,
            None if report.problem is None else (report.problem.line, report.problem.column, report.problem.reason),
            [(f.rule, f.severity, f.file, f.line, f.column, f.key, f.message, f.hint, f.data, f.related,
              f.fix.summary if f.fix else None) for f in report.findings],
            [(w[0].rule, w[0].line, w[1], w[2]) for w in report.waived],
            [(e.file, e.rule, e.error) for e in report.internal])


def _one_by_one(pairs):
    out = []
    with memo.scope():
        for path, options in pairs:
            out.append(engine.lint_file(path, options))
    return out


def _mixed_files(tmp_path: Path) -> list[str]:
    """Every kind of file a run meets: the fixtures (launch scripts, composed configs, sweeps,
    waivers, DeepSpeed and adapter JSON), and a few written here."""
    (tmp_path / ".git").mkdir()
    (tmp_path / "two-docs.yaml").write_text(
        "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1e-4\nlora_r: 8\nlora_alpha: 4\n"
        "---\nmodel_name_or_path: Qwen/Qwen2.5-0.5B\nlearning_rate: 2e-4\nbf16: true\nfp16: true\n")
    (tmp_path / "waived.yaml").write_text(
        "model_name_or_path: meta-llama/Llama-2-7b-hf\n"
        "learning_rate: 1e-4  # cfgcheck: waive yaml-version-dependent-value because our loader reads YAML 1.2\n"
        "lora_r: 16\nlora_alpha: 8\n")
    (tmp_path / "broken.yaml").write_text("a: [1, 2\n")
    (tmp_path / "empty.yaml").write_text("")
    (tmp_path / "adapter_config.json").write_text(
        '{"peft_type": "LORA", "r": 16, "lora_alpha": 8, "target_modules": ["q_proj", "v_proj"],'
        ' "base_model_name_or_path": "meta-llama/Llama-2-7b-hf"}')
    (tmp_path / "not-a-config.yaml").write_text("name: build\non: [push]\njobs: {}\n")
    files = [str(p) for p in sorted((ROOT / "fixtures").rglob("*"))
             if p.is_file() and p.suffix in (".yaml", ".yml", ".json", ".sh")]
    return files + [str(p) for p in sorted(tmp_path.iterdir()) if p.is_file()]


@pytest.mark.parametrize("batch_files", [1, 3, 32])
def test_a_batched_run_gives_every_file_the_report_it_gets_alone(tmp_path, monkeypatch, batch_files):
    monkeypatch.setattr(engine, "BATCH_FILES", batch_files)
    files = _mixed_files(tmp_path)
    options = Options()
    pairs = [(f, options) for f in files]
    together = list(engine.lint_files(pairs, keep_views=False))
    alone = _one_by_one(pairs)
    assert [_summary(r) for r in together] == [_summary(r) for r in alone]
    assert sum(len(r.findings) for r in alone) > 30 and any(r.waived for r in alone)
    assert any(r.problem for r in alone) and any(r.skipped for r in alone)


def test_a_batch_over_files_with_options_of_their_own_runs_each_with_its_rules(tmp_path):
    files = _mixed_files(tmp_path)
    narrow = Options(only=frozenset({"lora-scale-below-one", "yaml-version-dependent-value"}))
    wide = Options(gpu=None, rows=5000)
    pairs = [(f, narrow if i % 2 else wide) for i, f in enumerate(files)]
    together = list(engine.lint_files(pairs, keep_views=False))
    assert [_summary(r) for r in together] == [_summary(r) for r in _one_by_one(pairs)]
    assert {f.rule for r in together[1::2] for f in r.findings} <= set(narrow.only) | {"waiver-comment-problem"}


def _together_with_one_failing(tmp_path):
    """The mixed files linted in batches, compared with each alone; waived.yaml the only one
    with an internal error. -> (the batched reports, waived.yaml's)."""
    pairs = [(f, Options()) for f in _mixed_files(tmp_path)]
    together = list(engine.lint_files(pairs, keep_views=False))
    assert [_summary(r) for r in together] == [_summary(r) for r in _one_by_one(pairs)]
    failed = [r for r in together if r.internal]
    assert [os.path.basename(r.file) for r in failed] == ["waived.yaml"]
    return together, failed[0]


def test_a_rule_that_fails_on_one_file_of_a_batch_spares_the_others(tmp_path, monkeypatch):
    real = checks.all_checks()["lora-scale-below-one"]

    def fails_on_one(ctx):
        if os.path.basename(ctx.file) == "waived.yaml":
            raise RuntimeError("a bug in the rule")
        return real(ctx)

    monkeypatch.setitem(checks.all_checks(), "lora-scale-below-one", fails_on_one)
    together, failed = _together_with_one_failing(tmp_path)
    assert failed.internal[0].rule == "lora-scale-below-one"
    assert any(f.rule == "lora-scale-below-one" for r in together for f in r.findings)  # the others ran it


def test_a_batch_holds_its_files_until_its_rules_have_run_and_no_longer(tmp_path, monkeypatch):
    """Reports come out complete (sorted findings, views dropped when asked) in the files'
    order, one batch at a time."""
    monkeypatch.setattr(engine, "BATCH_FILES", 2)
    files = _mixed_files(tmp_path)
    seen = []
    for report in engine.lint_files([(f, Options()) for f in files], keep_views=False):
        assert report.views == []
        assert report.findings == sorted(report.findings, key=engine._FINDING_ORDER)
        seen.append(report.file)
    assert seen == files


def test_a_batch_notes_each_files_reads_into_that_files_own_record(tmp_path, monkeypatch):
    """With the result cache, what a file's rules read (pins beside it, its repository, its
    model) goes into the record of that file, as when the file is linted alone."""
    monkeypatch.setattr(engine, "BATCH_FILES", 4)
    files = _mixed_files(tmp_path)
    (tmp_path / "requirements.txt").write_text("trl==0.12.0\ntransformers==4.44.0\n")
    sub = tmp_path / "other"
    sub.mkdir()
    (sub / "train.yaml").write_text("model_name_or_path: Qwen/Qwen2.5-0.5B\nmax_seq_length: 512\nlora_r: 8\n")
    files.append(str(sub / "train.yaml"))
    pairs = [(f, Options()) for f in files]
    with memo.scope():
        together = list(engine._lint_batches_recorded(pairs))
    with memo.scope():
        alone = [engine.lint_file_recorded(p, o) for p, o in pairs]
    assert [_summary(r) for r, _ in together] == [_summary(r) for r, _ in alone]
    assert [facts for _, facts in together] == [facts for _, facts in alone]
    pins = str(tmp_path / "requirements.txt")
    assert any(k[1] == pins for _, facts in together for k in facts)  # a rule's read, noted


def test_a_batch_of_large_files_runs_as_soon_as_it_holds_enough_text(tmp_path, monkeypatch):
    """However large the files, a batch keeps at most about BATCH_TEXT characters of them (and
    their documents) before their rules run."""
    files = _mixed_files(tmp_path)
    pairs = [(f, Options()) for f in files]
    runs = []
    real_run = engine.Batch.run

    def counted(self):
        runs.append(len(self.jobs))
        real_run(self)

    monkeypatch.setattr(engine.Batch, "run", counted)
    monkeypatch.setattr(engine, "BATCH_TEXT", 1)  # every file fills a batch
    small = list(engine.lint_files(pairs, keep_views=False))
    assert max(runs) == 1 and sum(runs) > 10
    runs.clear()
    monkeypatch.setattr(engine, "BATCH_TEXT", 1 << 30)
    big = list(engine.lint_files(pairs, keep_views=False))
    assert max(runs) > 10
    assert [_summary(r) for r in small] == [_summary(r) for r in big]


def test_a_bug_after_a_files_rules_spares_the_rest_of_its_batch(tmp_path, monkeypatch):
    """A failure in the engine's last step for one file (its findings sorted, filtered) is that
    file's internal error, as when it is linted alone; the batch's other files are complete."""
    real = engine._documents_linted

    def fails_on_one(report, reasons, file, options, located_in):
        if os.path.basename(file) == "waived.yaml":
            raise ValueError("a bug after the rules")
        return real(report, reasons, file, options, located_in)

    monkeypatch.setattr(engine, "_documents_linted", fails_on_one)
    together, failed = _together_with_one_failing(tmp_path)
    assert failed.findings == [] and failed.internal[0].rule is None
    assert sum(len(r.findings) for r in together) > 30
