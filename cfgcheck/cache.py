"""A content cache of lint results: an unchanged file with unchanged surroundings is not linted again.

An entry is found by a key made of everything that decides a file's report and is known before
the lint starts: the file's bytes (sha256), its name as given and its absolute path, the working
folder, cfgcheck's version, a fingerprint of cfgcheck's own files (code, rule records, knowledge
tables) and of the libraries that read the files (PyYAML, bashlex), the environment variables that
decide where models are looked up, and the options of the lint (GPU, GPU count, rows, rule
selection, severity and threshold overrides, waivers and hardware profiles from the project file,
launch files, overrides, library releases, the launch script paired with the file).

What is only known while linting (the files a config links or composes, launch files, a
checkpoint's config.json, the model hub cache, the repository's Python files, pins beside the
config, paths that did not exist) is recorded by ``reads`` as facts, stored with the entry, and
checked again before the entry is used: one changed fact and the file is linted afresh.

Entries are pickles of FileReport (without its views: the text, JSON, SARIF and GitHub output
never read them), read back with an unpickler that builds only the result types. Reports with an
internal error are never stored. Writes go to a temporary file in the same folder and are moved
into place, so concurrent runs never see half an entry; during a run they are written behind the
lint, by a child process on Linux (a thread elsewhere), and waited for when the run ends. A run's
first PACK_AFTER entries get a file each (under a folder named by the key's first two letters);
the rest, with the fact sets they bring, go into one pack file of the run under ``packs/``
(moved into place whole at the end), since creating a file costs as much as linting one on some
disks. A lookup tries the entry's own file, then the packs, newest first, and takes the first
entry whose facts hold (a run's first PACK_SCANS lookups search the packs' index bytes, later
ones a table made of them once). An unreadable entry or pack is a miss; a folder that cannot be
written to means no caching, never an error. The total size is bounded: now and then the oldest files
(entries, packs, fact sets, run records; by modification time) are removed.

Whole runs: the ``lint`` command also keeps one record per command line (its arguments, working
folder, environment, terminal and encoding of stdout/stderr, cfgcheck's fingerprint): the bytes
it printed, its exit status, the digest of every file it linted and every fact those reports and
the run itself rest on (what the walk of the folders listed, what the project-file search looked
at, the project and baseline files). ``lint_from_cache``, called first by the command, checks
those and prints the stored bytes, importing only this module, ``reads`` and the standard
library; on any difference the full lint runs (reusing the per-file entries and the digests the
check computed) and the record is written anew. A record is one file under ``runs/`` (the output,
then a marshal of plain tuples, then its length and a magic line), written whole and moved into
place; it is trimmed with the entries.

The folder: ``$CFGCHECK_CACHE_DIR``, else the platform's user cache folder (platformdirs).
"""

from __future__ import annotations

import contextvars
import io
import os
import stat
import sys
import time
from pathlib import Path
from typing import Any, Iterable

from . import __version__, reads
from .pipes import read_exactly, write_all

ENV_FOLDER = "CFGCHECK_CACHE_DIR"
FORMAT = 1  # bump when the entry layout or the key's make-up changes
MAX_BYTES = 256 * 1024 * 1024  # entries kept in all
MAX_ENTRIES = 200_000
TRIM_EVERY_S = 24 * 3600  # look at the total size at most this often (or after writing a lot)
KEEP_FRACTION = 0.8  # a trim removes the oldest entries until this much of the bound is left

# environment variables that change which model a name resolves to, or where ~ points
ENV_INPUTS = ("HF_HOME", "HF_HUB_CACHE", "HUGGINGFACE_HUB_CACHE", "TRANSFORMERS_CACHE",
              "HF_HUB_OFFLINE", "TRANSFORMERS_OFFLINE", "XDG_CACHE_HOME", "HOME", "USERPROFILE")

_MAGIC = b"cfgcheck-lint-cache\n"
# Packs: a run that writes many entries writes all but its first PACK_AFTER into one file under
# ``packs/`` (the entries one after another, then an index of (key, offset, length), its length
# and the magic line), moved into place whole when the run ends: creating a file costs 0.15 to
# 0.85 ms on a VM disk (measured: 2,000 small files in 0.3 to 1.7 s), more than linting it.
PACK_AFTER = 32
PACK_SCANS = 64  # lookups a run makes in the packs' index bytes before it works them into a table
OPEN_PACKS = 16  # packs a run keeps open for its reads at most (the longest unused one is closed)
_PACK_MAGIC = b"cfgcheck-lint-pack\n"
_PACK_TRAILER = 8 + len(_PACK_MAGIC)
_PACK_ROW = 1 + 32 + 8 + 8  # what it is (e: an entry, f: a fact set), its key's 32 bytes, offset, length
SEND_BYTES = 256 * 1024  # frames gathered before one write to the writer process's pipe
_PACKED = "\0pack\0"  # a write asked of the writer: "e" or "f" and the key follow; into the run's pack
_OPTIONS_LEFT_OUT = ("debug",)  # re-raising a failing rule: a stored report has no failure


# the command-line run being recorded whole, if any (lint_from_cache)
_ACTIVE_RUN: contextvars.ContextVar["_Run | None"] = contextvars.ContextVar("cfgcheck_run", default=None)


class Uncacheable(Exception):
    """An input the key cannot describe exactly: lint without the cache."""


def default_folder() -> Path | None:
    """``$CFGCHECK_CACHE_DIR``, else the platform's user cache folder; None when neither can be
    known (no home folder, platformdirs missing): then nothing is cached."""
    given = os.environ.get(ENV_FOLDER)
    try:
        if given:
            return Path(given).expanduser()
        linux = _linux_cache_folder()
        if linux is not None:
            return Path(linux)
        import platformdirs

        return Path(platformdirs.user_cache_dir("cfgcheck", appauthor=False))
    except (ImportError, RuntimeError, OSError, ValueError):
        return None


def _linux_cache_folder() -> str | None:
    """platformdirs' user cache folder for cfgcheck on plain Linux, worked out without importing
    platformdirs (its import is a large share of a one-file lint); None wherever it might answer
    otherwise (Android, an XDG_CACHE_HOME or HOME that is not an absolute path, the library
    blocked), and the caller asks platformdirs. The same steps as platformdirs 4.14.9's
    ``Unix.user_cache_dir`` (the pinned release): ``$XDG_CACHE_HOME`` when absolute, else
    ``~/.cache``, with the app name joined."""
    if sys.platform != "linux" or sys.modules.get("platformdirs", 0) is None:
        return None
    env = os.environ
    if hasattr(sys, "getandroidapilevel") or (env.get("ANDROID_DATA") == "/data" and env.get("ANDROID_ROOT") == "/system"):
        return None
    xdg = env.get("XDG_CACHE_HOME", "")
    if os.path.isabs(xdg):
        return os.path.join(xdg, "cfgcheck")
    home = env.get("HOME")
    if home is None or not os.path.isabs(home):
        return None
    return os.path.join(os.path.expanduser("~/.cache"), "cfgcheck")


# --------------------------------------------------------------------------- the key

