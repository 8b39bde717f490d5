"""Parallel lint: chunks of files (one round trip per chunk), `--jobs auto`, workers started by
fork or a fork server, a dead worker or no processes at all: always the serial output, with this
process linting too and holding no more than a bounded window of reports."""

from __future__ import annotations

import concurrent.futures
import os
import subprocess
import sys
from pathlib import Path

import pytest

from cfgcheck import engine, parallel
from cfgcheck.engine import Options
from cfgcheck.render import render

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT))
LORA = "model_name_or_path: tidewater/support-7b\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-5\n"


def _corpus(folder: Path, n: int = 40) -> list[str]:
    for i in range(n):
        if i % 7 == 3:
            (folder / f"c{i:03d}.yaml").write_text("learning_rate: [2.0e-4\n")  # broken
        elif i % 5 == 0:
            (folder / f"c{i:03d}.json").write_text(
                '{"train_batch_size": 64, "train_micro_batch_size_per_gpu": 4, '
                '"gradient_accumulation_steps": %d, "zero_optimization": {"stage": 2}}\n' % (i % 3 + 1))
        else:
            (folder / f"c{i:03d}.yaml").write_text(LORA.replace("16", str(4 + i)))
    return engine.expand_paths([folder])


def _json(reports) -> str:
    report = engine.Report(files=list(reports))
    return render("json", report, report.findings)


@pytest.mark.parametrize("n,processes", [(1, 1), (7, 2), (8, 2), (9, 2), (100, 3), (2000, 2), (5, 16)])
def test_chunks_cover_the_files_in_order_small_and_even(n, processes):
    bounds = parallel.chunk_bounds(n, processes)
    assert bounds[0][0] == 0 and bounds[-1][1] == n
    assert all(a[1] == b[0] for a, b in zip(bounds, bounds[1:]))  # contiguous, in order
    sizes = [b - a for a, b in bounds]
    assert min(sizes) >= 1 and max(sizes) <= parallel.CHUNK_FILES
    assert set(sizes[:-1]) <= {sizes[0]}  # one size, the last chunk what is left
    # a short run still gives every process chunks of its own
    assert len(bounds) >= min(n, processes * parallel.CHUNKS_PER_PROCESS)


def test_jobs_auto_is_the_usable_cpus_and_serial_for_a_short_run(monkeypatch):
    monkeypatch.setattr(parallel, "usable_cpus", lambda: 4)
    per = parallel.AUTO_FILES_PER_WORKER
    assert parallel.worker_count("auto", 2 * per - 1) == 1
    assert parallel.worker_count("auto", 2 * per) == 2
    assert parallel.worker_count("auto", 3 * per) == 3
    assert parallel.worker_count("auto", 10_000) == 4
    assert parallel.worker_count(3, 2) == 2  # a number is taken as given, never past the files
    assert parallel.worker_count(8, 1000) == 8


def test_usable_cpus_follow_the_affinity_mask(monkeypatch):
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: {3}, raising=False)
    assert parallel.usable_cpus() == 1
    monkeypatch.delattr(os, "sched_getaffinity", raising=False)
    monkeypatch.setattr(os, "cpu_count", lambda: 6)
    assert parallel.usable_cpus() == 6


@pytest.mark.parametrize("text,value", [("auto", "auto"), ("AUTO", "auto"), ("3", 3), (" 2 ", 2), (1, 1)])
def test_jobs_values_read(text, value):
    assert parallel.parse_jobs(text) == value


@pytest.mark.parametrize("text", ["0", "-1", "many", "", "2.5", 0])
def test_jobs_values_refused(text):
    with pytest.raises(ValueError, match="--jobs"):
        parallel.parse_jobs(text)


class _Counting(concurrent.futures.ProcessPoolExecutor):
    submitted = 0

    def submit(self, fn, /, *args, **kwargs):
        type(self).submitted += 1
        return super().submit(fn, *args, **kwargs)


