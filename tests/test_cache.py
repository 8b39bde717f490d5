"""The lint result cache: a stored report is reused only while everything it rests on is unchanged.

Each invalidation case lints once (stored), again (served from the cache, same answer), changes one
input, and lints again: the answer must be the one a lint without the cache gives, and differ from
the old one. The concurrency, corruption, unwritable-folder and size cases check that the cache
never breaks a run.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import pickle
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from cfgcheck import api, cache, reads
from cfgcheck.findings import FileReport, Finding, Severity
from cfgcheck.render import render

from .helpers import LLAMA2_7B_CONFIG, SMALLER_LLAMA_CONFIG

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT), NO_COLOR="1")

# alpha 8 / r 16: LoRA scale 0.5 (LoRA paper sec. 4.1: the update is scaled by alpha / r), which
# lora-scale-below-one reports; alpha 32 gives scale 2 and no finding
LOW_SCALE = "use_peft: true\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2.0e-4\n"
GOOD_SCALE = "use_peft: true\nlora_r: 16\nlora_alpha: 32\nlearning_rate: 2.0e-4\n"


def _answer(report) -> str:
    return render("json", report, report.findings)


class Case:
    """Lints through one cache folder; ``store`` is the Store of the latest cached lint."""

    def __init__(self, tmp_path: Path):
        self.folder = tmp_path / "cache"
        self.store: cache.Store | None = None

    def cached(self, paths, **options) -> str:
        self.store = cache.Store(self.folder)
        options.setdefault("project", None)
        return _answer(api.lint([str(p) for p in paths], cache=self.store, **options))

    @staticmethod
    def fresh(paths, **options) -> str:
        options.setdefault("project", None)
        return _answer(api.lint([str(p) for p in paths], **options))

    def check(self, paths, change, **options) -> tuple[str, str]:
        """(answer before, answer after CHANGE); asserts the hit before and the miss after."""
        before = self.cached(paths, **options)
        assert self.store.misses == len(paths) and self.store.written > 0
        again = self.cached(paths, **options)
        assert (self.store.hits, again) == (len(paths), before)
        changed = change()
        new_options = changed if isinstance(changed, dict) else options
        after = self.cached(paths, **new_options)
        assert self.store.hits == 0, "a changed input must not be served from the cache"
        assert after == self.fresh(paths, **new_options)
        assert after != before
        # and the new answer is stored in its turn
        assert self.cached(paths, **new_options) == after and self.store.hits == len(paths)
        return before, after


def _rules(answer: str) -> list[str]:
    return sorted(f["rule"] for f in json.loads(answer)["findings"])


# --------------------------------------------------------------------------- invalidation

def test_changed_file_is_linted_again(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    before, after = Case(tmp_path).check([cfg], lambda: cfg.write_text(GOOD_SCALE))
    assert "lora-scale-below-one" in _rules(before) and "lora-scale-below-one" not in _rules(after)


def test_changed_linked_deepspeed_file(tmp_path):
    # an accelerate file naming a DeepSpeed JSON; 4 accumulation steps against the JSON's 8
    # contradict each other (rule deepspeed-file-contradicts-config), against 4 they agree
    cfg = tmp_path / "accelerate.yaml"
    cfg.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 8\n"
                   "deepspeed_config:\n  deepspeed_config_file: ds.json\n  gradient_accumulation_steps: 4\n")
    ds = tmp_path / "ds.json"
    ds.write_text('{"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": 8, '
                  '"zero_optimization": {"stage": 2}}\n')
    before, after = Case(tmp_path).check([cfg], lambda: ds.write_text(
        '{"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": 4, '
        '"zero_optimization": {"stage": 2}}\n'))
    assert "deepspeed-file-contradicts-config" in _rules(before)
    assert "deepspeed-file-contradicts-config" not in _rules(after)


def test_linked_file_that_appears_where_nothing_was(tmp_path):
    cfg = tmp_path / "accelerate.yaml"
    cfg.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 8\n"
                   "deepspeed_config:\n  deepspeed_config_file: ds.json\n  gradient_accumulation_steps: 4\n")
    ds = tmp_path / "ds.json"
    before, after = Case(tmp_path).check([cfg], lambda: ds.write_text(
        '{"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": 8, '
        '"zero_optimization": {"stage": 2}}\n'))
    assert "deepspeed-file-contradicts-config" in _rules(after)
    assert "ds.json" in before  # the missing file was reported as not found


def test_changed_launch_file(tmp_path):
    # bf16 in the config against fp16 in the launch file: launch-context-disagrees; bf16 in both agree
    cfg = tmp_path / "train.yaml"
    cfg.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\nbf16: true\n")
    launch = tmp_path / "launch.yaml"
    launch.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: MULTI_GPU\nnum_processes: 4\n"
                      "mixed_precision: fp16\n")
    before, after = Case(tmp_path).check(
        [cfg], lambda: launch.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: MULTI_GPU\n"
                                         "num_processes: 4\nmixed_precision: bf16\n"),
        launch=[str(launch)])
    assert "launch-context-disagrees" in _rules(before) and "launch-context-disagrees" not in _rules(after)


def test_changed_project_file(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    project = tmp_path / "cfgcheck.yaml"
    project.write_text("rules:\n  skip: [unknown-key]\n")
    before, after = Case(tmp_path).check(
        [cfg], lambda: project.write_text("rules:\n  skip: [lora-scale-below-one]\n"), project="auto")
    assert "lora-scale-below-one" in _rules(before) and "lora-scale-below-one" not in _rules(after)


@pytest.mark.parametrize("first, second", [
    ({}, {"gpu": "t4"}),
    ({"gpu": "t4"}, {"gpu": "a100-80gb"}),
    ({}, {"severity": {"lora-scale-below-one": "error"}}),
    ({}, {"skip": ["lora-scale-below-one"]}),
    ({}, {"only": ["lora-scale-below-one"]}),
    ({"gpu": "t4"}, {"gpu": "t4", "gpus": 4}),
])
def test_changed_option(tmp_path, first, second):
    cfg = tmp_path / "run.yaml"
    # a 7B model: whether it fits depends on the GPU (memory-exceeds-gpu) and the GPU count
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 16\n"
                   "lora_alpha: 8\nlearning_rate: 2.0e-4\nper_device_train_batch_size: 8\n"
                   "max_seq_length: 4096\n")
    Case(tmp_path).check([cfg], lambda: second, **first)


def test_changed_threshold(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    from cfgcheck.catalogue import load_catalogue

    rule = load_catalogue()["lora-scale-below-one"]
    name = next(iter(rule.thresholds))
    case = Case(tmp_path)
    case.cached([cfg])
    other = case.cached([cfg], thresholds={"lora-scale-below-one": {name: -1}})
    assert case.store.hits == 0 and other == Case.fresh([cfg], thresholds={"lora-scale-below-one": {name: -1}})


def test_changed_base_file_of_a_composed_config(tmp_path):
    base = tmp_path / "base.yaml"
    base.write_text("lora_r: 16\nlora_alpha: 8\n")
    cfg = tmp_path / "run.yaml"
    cfg.write_text("defaults:\n  - base\n  - _self_\nuse_peft: true\nlearning_rate: 2.0e-4\n")
    before, after = Case(tmp_path).check([cfg], lambda: base.write_text("lora_r: 16\nlora_alpha: 32\n"))
    assert "lora-scale-below-one" in _rules(before) and "lora-scale-below-one" not in _rules(after)


def test_repository_script_that_starts_declaring_a_key(tmp_path):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    script = repo / "train.py"
    script.write_text("from dataclasses import dataclass\n\n@dataclass\nclass ScriptArgs:\n"
                      "    dataset_mix: str = ''\n")
    cfg = repo / "configs" / "run.yaml"
    cfg.parent.mkdir()
    cfg.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\nnum_train_epochs: 1\n"
                   "dataset_mix: a\nharbor_tide_window: 3\n")
    before, after = Case(tmp_path).check([cfg], lambda: script.write_text(
        "from dataclasses import dataclass\n\n@dataclass\nclass ScriptArgs:\n"
        "    dataset_mix: str = ''\n    harbor_tide_window: int = 0\n"))
    assert "harbor_tide_window" in before and "harbor_tide_window" not in after


def test_new_python_file_in_the_repository(tmp_path):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    cfg = repo / "run.yaml"
    cfg.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\nharbor_tide_window: 3\n")
    before, after = Case(tmp_path).check([cfg], lambda: (repo / "tools").mkdir() or (
        repo / "tools" / "args.py").write_text(
        "from dataclasses import dataclass\n\n@dataclass\nclass Extra:\n    harbor_tide_window: int = 0\n"))
    assert "harbor_tide_window" in before and "harbor_tide_window" not in after


def test_checkpoint_config_json_changed(tmp_path):
    ckpt = tmp_path / "ckpt"
    ckpt.mkdir()
    shape = LLAMA2_7B_CONFIG
    (ckpt / "config.json").write_text(json.dumps(shape))
    cfg = tmp_path / "run.yaml"
    cfg.write_text(f"model_name_or_path: {ckpt}\nlearning_rate: 2.0e-5\nper_device_train_batch_size: 8\n"
                   "max_seq_length: 4096\nbf16: true\n")
    Case(tmp_path).check([cfg], lambda: (ckpt / "config.json").write_text(json.dumps(SMALLER_LLAMA_CONFIG)),
                         gpu="t4")


def test_catalogue_or_code_change_is_a_miss(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    record = tmp_path / "extra-record.yaml"
    record.write_text("id: x\n")
    files = cache._package_files()
    monkeypatch.setattr(cache, "_package_files", lambda: files + [record])
    case = Case(tmp_path)
    first = case.cached([cfg])
    case.cached([cfg])
    assert case.store.hits == 1
    record.write_text("id: y\n")  # same size: the content is what counts, through the mtime
    os.utime(record, ns=(1, 1))
    assert case.cached([cfg]) == first and case.store.hits == 0


def test_the_package_fingerprint_covers_the_rule_records():
    from cfgcheck.catalogue import catalogue_dir

    listed = {Path(p).resolve() for p in cache._package_files()}
    records = sorted(catalogue_dir().glob("*.yaml"))
    assert records and all(r.resolve() in listed for r in records)
    assert Path(cache.__file__).resolve() in listed
    knowledge = sorted((Path(cache.__file__).parent / "knowledge").glob("*.json"))
    assert knowledge and all(k.resolve() in listed for k in knowledge)


def test_version_change_is_a_miss(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    case = Case(tmp_path)
    case.cached([cfg])
    monkeypatch.setattr(cache, "__version__", "99.0.0")
    case.cached([cfg])
    assert case.store.hits == 0 and case.store.misses == 1


def test_hub_cache_location_is_part_of_the_key(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    case = Case(tmp_path)
    case.cached([cfg])
    monkeypatch.setenv("HF_HUB_CACHE", str(tmp_path / "elsewhere"))
    case.cached([cfg])
    assert case.store.hits == 0


def test_same_bytes_under_another_name_is_another_entry(tmp_path):
    a, b = tmp_path / "a.yaml", tmp_path / "b.yaml"
    a.write_text(LOW_SCALE)
    b.write_text(LOW_SCALE)
    case = Case(tmp_path)
    case.cached([a])
    out = case.cached([b])
    assert case.store.hits == 0 and '"file": "' + str(b) in out


def test_a_report_with_an_internal_error_is_not_stored(tmp_path, monkeypatch):
    from cfgcheck import checks

    def broken(ctx):
        raise RuntimeError("a rule that fails")

    monkeypatch.setitem(checks.all_checks(), "lora-scale-below-one", broken)
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    case = Case(tmp_path)
    case.cached([cfg])
    assert case.store.written == 0
    case.cached([cfg])
    assert case.store.hits == 0


def test_reads_memo_replays_what_the_first_call_read(tmp_path):
    f = tmp_path / "data.txt"
    f.write_text("x")

    @reads.memo()
    def look(path):
        reads.note_file(path)
        return 1

    with reads.recording() as first:
        look(str(f))
    with reads.recording() as second:
        look(str(f))
    assert first == second and len(first) == 1


def test_a_memo_first_asked_with_nothing_recording_still_gives_a_recording_caller_the_facts(tmp_path):
    """A run without the result cache records nothing (no hashing, no folder listing for a
    record no one reads); a caller that records and asks for the same answer afterwards gets
    it worked out again with its facts, from reads.memo and from memo.remembered alike."""
    from cfgcheck import memo

    f = tmp_path / "data.txt"
    f.write_text("x")
    calls = []

    @reads.memo()
    def look(path):
        calls.append(path)
        reads.note_file(path)
        return len(calls)

    assert reads.active_record() is None
    assert look(str(f)) == 1 and look(str(f)) == 1  # remembered, with no facts kept
    with reads.recording() as facts:
        assert look(str(f)) == 2  # worked out again: the facts were never noted
    assert len(facts) == 1
    with reads.recording() as again:
        assert look(str(f)) == 2  # now served from the memo, facts replayed
    assert again == facts

    with memo.scope():
        seen = []

        def compute():
            seen.append(1)
            reads.note_file(str(f))
            return "answer"

        assert memo.remembered("probe", "k", compute) == "answer"
        with reads.recording() as first:
            assert memo.remembered("probe", "k", compute) == "answer"
        with reads.recording() as second:
            assert memo.remembered("probe", "k", compute) == "answer"
        assert len(seen) == 2 and len(first) == 1 and first == second


# --------------------------------------------------------------------------- byte-identical output

def _all_formats(paths, env, *extra):
    out = {}
    for fmt in ("text", "json", "sarif", "github"):
        p = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", *map(str, paths), "--format", fmt,
                            "--no-project", *extra], capture_output=True, cwd=ROOT, env=env, timeout=300)
        out[fmt] = (p.returncode, p.stdout, p.stderr)
    return out


def test_cached_output_is_byte_identical_in_every_format(tmp_path):
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(tmp_path / "cache"))
    paths = [ROOT / "fixtures" / "demo", ROOT / "fixtures" / "clean", ROOT / "fixtures" / "launch"]
    uncached = _all_formats(paths, env, "--no-cache", "--show", "info")
    assert not (tmp_path / "cache").exists()
    stored = _all_formats(paths, env, "--show", "info")
    served = _all_formats(paths, env, "--show", "info")
    assert uncached == stored == served
    assert uncached["json"][1].count(b'"rule"') > 5  # the fixtures hold findings


def test_cached_reports_render_the_same_over_the_public_corpus(tmp_path, shared_dir):
    corpus = shared_dir / "corpus" / "public"
    if not corpus.is_dir():
        pytest.skip("no public corpus")
    first = cache.Store(tmp_path / "cache")
    plain = api.lint([corpus], project=None)
    api.lint([corpus], project=None, cache=first)
    store = cache.Store(tmp_path / "cache")
    served = api.lint([corpus], project=None, cache=store)
    # every file linted the first time is served now, except one whose lint failed inside cfgcheck
    assert first.misses > 100 and store.hits + store.misses == first.misses
    assert store.misses == sum(1 for fr in plain.files if fr.internal)
    for fmt in ("text", "json", "sarif", "github"):
        assert render(fmt, served, served.findings) == render(fmt, plain, plain.findings), fmt


# --------------------------------------------------------------------------- robustness

def _hammer(folder: str, worker: int, rounds: int) -> None:
    store = cache.Store(folder)
    for i in range(rounds):
        key = f"{i % 4:02d}" + "ab" * 31  # four keys, shared by every worker
        report = FileReport(file=f"w{worker}.yaml", layout="trainer", findings=[
            Finding(rule="r", severity=Severity.WARNING, file="f", line=i, column=1, key="k",
                    message="m" * (1000 + worker), hint="h")])
        store.put(key, "0" * 64, f"/nonexistent/w{worker}.yaml", {}, report)
        got = store.get(key)
        assert got is None or isinstance(got, FileReport)


def test_concurrent_writers_never_leave_a_broken_entry(tmp_path):
    folder = str(tmp_path / "cache")
    ctx = multiprocessing.get_context("fork" if sys.platform.startswith("linux") else None)
    procs = [ctx.Process(target=_hammer, args=(folder, w, 60)) for w in range(4)]
    threads = [threading.Thread(target=_hammer, args=(folder, 10 + w, 60)) for w in range(3)]
    for p in procs:
        p.start()
    for t in threads:
        t.start()
    for p in procs:
        p.join(120)
    for t in threads:
        t.join(120)
    assert all(p.exitcode == 0 for p in procs)
    store = cache.Store(folder)
    for i in range(4):
        got = store.get(f"{i:02d}" + "ab" * 31)
        assert isinstance(got, FileReport) and got.findings[0].message.startswith("m" * 1000)
    assert not list(Path(folder).rglob("*.tmp"))


def test_corrupt_or_foreign_entry_is_a_miss(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    case = Case(tmp_path)
    first = case.cached([cfg])
    root = case.folder / f"lint-{cache.FORMAT}"
    (entry,) = [p for p in root.glob("??/*") if p.is_file()]
    (facts,) = [p for p in root.glob("facts/??/*") if p.is_file()]
    blob = entry.read_bytes()
    facts.write_bytes(facts.read_bytes()[:-2])  # a damaged record of what the lint read
    assert case.cached([cfg]) == first and case.store.hits == 0
    marker = tmp_path / "ran"

    class Evil:
        def __reduce__(self):
            return (os.system, (f"touch {marker}",))

    for damaged in (blob[: len(blob) // 2], b"", b"garbage", blob[:-3] + b"xyz",
                    cache._MAGIC + pickle.dumps(("k", [], Evil()))):
        entry.write_bytes(damaged)
        assert case.cached([cfg]) == first and case.store.hits == 0
    assert not marker.exists()


def test_unwritable_cache_folder_is_no_error(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    store = cache.Store(blocker / "cache")
    report = api.lint([str(cfg)], project=None, cache=store)
    assert "lora-scale-below-one" in _rules(_answer(report)) and store.written == 0
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(blocker / "cache"))
    p = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(cfg), "--no-project", "--show", "info"],
                       capture_output=True, text=True, cwd=ROOT, env=env, timeout=120)
    assert p.returncode == 0 and "lora-scale-below-one" in p.stdout and p.stderr == ""


def test_size_stays_bounded(tmp_path, monkeypatch):
    monkeypatch.setattr(cache, "MAX_BYTES", 40_000)
    files = []
    for i in range(40):
        f = tmp_path / "cfgs" / f"run{i:02d}.yaml"
        f.parent.mkdir(exist_ok=True)
        f.write_text(LOW_SCALE + f"seed: {i}\n")
        files.append(f)
    for chunk in range(0, 40, 5):  # several runs, each writing a few entries
        store = cache.Store(tmp_path / "cache")
        api.lint([str(f) for f in files[chunk:chunk + 5]], project=None, cache=store)
    n, total = cache.usage(tmp_path / "cache" / f"lint-{cache.FORMAT}")
    assert 0 < total <= 40_000 and n < 40


def test_trim_removes_the_oldest_first(tmp_path):
    root = tmp_path / "root"
    for i in range(10):
        p = root / f"{i:02d}" / "entry"
        p.parent.mkdir(parents=True)
        p.write_bytes(b"x" * 100)
        os.utime(p, (1000 + i, 1000 + i))
    removed = cache.trim(root, max_bytes=500)
    left = sorted(p.parent.name for p in root.rglob("entry"))
    assert removed == 6 and left == ["06", "07", "08", "09"]  # 80 % of 500 bytes: 4 entries


def test_no_cache_never_touches_the_cache_folder(tmp_path):
    folder = tmp_path / "never"
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(folder))
    for extra in ([], ["--format", "json"], ["-j", "2"]):
        p = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(cfg), str(cfg), "--no-cache",
                            "--no-project", *extra], capture_output=True, text=True, cwd=ROOT, env=env,
                           timeout=120)
        assert p.returncode == 0, p.stderr
    assert not folder.exists()


def test_parallel_cached_run_gives_the_serial_answer(tmp_path):
    files = []
    for i in range(6):
        f = tmp_path / f"run{i}.yaml"
        f.write_text(LOW_SCALE if i % 2 else GOOD_SCALE)
        files.append(str(f))
    plain = _answer(api.lint(files, project=None))
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store, jobs=2)) == plain
    assert store.misses == 6 and store.written > 0
    Path(files[0]).write_text(LOW_SCALE)
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store, jobs=2)) == _answer(api.lint(files, project=None))
    assert (store.hits, store.misses) == (5, 1)


def test_cache_folder_comes_from_the_environment_or_the_platform(tmp_path, monkeypatch):
    import platformdirs

    monkeypatch.setenv(cache.ENV_FOLDER, str(tmp_path / "mine"))
    assert cache.default_folder() == tmp_path / "mine"
    monkeypatch.delenv(cache.ENV_FOLDER)
    assert cache.default_folder() == Path(platformdirs.user_cache_dir("cfgcheck", appauthor=False))


@pytest.mark.parametrize("xdg, home", [(None, "/home/someone"), ("/var/tmp/xdg", "/home/someone"),
                                       ("relative/xdg", "/home/someone"), ("", "/home/someone/"),
                                       ("/x/trailing/", None), (None, "relative/home")])
def test_cache_folder_on_linux_is_platformdirs_answer(monkeypatch, xdg, home):
    import platformdirs

    monkeypatch.delenv(cache.ENV_FOLDER, raising=False)
    for name, value in (("XDG_CACHE_HOME", xdg), ("HOME", home)):
        if value is None:
            monkeypatch.delenv(name, raising=False)
        else:
            monkeypatch.setenv(name, value)
    try:
        expected = Path(platformdirs.user_cache_dir("cfgcheck", appauthor=False))
    except RuntimeError:
        expected = None
    assert cache.default_folder() == expected
    fast = cache._linux_cache_folder()
    if sys.platform == "linux" and ((xdg or "").startswith("/") or (home or "").startswith("/")):
        assert fast is not None
    if fast is not None:
        assert Path(fast) == expected


def test_cache_folder_is_found_without_importing_platformdirs(tmp_path):
    if sys.platform != "linux":
        pytest.skip("the folder is worked out by hand on Linux only")
    env = {k: v for k, v in os.environ.items() if k != cache.ENV_FOLDER}
    env["HOME"] = str(tmp_path)
    env.pop("XDG_CACHE_HOME", None)
    code = ("import sys; from cfgcheck import cache; f = cache.default_folder(); "
            "print(f); print('platformdirs' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True).stdout
    assert out.split() == [str(tmp_path / ".cache" / "cfgcheck"), "False"]


def test_no_known_cache_folder_means_no_caching(tmp_path, monkeypatch):
    monkeypatch.delenv(cache.ENV_FOLDER)
    monkeypatch.setitem(sys.modules, "platformdirs", None)  # the library cannot be imported
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    store = cache.Store()
    report = api.lint([str(cfg)], project=None, cache=store)
    assert not store.usable and store.written == 0 and store.hits == 0
    assert "lora-scale-below-one" in _rules(_answer(report))


def test_a_replaced_check_in_a_long_lived_process_is_a_miss(tmp_path, monkeypatch):
    from cfgcheck import checks

    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    case = Case(tmp_path)
    before = case.cached([cfg])
    assert "lora-scale-below-one" in _rules(before)

    def silent(ctx):
        return None

    monkeypatch.setitem(checks.all_checks(), "lora-scale-below-one", silent)
    after = case.cached([cfg])
    assert case.store.hits == 0 and "lora-scale-below-one" not in _rules(after)


# every file a lint opens and every folder it lists must be in its record of reads, or a change
# there would go unseen by the cache; checked with the interpreter's audit events in a fresh process
_AUDIT = r"""
import json, os, sys
watch, opened = [False], []
def hook(event, args):
    if watch[0] and event in ("open", "os.listdir", "os.scandir") and args and isinstance(args[0], (str, bytes, os.PathLike)):
        opened.append((event, os.path.abspath(os.fsdecode(args[0]))))
