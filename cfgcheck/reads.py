"""What the lint of one file looked at on disk, so a stored result can be checked before reuse.

While ``recording()`` is active, every place that reads a file, asks whether a path exists or
lists a folder notes a *fact* here: the file's content (sha256 of its bytes), the kind of a path
(file, folder, other, missing) or the names in a folder (optionally only those matching a
pattern). ``fact(kind, path, pattern)`` computes the same fact again from the disk, so the result
cache (cache.py) can tell whether anything a stored result rests on has changed: a linked file
edited, a file appearing where a link pointed to nothing, a new lock file beside a config.

Outside ``recording()`` every ``note_*`` function returns at once: a lint without the cache pays
one context-variable lookup per read. Functions memoised across files must use ``memo``, which
replays the facts of the first call into each later caller's record.

Standard library only: the cache-hit path imports this module and nothing heavier.
"""

from __future__ import annotations

import contextlib
import contextvars
import functools
import os
import re
import stat
from typing import Any, Callable, Iterator

# (kind, absolute path, pattern or "") -> fact; kinds: "f" content, "k" kind of path, "d" names,
# "s" subfolder names, "w" a folder's entries as a walk sees them (names, each marked folder or not)
Facts = dict[tuple[str, str, str], str]

_RECORD: contextvars.ContextVar[Facts | None] = contextvars.ContextVar("cfgcheck_reads", default=None)

MAX_HASHED = 64 * 1024 * 1024  # a bigger file is known by its size and modification time


@contextlib.contextmanager
def recording() -> Iterator[Facts]:
    """Collect the facts noted inside the block (nested blocks collect their own)."""
    facts: Facts = {}
    token = _RECORD.set(facts)
    try:
        yield facts
    finally:
        _RECORD.reset(token)


def sha256(data: bytes = b"") -> Any:
    """``hashlib.sha256(data)``, with hashlib (and the OpenSSL library it loads, a few
    milliseconds) imported when the first hash is made: a run with the cache off makes none."""
    import hashlib

    return hashlib.sha256(data)


def _abs(path: Any) -> str:
    return os.path.abspath(os.fspath(path))


def path_kind(path: Any) -> str:
    """"file" | "folder" | "other" | "missing" (links followed) | "error:<errno>"."""
    try:
        st = os.stat(path)
    except (FileNotFoundError, NotADirectoryError, ValueError):
        return "missing"
    except OSError as exc:
        return f"error:{exc.errno}"
    if stat.S_ISREG(st.st_mode):
        return "file"
    if stat.S_ISDIR(st.st_mode):
        return "folder"
    return "other"


_NONBLOCK = getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)


def regular_bytes(path: Any, limit: int = MAX_HASHED) -> tuple[os.stat_result, bytes] | None:
    """(stat, bytes) of a regular file of at most LIMIT bytes; None for anything else (a FIFO,
    a device, a folder, a bigger file). Opened without blocking, so a pipe never hangs the run.
    Raises OSError when the path cannot be opened."""
    fd = os.open(path, os.O_RDONLY | _NONBLOCK)
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode) or st.st_size > limit:
            return None
        # the size and one byte more in one read, then on to the end should the file have grown
        # (no buffered reader: its buffer would be set aside and cleared for each file)
        raw = os.read(fd, st.st_size + 1)
        if len(raw) <= st.st_size:  # a regular file reads short only at its end
            return st, raw
        parts = [raw]
        while True:
            more = os.read(fd, 1 << 20)
            if not more:
                return st, b"".join(parts)
            parts.append(more)
    finally:
        os.close(fd)


def content(path: Any) -> str:
    """sha256 of a regular file's bytes, or the kind of path when it is not a readable file."""
    kind = path_kind(path)
    if kind != "file":
        return kind
    try:
        size = os.stat(path).st_size
        if size > MAX_HASHED:
            st = os.stat(path)
            return f"large:{st.st_size}:{st.st_mtime_ns}"
        got = regular_bytes(path)
        if got is None:  # replaced by a pipe or a device, or grown, since the stat
            return path_kind(path)
        return sha256(got[1]).hexdigest()
    except OSError as exc:
        return f"unreadable:{exc.errno}"


def names(path: Any, pattern: str = "") -> str:
    """sha256 of the sorted names in a folder (those matching PATTERN in full, when given)."""
    try:
        found = os.listdir(path)
    except (FileNotFoundError, NotADirectoryError, ValueError):
        return "missing"
    except OSError as exc:
        return f"error:{exc.errno}"
    if pattern:
        rx = re.compile(pattern)
        found = [n for n in found if rx.fullmatch(n)]
    return sha256("\0".join(sorted(found)).encode("utf-8", "surrogateescape")).hexdigest()


def folders(path: Any) -> str:
    """sha256 of the sorted names of the subfolders of PATH (links to folders included)."""
    try:
        with os.scandir(path) as it:
            found = [e.name for e in it if e.is_dir()]
    except (FileNotFoundError, NotADirectoryError, ValueError):
        return "missing"
    except OSError as exc:
        return f"error:{exc.errno}"
    return sha256("\0".join(sorted(found)).encode("utf-8", "surrogateescape")).hexdigest()