def canonical(value: Any) -> Any:
    """VALUE as plain nested tuples that print the same in every process (sets sorted, dataclass
    fields by name); raises Uncacheable for a value it cannot describe."""
    if value is None or isinstance(value, (bool, int, float, str, bytes)):
        return (type(value).__name__, value)
    if isinstance(value, os.PathLike):
        return ("path", os.fspath(value))
    import enum

    if isinstance(value, enum.Enum):
        return ("enum", type(value).__qualname__, canonical(value.value))
    if isinstance(value, (list, tuple)):
        return (type(value).__name__, tuple(canonical(v) for v in value))
    if isinstance(value, (set, frozenset)):
        return ("set", tuple(sorted((canonical(v) for v in value), key=repr)))
    if isinstance(value, dict):
        return ("dict", tuple(sorted(((canonical(k), canonical(v)) for k, v in value.items()), key=repr)))
    names = getattr(type(value), "_record_fields", None)  # a record class written out by hand
    if names is not None:
        return (type(value).__module__ + "." + type(value).__qualname__,
                tuple((name, canonical(getattr(value, name))) for name in names))
    import dataclasses

    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return (type(value).__module__ + "." + type(value).__qualname__,
                tuple((f.name, canonical(getattr(value, f.name))) for f in dataclasses.fields(value)))
    raise Uncacheable(f"{type(value).__name__} in the options")


def options_text(options: Any) -> str:
    fields = [(name, canonical(getattr(options, name))) for name in type(options)._record_fields
              if name not in _OPTIONS_LEFT_OUT]
    return repr(fields)


def _package_files() -> list[str]:
    """cfgcheck's own files whose change can change a report: the package (code, knowledge
    tables) and the rule records (packaged as cfgcheck/_catalogue, or rules/ beside a checkout;
    the same choice as catalogue.catalogue_dir). Plain strings: every lint, the cache-hit path
    too, lists them."""
    pkg = os.path.dirname(os.path.realpath(__file__))
    roots = [pkg]
    if not os.path.isdir(os.path.join(pkg, "_catalogue")):
        roots.append(os.path.join(os.path.dirname(pkg), "rules"))
    out = []
    for root in roots:
        for here, dirs, files in os.walk(root):
            dirs[:] = sorted(d for d in dirs if d != "__pycache__" and not d.startswith("."))
            out.extend(os.path.join(here, f) for f in sorted(files)
                       if not f.endswith((".pyc", ".tmp")) and not f.startswith("."))
    return out


def _library_files() -> list[str]:
    import importlib.util

    out = []
    for name in ("yaml", "bashlex"):
        try:
            spec = importlib.util.find_spec(name)
        except (ImportError, ValueError):
            continue
        if spec is not None and spec.origin:
            out.append(spec.origin)
    return out


# --------------------------------------------------------------------------- entries

_ALLOWED = frozenset({
    ("cfgcheck.findings", name)
    for name in ("FileReport", "Finding", "Fix", "Edit", "Related", "InputProblem", "Severity")
})
_PLAIN = (type(None), bool, int, float, str, bytes, list, tuple, dict, set, frozenset)


_CLASSES_CACHE: dict[str, Any] = {}  # the pickler and unpickler classes, made on first use


def _picklers() -> dict[str, Any]:
    if not _CLASSES_CACHE:
        import pickle

        from . import findings

        allowed = (findings.FileReport, findings.Finding, findings.Fix, findings.Edit,
                   findings.Related, findings.InputProblem, findings.Severity)

        class _Pickler(pickle.Pickler):
            # asked of every object but those of exactly None, bool, int, float, str and bytes
            # (and those met before): a report's many texts and numbers are not asked about
            def reducer_override(self, obj: Any) -> Any:
                if isinstance(obj, type):  # a class named by reference
                    ok = obj in allowed or obj in _PLAIN
                else:
                    ok = isinstance(obj, _PLAIN) or type(obj) in allowed
                if not ok:
                    raise Uncacheable(f"{type(obj).__name__} in a report")
                return NotImplemented  # pickled the usual way

        classes = {(cls.__module__, cls.__qualname__): cls for cls in allowed}
        assert set(classes) == _ALLOWED

        class _Unpickler(pickle.Unpickler):
            # the result types straight from a table: no import looked up for each entry read
            def find_class(self, module: str, name: str) -> Any:
                cls = classes.get((module, name))
                if cls is None:
                    raise pickle.UnpicklingError(f"{module}.{name} is not a result type")
                return cls

        _CLASSES_CACHE.update(pickler=_Pickler, unpickler=_Unpickler, protocol=pickle.HIGHEST_PROTOCOL)
    return _CLASSES_CACHE


def _dumps(payload: Any) -> bytes:
    """PAYLOAD pickled; Uncacheable when it holds anything but plain values and result types."""
    made = _picklers()
    buf = io.BytesIO()
    made["pickler"](buf, protocol=made["protocol"]).dump(payload)
    return buf.getvalue()


def _loads(blob: bytes) -> Any:
    """An entry's payload, building no class but the result types (never code from the file)."""
    return _picklers()["unpickler"](io.BytesIO(blob)).load()


