"""Packed entries: a run that stores many reports writes all but its first few into one pack
file. The invalidation cases of test_cache run here again with every entry packed (they are
imported, so pytest collects them in this module, under its fixture), then the cases of packs
alone: one file for many entries, damaged packs, a pack that cannot be written, trimming."""

from __future__ import annotations

import os
import pickle
import sys
import threading
from pathlib import Path

import pytest

from cfgcheck import api, cache
from cfgcheck.findings import FileReport

from .test_cache import (GOOD_SCALE, LOW_SCALE, _answer, _stored,  # noqa: F401 - collected here again
                         test_changed_base_file_of_a_composed_config, test_changed_file_is_linted_again,
                         test_changed_launch_file, test_changed_linked_deepspeed_file,
                         test_changed_option, test_changed_project_file, test_changed_threshold,
                         test_checkpoint_config_json_changed, test_linked_file_that_appears_where_nothing_was,
                         test_new_python_file_in_the_repository, test_parallel_cached_run_gives_the_serial_answer,
                         test_repository_script_that_starts_declaring_a_key,
                         test_same_bytes_under_another_name_is_another_entry, test_size_stays_bounded)


@pytest.fixture(autouse=True, params=["index searched", "index in a table"])
def _every_entry_packed(monkeypatch, request):
    monkeypatch.setattr(cache, "PACK_AFTER", 0)
    # a run's first lookups search the packs' index bytes; past PACK_SCANS, a table of them
    monkeypatch.setattr(cache, "PACK_SCANS", 64 if request.param == "index searched" else 0)


def _configs(folder: Path, n: int) -> list[str]:
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(n):
        f = folder / f"run{i:02d}.yaml"
        f.write_text((LOW_SCALE if i % 2 else GOOD_SCALE) + f"seed: {i}\n")
        out.append(str(f))
    return out


def _root(tmp_path: Path) -> Path:
    return tmp_path / "cache" / f"lint-{cache.FORMAT}"


def _packs(tmp_path: Path) -> list[Path]:
    return sorted((_root(tmp_path) / "packs").glob("*.pack"))


@pytest.mark.parametrize("how", ["process", "thread"])
def test_a_run_past_the_first_entries_writes_one_pack(tmp_path, monkeypatch, how):
    monkeypatch.setattr(cache, "PACK_AFTER", 3)
    if how == "thread":
        monkeypatch.setattr(cache.Store, "_fork_writer", lambda self: False)
    elif not sys.platform.startswith("linux") or threading.active_count() != 1:
        pytest.skip("a writer process is forked only on Linux, by a process with no other thread")
    files = _configs(tmp_path / "cfg", 10)
    plain = _answer(api.lint(files, project=None))
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store)) == plain
    assert store.wrote_behind == how
    assert len(_stored(tmp_path / "cache")) == 3  # the first three have files of their own
    (pack,) = _packs(tmp_path)  # the other seven share one, in place once lint returns
    assert len(cache._read_pack_index(str(pack))) >= 7
    assert not list((tmp_path / "cache").rglob("*.tmp"))
    again = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=again)) == plain
    assert (again.hits, again.misses) == (10, 0)


def test_of_two_packed_entries_of_a_file_the_one_whose_facts_hold_is_used(tmp_path):
    (cfg,) = _configs(tmp_path / "cfg", 1)
    ds = tmp_path / "cfg" / "ds.json"
    ds.write_text('{"train_micro_batch_size_per_gpu": 4}')
    Path(cfg).write_text(LOW_SCALE + "deepspeed: ds.json\n")
    first = _answer(api.lint([cfg], project=None, cache=cache.Store(tmp_path / "cache")))
    ds.write_text('{"train_micro_batch_size_per_gpu": 8}')  # the same key, other facts
    store = cache.Store(tmp_path / "cache")
    second = _answer(api.lint([cfg], project=None, cache=store))
    assert store.misses == 1 and len(_packs(tmp_path)) == 2
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint([cfg], project=None, cache=store)) == second and store.hits == 1
    ds.write_text('{"train_micro_batch_size_per_gpu": 4}')  # back: the older pack's entry holds again
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint([cfg], project=None, cache=store)) == first and store.hits == 1