def listing(path: Any) -> str:
    """sha256 of a folder's entries as ``os.walk`` splits them: each name, marked as a folder
    (links to folders included) or not."""
    try:
        with os.scandir(path) as it:
            found = []
            for e in it:
                try:
                    is_dir = e.is_dir()
                except OSError:
                    is_dir = False
                found.append(("d/" if is_dir else "f/") + e.name)
    except (FileNotFoundError, NotADirectoryError, ValueError):
        return "missing"
    except OSError as exc:
        return f"error:{exc.errno}"
    return sha256("\0".join(sorted(found)).encode("utf-8", "surrogateescape")).hexdigest()


def fact(kind: str, path: str, pattern: str = "") -> str:
    """The fact of KIND about PATH as the disk says now."""
    if kind == "f":
        return content(path)
    if kind == "k":
        return path_kind(path)
    if kind == "s":
        return folders(path)
    if kind == "w":
        return listing(path)
    return names(path, pattern)


# --------------------------------------------------------------------------- noting

def active() -> bool:
    return _RECORD.get() is not None


def note_bytes(path: Any, raw: bytes) -> None:
    """PATH was read and these are the bytes used (the guarded reader calls this)."""
    facts = _RECORD.get()
    if facts is not None:
        facts.setdefault(("f", _abs(path), ""), sha256(raw).hexdigest())


def note_file(path: Any) -> None:
    """PATH was read (or could not be): its content as the disk holds it."""
    facts = _RECORD.get()
    if facts is not None:
        facts.setdefault(("f", _abs(path), ""), content(path))


def note_kind(path: Any) -> None:
    """Whether PATH exists, and as what, decided something."""
    facts = _RECORD.get()
    if facts is not None:
        facts.setdefault(("k", _abs(path), ""), path_kind(path))


def note_names(path: Any, pattern: str = "") -> None:
    """The names in folder PATH (those matching PATTERN) decided something."""
    facts = _RECORD.get()
    if facts is not None:
        facts.setdefault(("d", _abs(path), pattern), names(path, pattern))


def note_folders(path: Any) -> None:
    """The subfolders of PATH decided something (a walk went into them)."""
    facts = _RECORD.get()
    if facts is not None:
        facts.setdefault(("s", _abs(path), ""), folders(path))


def note_walk(path: Any) -> None:
    """A walk listed folder PATH: which files it holds and which folders it goes on into decided
    which files are linted."""
    facts = _RECORD.get()
    if facts is not None:
        key = ("w", _abs(path), "")
        if key not in facts:  # the configs' walk and the scripts' walk list the same folders
            facts[key] = listing(path)


def resume(facts: Facts | None) -> Any:
    """Make FACTS (a record ``recording()`` gave, or None for none) the active record again;
    returns the token ``pause`` takes back. A batch of files runs each file's rules inside the
    record that file was read into."""
    return _RECORD.set(facts)


def pause(token: Any) -> None:
    """End what ``resume`` began."""
    _RECORD.reset(token)


def active_record() -> Facts | None:
    """The record facts are noted into now, or None."""
    return _RECORD.get()


def replay(seen: tuple) -> None:
    """Note again, in the record now active, the facts an earlier (memoised) call noted."""
    facts = _RECORD.get()
    if facts is not None:
        for k, v in seen:
            facts.setdefault(k, v)


_MEMOS_CACHE: list[Callable] = []


def forget() -> None:
    """Empty every ``memo``: a new run looks at the disk afresh (``api.lint`` starts with this,
    so a long-lived process never reuses what an earlier run saw)."""
    for clear in _MEMOS_CACHE:
        clear()


def memo(maxsize: int = 64) -> Callable[[Callable], Callable]:
    """A memo of a function's answers by its arguments (at most MAXSIZE, emptied when full) for
    functions that look at the disk: a call served from the memo notes the facts the first call
    noted, so each file's record stays complete. A call made while nothing records (a run
    without the result cache) notes nothing: its answer is kept without facts, and worked out
    again, recorded, should a caller that records ask for it."""

    def wrap(fn: Callable) -> Callable:
        table: dict[tuple, tuple[Any, tuple | None]] = {}

        @functools.wraps(fn)
        def call(*args: Any) -> Any:
            got = table.get(args)
            wanted = _RECORD.get() is not None
            if got is None or (wanted and got[1] is None):
                if wanted:
                    with recording() as facts:
                        result = fn(*args)
                    got = (result, tuple(facts.items()))
                else:
                    got = (fn(*args), None)
                if len(table) >= maxsize:
                    table.clear()
                table[args] = got
            if wanted:
                replay(got[1])
            return got[0]

        call.cache_clear = table.clear  # type: ignore[attr-defined]
        _MEMOS_CACHE.append(table.clear)
        return call

    return wrap