def test_one_round_trip_per_chunk_not_per_file(tmp_path, monkeypatch):
    files = _corpus(tmp_path, 120)
    monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", _Counting)
    _Counting.submitted = 0
    opts = Options()
    parallel_out = _json(engine.lint_files([(f, opts) for f in files], jobs=2))
    chunks = len(parallel.chunk_bounds(len(files), 2))
    assert chunks < len(files) / 4
    # each chunk is sent to the worker once or linted here; the first always goes out
    assert 1 <= _Counting.submitted <= chunks
    assert parallel.LAST_RUN_CACHE["workers"].get(os.getpid(), 0) > 0  # this process linted too
    assert parallel_out == _json(engine.lint_files([(f, opts) for f in files]))


def test_a_bounded_window_of_reports_is_held(tmp_path):
    files = _corpus(tmp_path, 200)
    opts = Options()
    pairs = [(f, opts) for f in files]
    seen = 0
    most = 0
    size = parallel.chunk_bounds(len(files), 2)[0][1]
    for _report in parallel.lint_files_parallel(pairs, 2, lint_file=_counted, prepare=engine.active_rules):
        seen += 1
        most = max(most, _LINTED_HERE[0] - seen)
    window = (parallel.HELD_CHUNKS + 1) * size
    assert seen == len(files) and most <= window


_LINTED_HERE = [0]


def _counted(path, options):
    if os.getpid() == _PARENT:
        _LINTED_HERE[0] += 1
    return engine.lint_file(path, options)


def test_fork_server_workers_give_the_serial_output(tmp_path, monkeypatch):
    files = _corpus(tmp_path)
    monkeypatch.setattr(parallel, "_fork_is_safe", lambda: False)  # as when other threads run
    opts = engine.Options(gpus=8)
    assert _json(engine.lint_files([(f, opts) for f in files], jobs=2)) == \
        _json(engine.lint_files([(f, opts) for f in files]))


def test_per_file_options_reach_the_workers(tmp_path):
    files = _corpus(tmp_path)
    few, many = Options(gpus=1), Options(gpus=8, only=frozenset({"lora-scale-below-one"}))
    pairs = [(f, few if i % 2 else many) for i, f in enumerate(files)]
    assert _json(engine.lint_files(pairs, jobs=3)) == _json(engine.lint_files(pairs))


_PARENT = os.getpid()


def _dies_in_a_worker(path, options):
    if os.getpid() != _PARENT and path.endswith("c020.yaml"):
        os._exit(3)  # a worker killed mid-chunk (out of memory, a signal)
    return engine.lint_file(path, options)


def test_a_dead_worker_leaves_the_output_serial(tmp_path):
    files = _corpus(tmp_path)
    opts = Options()
    pairs = [(f, opts) for f in files]
    got = parallel.lint_files_parallel(pairs, 2, lint_file=_dies_in_a_worker, prepare=engine.active_rules)
    assert _json(got) == _json(engine.lint_files(pairs))


def test_no_processes_to_be_had_lints_serially(tmp_path, monkeypatch):
    files = _corpus(tmp_path, 12)

    def refuse(*args, **kwargs):
        raise OSError(38, "Function not implemented")  # no semaphores in this sandbox

    monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", refuse)
    opts = Options()
    assert _json(engine.lint_files([(f, opts) for f in files], jobs=2)) == \
        _json(engine.lint_files([(f, opts) for f in files]))


def test_cli_jobs_auto_prints_the_serial_bytes(tmp_path):
    _corpus(tmp_path, 80)  # above the serial threshold of auto on two CPUs
    runs = [subprocess.run([sys.executable, "-m", "cfgcheck", "lint", "--no-project", str(tmp_path), *extra],
                           capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=180)
            for extra in ([], ["--jobs", "auto"], ["-j", "2"])]
    assert {r.stdout for r in runs} == {runs[0].stdout} and runs[0].stdout
    assert {r.returncode for r in runs} == {2}


@pytest.mark.parametrize("value", ["0", "several"])
def test_cli_refuses_a_bad_jobs_value(tmp_path, value):
    (tmp_path / "a.yaml").write_text(LORA)
    out = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(tmp_path), "--jobs", value],
                         capture_output=True, text=True, cwd=ROOT, env=ENV, timeout=120)
    assert out.returncode == 2 and "--jobs" in out.stderr and value in out.stderr
    assert "Traceback" not in out.stderr and out.stdout == ""
