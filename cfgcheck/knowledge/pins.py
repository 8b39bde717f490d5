"""The releases of the training libraries a project pins, read from the files beside a config.

Looked for in the config's folder and its parents (up to the folder that holds ``.git`` or a
``pyproject.toml``, at most eight levels): ``requirements*.txt`` / ``constraints*.txt`` (exact
``name==X`` pins only; ranges say nothing about the release that runs), ``pyproject.toml``
(``[project]`` dependencies and optional dependencies, Poetry dependencies written as an exact
version), and the lock files ``uv.lock``, ``poetry.lock`` and ``pdm.lock`` (``[[package]]`` name and
version). The nearest folder wins; within a folder a lock file wins over a requirements file,
which wins over ``pyproject.toml``. Files that cannot be read or parsed are passed over: they are
not the config, so they are never an input problem. Each file is read once (at most 4 MB).

>>> parse_requirement("transformers==4.44.2 ; python_version > '3.8'")
('transformers', '4.44.2')
>>> parse_requirement("trl>=0.12") is None
True
"""

from __future__ import annotations

import os
import re
import stat
from functools import lru_cache
from pathlib import Path
from types import MappingProxyType

from .._patterns import later
from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .. import reads
from ..findings import OptionError
from ..memo import remembered

LIBRARIES = ("transformers", "trl", "peft", "deepspeed", "accelerate")
_MAX_BYTES = 4 * 1024 * 1024
_MAX_UP = 8
_REQ = later(r"^\s*([A-Za-z0-9][A-Za-z0-9._-]*)\s*(?:\[[^\]]*\])?\s*===?\s*([0-9][0-9A-Za-z.+!-]*)\s*(?:[;#].*)?$")


class Pin:
    library: str
    version: str
    source: str  # the file that pins it, or "--installed" for the command line

    __slots__ = ('library', 'version', 'source')

    def __init__(self, library, version, source):
        _setattr(self, 'library', library)
        _setattr(self, 'version', version)
        _setattr(self, 'source', source)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(library={self.library!r}, version={self.version!r}, source={self.source!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.library, self.version, self.source) == (other.library, other.version, other.source)
        return NotImplemented

    def __hash__(self):
        return hash((self.library, self.version, self.source))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.library, self.version, self.source)

    __setstate__ = _frozen_setstate