class Store:
    """One run's use of the cache folder. Every method swallows the folder's failures: a cache
    that cannot be read is a miss, one that cannot be written is not written."""

    def __init__(self, folder: str | os.PathLike | None = None):
        base = Path(folder) if folder is not None else default_folder()
        self.root = (base if base is not None else Path(os.devnull)) / f"lint-{FORMAT}"
        self._folder = str(self.root)
        self.usable = base is not None
        self.writable = self.usable
        self.hits = 0
        self.misses = 0
        self.written = 0  # bytes written by this run
        self._facts: dict[tuple[str, str, str], str] = {}  # facts checked in this run
        self._prefix: str | None = None
        self._code: str | None = None  # sha256 of cfgcheck's files (set by _fixed)
        self._options: dict[int, tuple[Any, str]] = {}  # id -> (options, their text): files share them
        self._sets: dict[str, bool] = {}  # fact sets checked in this run -> whether they hold
        self._set_facts: dict[str, list] = {}  # fact set -> its facts, while a run is recorded
        # a command-line run being recorded whole (see lint_from_cache): every file keyed, with
        # its digest, and every fact its report rests on
        active = _ACTIVE_RUN.get()
        self.run = active if active is not None and active.open and active.store is None else None
        if self.run is not None:
            self.run.store = self
            self._facts.update(self.run.seen.get("facts", {}))  # checked a moment ago, in this run
        self._digests = self.run.seen.get("digests", {}) if self.run is not None else {}
        self.run_files: list[tuple[str, str]] = []
        self.run_facts: dict[tuple[str, str, str], str] = {}
        self.run_whole = True  # False once a file was linted without the cache
        # within a run (``lint_cached``) entries and fact sets are written behind the lint
        # (``_write_later``), by a child process on Linux, else a thread: creating a file costs
        # 0.1 to 1 ms on some disks, as much as linting it; ``flush`` waits for the writer.
        # Outside a run ``put`` writes at once.
        self.write_behind = False
        self._queue: Any = None  # the writer thread's work, or None
        self._writer: Any = None  # the writer thread, or None
        self._pipe: int | None = None  # the writer process's pipe (Linux), or None
        self._child: int | None = None  # the writer process, or None
        self._write_failed = False
        self.wrote_behind: str | None = None  # "process" or "thread": what wrote behind the lint
        self._sent_behind = 0  # entries asked of the writer this run (the first PACK_AFTER: files)
        self._fact_sets: dict[tuple, tuple[str, bytes]] = {}  # the facts of a file -> (id, bytes)
        self._unsent: list[bytes] = []  # frames for the writer process, sent a batch at a time
        self._unsent_bytes = 0
        self._packs: _PackIndex | None = None  # the packs, read on the first look into them
        self._shards: frozenset[str] | None = None  # the entries' two-letter folders, listed once

    # the key ------------------------------------------------------------------
    def _fixed(self) -> str:
        """The part of every key that does not depend on the file or its options."""
        if self._prefix is None:
            # the check of the run's record worked the code's fingerprint out a moment ago
            code = self.run.seen.get("code") if self.run is not None else None
            if code is None:
                stats = []
                for p in _package_files() + _library_files():
                    try:
                        st = os.stat(p)
                        stats.append((str(p), st.st_size, st.st_mtime_ns))
                    except OSError:
                        stats.append((str(p), -1, -1))
                code = self._code_fingerprint(stats)
            self._code = code
            env = [(n, os.environ.get(n)) for n in ENV_INPUTS]
            # a process that already holds the checks (a long-lived caller, a test) may have
            # replaced one with a function from elsewhere: such replacements are part of the key
            held = sys.modules.get("cfgcheck.checks")
            checks = held.registered() if held is not None and hasattr(held, "registered") else {}
            registry = sorted((rule, str(getattr(fn, "__module__", "")), getattr(fn, "__qualname__", ""))
                              for rule, fn in checks.items()
                              if not str(getattr(fn, "__module__", "")).startswith("cfgcheck.checks."))
            self._prefix = repr((FORMAT, __version__, sys.version, code, env, os.getcwd(), registry))
        return self._prefix

    def _code_fingerprint(self, stats: list) -> str:
        """sha256 over the contents of cfgcheck's files, remembered in the cache folder under the
        hash of their sizes and modification times (an editable install: any edit is seen)."""
        by_stat = reads.sha256(repr(stats).encode("utf-8", "surrogateescape")).hexdigest()
        where = self.root / "code" / by_stat
        try:
            known = where.read_text(encoding="ascii").strip()
            if len(known) == 64:
                return known
        except (OSError, ValueError):
            pass
        h = reads.sha256()
        for name, _size, _mtime in stats:
            h.update(name.encode("utf-8", "surrogateescape") + b"\0")
            h.update(reads.content(name).encode("ascii", "replace") + b"\0")
        digest = h.hexdigest()
        self._write(where, digest.encode("ascii"))
        return digest

    def key(self, path: str, options: Any) -> tuple[str, str]:
        """(entry key, sha256 of the file's bytes); Uncacheable when the file or the options
        cannot be keyed (not a regular file, an option the key cannot describe)."""
        try:
            known = self._digests.get(path)
            if known is not None and known[0] == _stat_id(os.stat(path)):
                digest = known[1]  # hashed by the check of the run's record, file untouched since
            else:
                got = reads.regular_bytes(path)  # never blocks on a pipe
                if got is None:
                    raise Uncacheable("not a regular file of a size worth keeping")
                digest = reads.sha256(got[1]).hexdigest()
        except (OSError, ValueError):  # a folder, a missing file: linting it says why, cheaply
            raise Uncacheable("not readable") from None
        known = self._options.get(id(options))
        if known is None or known[0] is not options:
            known = self._options[id(options)] = (options, options_text(options))
        text = "\0".join((self._fixed(), path, os.path.abspath(path), digest, known[1]))
        if self.run is not None:
            self.run_files.append((path, digest))
        return reads.sha256(text.encode("utf-8", "surrogateescape")).hexdigest(), digest

    # entries ------------------------------------------------------------------
    def _entry(self, key: str) -> str:
        return os.path.join(self._folder, key[:2], key[2:])

    def get(self, key: str) -> Any:
        """The stored report for KEY when every fact it rests on still holds, else None. Its own
        file is looked at first, then the packs, newest first: the first entry that holds (once
        the packs' index has been read and names KEY, the packs first)."""
        if not self.usable:
            self.misses += 1
            return None
        got = None
        places = self._packs.places("e" + key) if self._packs is not None else None
        if places:
            got = self._packed(key, places)  # the packs were read already and hold it: no look for its file
        if got is None and key[:2] in self._entry_folders():
            try:
                with open(self._entry(key), "rb") as fh:
                    blob = fh.read()
            except OSError:
                blob = None
            got = self._valid(key, blob) if blob is not None else None
        if got is None and places is None:
            got = self._packed(key, self._pack_index().places("e" + key))  # read on the run's first such look
        if got is None:
            self.misses += 1
            return None
        facts_id, report = got
        self.hits += 1
        if self.run is not None:
            for k, p, pat, v in self._set_facts.get(facts_id, ()):
                self.run_facts.setdefault((k, p, pat), v)
        return report

    def _entry_folders(self) -> frozenset[str]:
        """The entries' two-letter folders there are, listed on the run's first lookup: a key whose
        folder is not there is not looked for (an empty cache: no failed open a file). One that
        another run makes meanwhile is only a miss."""
        if self._shards is None:
            try:
                self._shards = frozenset(n for n in os.listdir(self._folder) if len(n) == 2)
            except OSError:
                self._shards = frozenset()
        return self._shards

    def _packed(self, key: str, places: list[tuple[str, int, int]]) -> tuple[str, Any] | None:
        """KEY's first packed entry (of PLACES, newest first) that holds."""
        for path, offset, length in places:
            got = self._valid(key, self._pack_index().read(path, offset, length))
            if got is not None:
                return got
        return None

    def _valid(self, key: str, blob: bytes | None) -> tuple[str, Any] | None:
        """(facts id, report) of the entry BLOB when it is KEY's and its facts hold, else None."""
        try:
            if blob is None or not blob.startswith(_MAGIC):
                raise ValueError("not an entry")
            stored_key, facts_id, report = _loads(blob[len(_MAGIC):])
            if stored_key != key or not self._holds(facts_id):
                raise ValueError("another key, or a fact changed")
        except Exception:  # noqa: BLE001 - a truncated, corrupt or foreign entry is a miss
            return None
        return facts_id, report

    def _pack_index(self) -> "_PackIndex":
        """The run's packs: read once per run, when a key is not found in a file of its own."""
        if self._packs is None:
            self._packs = _PackIndex(os.path.join(self._folder, "packs"))
        return self._packs

    def _facts_file(self, facts_id: str) -> str:
        return os.path.join(self._folder, "facts", facts_id[:2], facts_id[2:])

    def _holds(self, facts_id: str) -> bool:
        """Whether every fact of the stored set FACTS_ID holds now. Files of one folder share
        one set (the folders above them, the hub cache, the repository): each set is checked
        once per run, each fact at most once."""
        known = self._sets.get(facts_id)
        if known is not None:
            return known
        ok = False
        try:
            try:
                with open(self._facts_file(facts_id), "rb") as fh:
                    blob = fh.read()
            except OSError:  # packed: the first copy with the right bytes (a set is named by its hash)
                packs = self._pack_index()
                blob = next((b for b in (packs.read(*at) for at in packs.places("f" + facts_id))
                             if b is not None and reads.sha256(b).hexdigest() == facts_id), None)
                if blob is None:
                    raise
            if reads.sha256(blob).hexdigest() == facts_id:
                import json

                ok = True
                listed = json.loads(blob)
                if self.run is not None:
                    self._set_facts[facts_id] = listed
                for kind, path, pattern, fact in listed:
                    now = self._facts.get((kind, path, pattern))
                    if now is None:
                        now = self._facts[(kind, path, pattern)] = reads.fact(kind, path, pattern)
                    if now != fact:
                        ok = False
                        break
        except (OSError, ValueError, TypeError):
            ok = False
        self._sets[facts_id] = ok
        return ok

    def put(self, key: str, digest: str, path: str, facts: dict, report: Any) -> bool:
        """Store REPORT (without views) with the facts it rests on; False when it is not stored
        (an internal error, the file changed while it was linted, an unwritable folder)."""
        if not self.writable or report.internal:
            self.run_whole = False
            return False
        own = ("f", os.path.abspath(path), "")
        if facts.get(own, digest) != digest:
            self.run_whole = False
            return False  # the file changed between the key and the lint
        # what the key says already (the file is there, with these bytes) is left out, so the
        # files of one folder share one set of facts
        kept = tuple([item for item in sorted(facts.items())
                      if not (item[0][1] == own[1] and item[0][0] in ("f", "k"))])
        try:
            known = self._fact_sets.get(kept)  # the same facts as another file of the folder
        except TypeError:  # a fact that is not text (never, from reads): worked out each time
            known = None
        if known is None:
            import json

            try:
                facts_blob = json.dumps([[k, p, pat, v] for (k, p, pat), v in kept],
                                        separators=(",", ":")).encode("utf-8", "surrogateescape")
            except (TypeError, ValueError, UnicodeEncodeError):
                self.run_whole = False
                return False
            known = (reads.sha256(facts_blob).hexdigest(), facts_blob)
            try:
                self._fact_sets[kept] = known
            except TypeError:
                pass
        facts_id, facts_blob = known
        # written behind the lint, a run's first entries get files of their own, the rest (with
        # the fact sets they bring) go into the run's pack
        packing = self.write_behind and self._sent_behind >= PACK_AFTER
        if self._sets.get(facts_id) is None:
            target = self._facts_file(facts_id)
            stored = os.path.exists(target) or bool(self._pack_index().places("f" + facts_id))
            if not stored and not self._store(_PACKED + "f" + facts_id if packing else target, facts_blob):
                self.run_whole = False
                return False
            self._sets[facts_id] = True  # written now from what this run saw
        views, report.views = report.views, []
        try:
            blob = _MAGIC + _dumps((key, facts_id, report))
        except Exception:  # noqa: BLE001 - a value the result types do not hold: not stored
            self.run_whole = False
            return False
        finally:
            report.views = views
        if self.write_behind:
            self._sent_behind += 1
        if self._store(_PACKED + "e" + key if packing else self._entry(key), blob):
            self.written += len(blob)
            if not packing and self._shards is not None and key[:2] not in self._shards:
                self._shards = self._shards | {key[:2]}  # looked for when asked again
            if self.run is not None:
                for fact, v in kept:
                    self.run_facts.setdefault(fact, v)
            return True
        self.run_whole = False
        return False

    def _store(self, target: str, blob: bytes) -> bool:
        return self._write_later(target, blob) if self.write_behind else self._write(target, blob)

    def _write_later(self, target: str, blob: bytes) -> bool:
        """``_write``, done by the writer process (or thread) in the order asked (a fact set
        before the entries that name it); False when this run writes nothing more. A write that
        fails there stops the writing as ``_write`` does and is known after ``flush``."""
        if not self.writable:
            return False
        if self._pipe is not None:
            return self._send(target, blob)
        if self._writer is None:
            if self._fork_writer():
                return self._send(target, blob)
            import queue
            import threading

            self._queue = queue.SimpleQueue()
            self._writer = threading.Thread(target=self._write_queued, name="cfgcheck-cache-writer",
                                            daemon=True)
            try:
                self._writer.start()
            except RuntimeError:  # no thread to be had: write here
                self._writer = self._queue = None
                return self._write(target, blob)
            self.wrote_behind = "thread"
        self._queue.put((target, blob))
        return True

    def _fork_writer(self) -> bool:
        """On Linux, in a process that runs no other thread: a child process that writes what
        this one sends it through a pipe. A thread would hardly help: each call to the disk it
        makes gives up the interpreter, and it waits for a busy lint to hand it back (on a
        2-core VM, 2,262 entries took 1.5 s alone and 53 s beside a thread that counts). False
        where there is no such process to be had: a writer thread then. The child runs nothing
        but ``_write_from`` and leaves with ``os._exit``: no exit handler, no buffered output of
        this process is run or written twice."""
        import threading

        if not sys.platform.startswith("linux") or threading.active_count() != 1:
            return False
        try:
            read, write = os.pipe()
        except OSError:
            return False
        try:
            import fcntl

            fcntl.fcntl(write, fcntl.F_SETPIPE_SZ, 1 << 20)  # room for ~200 entries ahead
        except (ImportError, AttributeError, OSError):
            pass
        try:
            pid = os.fork()
        except OSError:
            os.close(read)
            os.close(write)
            return False
        if pid == 0:  # the writer: reads frames until the pipe closes, never returns
            code = 2
            try:
                os.close(write)
                code = self._write_from(read)
            finally:
                os._exit(code)
        os.close(read)
        self._pipe, self._child = write, pid
        self.wrote_behind = "process"
        return True

    def _send(self, target: str, blob: bytes) -> bool:
        """A frame for the writer process, sent with others once SEND_BYTES are waiting (one
        call to the pipe for dozens of entries); ``flush`` sends the rest."""
        name = target.encode("utf-8", "surrogateescape")
        self._unsent.append(len(name).to_bytes(4, "little") + len(blob).to_bytes(8, "little") + name + blob)
        self._unsent_bytes += len(name) + len(blob) + 12
        return self._send_unsent() if self._unsent_bytes >= SEND_BYTES else True

    def _send_unsent(self) -> bool:
        data, self._unsent, self._unsent_bytes = b"".join(self._unsent), [], 0
        try:
            write_all(self._pipe, data)
        except OSError:  # the writer is gone: nothing more is stored this run
            self.writable = False
            self._write_failed = True
            return False
        return True

    def _write_from(self, fd: int) -> int:
        """In the writer process: write each (target, blob) frame read from FD; 0 when all were
        written, 1 when one failed (those after it are read and dropped)."""
        made: set[str] = set()
        pack = _Pack(self._folder)
        ok = True

        while True:
            head = read_exactly(fd, 12)
            if head is None:
                finished = pack.finish()  # what was packed before a failure is whole, and kept
                return 0 if ok and finished else 1
            name = read_exactly(fd, int.from_bytes(head[:4], "little"))
            blob = read_exactly(fd, int.from_bytes(head[4:], "little"))
            if name is None or blob is None:
                pack.abandon()
                return 1
            if ok and not self._write_item(name.decode("utf-8", "surrogateescape"), blob, made, pack):
                ok = False

    def _write_queued(self) -> None:
        made: set[str] = set()  # folders known to be there: no look at the disk for them again
        pack = _Pack(self._folder)
        while True:
            item = self._queue.get()
            if item is None:
                if not pack.finish():
                    self._write_failed = True
                return
            if self.writable and not self._write_item(item[0], item[1], made, pack):
                self._write_failed = True

    def _write_item(self, target: str, blob: bytes, made: set[str], pack: "_Pack") -> bool:
        """In the writer: an entry into the run's pack, or a file written whole."""
        if target.startswith(_PACKED):
            if pack.add(target[len(_PACKED):], blob):
                return True
            self.writable = False
            return False
        return self._write_file(target, blob, made)

    def _write_file(self, target: str, blob: bytes, made: set[str]) -> bool:
        """``_write``; MADE: the folders known to be there already (the writer thread's), which
        are not asked for again."""
        folder = os.path.dirname(target)
        tmp = os.path.join(folder, f".{os.path.basename(target)}.{os.getpid()}.{time.monotonic_ns()}.tmp")
        try:
            if folder not in made:
                os.makedirs(folder, exist_ok=True)
                made.add(folder)
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o666)
            try:
                write_all(fd, blob)
            finally:
                os.close(fd)
            os.replace(tmp, target)
            return True
        except OSError:
            self.writable = False  # a read-only or full disk: this run stops trying
            try:
                os.unlink(tmp)
            except OSError:
                pass
            return False

    def flush(self) -> None:
        """Wait until everything asked of the writer is on disk (the process is waited for,
        the thread joined); a write that failed there means the run was not stored whole."""
        if self._packs is not None:
            self._packs.close()  # the run's reads are over: the packs kept open are closed
        if self._pipe is not None:
            if self._unsent:
                self._send_unsent()
            pipe, child = self._pipe, self._child
            self._pipe = self._child = None
            os.close(pipe)
            try:
                _pid, status = os.waitpid(child, 0)
                if os.waitstatus_to_exitcode(status) != 0:
                    self._write_failed = True
            except (OSError, ValueError):
                self._write_failed = True
        writer = self._writer
        if writer is not None:
            self._writer = None
            self._queue.put(None)
            writer.join()
            self._queue = None
        if self._write_failed:  # a write failed behind the lint: no more this run, no whole run
            self.writable = False
            self.run_whole = False

    def _write(self, target: str | Path, blob: bytes) -> bool:
        """BLOB written to TARGET whole: to a temporary file in the same folder, then moved into
        place, so a reader never sees half of it; False (and no more writes this run) when the
        folder cannot be written to."""
        if not self.writable:
            return False
        target = os.fspath(target)
        if target.startswith(_PACKED):  # no writer to pack it (no thread to be had): a file of its own
            kind, key = target[len(_PACKED)], target[len(_PACKED) + 1:]
            target = self._entry(key) if kind == "e" else self._facts_file(key)
        return self._write_file(target, blob, set())

    # size ---------------------------------------------------------------------
    def close(self) -> None:
        """After a run that wrote entries: wait for their writes, then trim the folder when it
        is due."""
        self.flush()
        if not self.written:
            return
        stamp = self.root / "trimmed"
        try:
            due = time.time() - stamp.stat().st_mtime > TRIM_EVERY_S
        except OSError:
            due = True
        if due or self.written > MAX_BYTES // 8:
            trim(self.root)
            self._write(stamp, b"")


