"""Tables built from the bundled JSON files, kept ready to use beside the package.

Building the known-key tables or the model-name index from their JSON files takes longer than
the whole lint of a small file; a pickled copy loads in about a millisecond. The copy lives in
this package's ``__pycache__`` (as Python keeps bytecode), is written only when Python writes
bytecode, and is used only while every file it was built from (the JSON files and the module
that builds it) has the same size and modification time; otherwise the table is built afresh.
A copy that cannot be read, or a folder that cannot be written, only costs the build.
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


def ready_table(name: str, sources: list[Path], build: Callable[[], Any], folder: Path | None = None) -> Any:
    """``build()``, or its kept copy (in FOLDER, this package's ``__pycache__`` by default) while
    SOURCES are unchanged."""
    try:
        stamp = _stamp(sources)
    except OSError:  # a zipped package or a file gone: nothing to compare with
        return build()
    import pickle

    cache = (folder or _HERE / "__pycache__") / f"{name}.{sys.implementation.cache_tag}.pickle"
    try:
        with open(cache, "rb") as fh:
            kept = pickle.load(fh)
        if isinstance(kept, tuple) and len(kept) == 3 and kept[0] == _FORMAT and kept[1] == stamp:
            return kept[2]
    except Exception:  # noqa: BLE001 - absent, partly written or from another version: rebuild
        pass
    value = build()
    if not sys.dont_write_bytecode:
        try:
            blob = pickle.dumps((_FORMAT, stamp, value), protocol=pickle.HIGHEST_PROTOCOL)
            cache.parent.mkdir(exist_ok=True)
            tmp = cache.with_name(f"{cache.name}.{os.getpid()}.tmp")
            tmp.write_bytes(blob)
            os.replace(tmp, cache)  # a concurrent run reads the old copy or the new one, never half
        except (OSError, pickle.PicklingError, TypeError, AttributeError):
            pass
    return value