def _norm(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def parse_requirement(line: str) -> tuple[str, str] | None:
    """(name, version) of an exact pin ``name==X``, else None."""
    m = _REQ.match(line)
    if not m:
        return None
    return _norm(m.group(1)), m.group(2)


@lru_cache(maxsize=4096)  # a pure function asked about the same few releases for every key
def version_key(text: str) -> tuple[int, ...]:
    """'4.44.2' -> (4, 44, 2); pre-release and local parts are dropped."""
    out = []
    for part in re.split(r"[.+!-]", text):
        m = re.match(r"\d+", part)
        if not m:
            break
        out.append(int(m.group()))
    return tuple(out)


def satisfies(version: str, spec: str) -> bool:
    """Whether VERSION meets a comma-separated specifier (``>=4.55.0,<=5.6.0,!=4.57.0``); the
    operators ``==`` (with a trailing ``.*``), ``!=``, ``<=``, ``>=``, ``<``, ``>``, ``~=``."""
    v = version_key(version)
    for part in (p.strip() for p in spec.split(",")):
        m = re.match(r"(==|!=|<=|>=|~=|<|>)\s*([0-9][0-9A-Za-z.*+!-]*)$", part)
        if not m:
            continue
        op, text = m.groups()
        star = text.endswith(".*")
        w = version_key(text[:-2] if star else text)
        width = max(len(v), len(w))
        a, b = v + (0,) * (width - len(v)), w + (0,) * (width - len(w))
        if star:
            same = v[:len(w)] == w
            ok = same if op == "==" else not same if op == "!=" else True
        elif op == "~=":
            ok = a >= b and v[:len(w) - 1] == w[:len(w) - 1]
        else:
            ok = {"==": a == b, "!=": a != b, "<=": a <= b, ">=": a >= b, "<": a < b, ">": a > b}[op]
        if not ok:
            return False
    return True


def _read(path: Path) -> str | None:
    reads.note_file(path)
    try:
        if not path.is_file() or path.stat().st_size > _MAX_BYTES:
            return None
        return path.read_text(encoding="utf-8", errors="replace")
    except OSError:
        return None


def _from_requirements(text: str) -> dict[str, str]:
    out = {}
    for line in text.splitlines():
        got = parse_requirement(line)
        if got and got[0] in LIBRARIES:
            out.setdefault(got[0], got[1])
    return out


def _toml(text: str):
    import tomllib

    try:
        return tomllib.loads(text)
    except (tomllib.TOMLDecodeError, ValueError, RecursionError, MemoryError):
        return None  # not the config: a pin file that cannot be parsed is passed over


def _from_lock(text: str) -> dict[str, str]:
    data = _toml(text)
    out = {}
    if isinstance(data, dict):
        for pkg in data.get("package", []) or []:
            if isinstance(pkg, dict) and isinstance(pkg.get("name"), str) and isinstance(pkg.get("version"), str):
                name = _norm(pkg["name"])
                if name in LIBRARIES:
                    out.setdefault(name, pkg["version"])
    return out


def _from_pyproject(text: str) -> dict[str, str]:
    data = _toml(text)
    out: dict[str, str] = {}
    if not isinstance(data, dict):
        return out
    project = data.get("project") if isinstance(data.get("project"), dict) else {}
    lines = list(project.get("dependencies") or [])
    for extra in (project.get("optional-dependencies") or {}).values():
        if isinstance(extra, list):
            lines.extend(extra)
    for line in lines:
        got = parse_requirement(line) if isinstance(line, str) else None
        if got and got[0] in LIBRARIES:
            out.setdefault(got[0], got[1])
    poetry = ((data.get("tool") or {}).get("poetry") or {}) if isinstance(data.get("tool"), dict) else {}
    deps = poetry.get("dependencies") if isinstance(poetry, dict) else None
    if isinstance(deps, dict):
        for name, spec in deps.items():
            version = spec.get("version") if isinstance(spec, dict) else spec
            if isinstance(version, str) and re.fullmatch(r"=?=?\s*[0-9][0-9A-Za-z.+-]*", version.strip()):
                if _norm(name) in LIBRARIES:
                    out.setdefault(_norm(name), version.strip().lstrip("= "))
    return out


# the names in a folder that decide its pins (the result cache re-lists only these)
_PIN_NAMES = r"(?:uv|poetry|pdm)\.lock|(?:requirements|constraints)[\w.-]*\.txt|pyproject\.toml|\.git"


_REQUIREMENTS = later(r"(requirements|constraints)[\w.-]*\.txt")


@reads.memo(maxsize=256)
def _folder_pins(folder: str) -> tuple[tuple[Pin, ...], bool]:
    """The pins found in one folder, and whether the search stops here (a project root)."""
    path = Path(folder)
    found: dict[str, Pin] = {}
    reads.note_names(path, _PIN_NAMES)
    try:
        names = sorted(os.listdir(folder))  # the names alone: a folder of configs has many
    except OSError:
        return (), False
    locks = [n for n in names if n in ("uv.lock", "poetry.lock", "pdm.lock")]
    reqs = [n for n in names if n.startswith(("requirements", "constraints")) and _REQUIREMENTS.fullmatch(n)]
    for name in locks:
        for lib, ver in _from_lock(_read(path / name) or "").items():
            found.setdefault(lib, Pin(lib, ver, str(path / name)))
    for name in reqs:
        for lib, ver in _from_requirements(_read(path / name) or "").items():
            found.setdefault(lib, Pin(lib, ver, str(path / name)))
    if "pyproject.toml" in names:
        for lib, ver in _from_pyproject(_read(path / "pyproject.toml") or "").items():
            found.setdefault(lib, Pin(lib, ver, str(path / "pyproject.toml")))
    root = ".git" in names or "pyproject.toml" in names
    return tuple(found.values()), root


def file_kind(path: str) -> tuple[bool, bool]:
    """(whether PATH is a file, following a link; whether it is a link), as ``os.path.isfile``
    and ``os.path.islink`` say, from one look at the disk when PATH is no link; once per run
    (the config's read has said it already: ``load.read_source``)."""
    return remembered("file_kind", path, lambda: _file_kind(path))


def _file_kind(path: str) -> tuple[bool, bool]:
    try:
        mode = os.lstat(path).st_mode
    except (OSError, ValueError):
        return False, False
    if stat.S_ISLNK(mode):
        return os.path.isfile(path), True
    return stat.S_ISREG(mode), False


def pins_near(file: str | None, cwd: Path | None = None) -> dict[str, Pin]:
    """The pins that apply to a config file: the nearest folder's pin of each library wins."""
    return dict(_near(file, cwd, "pins_near", _pins_of_folder))


_NONE: MappingProxyType = MappingProxyType({})


def pinned_versions_near(file: str | None, cwd: Path | None = None) -> MappingProxyType:
    """{library: (version, "pinned in SOURCE")} of ``pins_near``, read-only: the configs of one
    folder share the one mapping (worked out once per run, ``cfgcheck.memo``)."""
    return _near(file, cwd, "pinned_versions_near", _versions_of_folder)


def _versions_of_folder(path: Path) -> MappingProxyType:
    return MappingProxyType({lib: (pin.version, f"pinned in {pin.source}")
                             for lib, pin in _pins_of_folder(path).items()})


def _near(file: str | None, cwd: Path | None, kind: str, of_folder):
    """``of_folder(path)`` for the config FILE (empty for text without a file): once per folder
    in a run, unless FILE is a link (its target's folder decides)."""
    if not file or file.startswith("<"):
        return _NONE
    try:
        # plain strings: this runs for every config, the folder's answer is remembered
        path = file if os.path.isabs(file) else os.path.join(os.fspath(cwd) if cwd else os.getcwd(), file)
        reads.note_kind(path)
        is_file, is_link = file_kind(path)
        if not is_file:
            return _NONE  # text given without a file (lint_text): nothing lies beside it
        if not is_link:  # the folder is looked up once per run (cfgcheck.memo)
            return remembered(kind, os.path.dirname(path), lambda: of_folder(Path(path)))
        return of_folder(Path(path))
    except (OSError, RuntimeError, ValueError):
        return _NONE


def _pins_of_folder(path: Path) -> dict[str, Pin]:
    try:
        folder = path.resolve().parent
    except (OSError, RuntimeError):
        return {}
    out: dict[str, Pin] = {}
    for _ in range(_MAX_UP):
        pins, root = _folder_pins(str(folder))
        for pin in pins:
            out.setdefault(pin.library, pin)
        if root or folder.parent == folder:
            break
        folder = folder.parent
    return out


def parse_installed(items) -> dict[str, str]:
    """``["trl==0.12.2", "transformers=4.44"]`` or a mapping -> {library: version}.
    Raises OptionError (a ValueError) naming the item that is not ``LIBRARY==VERSION`` of a known library."""
    if isinstance(items, dict):
        pairs = list(items.items())
    else:
        pairs = []
        for item in items:
            m = re.fullmatch(r"\s*([A-Za-z0-9._-]+)\s*==?\s*([0-9][0-9A-Za-z.+-]*)\s*", str(item))
            if not m:
                raise OptionError(f"--installed {item!r}: expected LIBRARY==VERSION, e.g. trl==0.12.2")
            pairs.append((m.group(1), m.group(2)))
    out = {}
    for name, version in pairs:
        lib = _norm(str(name))
        if lib not in LIBRARIES:
            raise OptionError(f"--installed {name!r}: expected one of {', '.join(LIBRARIES)}")
        if not version_key(str(version)):
            raise OptionError(f"--installed {name}=={version}: not a release number")
        out[lib] = str(version)
    return out
