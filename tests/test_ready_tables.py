"""Tables kept ready to use beside the package: the same answer as a fresh build, rebuilt when a
source changes, never written when Python writes no bytecode, and a damaged copy costs only the
build."""

from __future__ import annotations

import os
import sys

from cfgcheck.knowledge import keys, models
from cfgcheck.knowledge.tables import ready_part, ready_table


def _builder(calls: list, path):
    def build():
        calls.append(1)
        return {"text": path.read_text(), "rows": (1, 2, 3)}
    return build


def test_a_kept_table_is_used_until_its_source_changes(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", False)
    src, calls = tmp_path / "table.json", []
    src.write_text('{"a": 1}')
    first = ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")
    again = ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")
    assert first == again == {"text": '{"a": 1}', "rows": (1, 2, 3)} and len(calls) == 1
    src.write_text('{"a": 22}')  # another size: the kept copy is stale
    changed = ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")
    assert changed["text"] == '{"a": 22}' and len(calls) == 2


def test_no_copy_is_written_when_python_writes_no_bytecode(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", True)
    src, calls = tmp_path / "table.json", []
    src.write_text("[]")
    for _ in range(2):
        assert ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")["text"] == "[]"
    assert len(calls) == 2 and not (tmp_path / "kept").exists()


def test_a_part_is_loaded_alone_and_one_build_keeps_every_part(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", False)
    src, calls = tmp_path / "table.json", []
    src.write_text('{"a": 1}')

    def build():
        calls.append(1)
        return {"one": ("a", 1), "two": {"b": [2]}}

    assert ready_part("t", "two", [src], build, folder=tmp_path / "kept") == {"b": [2]}
    assert ready_part("t", "one", [src], build, folder=tmp_path / "kept") == ("a", 1)
    assert len(calls) == 1  # the first build kept both parts
    assert len(list((tmp_path / "kept").iterdir())) == 2
    src.write_text('{"a": 22}')  # a source changed: every part is stale
    assert ready_part("t", "one", [src], build, folder=tmp_path / "kept") == ("a", 1)
    assert len(calls) == 2


def test_the_key_tables_of_a_lint_load_only_the_parts_it_asks_for(tmp_path, monkeypatch):
    # a fresh process's view of the tables: nothing loaded yet
    from cfgcheck.knowledge import tables

    asked = []
    real = tables.ready_part

    def spy(name, part, *args, **kwargs):
        asked.append(part)
        return real(name, part, *args, **kwargs)

    monkeypatch.setattr(tables, "ready_part", spy)
    keys._common.cache_clear()
    keys.table_of.cache_clear()
    try:
        assert keys.lookup("lora_alpha", "peft-adapter") is not None
        assert sorted(set(asked)) == ["common", "layout-peft-adapter"]
    finally:
        keys._common.cache_clear()
        keys.table_of.cache_clear()


def test_a_damaged_copy_is_rebuilt_without_an_error(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", False)
    src, calls = tmp_path / "table.json", []
    src.write_text("{}")
    ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")
    (kept,) = (tmp_path / "kept").iterdir()
    kept.write_bytes(kept.read_bytes()[:20])  # cut short, as by a full disk
    assert ready_table("t", [src], _builder(calls, src), folder=tmp_path / "kept")["text"] == "{}"
    assert len(calls) == 2


def test_the_kept_key_tables_and_model_index_equal_a_fresh_build(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", False)
    here = os.path.dirname(keys.__file__)
    sources = [os.path.join(here, n) for n in (keys._GENERATED, keys._EXTRA, keys._RUNNERS)]
    from pathlib import Path

    fresh = keys._build_parts()
    assert {"common", "names"} <= set(fresh) and len(fresh) == 2 + len(fresh["common"]["layouts"])
    ready_part("k", "common", [Path(p) for p in sources], lambda: fresh, folder=tmp_path)
    for part, value in fresh.items():  # one build wrote every part's copy
        assert ready_part("k", part, [Path(p) for p in sources], lambda: None, folder=tmp_path) == value
    entries = models._build_entries()
    ready_table("m", [models._CATALOGUE_FILE], lambda: (entries, models._build_name_index(entries)), folder=tmp_path)
    kept_entries, kept_index = ready_table("m", [models._CATALOGUE_FILE], lambda: None, folder=tmp_path)
    assert kept_entries == entries and kept_index == models._build_name_index(entries)
    by_id = kept_index[0]  # the index holds the very entries the kept catalogue lists
    assert all(any(e is k for k in kept_entries) for e in by_id.values())