def test_a_damaged_or_foreign_pack_is_a_miss(tmp_path):
    files = _configs(tmp_path / "cfg", 4)
    plain = _answer(api.lint(files, project=None))
    api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))
    (pack,) = _packs(tmp_path)
    whole = pack.read_bytes()
    index = cache._read_pack_index(str(pack))
    marker = tmp_path / "ran"

    class Evil:
        def __reduce__(self):
            return (os.system, (f"touch {marker}",))

    evil = cache._MAGIC + pickle.dumps(("k", "f", Evil()))
    first_entry = min(offset for _, offset, _ in index)
    damaged = [
        whole[: len(whole) // 2],  # cut short: no index at the end
        b"",
        b"garbage" * 50,
        whole[:-3] + b"xyz",  # the magic line broken
        whole[:first_entry] + b"\0" * 40 + whole[first_entry + 40:],  # an entry's bytes broken
        # an index that points past the entries
        whole[:-cache._PACK_TRAILER - cache._PACK_ROW + 33] + (10 ** 9).to_bytes(8, "little")
        + whole[-cache._PACK_TRAILER - cache._PACK_ROW + 41:],
    ]
    for blob in damaged:
        pack.write_bytes(blob)
        store = cache.Store(tmp_path / "cache")
        assert _answer(api.lint(files, project=None, cache=store)) == plain
        assert store.hits < 4
        for p in _packs(tmp_path):  # the run stores its answers again: back to the damaged one
            if p != pack:
                p.unlink()
    # an entry that unpickles a callable: refused, never run
    rows = [("e" + key[1:], len(cache._PACK_MAGIC), len(evil)) for key, _, _ in index if key[0] == "e"]
    body = cache._PACK_MAGIC + evil
    table = b"".join(b"e" + bytes.fromhex(k[1:]) + o.to_bytes(8, "little") + n.to_bytes(8, "little")
                     for k, o, n in rows)
    pack.write_bytes(body + table + len(table).to_bytes(8, "little") + cache._PACK_MAGIC)
    assert len(cache._read_pack_index(str(pack))) == len(rows)
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store)) == plain and store.hits == 0
    assert not marker.exists()


@pytest.mark.parametrize("how", ["process", "thread"])
def test_a_pack_that_cannot_be_written_leaves_nothing_and_no_whole_run(tmp_path, monkeypatch, how):
    if how == "thread":
        monkeypatch.setattr(cache.Store, "_fork_writer", lambda self: False)
    elif not sys.platform.startswith("linux") or threading.active_count() != 1:
        pytest.skip("a writer process is forked only on Linux, by a process with no other thread")
    files = _configs(tmp_path / "cfg", 5)
    root = _root(tmp_path)
    root.mkdir(parents=True)
    (root / "packs").write_text("a file where the packs' folder goes")
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store)) == _answer(api.lint(files, project=None))
    assert store.run_whole is False
    assert not list((tmp_path / "cache").rglob("*.tmp")) and not list(root.rglob("*.pack"))
    store = cache.Store(tmp_path / "cache")
    api.lint(files, project=None, cache=store)
    assert store.hits == 0  # nothing was stored that could be read back


def test_packs_are_counted_and_trimmed_oldest_first(tmp_path):
    for run in range(4):
        files = _configs(tmp_path / f"cfg{run}", 3)
        api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))
    root = _root(tmp_path)
    packs = _packs(tmp_path)
    assert len(packs) == 4
    for age, p in enumerate(packs):
        os.utime(p, (1000 + age, 1000 + age))
    n, size = cache.usage(root)
    assert n >= 4 and size >= sum(p.stat().st_size for p in packs)
    keep = sum(p.stat().st_size for p in packs[2:])
    others = size - sum(p.stat().st_size for p in packs)
    # room for the two newest packs and everything else, at the trim's 80 %
    cache.trim(root, max_bytes=int((keep + others) / cache.KEEP_FRACTION) + 10)
    assert _packs(tmp_path) == packs[2:]


def test_a_pack_read_back_gives_every_entry(tmp_path):
    files = _configs(tmp_path / "cfg", 6)
    api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))
    (pack,) = _packs(tmp_path)
    index = cache._read_pack_index(str(pack))
    entries = [k for k, _, _ in index if k[0] == "e"]
    assert len(entries) == 6 and len(set(entries)) == 6
    assert {k[0] for k, _, _ in index} == {"e", "f"}  # the fact sets the entries name are in it too
    reader = cache._PackIndex(str(pack.parent))
    for _, offset, length in index:
        blob = reader.read(str(pack), offset, length)
        assert blob is not None and len(blob) == length
    reader.close()
    store = cache.Store(tmp_path / "cache")
    got = [store.get(k[1:]) for k in entries]
    assert all(isinstance(r, FileReport) for r in got)
    assert sorted(r.file for r in got) == sorted(files)


