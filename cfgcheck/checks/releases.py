"""Keys that the release a project runs rejects or ignores: renamed and removed keys, judged
against the versions pinned beside the config (or given with --installed)."""

from __future__ import annotations

from functools import cache, lru_cache
from types import MappingProxyType

from . import check
from .unknown_keys import repo_keys_of  # shared with unknown-key, once per view

# Whether the library that reads a key table refuses a key it does not declare (an error) or
# passes over it (a warning): transformers' HfArgumentParser raises "Some keys are not used by the
# HfArgumentParser"; accelerate's config loader raises on unknown keys ("The config file at ... had
# unknown keys"); DeepSpeed and PEFT adapter configs are read more loosely (from memory).
_REFUSES = MappingProxyType({"trainer": True, "accelerate": True, "deepspeed": False, "peft-adapter": False})


def _minor(v: str) -> tuple[int, ...]:
    from ..knowledge.pins import version_key

    return version_key(v)[:2]


@lru_cache(maxsize=4096)  # a pure function of fixed tables, asked the same few questions per key
def _status(lib: str, first: str, last: str, pinned: str) -> tuple[str, str]:
    """'yes' | 'no' | 'unsure', and the scanned release that decides it."""
    from ..knowledge.keys import _common

    scanned = _common()["scanned"].get(lib, [])
    p = _minor(pinned)
    lo, hi = _minor(first), _minor(last)
    if lo <= p <= hi:
        return "yes", last
    minors = [_minor(v) for v in scanned]
    if p > hi:
        later = [v for v, m in zip(scanned, minors) if m > hi]
        if later and p >= _minor(later[0]):
            return "no", later[0]
        return "unsure", later[0] if later else last
    earlier = [v for v, m in zip(scanned, minors) if m < lo]
    if earlier and p <= _minor(earlier[-1]):
        return "no", earlier[-1]
    return "unsure", first


def installed(ctx):
    """{library: (version, where)} (read-only): --installed first, then the pins beside the
    config (looked up once per view, whichever rules ask)."""
    return ctx.once("installed", lambda: _installed(ctx))


@cache  # looked up once: a relative import inside a function costs a package lookup per call
def _pins_module():
    from ..knowledge import pins

    return pins


def _installed(ctx):
    """A read-only mapping: the pins of a folder are shared by its configs."""
    pinned = _pins_module().pinned_versions_near(ctx.file, ctx.options.cwd)
    stated = getattr(ctx.options, "versions", None)
    if not stated:
        return pinned
    out = dict(pinned)
    for lib, version in stated.items():
        out[lib] = (version, "stated with --installed or the project file")
    return out


def _installed_text(lib: str, version: str, requires: dict, runner: str) -> str:
    if lib in requires and runner:
        return f"{lib} {version}, the newest scanned release {runner} allows ({requires[lib]})"
    return f"{lib} {version}"


class _Table:
    """What key-not-in-release needs of one key table: each key path that names a key with
    release bounds, and those of the keys a fresh install no longer accepts (the only ones a
    config with nothing pinned is told about)."""

    __slots__ = ("table", "bounded", "stale", "newest", "requires", "runner")

    def __init__(self, table):
        self.table = table
        self.bounded = table.bounded
        self.stale = table.stale
        self.requires = table.requires
        self.newest = table.newest
        self.runner = table.source.split(" (")[0]


@lru_cache(maxsize=None)  # one per key table; the tables are fixed for the process
def _table(table: str) -> _Table | None:
    from ..knowledge.keys import table_of

    known = table_of(table)
    return _Table(known) if known is not None else None


def _in_order(entries: dict, paths) -> list[tuple]:
    """PATHS in the document's order, parents before their keys (a section reported once covers
    what is inside it)."""
    if len(paths) > 1:
        paths = [p for p in entries if p in paths]  # the document's order
        paths.sort(key=len)  # stable: the document's order among paths of one length
    return list(paths)


@check("key-not-in-release")
def key_not_in_release(ctx) -> None:
    view = ctx.view
    layout = view.layout
    if layout is None:
        return
    table = layout.key_table  # the key table of the libraries that read this kind of file
    known = _table(table) if table is not None else None
    if known is None:
        return
    doc = ctx.doc
    entries = doc.entries
    candidates = known.bounded.keys() & entries.keys()  # the written keys with release bounds
    if not candidates:
        return
    data = doc.data if isinstance(doc.data, dict) else None
    sections = layout.sections
    if sections and data is not None:
        # a section of the file's own script (training:, lora:) is the script's, not the library's
        inside = [h for h in sections.keys() & data.keys() if isinstance(data[h], dict)]
        if inside:
            candidates = {p for p in candidates if p[0] not in inside}
    repo = None
    if layout.trainer_defaults or layout.read_by_own_classes:
        if not any(entries[p].keyed for p in candidates):
            return
        repo = repo_keys_of(ctx)
    keys = known.table.keys
    if repo is not None:
        declared, read_only, libraries = repo.keys, repo.read_only, repo.reader_libraries
        kept = set()
        for p in candidates:
            if not entries[p].keyed:
                continue
            if p[-1] in declared and p[-1] not in read_only:
                continue  # the script that reads the file declares it: its own release decides
            if libraries is not None and libraries.isdisjoint(keys[known.bounded[p]][1]):
                # the repository's parsers are built from classes of other libraries (or its
                # own): the releases of the libraries that once took the key say nothing about them
                continue
            kept.add(p)
        candidates = kept
    elif not any(entries[p].keyed for p in candidates):
        return
    if not candidates:
        return
    pins = installed(ctx)
    if not pins:
        # nothing pinned: only a key a fresh install no longer accepts is reported
        candidates = candidates & known.stale
        if not candidates:
            return
    reported: list[tuple] = []
    table_of_keys = known.table
    for path in _in_order(entries, candidates):
        if not entries[path].keyed:
            continue
        if reported and any(path[:len(p)] == p for p in reported):
            continue  # inside a section already reported: the section says it
        name = known.bounded[path]
        info = table_of_keys.info(name)
        current = keys[name][3]
        if not pins and current:
            continue  # nothing pinned, and a fresh install accepts it
        verdicts = {}
        if pins:
            for lib, (first, last) in info.accepted.items():
                if lib in pins:
                    verdicts[lib] = _status(lib, first, last, pins[lib][0])
            if any(s == "yes" for s, _ in verdicts.values()):
                continue
            unpinned = [lib for lib in info.accepted if lib not in pins]
        else:
            unpinned = list(info.accepted)
        if verdicts or not info.current:
            versions = info.versions_text()  # only for a key that may be reported
        if verdicts and not unpinned and all(s == "no" for s, _ in verdicts.values()):
            lib = sorted(verdicts)[0]
            variant = "refused" if _REFUSES.get(table) else "ignored"
            ctx.report(path, variant, on="key", key=name, library=lib, version=pins[lib][0],
                       where=pins[lib][1], versions=versions)
            reported.append(tuple(path))
        elif verdicts and not unpinned:
            lib = sorted(verdicts)[0]
            ctx.report(path, "between", on="key", key=name, library=lib, version=pins[lib][0],
                       where=pins[lib][1], versions=versions)
            reported.append(tuple(path))
        elif not current:
            newest, requires = known.newest, known.requires
            libs = sorted(info.accepted)
            ctx.report(path, "no-version", on="key", key=name, versions=versions,
                       newest=", ".join(_installed_text(lib, newest[lib], requires, known.runner)
                                        for lib in libs if lib in newest))
            reported.append(tuple(path))
