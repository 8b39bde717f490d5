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


@pytest.mark.parametrize("how", ["forked", "fork server"])
def test_one_round_trip_per_chunk_not_per_file(tmp_path, monkeypatch, how):
    files = _corpus(tmp_path, 120)
    _Counting.submitted = 0
    if how == "forked":  # this process forks the workers itself
        real_submit = parallel._ForkPool.submit

        def counting_submit(self, start, end):
            _Counting.submitted += 1
            return real_submit(self, start, end)

        monkeypatch.setattr(parallel._ForkPool, "submit", counting_submit)
    else:
        monkeypatch.setattr(parallel, "_fork_is_safe", lambda: False)
        monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", _Counting)
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


@pytest.mark.parametrize("how", ["forked", "fork server"])
def test_no_processes_to_be_had_lints_serially(tmp_path, monkeypatch, how):
    files = _corpus(tmp_path, 12)

    def refuse(*args, **kwargs):
        raise OSError(38, "Function not implemented")  # no semaphores, no more processes

    if how == "forked":
        monkeypatch.setattr(parallel.os, "fork", refuse)
    else:
        monkeypatch.setattr(parallel, "_fork_is_safe", lambda: False)
        monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", refuse)
    opts = Options()
    assert _json(engine.lint_files([(f, opts) for f in files], jobs=2)) == \
        _json(engine.lint_files([(f, opts) for f in files]))


def _forked_pids(monkeypatch) -> list[int]:
    pids: list[int] = []
    real_init = parallel._ForkedWorker.__init__

    def init(self, close_in_child):
        real_init(self, close_in_child)
        pids.append(self.pid)

    monkeypatch.setattr(parallel._ForkedWorker, "__init__", init)
    return pids


def _gone(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True  # ended and waited for: no zombie left
    return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="workers are forked by this process on Linux")
def test_a_run_ended_early_leaves_no_worker_behind(tmp_path, monkeypatch):
    files = _corpus(tmp_path, 200)
    pids = _forked_pids(monkeypatch)
    opts = Options()
    reports = parallel.lint_files_parallel([(f, opts) for f in files], 3, lint_file=engine.lint_file,
                                           prepare=engine.active_rules)
    first = [next(reports) for _ in range(3)]  # the workers have chunks in hand
    assert [r.file for r in first] == files[:3] and len(pids) == 2
    reports.close()
    assert all(_gone(pid) for pid in pids)
    # a run taken to its end: the workers leave when told there is no more
    pids.clear()
    assert _json(engine.lint_files([(f, opts) for f in files], jobs=3)) == \
        _json(engine.lint_files([(f, opts) for f in files]))
    assert len(pids) == 2 and all(_gone(pid) for pid in pids)


def _fails_to_send(path, options):
    report = engine.lint_file(path, options)
    if os.getpid() != _PARENT:
        report.findings.append(lambda: None)  # a report that cannot be pickled back
    return report


def test_a_chunk_a_worker_cannot_send_is_linted_here(tmp_path):
    files = _corpus(tmp_path)
    opts = Options()
    pairs = [(f, opts) for f in files]
    got = list(parallel.lint_files_parallel(pairs, 2, lint_file=_fails_to_send, prepare=engine.active_rules))
    assert list(parallel.LAST_RUN_CACHE["workers"]) == [os.getpid()]  # nothing was taken from the worker
    assert _json(got) == _json(engine.lint_files(pairs))


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="workers are forked by this process on Linux")
def test_forked_workers_need_no_thread_and_no_standard_pool(tmp_path):
    _corpus(tmp_path, 120)
    code = ("import sys; from cfgcheck import engine; o = engine.Options(); "
            f"fs = engine.expand_paths([{str(tmp_path)!r}]); "
            "n = sum(1 for _ in engine.lint_files([(f, o) for f in fs], jobs=2)); "
            "t = sys.modules.get('threading'); "
            "print(n, 'concurrent.futures' in sys.modules, 'multiprocessing' in sys.modules, "
            "t.active_count() if t else 1)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, env=ENV,
                         timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["120", "False", "False", "1"]


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
