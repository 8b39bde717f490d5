"""Keys that the release a project runs rejects or ignores: renamed and removed keys, judged
against the versions pinned beside the config (or given with --installed)."""

from __future__ import annotations

from functools import lru_cache
from types import MappingProxyType

from . import check
from .unknown_keys import keyed_paths, repo_keys_of  # shared with unknown-key, once per view

# Whether the library that reads a key table refuses a key it does not declare (an error) or
# passes over it (a warning): transformers' HfArgumentParser raises "Some keys are not used by the
# HfArgumentParser"; accelerate's config loader raises on unknown keys ("The config file at ... had
# unknown keys"); DeepSpeed and PEFT adapter configs are read more loosely (from memory).
_REFUSES = MappingProxyType({"trainer": True, "accelerate": True, "deepspeed": False, "peft-adapter": False})


def _keys():
    from ..knowledge import keys

    return keys


def _minor(v: str) -> tuple[int, ...]:
    from ..knowledge.pins import version_key

    return version_key(v)[:2]


@lru_cache(maxsize=4096)  # a pure function of fixed tables, asked the same few questions per key
def _status(lib: str, first: str, last: str, pinned: str) -> tuple[str, str]:
    """'yes' | 'no' | 'unsure', and the scanned release that decides it."""
    scanned = _keys()._data()["scanned"].get(lib, [])
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


def installed(ctx) -> dict:
    """{library: (version, where)}: --installed first, then the pins beside the config (looked
    up once per view, whichever rules ask)."""
    return ctx.once("installed", lambda: _installed(ctx))


def _installed(ctx) -> dict:
    from ..knowledge.pins import pins_near

    out = {lib: (pin.version, f"pinned in {pin.source}")
           for lib, pin in pins_near(ctx.file, ctx.options.cwd).items()}
    for lib, version in (getattr(ctx.options, "versions", None) or {}).items():
        out[lib] = (version, "stated with --installed or the project file")
    return out


def _newest_installed(scanned: dict, requires: dict) -> dict[str, str]:
    """The release of each library a fresh install gets: the newest scanned one, or for a
    recipe runner the newest scanned one its own requirements allow (llamafactory 0.9.5 installs
    transformers <=5.6.0, so a key removed in 5.15 still reaches its parser)."""
    from ..knowledge.pins import satisfies

    out = {}
    for lib, versions in scanned.items():
        allowed = [v for v in versions if lib not in requires or satisfies(v, requires[lib])]
        if allowed:
            out[lib] = allowed[-1]
    return out


def _installed_text(lib: str, version: str, requires: dict, runner: str) -> str:
    if lib in requires and runner:
        return f"{lib} {version}, the newest scanned release {runner} allows ({requires[lib]})"
    return f"{lib} {version}"


def _current(info, newest: dict) -> bool:
    """Whether a fresh install accepts the key: some library reads it in the release installed."""
    from ..knowledge.pins import version_key

    # a library none of whose scanned releases the runner allows: no verdict on it
    return any(lib not in newest or version_key(first)[:2] <= version_key(newest[lib])[:2]
               <= version_key(last)[:2] for lib, (first, last) in info.accepted.items())


class _Table:
    """What key-not-in-release needs of one key table, worked out once per process: the keys
    that have release bounds at all, each with whether a fresh install accepts it."""

    __slots__ = ("groups", "bounded", "newest", "requires", "runner")

    def __init__(self, table: str):
        keys = _keys()
        data = keys._data()
        self.groups = data["by_parent"][table]
        self.requires = data["requires"].get(table, {})
        self.newest = _newest_installed(data["scanned"], self.requires)
        self.runner = data["runner_sources"].get(table, "").split(" (")[0]
        self.bounded = {name: (info, _current(info, self.newest))
                        for name, info in data["infos"][table].items() if info.accepted}


@lru_cache(maxsize=None)  # one per key table; the tables are fixed for the process
def _table(table: str) -> _Table | None:
    return _Table(table) if table in _keys().layouts() else None


@check("key-not-in-release")
def key_not_in_release(ctx) -> None:
    view = ctx.view
    if view.layout is None:
        return
    table = view.layout.key_table  # the key table of the libraries that read this kind of file
    known = _table(table) if table is not None else None
    if known is None:
        return
    groups, bounded = known.groups, known.bounded
    sections = view.layout.sections
    doc = ctx.doc
    data = doc.data if isinstance(doc.data, dict) else None
    candidates = []
    for path, parent, name in keyed_paths(ctx):
        if parent not in groups or name not in bounded:
            continue
        if path[0] in sections and data is not None and isinstance(data.get(path[0]), dict):
            continue
        candidates.append((path, name))
    if not candidates:
        return
    repo = None
    if view.layout.trainer_defaults or view.layout.read_by_own_classes:
        repo = repo_keys_of(ctx)
    pins = None
    reported: list[tuple] = []
    # parents before their keys, so a section reported once covers what is inside it
    candidates.sort(key=lambda pn: len(pn[0]))
    for path, name in candidates:
        if reported and any(path[:len(p)] == p for p in reported):
            continue  # inside a section already reported: the section says it
        info, current = bounded[name]
        if repo is not None and path[-1] in repo.keys and path[-1] not in repo.read_only:
            continue  # the script that reads the file declares it: its own release decides
        if repo is not None and repo.reader_libraries is not None \
                and not set(info.accepted) & repo.reader_libraries:
            # the repository's parsers are built from classes of other libraries (or its own):
            # the releases of the libraries that once took the key say nothing about them
            continue
        if pins is None:
            pins = installed(ctx)
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
