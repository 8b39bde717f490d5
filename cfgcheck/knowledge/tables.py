"""Tables built from the bundled JSON files, kept ready to use beside the package.

Building the known-key tables or the model-name index from their JSON files takes longer than
the whole lint of a small file; a pickled copy loads in about a millisecond. The copy lives in
this package's ``__pycache__`` (as Python keeps bytecode), is written only when Python writes
bytecode, and is used only while every file it was built from (the JSON files and the module
that builds it) has the same size and modification time; otherwise the table is built afresh.
A copy that cannot be read, or a folder that cannot be written, only costs the build.

A table a lint needs only a part of (the known keys: one layout's list) is kept as one copy per
part (``ready_part``), so a one-file lint loads the part it asks for, not the whole table.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Any, Callable

_FORMAT = 1
_HERE = Path(__file__).resolve().parent


def _stamp(sources: list[Path]) -> tuple:
    out = []
    for p in sources:
        st = os.stat(p)
        out.append((p.name, st.st_size, st.st_mtime_ns))
    return tuple(out)


def _kept_path(name: str, folder: Path | None) -> Path:
    return (folder or _HERE / "__pycache__") / f"{name}.{sys.implementation.cache_tag}.pickle"


def _load_kept(cache: Path, stamp: tuple) -> tuple[bool, Any]:
    try:  # the C unpickler alone: the pickle module's own import (its tables, a pattern) is not needed to read
        from _pickle import loads
    except ImportError:  # pragma: no cover - an interpreter without the C accelerator
        from pickle import loads
    try:
        with open(cache, "rb") as fh:
            kept = loads(fh.read())
        if isinstance(kept, tuple) and len(kept) == 3 and kept[0] == _FORMAT and kept[1] == stamp:
            return True, kept[2]
    except Exception:  # noqa: BLE001 - absent, partly written or from another version: rebuild
        pass
    return False, None


def _keep(cache: Path, stamp: tuple, value: Any) -> None:
    import pickle

    if sys.dont_write_bytecode:
        return
    try:
        blob = pickle.dumps((_FORMAT, stamp, value), protocol=pickle.HIGHEST_PROTOCOL)
        cache.parent.mkdir(exist_ok=True)
        tmp = cache.with_name(f"{cache.name}.{os.getpid()}.tmp")
        tmp.write_bytes(blob)
        os.replace(tmp, cache)  # a concurrent run reads the old copy or the new one, never half
    except (OSError, pickle.PicklingError, TypeError, AttributeError):
        pass


def ready_part(name: str, part: str, sources: list[Path], build: Callable[[], dict],
               folder: Path | None = None) -> Any:
    """``build()[part]``, or the kept copy of that part alone (in FOLDER, this package's
    ``__pycache__`` by default) while SOURCES are unchanged. BUILD returns every part of the
    table at once (a dict); when one part has to be built, each part's copy is written."""
    try:
        stamp = _stamp(sources)
    except OSError:  # a zipped package or a file gone: nothing to compare with
        return build()[part]
    found, value = _load_kept(_kept_path(f"{name}.{part}", folder), stamp)
    if found:
        return value
    parts = build()
    for each, value in parts.items():
        _keep(_kept_path(f"{name}.{each}", folder), stamp, value)
    return parts[part]


def ready_table(name: str, sources: list[Path], build: Callable[[], Any], folder: Path | None = None) -> Any:
    """``build()``, or its kept copy (in FOLDER, this package's ``__pycache__`` by default) while
    SOURCES are unchanged."""
    try:
        stamp = _stamp(sources)
    except OSError:  # a zipped package or a file gone: nothing to compare with
        return build()
    cache = _kept_path(name, folder)
    found, value = _load_kept(cache, stamp)
    if found:
        return value
    value = build()
    _keep(cache, stamp, value)
    return value