class _Pack:
    """In the writer: the entries of one run past its first PACK_AFTER, written one after another
    to a temporary file under ``packs/``; ``finish`` adds the index and moves it into place, so
    a reader sees a whole pack or none. Nothing is created for a run that packs nothing."""

    def __init__(self, folder: str):
        self.folder = os.path.join(folder, "packs")
        self.fd: int | None = None
        self.tmp = self.name = ""
        self.rows: list[bytes] = []
        self.offset = 0
        self.failed = False

    def add(self, name: str, blob: bytes) -> bool:
        """NAME: "e" or "f" and the key in hex."""
        if self.failed:
            return False
        try:
            row = name[:1].encode("ascii") + bytes.fromhex(name[1:])
            if len(row) != 33 or name[0] not in "ef":
                raise ValueError("not a key")
            if self.fd is None:
                os.makedirs(self.folder, exist_ok=True)
                base = f"{time.time_ns():020d}-{os.getpid()}.pack"
                self.name = os.path.join(self.folder, base)
                self.tmp = os.path.join(self.folder, f".{base}.tmp")
                self.fd = os.open(self.tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o666)
                write_all(self.fd, _PACK_MAGIC)
                self.offset = len(_PACK_MAGIC)
            write_all(self.fd, blob)
        except (OSError, ValueError):
            self.abandon()
            return False
        self.rows.append(row + self.offset.to_bytes(8, "little") + len(blob).to_bytes(8, "little"))
        self.offset += len(blob)
        return True

    def finish(self) -> bool:
        """The index written and the pack moved into place; True when there was nothing to pack,
        False when the pack failed (then nothing of it is left)."""
        if self.fd is None:
            return not self.failed
        try:
            index = b"".join(self.rows)
            write_all(self.fd, index + len(index).to_bytes(8, "little") + _PACK_MAGIC)
            os.close(self.fd)
            self.fd = None
            os.replace(self.tmp, self.name)
            return True
        except OSError:
            self.abandon()
            return False

    def abandon(self) -> None:
        if self.fd is not None:
            try:
                os.close(self.fd)
            except OSError:
                pass
            self.fd = None
        if self.tmp:
            _remove(self.tmp)
        self.failed = True