sys.addaudithook(hook)
from cfgcheck import engine
from cfgcheck.catalogue import catalogue_dir
from cfgcheck.engine import Options
# cfgcheck's own files (code, rule records) are in the key; the interpreter's and libraries' too
skip = tuple({sys.prefix, sys.base_prefix, os.path.dirname(engine.__file__), os.path.dirname(os.__file__),
              str(catalogue_dir())})
out = {}
for f in engine.expand_paths(sys.argv[1:]):
    opened.clear()
    watch[0] = True
    report, facts = engine.lint_file_recorded(f, Options(launch=tuple(os.environ.get("LAUNCH", "").split()) or ()))
    watch[0] = False
    read = {p for k, p, _pat in facts if k == "f"} | {os.path.abspath(f)}  # contents
    listed = {p for k, p, _pat in facts if k in ("d", "s")}  # names in folders
    unseen = sorted({f"{e} {p}" for e, p in opened if p not in (read if e == "open" else listed)
                     and not p.startswith(skip)})
    out[f] = unseen
print(json.dumps(out))
"""


def test_every_file_a_lint_opens_is_recorded(tmp_path):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    (repo / "train.py").write_text("import argparse\np = argparse.ArgumentParser()\np.add_argument('--harbor_tide_window')\n")
    (repo / "requirements.txt").write_text("transformers==4.57.0\n")
    ckpt = repo / "ckpt"
    ckpt.mkdir()
    (ckpt / "config.json").write_text(json.dumps({
        "model_type": "llama", "hidden_size": 1024, "intermediate_size": 2816, "num_hidden_layers": 8,
        "num_attention_heads": 16, "num_key_value_heads": 16, "vocab_size": 32000,
        "max_position_embeddings": 2048, "tie_word_embeddings": False, "torch_dtype": "bfloat16"}))
    (repo / "ds.json").write_text('{"train_micro_batch_size_per_gpu": 2, "zero_optimization": {"stage": 2}}\n')
    (repo / "base.yaml").write_text("lora_r: 16\nlora_alpha: 8\n")
    (repo / "composed.yaml").write_text("defaults:\n  - base\n  - _self_\nuse_peft: true\n")
    (repo / "run.yaml").write_text(f"model_name_or_path: {ckpt}\ndeepspeed: ds.json\nlearning_rate: 2.0e-5\n"
                                   "harbor_tide_window: 3\nper_device_train_batch_size: 2\n")
    (repo / "launch.yaml").write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: MULTI_GPU\n"
                                      "num_processes: 4\nmixed_precision: fp16\n")
    env = dict(ENV, LAUNCH=str(repo / "launch.yaml"))
    p = subprocess.run([sys.executable, "-c", _AUDIT, str(repo), str(ROOT / "fixtures")], capture_output=True,
                       text=True, cwd=ROOT, env=env, timeout=600)
    assert p.returncode == 0, p.stderr
    unseen = {f: u for f, u in json.loads(p.stdout.splitlines()[-1]).items() if u}
    assert unseen == {}
    assert len(json.loads(p.stdout.splitlines()[-1])) > 20


# --------------------------------------------------------------------------- whole runs (the command line)

def _lint_cli(args, folder, *, lean: bool | None = None, monkeypatch=None, **env):
    """(exit code, stdout bytes, stderr bytes) of `cfgcheck lint ARGS` in this process, through
    the cache folder FOLDER. lean=True: the run must be answered by its stored record (the full
    lint is made to fail); lean=False: it must not be (the full lint is watched)."""
    from typer.testing import CliRunner

    from cfgcheck.cli import app

    called = []
    if lean is not None:
        real = api.lint_reports

        def full_lint(*a, **k):
            called.append(1)
            if lean:
                raise AssertionError("the stored run record was not used")
            return real(*a, **k)

        monkeypatch.setattr(api, "lint_reports", full_lint)
    result = CliRunner().invoke(app, ["lint", *map(str, args)],
                                env={"CFGCHECK_CACHE_DIR": str(folder), "NO_COLOR": "1", **env})
    if lean is not None:
        monkeypatch.setattr(api, "lint_reports", real)
        assert called == ([] if lean else [1])
    assert result.exception is None or isinstance(result.exception, SystemExit), result.exception
    return result.exit_code, result.stdout_bytes, result.stderr_bytes


def _run_records(folder: Path) -> list[Path]:
    return sorted(p for p in (folder / f"lint-{cache.FORMAT}" / "runs").glob("*/*") if not p.name.endswith(".tmp"))


@pytest.mark.parametrize("fmt", ["text", "json", "sarif", "github"])
def test_an_unchanged_run_is_answered_byte_identical_from_its_record(tmp_path, monkeypatch, fmt):
    paths = [ROOT / "fixtures" / "demo", ROOT / "fixtures" / "clean", ROOT / "fixtures" / "launch"]
    folder = tmp_path / "cache"
    args = [*paths, "--format", fmt, "--show", "info", "--no-project"]
    uncached = _lint_cli([*args, "--no-cache"], folder)
    assert not folder.exists()
    stored = _lint_cli(args, folder, lean=False, monkeypatch=monkeypatch)
    assert len(_run_records(folder)) == 1
    served = _lint_cli(args, folder, lean=True, monkeypatch=monkeypatch)
    assert uncached == stored == served
    assert uncached[0] == 1 and len(uncached[1]) > 500  # the fixtures hold findings


def test_a_run_with_the_summary_or_quiet_output_is_its_own_record(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    answers = {}
    for extra in ([], ["--summary"], ["--quiet"]):
        answers[tuple(extra)] = _lint_cli([cfg, "--no-project", *extra], folder, lean=False, monkeypatch=monkeypatch)
    for extra, answer in answers.items():
        assert _lint_cli([cfg, "--no-project", *extra], folder, lean=True, monkeypatch=monkeypatch) == answer
        assert answer == _lint_cli([cfg, "--no-project", "--no-cache", *extra], folder)
    assert len({a[1] for a in answers.values()}) == 3


class RunCase:
    """A command line linted (recorded), again (answered by its record), then once more after
    CHANGE: the full lint must run and give the answer of a lint without the cache."""

    def __init__(self, tmp_path: Path, monkeypatch):
        self.folder = tmp_path / "cache"
        self.monkeypatch = monkeypatch

    def check(self, args, change, recorded=False, **env):
        args = [*args, "--show", "info"]  # lora-scale-below-one is an info finding
        before = _lint_cli(args, self.folder, lean=recorded, monkeypatch=self.monkeypatch, **env)
        assert _lint_cli(args, self.folder, lean=True, monkeypatch=self.monkeypatch, **env) == before
        changed = change()
        new_args = [*changed, "--show", "info"] if isinstance(changed, list) else args
        new_env = changed if isinstance(changed, dict) else env
        after = _lint_cli(new_args, self.folder, lean=False, monkeypatch=self.monkeypatch, **new_env)
        assert after == _lint_cli([*new_args, "--no-cache"], self.folder, **new_env)
        assert after != before
        # the new answer is recorded in its turn
        assert _lint_cli(new_args, self.folder, lean=True, monkeypatch=self.monkeypatch, **new_env) == after
        return before, after


def test_run_record_changed_file_bytes(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    before, after = RunCase(tmp_path, monkeypatch).check([cfg, "--no-project"], lambda: cfg.write_text(GOOD_SCALE))
    assert b"lora-scale-below-one" in before[1] and b"lora-scale-below-one" not in after[1]


def test_run_record_changed_linked_file(tmp_path, monkeypatch):
    cfg = tmp_path / "accelerate.yaml"
    cfg.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 8\n"
                   "deepspeed_config:\n  deepspeed_config_file: ds.json\n  gradient_accumulation_steps: 4\n")
    ds = tmp_path / "ds.json"
    ds.write_text('{"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": 8, '
                  '"zero_optimization": {"stage": 2}}\n')
    before, after = RunCase(tmp_path, monkeypatch).check([cfg, "--no-project"], lambda: ds.write_text(
        '{"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": 4, '
        '"zero_optimization": {"stage": 2}}\n'))
    assert b"deepspeed-file-contradicts-config" in before[1]
    assert b"deepspeed-file-contradicts-config" not in after[1]


def test_run_record_changed_project_file(tmp_path, monkeypatch):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    cfg = repo / "run.yaml"
    cfg.write_text(LOW_SCALE)
    project = repo / "cfgcheck.yaml"
    project.write_text("rules:\n  skip: [unknown-key]\n")
    before, after = RunCase(tmp_path, monkeypatch).check(
        [cfg], lambda: project.write_text("rules:\n  skip: [lora-scale-below-one]\n"))
    assert b"lora-scale-below-one" in before[1] and b"lora-scale-below-one" not in after[1]


def test_run_record_project_file_that_appears(tmp_path, monkeypatch):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    cfg = repo / "configs" / "run.yaml"
    cfg.parent.mkdir()
    cfg.write_text(LOW_SCALE)
    before, after = RunCase(tmp_path, monkeypatch).check(
        [cfg], lambda: (repo / "cfgcheck.yaml").write_text("rules:\n  skip: [lora-scale-below-one]\n"))
    assert b"lora-scale-below-one" in before[1] and b"lora-scale-below-one" not in after[1]


def test_run_record_new_and_removed_files_in_a_walked_folder(tmp_path, monkeypatch):
    top = tmp_path / "configs"
    (top / "sub").mkdir(parents=True)
    (top / "a.yaml").write_text(GOOD_SCALE)
    case = RunCase(tmp_path, monkeypatch)
    before, after = case.check([top, "--no-project"], lambda: (top / "sub" / "b.yaml").write_text(LOW_SCALE))
    assert b"lora-scale-below-one" in after[1]
    case.check([top, "--no-project"], lambda: (top / "sub" / "b.yaml").unlink(), recorded=True)
    # a folder the walk skips (hidden) changes nothing: still answered by the record
    (top / ".hidden").mkdir()
    (top / ".hidden" / "c.yaml").write_text(LOW_SCALE)
    args = [top, "--no-project", "--show", "info"]
    again = _lint_cli(args, case.folder, lean=False, monkeypatch=monkeypatch)  # a new entry in top
    (top / ".hidden" / "d.yaml").write_text(LOW_SCALE)
    assert _lint_cli(args, case.folder, lean=True, monkeypatch=monkeypatch) == again


def test_run_record_changed_option(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    before, after = RunCase(tmp_path, monkeypatch).check(
        [cfg, "--no-project"], lambda: [cfg, "--no-project", "--skip", "lora-scale-below-one"])


def test_run_record_changed_version_or_package(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch)
    _lint_cli([cfg, "--no-project"], folder, lean=True, monkeypatch=monkeypatch)
    monkeypatch.setattr(cache, "__version__", "99.0.0")
    _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch)
    monkeypatch.undo()
    record = tmp_path / "extra-record.yaml"
    record.write_text("id: x\n")
    files = cache._package_files()
    monkeypatch.setattr(cache, "_package_files", lambda: files + [record])
    _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch)
    _lint_cli([cfg, "--no-project"], folder, lean=True, monkeypatch=monkeypatch)
    record.write_text("id: y\n")
    os.utime(record, ns=(1, 1))
    _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch)


def test_run_record_changed_environment(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    for env in ({}, {"HF_HUB_CACHE": str(tmp_path / "elsewhere")}, {"NO_COLOR": ""}):
        _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch, **env)
        _lint_cli([cfg, "--no-project"], folder, lean=True, monkeypatch=monkeypatch, **env)


def test_run_record_checkpoint_config_changed(tmp_path, monkeypatch):
    ckpt = tmp_path / "ckpt"
    ckpt.mkdir()
    (ckpt / "config.json").write_text(json.dumps(LLAMA2_7B_CONFIG))
    cfg = tmp_path / "run.yaml"
    cfg.write_text(f"model_name_or_path: {ckpt}\nlearning_rate: 2.0e-5\nper_device_train_batch_size: 8\n"
                   "max_seq_length: 4096\nbf16: true\n")
    RunCase(tmp_path, monkeypatch).check(
        [cfg, "--no-project", "--gpu", "t4"],
        lambda: (ckpt / "config.json").write_text(json.dumps(SMALLER_LLAMA_CONFIG)))


def test_run_record_changed_baseline_file(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    base = tmp_path / "baseline.json"
    code, _, err = _lint_cli([cfg, "--no-project", "--save-baseline", base], folder)
    assert code == 0 and base.is_file() and b"recorded 3 findings" in err
    RunCase(tmp_path, monkeypatch).check([cfg, "--no-project", "--baseline", base], lambda: base.write_text(
        json.dumps(dict(json.loads(base.read_text()), findings=[]))))


def test_save_baseline_is_never_answered_from_a_record(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    base = tmp_path / "baseline.json"
    for _ in range(2):
        base.unlink(missing_ok=True)
        assert _lint_cli([cfg, "--no-project", "--save-baseline", base], folder, lean=False,
                         monkeypatch=monkeypatch)[0] == 0
        assert base.is_file()
    assert _run_records(folder) == []


def test_corrupt_or_foreign_run_record_is_a_miss(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    args = [cfg, "--no-project", "--format", "json"]
    answer = _lint_cli(args, folder, lean=False, monkeypatch=monkeypatch)
    (record,) = _run_records(folder)
    good = record.read_bytes()
    for bad in (b"", good[:-3], good[: len(good) // 2], b"x" * len(good), good[:-30] + b"\0" * 30):
        record.write_bytes(bad)
        assert _lint_cli(args, folder, lean=False, monkeypatch=monkeypatch) == answer
        record.write_bytes(bad)  # the miss stored the record afresh; break it again for the next case
    record.write_bytes(good)
    assert _lint_cli(args, folder, lean=True, monkeypatch=monkeypatch) == answer


def test_run_records_are_counted_and_trimmed(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    for fmt in ("text", "json", "sarif"):
        _lint_cli([cfg, "--no-project", "--format", fmt], folder)
    root = folder / f"lint-{cache.FORMAT}"
    records = _run_records(folder)
    assert len(records) == 3
    n, size = cache.usage(root)
    assert n >= 3 + 1 + 1 and size >= sum(r.stat().st_size for r in records)
    cache.trim(root, max_entries=2)
    assert cache.usage(root)[0] <= 2


def test_a_run_that_cannot_store_a_file_is_not_recorded(tmp_path, monkeypatch):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    monkeypatch.setattr(cache.Store, "put", lambda self, *a, **k: setattr(self, "run_whole", False) or False)
    _lint_cli([cfg, "--no-project"], folder)
    assert _run_records(folder) == []


def test_a_run_answered_from_its_record_imports_no_linting_code(tmp_path):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(tmp_path / "cache"))
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    probe = ("import sys, runpy\nsys.argv = ['cfgcheck', 'lint', sys.argv[1], '--no-project']\n"
             "try:\n    runpy.run_module('cfgcheck', run_name='__main__')\nexcept SystemExit as e:\n"
             "    code = e.code\nsys.stderr.write(repr((code, sorted(m for m in sys.modules if m in HEAVY))))\n")
    heavy = ["yaml", "pickle", "json", "cfgcheck.api", "cfgcheck.engine", "cfgcheck.findings",
             "cfgcheck.load", "cfgcheck.view", "cfgcheck.render", "cfgcheck.checks", "cfgcheck.catalogue",
             "cfgcheck.knowledge", "cfgcheck.project", "cfgcheck.projectfile"]
    runs = [subprocess.run([sys.executable, "-c", f"HEAVY = {heavy!r}\n" + probe, str(cfg)], capture_output=True,
                           text=True, cwd=ROOT, env=env, timeout=120) for _ in range(2)]
    first, second = (eval(p.stderr.strip().splitlines()[-1]) for p in runs)  # noqa: S307 - our own repr
    assert first[0] == second[0] == 0 and runs[0].stdout == runs[1].stdout != ""
    assert "cfgcheck.engine" in first[1]  # the first run lints
    assert second[1] == []


def test_concurrent_runs_leave_one_whole_run_record(tmp_path):
    cfgs = []
    for i in range(4):
        cfg = tmp_path / "configs" / f"run{i}.yaml"
        cfg.parent.mkdir(exist_ok=True)
        cfg.write_text(LOW_SCALE if i % 2 else GOOD_SCALE)
        cfgs.append(cfg)
    folder = tmp_path / "cache"
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(folder))
    cmd = [sys.executable, "-m", "cfgcheck", "lint", str(tmp_path / "configs"), "--no-project", "--format", "json"]
    procs = [subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT, env=env)
             for _ in range(4)]
    answers = {(p.wait(timeout=300), *p.communicate()) for p in procs}
    assert len(answers) == 1
    (record,) = _run_records(folder)
    assert not [p for p in record.parent.iterdir() if p.name.endswith(".tmp")]
    again = subprocess.run(cmd, capture_output=True, cwd=ROOT, env=env, timeout=300)
    assert {(again.returncode, again.stdout, again.stderr)} == answers


@pytest.mark.parametrize("aside", ["a warning on stderr", "bytes through stdout's buffer"])
def test_a_run_that_printed_what_a_record_cannot_hold_is_not_recorded(tmp_path, monkeypatch, aside):
    cfg = tmp_path / "run.yaml"
    cfg.write_text(LOW_SCALE)
    folder = tmp_path / "cache"
    real = api.lint_reports

    def lint_and_print(*a, **k):
        if aside.startswith("a warning"):
            sys.stderr.write("cfgcheck: a warning\n")
        else:
            sys.stdout.flush()
            sys.stdout.buffer.write(b"raw\n")
        return real(*a, **k)

    monkeypatch.setattr(api, "lint_reports", lint_and_print)
    code, out, err = _lint_cli([cfg, "--no-project"], folder)
    assert (b"raw\n" in out) or (b"a warning" in err)
    assert _run_records(folder) == []
    monkeypatch.setattr(api, "lint_reports", real)
    assert _lint_cli([cfg, "--no-project"], folder, lean=False, monkeypatch=monkeypatch)[0] == code
    assert len(_run_records(folder)) == 1


def test_run_record_project_baseline_that_appears(tmp_path, monkeypatch):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    cfg = repo / "run.yaml"
    cfg.write_text(LOW_SCALE)
    (repo / "cfgcheck.yaml").write_text("baseline: known.json\n")
    known = repo / "known.json"
    assert _lint_cli([cfg, "--save-baseline", known], tmp_path / "cache")[0] == 0
    saved = known.read_text()
    known.unlink()
    before, after = RunCase(tmp_path, monkeypatch).check([cfg], lambda: known.write_text(saved))
    assert b"lora-scale-below-one" in before[1] and b"lora-scale-below-one" not in after[1]


def test_run_record_of_a_project_linted_without_paths(tmp_path, monkeypatch):
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    (repo / "cfgcheck.yaml").write_text("configs: ['configs/**']\n")
    (repo / "configs" / "team").mkdir(parents=True)
    (repo / "configs" / "a.yaml").write_text(GOOD_SCALE)
    (repo / "notes").mkdir()
    monkeypatch.chdir(repo)
    case = RunCase(tmp_path, monkeypatch)
    before, after = case.check([], lambda: (repo / "configs" / "team" / "b.yaml").write_text(LOW_SCALE))
    assert b"lora-scale-below-one" in after[1]
    # a file outside the project's configs globs changes no answer, but a walked folder's entries:
    # the full lint runs and gives the same bytes
    (repo / "notes" / "c.yaml").write_text(LOW_SCALE)
    assert _lint_cli(["--show", "info"], case.folder, lean=False, monkeypatch=monkeypatch) == after


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes are a POSIX thing")
def test_a_pipe_among_the_configs_never_hangs_a_cached_lint(tmp_path):
    (tmp_path / "configs").mkdir()
    os.mkfifo(tmp_path / "configs" / "pipe.yaml")  # nothing ever writes to it: a blocking open would hang
    (tmp_path / "configs" / "run.yaml").write_text(LOW_SCALE)
    env = dict(ENV, CFGCHECK_CACHE_DIR=str(tmp_path / "cache"))
    answers = []
    for _ in range(2):
        p = subprocess.run([sys.executable, "-m", "cfgcheck", "lint", str(tmp_path / "configs"), "--no-project"],
                           capture_output=True, cwd=ROOT, env=env, timeout=120)
        answers.append((p.returncode, p.stdout, p.stderr))
    assert answers[0] == answers[1] and answers[0][0] == api.EXIT_INPUT
    assert b"pipe.yaml:1:1: input error: not a regular file" in answers[0][1]
    assert cache.reads.regular_bytes(str(tmp_path / "configs" / "pipe.yaml")) is None


def test_the_bytes_hashed_are_the_whole_file_even_when_it_grew_after_its_size_was_taken(tmp_path, monkeypatch):
    f = tmp_path / "run.yaml"
    body = LOW_SCALE.encode() * 50
    f.write_bytes(body)
    st, got = cache.reads.regular_bytes(str(f))
    assert got == body and st.st_size == len(body)
    real_fstat = os.fstat

    class Smaller:  # the size as a stat taken before the last writes would give it
        def __init__(self, st):
            self._st = st

        def __getattr__(self, name):
            return getattr(self._st, name)

        st_size = 10

    monkeypatch.setattr(cache.reads.os, "fstat", lambda fd: Smaller(real_fstat(fd)))
    assert cache.reads.regular_bytes(str(f))[1] == body
    assert cache.reads.regular_bytes(str(f), limit=9) is None  # over the limit by its stated size
    (tmp_path / "empty.yaml").write_bytes(b"")
    monkeypatch.setattr(cache.reads.os, "fstat", real_fstat)
    assert cache.reads.regular_bytes(str(tmp_path / "empty.yaml"))[1] == b""


# --------------------------------------------------------------------------- writing behind the lint

def _configs(folder: Path, n: int) -> list[Path]:
    folder.mkdir()
    out = []
    for i in range(n):
        p = folder / f"run{i:02d}.yaml"
        p.write_text(LOW_SCALE.replace("2.0e-4", f"{i + 1}.0e-5"))
        out.append(p)
    return out


def _stored(folder: Path) -> list[Path]:
    root = folder / f"lint-{cache.FORMAT}"
    return [p for p in root.glob("??/*") if p.is_file()]


@pytest.mark.parametrize("how", ["process", "thread"])
def test_entries_written_behind_the_lint_are_on_disk_when_the_run_ends(tmp_path, monkeypatch, how):
    files = _configs(tmp_path / "cfg", 12)
    if how == "thread":
        monkeypatch.setattr(cache.Store, "_fork_writer", lambda self: False)
    elif not sys.platform.startswith("linux") or threading.active_count() != 1:
        pytest.skip("a writer process is forked only on Linux, by a process with no other thread")
    store = cache.Store(tmp_path / "cache")
    first = api.lint([str(p) for p in files], project=None, cache=store)
    assert store.wrote_behind == how
    assert len(_stored(tmp_path / "cache")) == 12  # one entry a file, all there once lint returns
    assert not list((tmp_path / "cache").rglob("*.tmp"))
    again = cache.Store(tmp_path / "cache")
    served = api.lint([str(p) for p in files], project=None, cache=again)
    assert again.hits == 12 and again.misses == 0
    assert _answer(served) == _answer(first)


@pytest.mark.parametrize("how", ["process", "thread"])
def test_a_write_that_fails_behind_the_lint_stores_no_whole_run(tmp_path, monkeypatch, how):
    files = _configs(tmp_path / "cfg", 6)
    if how == "thread":
        monkeypatch.setattr(cache.Store, "_fork_writer", lambda self: False)
    elif not sys.platform.startswith("linux") or threading.active_count() != 1:
        pytest.skip("a writer process is forked only on Linux, by a process with no other thread")
    # every write behind fails (the forked writer inherits the replaced method); the answer is
    # the same, nothing is stored, and the run is known not to be stored whole
    monkeypatch.setattr(cache.Store, "_write_file", lambda self, target, blob, made: False)
    store = cache.Store(tmp_path / "cache")
    got = api.lint([str(p) for p in files], project=None, cache=store)
    assert store.wrote_behind == how
    assert _answer(got) == Case.fresh(files)
    assert _stored(tmp_path / "cache") == []
    assert store.run_whole is False and store.writable is False


def test_a_run_stopped_early_still_writes_what_it_linted(tmp_path):
    files = _configs(tmp_path / "cfg", 8)
    store = cache.Store(tmp_path / "cache")
    reports = api.lint_reports([str(p) for p in files], project=None, cache=store)
    taken = [next(reports) for _ in range(3)]
    reports.close()  # the caller stops: the writes behind are waited for, the writer let go
    assert len(taken) == 3 and len(_stored(tmp_path / "cache")) == 3
    assert store._pipe is None and store._child is None and store._writer is None


class _Text(str):
    """Text of a type that is no result type (a str subclass, as an enum's value could be)."""


@pytest.mark.parametrize("foreign", [Path("a.yaml"), _Text("x"), {"k": [1, Path("b")]}, (1, _Text("y"))])
def test_a_report_holding_a_value_of_another_type_is_not_stored(tmp_path, foreign):
    # the entry could not be read back by the unpickler that builds only result types
    store = cache.Store(tmp_path / "cache")
    report = FileReport(file="a.yaml", layout="trainer", findings=[
        Finding(rule="r", severity=Severity.WARNING, file="a.yaml", line=1, column=1, key="k",
                message="m", hint="h", data={"value": foreign})])
    assert store.put("ab" * 32, "0" * 64, str(tmp_path / "a.yaml"), {}, report) is False
    assert _stored(tmp_path / "cache") == []
    plain = FileReport(file="a.yaml", layout="trainer", findings=[
        Finding(rule="r", severity=Severity.WARNING, file="a.yaml", line=1, column=1, key="k",
                message="m", hint="h", data={"value": [1, 2.5, "x", None, True, {"n": (3,)}]})])
    assert store.put("cd" * 32, "0" * 64, str(tmp_path / "a.yaml"), {}, plain) is True
    assert isinstance(cache.Store(tmp_path / "cache").get("cd" * 32), FileReport)


def test_a_finding_read_back_is_the_same_frozen_finding():
    from cfgcheck._records import FrozenRecordError
    from cfgcheck.findings import Related

    f = Finding(rule="lora-scale", severity=Severity.ERROR, file="a.yaml", line=3, column=7, key="lora.alpha",
                message="m", hint="h", data={"alpha": 8, "r": (16,)}, path=("lora", "alpha"), document=1,
                fix=None, related=(Related(key="lora.r", line=4, column=5),))
    copy = pickle.loads(pickle.dumps(f, pickle.HIGHEST_PROTOCOL))
    assert type(copy) is Finding and copy == f
    assert [getattr(copy, n) for n in Finding._record_fields] == [getattr(f, n) for n in Finding._record_fields]
    with pytest.raises(FrozenRecordError):
        copy.line = 9
    # a state of another shape (an entry of an older layout) is refused, and the cache takes
    # a refused entry as a miss
    with pytest.raises(ValueError):
        Finding.__new__(Finding).__setstate__(f.__getstate__()[:-1])