def test_a_key_is_found_only_at_the_start_of_an_index_row(tmp_path):
    # row 0's key bytes followed by its offset hold "e" + K from their second byte on: a search
    # of the index bytes must not take that for K's row
    k = bytes([0xAB] * 31 + [0x15])
    row0 = b"e" + b"e" + k[:31] + (0x15).to_bytes(8, "little") + (3).to_bytes(8, "little")
    assert row0[1:34] == b"e" + k
    body = cache._PACK_MAGIC + b"x" * 0x40
    row1 = b"e" + k + (0x30).to_bytes(8, "little") + (4).to_bytes(8, "little")
    index = row0 + row1
    folder = tmp_path / "packs"
    folder.mkdir()
    (folder / "00000000000000000001-1.pack").write_bytes(
        body + index + len(index).to_bytes(8, "little") + cache._PACK_MAGIC)
    packs = cache._PackIndex(str(folder))
    assert packs.places("e" + k.hex()) == [(str(folder / "00000000000000000001-1.pack"), 0x30, 4)]
    assert packs.places("f" + k.hex()) == []


def test_a_run_that_looks_up_many_keys_reads_the_index_into_a_table_once(tmp_path, monkeypatch):
    monkeypatch.setattr(cache, "PACK_SCANS", 3)
    files = _configs(tmp_path / "cfg", 6)
    plain = _answer(api.lint(files, project=None))
    api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))
    store = cache.Store(tmp_path / "cache")
    assert _answer(api.lint(files, project=None, cache=store)) == plain and store.hits == 6
    assert store._packs.table is not None and store._packs.asked == 4  # searched thrice, then a table
    small = cache.Store(tmp_path / "cache")
    api.lint(files[:2], project=None, cache=small)
    assert small.hits == 2 and small._packs.table is None  # a short run only searches


def test_an_entry_stored_by_a_run_is_found_by_the_same_store(tmp_path):
    from cfgcheck.findings import Finding, Severity

    store = cache.Store(tmp_path / "cache")
    assert store.get("ab" * 32) is None  # the cache's folders listed: none there yet
    report = FileReport(file="a.yaml", layout="trainer", findings=[
        Finding(rule="r", severity=Severity.WARNING, file="a.yaml", line=1, column=1, key="k",
                message="m", hint="h", data={})])
    assert store.put("ab" * 32, "0" * 64, str(tmp_path / "a.yaml"), {}, report) is True
    assert isinstance(store.get("ab" * 32), FileReport)


@pytest.mark.parametrize("kept_open", [16, 1])
def test_a_run_opens_each_pack_once_for_its_reads_and_closes_it(tmp_path, monkeypatch, kept_open):
    monkeypatch.setattr(cache, "OPEN_PACKS", kept_open)
    files = _configs(tmp_path / "cfg", 12)
    plain = _answer(api.lint(files, project=None))
    for half in (files[:6], files[6:]):  # two runs: two packs
        api.lint(half, project=None, cache=cache.Store(tmp_path / "cache"))
    assert len(_packs(tmp_path)) == 2
    opened = []
    held = []  # how many packs were open for reads each time another was opened
    real_open = open
    store = cache.Store(tmp_path / "cache")

    def counting_open(path, *args, **kwargs):
        if str(path).endswith(".pack"):
            opened.append((str(path), args, kwargs))
            if kwargs.get("buffering") == 0:
                held.append(len(store._packs.open))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr(cache, "open", counting_open, raising=False)
    assert _answer(api.lint(files, project=None, cache=store)) == plain
    assert (store.hits, store.misses) == (12, 0)
    reads = [p for p, _args, kwargs in opened if kwargs.get("buffering") == 0]
    # once each, for 12 entries and their facts (one kept open at a time: the files are looked
    # up pack by pack, so each is opened once all the same)
    assert sorted(reads) == sorted(map(str, _packs(tmp_path)))
    assert max(held) < kept_open  # the longest unused one was closed first
    assert store._packs is not None and store._packs.open == {}  # closed when the run ended


def test_a_packed_entry_cut_short_after_the_pack_was_opened_is_a_miss(tmp_path):
    files = _configs(tmp_path / "cfg", 4)
    plain = _answer(api.lint(files, project=None))
    api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))
    (pack,) = _packs(tmp_path)
    index = cache._PackIndex(str(pack.parent))
    key, offset, length = next(row for row in cache._read_pack_index(str(pack)) if row[0][0] == "e")
    assert index.read(str(pack), offset, length) is not None  # opened, and kept open
    size = pack.stat().st_size
    os.truncate(pack, offset + length // 2)  # the bytes after the open handle's position go
    assert index.read(str(pack), offset, length) is None
    index.close()
    assert index.open == {}
    os.truncate(pack, size)
    assert _answer(api.lint(files, project=None, cache=cache.Store(tmp_path / "cache"))) == plain