def _read_pack(path: str) -> tuple[bytes, int] | None:
    """The index of the pack at PATH (its rows, unread) and where its entries end; None for
    anything but a whole pack (a foreign or truncated file)."""
    try:
        with open(path, "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            if size < len(_PACK_MAGIC) + _PACK_TRAILER:
                return None
            fh.seek(size - _PACK_TRAILER)
            trailer = fh.read(_PACK_TRAILER)
            n = int.from_bytes(trailer[:8], "little")
            end = size - _PACK_TRAILER - n  # where the entries end and the index begins
            if trailer[8:] != _PACK_MAGIC or n % _PACK_ROW or end < len(_PACK_MAGIC):
                return None
            fh.seek(0)
            if fh.read(len(_PACK_MAGIC)) != _PACK_MAGIC:
                return None
            fh.seek(end)
            index = fh.read(n)
    except OSError:
        return None
    return (index, end) if len(index) == n else None


def _row(index: bytes, i: int, end: int) -> tuple[str, int, int] | None:
    """The row at I of an index: ("e" or "f" + the key in hex, offset, length); None when it
    does not describe a place among the entries."""
    kind = index[i:i + 1]
    offset = int.from_bytes(index[i + 33:i + 41], "little")
    length = int.from_bytes(index[i + 41:i + 49], "little")
    if kind not in (b"e", b"f") or offset < len(_PACK_MAGIC) or offset + length > end:
        return None
    return kind.decode("ascii") + index[i + 1:i + 33].hex(), offset, length


def _rows(index: bytes, end: int) -> list[tuple[str, int, int]]:
    """Every row of an index; [] when one points outside the entries (none of it is used)."""
    out = []
    for i in range(0, len(index), _PACK_ROW):
        row = _row(index, i, end)
        if row is None:
            return []
        out.append(row)
    return out


def _read_pack_index(path: str) -> list[tuple[str, int, int]]:
    """(name, offset, length) of each entry of the pack at PATH; [] for anything but a whole pack
    (a foreign or truncated file, an index that points outside the entries)."""
    got = _read_pack(path)
    return _rows(*got) if got is not None else []


class _PackIndex:
    """The packs of a cache folder as one run sees them, newest first: each pack's index is read
    whole (one read a pack) and searched as bytes for a run's first PACK_SCANS lookups (a
    pre-commit run of a few files); past that it is worked into one table (about 1 us a row,
    so a cache of 100,000 packed entries would cost a small run 0.1 s)."""

    def __init__(self, folder: str):
        self.packs: list[tuple[str, bytes, int]] = []  # (path, index, end of the entries)
        self.table: dict[str, list[tuple[str, int, int]]] | None = None
        self.asked = 0
        self.open: dict[str, Any] = {}  # path -> the pack opened for reads (unbuffered), oldest first
        try:
            names = sorted((n for n in os.listdir(folder) if n.endswith(".pack")), reverse=True)
        except OSError:
            names = []
        for name in names:  # a name starts with its writing time: newest first
            path = os.path.join(folder, name)
            got = _read_pack(path)
            if got is not None:
                self.packs.append((path, *got))

    def places(self, name: str) -> list[tuple[str, int, int]]:
        """Where the entry or fact set NAME ("e" or "f" + its key) is packed, newest first."""
        if not self.packs:
            return []
        if self.table is None:
            self.asked += 1
            if self.asked > PACK_SCANS:
                self.table = {}
                for path, index, end in self.packs:
                    for key, offset, length in _rows(index, end):
                        self.table.setdefault(key, []).append((path, offset, length))
        if self.table is not None:
            return self.table.get(name, [])
        try:
            wanted = name[:1].encode("ascii") + bytes.fromhex(name[1:])
        except ValueError:
            return []
        out = []
        for path, index, end in self.packs:
            i = index.find(wanted)
            while i != -1 and i % _PACK_ROW:  # only a whole row's start counts
                i = index.find(wanted, i + 1)
            row = _row(index, i, end) if i != -1 else None
            if row is not None:
                out.append((path, row[1], row[2]))
        return out

    def read(self, path: str, offset: int, length: int) -> bytes | None:
        """LENGTH bytes at OFFSET of the pack at PATH (None when they cannot all be read), from
        the pack kept open: a run that takes its entries from a pack opens it once, not once an
        entry (2,000 opens of one pack took 10 to 18 ms). A pack is never written in place, only
        replaced by a newer one or removed whole, so what an open one holds stays as read."""
        fh = self.open.get(path)
        if fh is None:
            if len(self.open) >= OPEN_PACKS:
                self.open.pop(next(iter(self.open))).close()
            try:
                fh = self.open[path] = open(path, "rb", buffering=0)
            except OSError:
                return None
        else:  # the most recently used last
            self.open[path] = self.open.pop(path)
        try:
            if _pread is not None:
                blob = _pread(fh.fileno(), length, offset)
            else:
                fh.seek(offset)
                blob = fh.read(length)
        except (OSError, ValueError, OverflowError):
            return None
        return blob if blob is not None and len(blob) == length else None

    def close(self) -> None:
        """Close the packs kept open (a later read opens them again)."""
        while self.open:
            self.open.popitem()[1].close()


_pread = getattr(os, "pread", None)  # POSIX: a read at an offset in one call, no seek


def _leaf_folders(root: str | os.PathLike) -> list[str]:
    """The folders that hold files of the cache: the two-letter shards of the entries, fact sets
    and run records, and the packs."""
    out = []
    for folder in (os.fspath(root), os.path.join(root, "facts"), os.path.join(root, "runs")):
        try:
            out += [e.path for e in os.scandir(folder) if e.is_dir() and len(e.name) == 2]
        except OSError:
            pass
    packs = os.path.join(root, "packs")
    if os.path.isdir(packs):
        out.append(packs)
    return out


def trim(root: str | os.PathLike, max_bytes: int | None = None, max_entries: int | None = None) -> int:
    """Remove the oldest entries until at most KEEP_FRACTION of the bounds is used (and leftover
    temporary files older than an hour); returns the number of files removed."""
    max_bytes = MAX_BYTES if max_bytes is None else max_bytes
    max_entries = MAX_ENTRIES if max_entries is None else max_entries
    entries = []
    removed = 0
    now = time.time()
    for shard in _leaf_folders(root):
        try:
            with os.scandir(shard) as it:
                for e in it:
                    try:
                        st = e.stat()
                    except OSError:
                        continue
                    if e.name.endswith(".tmp"):
                        if now - st.st_mtime > 3600 and _remove(e.path):
                            removed += 1
                        continue
                    entries.append((st.st_mtime, st.st_size, e.path))
        except OSError:
            continue
    total = sum(size for _, size, _ in entries)
    if total <= max_bytes and len(entries) <= max_entries:
        return removed
    entries.sort()
    keep_bytes, keep_entries = int(max_bytes * KEEP_FRACTION), int(max_entries * KEEP_FRACTION)
    count = len(entries)
    for _mtime, size, path in entries:
        if total <= keep_bytes and count <= keep_entries:
            break
        if _remove(path):
            removed += 1
            total -= size
            count -= 1
    return removed


def _remove(path: str) -> bool:
    try:
        os.unlink(path)
        return True
    except OSError:
        return False


def usage(root: str | os.PathLike) -> tuple[int, int]:
    """(files, bytes) of the entries, packs, fact sets and run records stored under ROOT."""
    n = total = 0
    for shard in _leaf_folders(root):
        try:
            listed = list(os.scandir(shard))
        except OSError:
            continue
        for e in listed:
            if not e.name.endswith(".tmp"):
                try:
                    total += e.stat().st_size
                    n += 1
                except OSError:
                    pass
    return n, total


def lint_cached(pairs: Iterable[tuple[str, Any]], store: Store, lint_recorded, lint_many=None,
                window: int = 0):
    """Reports for (file, options) pairs, in order: stored ones when they still hold, the others
    from ``lint_recorded(path, options) -> (report, facts)`` (or, for several misses at once,
    ``lint_many(misses) -> iterator of (report, facts)``, e.g. over processes). ``window``: with
    ``lint_many``, the pairs are taken that many at a time (the misses of each window linted
    together), so that only a window's stored reports are held at once. What they store is
    written behind the lint and is on disk once the reports are all taken or the iterator is
    closed. The caller calls ``store.close()`` once it has taken the reports it wants."""
    store.write_behind = True
    try:
        yield from _lint_cached(list(pairs), store, lint_recorded, lint_many, window)
    finally:
        store.flush()
        store.write_behind = False


def _lint_cached(pairs: list[tuple[str, Any]], store: Store, lint_recorded, lint_many, window: int = 0):
    keyed: list[tuple[str, str] | None] = []
    for path, options in pairs:
        try:
            keyed.append(store.key(path, options) if store.usable else None)
        except Exception:  # noqa: BLE001 - Uncacheable, or anything odd: lint it without the cache
            keyed.append(None)
        if keyed[-1] is None:
            store.run_whole = False
    if lint_many is not None and window > 0:
        for start in range(0, len(pairs), window):
            span = range(start, min(len(pairs), start + window))
            found = [store.get(keyed[i][0]) if keyed[i] else None for i in span]
            misses = [i for i, r in zip(span, found) if r is None]
            fresh = iter(lint_many([pairs[i] for i in misses])) if misses else iter(())
            for i, report in zip(span, found):
                if report is None:
                    report, facts = next(fresh)
                    if keyed[i]:
                        store.put(keyed[i][0], keyed[i][1], pairs[i][0], facts, report)
                yield report
        return
    if lint_many is None:
        for (path, options), k in zip(pairs, keyed):
            report = store.get(k[0]) if k else None
            if report is None:
                report, facts = lint_recorded(path, options)
                if k:
                    store.put(k[0], k[1], path, facts, report)
            yield report
        return
    found = [store.get(k[0]) if k else None for k in keyed]
    misses = [i for i, r in enumerate(found) if r is None]
    fresh = lint_many([pairs[i] for i in misses]) if misses else iter(())
    pending = iter(misses)
    nxt = next(pending, None)
    for i, report in enumerate(found):
        if i == nxt:
            report, facts = next(fresh)
            if keyed[i]:
                store.put(keyed[i][0], keyed[i][1], pairs[i][0], facts, report)
            nxt = next(pending, None)
        yield report


# --------------------------------------------------------------------------- whole runs

RUN_FORMAT = 1  # bump when a run record's layout changes
MAX_RUN_OUTPUT = MAX_BYTES // 4  # a run printing more than this is not recorded
_RUN_MAGIC = b"cfgcheck-lint-run\n"
_TRAILER = 8 + len(_RUN_MAGIC)  # the metadata's length, then the magic
_ENCODINGS = frozenset({"utf-8", "ascii", "latin-1", "iso8859-1", "cp1252"})  # stateless: pieces encode as the whole


def _stream_traits(stream: Any) -> tuple:
    try:
        tty = bool(stream.isatty())
    except (AttributeError, ValueError, OSError):
        tty = None
    return (tty, getattr(stream, "encoding", None), getattr(stream, "errors", None))


def lint_from_cache(args: dict, progress: Any = None) -> "_Run":
    """The lint command's arguments ARGS -> a run. ``run.code`` is set when the same command, in
    the same folder and environment, was answered before and nothing it rested on changed: the
    stored output has been written to stdout (progress through PROGRESS, a ``(done, total)``
    callable with ``close()``, when given) and the command exits with that code, having imported
    nothing but this module, ``reads`` and the standard library. Otherwise the run records what
    the full lint reads and prints, and ``run.done(code)`` at the end stores it.

    What is checked before the stored output is used: every linted file's bytes (sha256), every
    fact a file's report rests on (reads.py), what the walk of the folders saw (each folder's
    entries), what the project-file search looked at, the project and baseline files' bytes;
    the key holds the arguments, the working folder, the environment (ENV_INPUTS, NO_COLOR,
    TERM), whether stdout and stderr are terminals and their encodings, and cfgcheck's version
    and package fingerprint."""
    stale = _ACTIVE_RUN.get()
    if stale is not None:
        stale.abandon()  # a run of this process that ended without done(): it stores nothing
    run = _Run()
    if args.get("no_cache") or args.get("save_baseline") is not None:
        return run
    folder = default_folder()
    if folder is None:
        return run
    store = Store(folder)
    try:
        key = reads.sha256(repr((
            RUN_FORMAT, store._fixed(), canonical(args), _stream_traits(sys.stdout),
            _stream_traits(sys.stderr), os.environ.get("NO_COLOR"), os.environ.get("TERM"), os.linesep,
        )).encode("utf-8", "surrogateescape")).hexdigest()
    except Exception:  # noqa: BLE001 - Uncacheable, an unreadable working folder: no run record
        return run
    target = os.path.join(store._folder, "runs", key[:2], key[2:])
    run.seen["code"] = store._code  # the per-file cache of a full run keys by it too
    code = _replay(target, key, progress, run.seen)
    if code is not None:
        run.code = code
        return run
    try:
        run.start(target, args)
    except Exception:  # noqa: BLE001 - recording is a help, never a reason for a run to fail
        run.abandon()
    return run


def _replay(target: str, key: str, progress: Any, seen: dict | None = None) -> int | None:
    """Write the output stored at TARGET and return its exit code when every file and fact it
    rests on is unchanged; None (nothing written) otherwise. SEEN gets what was checked on the
    way (facts, and files' digests with their stat), so a miss does not compute them again."""
    if seen is None:
        seen = {}
    facts_seen = seen.setdefault("facts", {})
    digests_seen = seen.setdefault("digests", {})
    try:
        fh = open(target, "rb")
    except OSError:
        return None
    shown = False
    with fh:
        try:
            size = os.fstat(fh.fileno()).st_size
            if size < _TRAILER:
                return None
            fh.seek(size - _TRAILER)
            trailer = fh.read(_TRAILER)
            if trailer[8:] != _RUN_MAGIC:
                return None
            meta_len = int.from_bytes(trailer[:8], "little")
            out_len = size - _TRAILER - meta_len
            if out_len < 0:
                return None
            fh.seek(out_len)
            import marshal

            meta = marshal.loads(fh.read(meta_len))
            fmt, stored_key, code, total, files, facts = meta
            if fmt != RUN_FORMAT or stored_key != key or type(code) is not int:
                return None
            for kind, path, pattern, value in facts:
                now = facts_seen[(kind, path, pattern)] = reads.fact(kind, path, pattern)
                if now != value:
                    return None
            n = len(files)
            for i, (path, digest) in enumerate(files, start=1):
                got = reads.regular_bytes(path)  # never blocks on a pipe
                if got is None:
                    return None
                now = reads.sha256(got[1]).hexdigest()
                digests_seen[path] = (_stat_id(got[0]), now)
                if now != digest:
                    return None
                if progress is not None and i < n:
                    progress(min(i, total), total)
                    shown = True
            if progress is not None:
                progress(total, total)
                progress.close()
                shown = False
            fh.seek(0)
        except Exception:  # noqa: BLE001 - a changed, vanished, corrupt or foreign record: a miss
            return None
        finally:
            if shown:
                progress.close()
        # from here on the answer is this record: a failing write (a closed pipe) is the
        # command's own failure, as it would be for a full run, never a second answer
        _copy_out(fh, out_len)
        return code


def _stat_id(st: os.stat_result) -> tuple:
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _copy_out(fh: Any, n: int) -> None:
    """N stored bytes from FH to stdout, as the full run's text writes produced them."""
    out = sys.stdout
    buf = getattr(out, "buffer", None) if os.linesep == "\n" else None
    out.flush()
    decoder = None
    if buf is None:
        import codecs

        decoder = codecs.getincrementaldecoder(out.encoding or "utf-8")(out.errors or "strict")
    while n > 0:
        chunk = fh.read(min(n, 1 << 20))
        if not chunk:
            break
        n -= len(chunk)
        if buf is not None:
            buf.write(chunk)
        else:
            out.write(decoder.decode(chunk, final=n <= 0))
    (buf if buf is not None else out).flush()


class _Tee:
    """Stands in for sys.stdout or sys.stderr while a run is recorded: every write goes through
    to the stream and is kept by the run. A use the run cannot replay (the binary buffer,
    writelines) spoils the record; the stream still works as before."""

    _PASS = frozenset({"flush", "isatty", "encoding", "errors", "fileno", "closed", "name", "mode",
                       "newlines", "line_buffering", "readable", "writable", "seekable"})

    def __init__(self, inner: Any, took: Any, run: "_Run"):
        self._inner = inner
        self._took = took
        self._run = run

    def write(self, text: str) -> int:
        n = self._inner.write(text)
        self._took(text)
        return n

    def __getattr__(self, name: str) -> Any:
        if name not in self._PASS:
            self._run.spoil()
        return getattr(self._inner, name)


class _Run:
    """One lint command's run: answered from a stored record (``code`` set), or recorded until
    ``done(code)``; a run that ends otherwise (an error, an exit before the end) stores nothing."""

    def __init__(self) -> None:
        self.code: int | None = None
        self.open = False
        self.store: Store | None = None
        self._spoiled = False
        self._tmp: str | None = None
        self._fh: Any = None
        self._bytes = 0
        self._progress_total: int | None = None  # what the progress line counted (skipped files too)
        self.seen: dict = {}  # what the check of a stored record computed before it missed

    def start(self, target: str, args: dict) -> None:
        out, err = sys.stdout, sys.stderr
        enc = getattr(out, "encoding", None) or ""
        try:
            import codecs

            enc = codecs.lookup(enc).name
        except (LookupError, TypeError):
            return
        if enc not in _ENCODINGS:
            return
        self._target, self._enc, self._errors = target, enc, getattr(out, "errors", None) or "strict"
        self._args = args
        self._facts: reads.Facts = {}
        self._token = reads._RECORD.set(self._facts)
        self._out, self._err = out, err
        sys.stdout = _Tee(out, self._took_out, self)
        sys.stderr = _Tee(err, self._took_err, self)
        self.open = True
        _ACTIVE_RUN.set(self)
        import atexit

        atexit.register(self.abandon)  # a run that exits early leaves no temporary file

    def spoil(self) -> None:
        self._spoiled = True

    def _took_out(self, text: str) -> None:
        if self._spoiled or not text:
            return
        try:
            blob = text.encode(self._enc, self._errors)
            if self._fh is None:
                self._open_spool()
            self._fh.write(blob)
            self._bytes += len(blob)
            if self._bytes > MAX_RUN_OUTPUT:
                self.spoil()
        except (OSError, ValueError, UnicodeError):
            self.spoil()

    def _open_spool(self) -> None:
        """The temporary file beside the record that the output is copied to, moved into place
        by done()."""
        folder = os.path.dirname(self._target)
        os.makedirs(folder, exist_ok=True)
        self._tmp = os.path.join(folder, f".{os.path.basename(self._target)}."
                                         f"{os.getpid()}.{time.monotonic_ns()}.tmp")
        self._fh = open(self._tmp, "wb")

    def _took_err(self, text: str) -> None:
        # the progress line ('\r...') is drawn again on a replay; anything else on stderr (a
        # warning) is not stored, so a run that printed one is not recorded
        if text and not text.startswith("\r"):
            self.spoil()
        elif text.startswith("\rcfgcheck: "):
            done, _, total = text[11:].partition(" ")[0].partition("/")
            if total.isdigit():
                self._progress_total = int(total)

    def _restore(self) -> None:
        if not self.open:
            return
        self.open = False
        if _ACTIVE_RUN.get() is self:
            _ACTIVE_RUN.set(None)
        if isinstance(sys.stdout, _Tee) and sys.stdout._run is self:
            sys.stdout = self._out
        if isinstance(sys.stderr, _Tee) and sys.stderr._run is self:
            sys.stderr = self._err
        try:
            reads._RECORD.reset(self._token)
        except ValueError:  # set in another context
            reads._RECORD.set(None)

    def abandon(self) -> None:
        self._restore()
        self._discard()
        import atexit

        atexit.unregister(self.abandon)

    def _discard(self) -> None:
        if self._fh is not None:
            try:
                self._fh.close()
            except OSError:
                pass
            self._fh = None
        if self._tmp is not None:
            _remove(self._tmp)
            self._tmp = None

    def done(self, code: int) -> int:
        """The run ended with exit status CODE: store its record when the whole run can be
        replayed (every file keyed and stored, nothing printed that a replay would lack)."""
        if not self.open:
            return code
        sys.stdout.flush()
        self._restore()
        store = self.store
        if store is not None:
            store.flush()  # the entries' writes: one that failed means the run is not whole
        if (self._spoiled or store is None or not store.run_whole or not store.writable
                or not store.run_files or type(code) is not int):
            self.abandon()
            return code
        try:
            import marshal

            facts = dict(self._facts)
            for name in ("project", "baseline"):
                given = self._args.get(name)
                if given is not None:
                    facts.setdefault(("f", os.path.abspath(given), ""), reads.content(given))
            for given in self._args.get("launch") or ():
                facts.setdefault(("f", os.path.abspath(given), ""), reads.content(given))
            for k, v in store.run_facts.items():
                facts.setdefault(k, v)
            total = self._progress_total if self._progress_total is not None else len(store.run_files)
            meta = marshal.dumps((RUN_FORMAT, os.path.basename(os.path.dirname(self._target))
                                  + os.path.basename(self._target), code, total,
                                  tuple(store.run_files),
                                  tuple((k, p, pat, v) for (k, p, pat), v in sorted(facts.items()))))
            if self._fh is None:  # nothing printed
                self._open_spool()
            self._fh.write(meta + len(meta).to_bytes(8, "little") + _RUN_MAGIC)
            self._fh.close()
            self._fh = None
            os.replace(self._tmp, self._target)
            self._tmp = None
            store.written += self._bytes + len(meta)
            store.close()  # a trim when one is due counts the record too
        except (OSError, ValueError):
            self._discard()
        import atexit

        atexit.unregister(self.abandon)
        return code
