"""Project configuration: ``cfgcheck.yaml`` or ``[tool.cfgcheck]`` in ``pyproject.toml``.

Found by walking up from the first linted path (or the working folder) to the repository root
(the folder holding ``.git``). Validated with a JSON Schema; every error carries
``file:line:column``. jsonschema is imported only when a project file is actually found.

What it holds: which files are training configs (``configs``/``exclude`` globs), rule selection,
severity and threshold overrides, hardware profiles per path glob, waivers (the way to waive a
finding in a JSON file), the Python scripts that read the configs (``readers``), the gate, and a
baseline file. ``options_for(file, given)`` turns it
into the engine's per-file ``Options``; values given on the command line (``given``) win.

``pyproject.toml`` is read with ``tomllib`` (Python 3.11+). On Python 3.10 a ``[tool.cfgcheck]``
table is refused with an error that says to use ``cfgcheck.yaml``: we do not ship a TOML parser.
"""

from __future__ import annotations

import difflib
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Iterable

from ._records import guarded_repr
from . import reads
from .engine import Options
from .load import walk_paths
from .load import dotted
from .findings import MAX_MAGNITUDE, Severity, printable
from .waivers import ProjectWaiver

# the file names, the project error and the search for the file live in projectfile (a lint with
# no project file never imports this module)
from .projectfile import TOML_NAME, YAML_NAME, ProjectError, _TABLE_LINE, _mentions_table, _short, find_file  # noqa: F401

TABLE = ("tool", "cfgcheck")

_LEVEL = MappingProxyType({"enum": ["error", "warning", "info"]})
_GLOBS = MappingProxyType({"type": "array", "items": {"type": "string", "minLength": 1}})
_GLOB_OR_GLOBS = MappingProxyType({"anyOf": [{"type": "string", "minLength": 1}, _GLOBS]})
_RULE_ID = MappingProxyType({"type": "string", "pattern": "^[a-z0-9][a-z0-9-]*$"})

SCHEMA: MappingProxyType[str, Any] = MappingProxyType({
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "title": "cfgcheck project configuration",
    "type": "object",
    "additionalProperties": False,
    "properties": {
        "configs": _GLOBS,
        "exclude": _GLOBS,
        "rules": {
            "type": "object",
            "additionalProperties": False,
            "properties": {
                "only": {"type": "array", "items": _RULE_ID},
                "skip": {"type": "array", "items": _RULE_ID},
            },
        },
        "severity": {"type": "object", "propertyNames": _RULE_ID, "additionalProperties": _LEVEL},
        "thresholds": {
            "type": "object",
            "propertyNames": _RULE_ID,
            "additionalProperties": {
                "type": "object",
                "additionalProperties": {"type": "number"},
            },
        },
        "profiles": {
            "type": "array",
            "items": {
                "type": "object",
                "additionalProperties": False,
                "required": ["paths"],
                "properties": {
                    "paths": _GLOB_OR_GLOBS,
                    "gpu": {"type": "string", "minLength": 1},
                    "gpus": {"type": "integer", "minimum": 1, "maximum": MAX_MAGNITUDE},
                    "rows": {"type": "integer", "minimum": 1, "maximum": MAX_MAGNITUDE},
                    # accelerate configs / DeepSpeed files the matching configs are started with
                    "launch": _GLOB_OR_GLOBS,
                },
            },
        },
        "waive": {
            "type": "array",
            "items": {
                "type": "object",
                "additionalProperties": False,
                "required": ["rule", "files", "reason"],
                "properties": {
                    "rule": _RULE_ID,
                    "files": _GLOB_OR_GLOBS,
                    "key": {"type": "string", "minLength": 1},
                    "reason": {"type": "string", "pattern": r"\S"},
                },
            },
        },
        "models": {  # models of your own: the id configs name, and a config.json path or the shape itself
            "type": "array",
            "items": {
                "type": "object",
                "required": ["id"],
                "properties": {
                    "id": {"type": "string", "minLength": 1},
                    "config": {"type": "string", "minLength": 1},
                },
            },
        },
        "gpu_types": {  # GPUs of your own, usable by name in profiles
            "type": "array",
            "items": {
                "type": "object",
                "additionalProperties": False,
                "required": ["name", "memory_gb", "capability"],
                "properties": {
                    "name": {"type": "string", "minLength": 1},
                    "label": {"type": "string", "minLength": 1},
                    "memory_gb": {"type": "number", "exclusiveMinimum": 0},
                    "capability": {"type": "string", "pattern": r"^\d+\.\d+$"},
                },
            },
        },
        # the Python script that reads the configs a glob matches: its declared keys are accepted
        "readers": {
            "type": "array",
            "items": {
                "type": "object",
                "additionalProperties": False,
                "required": ["configs", "script"],
                "properties": {
                    "configs": _GLOB_OR_GLOBS,
                    "script": {"type": "string", "minLength": 1},
                },
            },
        },
        "gate": _LEVEL,
        "show": _LEVEL,
        "baseline": {"type": "string", "minLength": 1},
        # library -> the release the runs use (what --installed states), for key-not-in-release
        "installed": {
            "type": "object",
            "propertyNames": {"enum": ["transformers", "trl", "peft", "deepspeed", "accelerate"]},
            "additionalProperties": {"type": "string", "pattern": r"^[0-9]"},
        },
    },
})


MAX_GLOB = 1_000  # characters in one glob of the project file


def _show(value: Any) -> str:
    """A value of the project file, quoted, short, on one line, whatever it holds."""
    try:
        text = repr(value)
    except ValueError:  # an integer too long to print
        text = f"a {type(value).__name__}"
    return text if len(text) <= 80 else text[:77] + "..."


# --------------------------------------------------------------------------- globs

class GlobError(ValueError):
    """A glob that cannot be read; ``reason`` in words, ``offset`` the character it points at."""

    def __init__(self, reason: str, offset: int = 0):
        self.reason, self.offset = reason, offset
        super().__init__(reason)


# the character classes of POSIX bracket expressions that a glob may use inside [...]
_POSIX_CLASSES = MappingProxyType({
    "alpha": str.isalpha, "digit": str.isdigit, "alnum": str.isalnum, "upper": str.isupper,
    "lower": str.islower, "space": str.isspace,
    "punct": lambda c: c.isascii() and not c.isalnum() and c.isprintable() and not c.isspace(),
    "xdigit": lambda c: c in "0123456789abcdefABCDEF",
})

_STEP_CACHE = 200_000  # positions held by one glob's memo of steps (a few MiB); cleared past it

# token kinds of a compiled glob
_LIT, _ONE, _SET, _STAR, _ANY, _DIRS, _IN_DIRS = range(7)


def _parse_set(pat: str, i: int) -> tuple[tuple, int]:
    """``[...]`` starting at ``pat[i] == "["`` -> ((negated, chars, ranges, classes), end)."""
    j = i + 1
    negated = j < len(pat) and pat[j] in "!^"
    if negated:
        j += 1
    chars: set[str] = set()
    ranges: list[tuple[str, str]] = []
    classes: list = []
    first = True
    while True:
        if j >= len(pat):
            raise GlobError("a '[' set is not closed by ']'", i)
        c = pat[j]
        if c == "]" and not first:
            break
        first = False
        if pat.startswith("[:", j):
            end = pat.find(":]", j + 2)
            if end == -1:
                raise GlobError("a '[:' class is not closed by ':]'", j)
            name = pat[j + 2:end]
            if name not in _POSIX_CLASSES:
                raise GlobError(f"unknown character class [:{name}:] (known: "
                                + ", ".join(sorted(_POSIX_CLASSES)) + ")", j)
            classes.append(_POSIX_CLASSES[name])
            j = end + 2
            continue
        if j + 2 < len(pat) and pat[j + 1] == "-" and pat[j + 2] != "]":
            lo, hi = c, pat[j + 2]
            if lo > hi:
                raise GlobError(f"the range {lo}-{hi} in a '[' set runs backwards", j)
            ranges.append((lo, hi))
            j += 3
            continue
        chars.add(c)
        j += 1
    return (negated, frozenset(chars), tuple(ranges), tuple(classes)), j + 1


def _in_set(spec: tuple, c: str) -> bool:
    negated, chars, ranges, classes = spec
    hit = c in chars or any(lo <= c <= hi for lo, hi in ranges) or any(f(c) for f in classes)
    return hit != negated


class Glob:
    """A path glob: ``*`` and ``?`` stay inside one folder, ``**`` spans folders, ``**/`` is any
    number of whole folders (none included), ``[..]`` a set (``[!..]`` or ``[^..]`` its
    complement, ranges ``a-z``, classes ``[:alpha:]``), a trailing ``/`` everything below.

    Matching runs the pattern as a set of positions over the path, one step per character, so
    its time is at most (path length) x (pattern length) whatever the pattern: no backtracking.
    """

    def __init__(self, pattern: str):
        self.pattern = pattern
        pat = pattern.strip().replace("\\", "/")
        if pat.startswith("./"):
            pat = pat[2:]
        tokens: list[tuple[int, Any]] = []
        i = 0
        while i < len(pat):
            c = pat[i]
            if pat.startswith("**/", i):
                if not (tokens and tokens[-1][0] == _IN_DIRS):  # **/**/ is one **/
                    tokens += [(_DIRS, None), (_IN_DIRS, None)]
                i += 3
            elif pat.startswith("**", i):
                if not (tokens and tokens[-1][0] == _ANY):
                    tokens.append((_ANY, None))
                i += 2
            elif c == "*":
                if not (tokens and tokens[-1][0] in (_STAR, _ANY)):
                    tokens.append((_STAR, None))
                i += 1
            elif c == "?":
                tokens.append((_ONE, None))
                i += 1
            elif c == "[":
                spec, i = _parse_set(pat, i)
                tokens.append((_SET, spec))
            else:
                tokens.append((_LIT, c))
                i += 1
        if pat.endswith("/"):
            tokens.append((_ANY, None))
        self._tokens = tokens
        self._start = self._closure({0})
        self._steps: dict[tuple[frozenset[int], str], frozenset[int]] = {}
        self._cached = 0

    def _closure(self, states: set[int]) -> frozenset[int]:
        """Add the positions reachable without reading a character."""
        tokens, todo, out = self._tokens, list(states), set(states)
        while todo:
            s = todo.pop()
            if s >= len(tokens):
                continue
            kind = tokens[s][0]
            nxt = ()
            if kind in (_STAR, _ANY):
                nxt = (s + 1,)
            elif kind == _DIRS:  # skip the folders, or start reading them
                nxt = (s + 1, s + 2)
            for n in nxt:
                if n not in out:
                    out.add(n)
                    todo.append(n)
        return frozenset(out)

    def match(self, path: str) -> bool:
        end = len(self._tokens)
        states = self._start
        cache = self._steps
        for c in path:
            nxt = cache.get((states, c))
            if nxt is None:
                nxt = self._step(states, c)
                self._cached += len(states) + len(nxt)
                if self._cached > _STEP_CACHE:  # bounded memory: start the memo afresh
                    cache.clear()
                    self._cached = 0
                cache[(states, c)] = nxt
            if not nxt:
                return False
            states = nxt
        return end in states

    def _step(self, states: frozenset[int], c: str) -> frozenset[int]:
        """The positions after reading ``c`` (memoised by ``match``: a path mostly repeats them)."""
        tokens, end = self._tokens, len(self._tokens)
        step: set[int] = set()
        for s in states:
            if s >= end:
                continue
            kind, arg = tokens[s]
            if kind == _LIT:
                if c == arg:
                    step.add(s + 1)
            elif kind == _ONE:
                if c != "/":
                    step.add(s + 1)
            elif kind == _SET:
                if _in_set(arg, c):
                    step.add(s + 1)
            elif kind == _STAR:
                if c != "/":
                    step.add(s)
            elif kind == _ANY:
                step.add(s)
            elif kind == _IN_DIRS:  # inside the folders: a '/' may end them
                step.add(s)
                if c == "/":
                    step.add(s + 1)
        return self._closure(step) if step else frozenset()

    @guarded_repr
    def __repr__(self) -> str:
        return f"Glob({self.pattern!r})"


def compile_glob(pattern: str) -> Glob:
    """Raises GlobError (with the offset in the pattern) for a set or class that cannot be read."""
    return Glob(pattern)


def _globs(value: Any) -> tuple[str, ...]:
    if value is None:
        return ()
    return (value,) if isinstance(value, str) else tuple(value)


def matches(rel: str, globs: Iterable[Glob]) -> bool:
    return any(g.match(rel) for g in globs)


# --------------------------------------------------------------------------- the project

@dataclass
class Profile:
    globs: tuple[Glob, ...]
    gpu: Any = None  # a knowledge.hardware.Gpu
    gpus: int | None = None
    rows: int | None = None
    launch: tuple[str, ...] = ()  # launch files, absolute


@dataclass
class Project:
    source: Path  # the file it was read from
    root: Path  # the folder holding it; globs are relative to it
    data: dict[str, Any]
    configs: tuple[Glob, ...] = ()
    exclude: tuple[Glob, ...] = ()
    only: frozenset[str] | None = None
    skip: frozenset[str] = frozenset()
    severity: dict[str, Severity] = field(default_factory=dict)
    thresholds: dict[str, dict[str, Any]] = field(default_factory=dict)
    profiles: list[Profile] = field(default_factory=list)
    waivers: list[tuple[tuple[Glob, ...], ProjectWaiver]] = field(default_factory=list)
    gate: Severity | None = None
    show: Severity | None = None
    baseline: Path | None = None
    installed: dict[str, str] = field(default_factory=dict)  # library -> release (``installed:``)
    models: tuple = ()  # (id, knowledge.models.Architecture) pairs declared here
    gpu_types: dict[str, Any] = field(default_factory=dict)  # name -> knowledge.hardware.Gpu declared here
    readers: list[tuple[tuple[Glob, ...], str]] = field(default_factory=list)  # (globs, script, absolute)

    def relative(self, file: str | Path) -> str | None:
        """The file's path relative to the project root, '/'-separated; None when outside it."""
        try:
            rel = Path(os.path.abspath(file)).relative_to(self.root)
        except ValueError:
            return None
        return rel.as_posix()

    def excluded(self, file: str | Path) -> str | None:
        """Why the project says this file is not a training config, or None."""
        rel = self.relative(file)
        if rel is None:
            return None
        if self.exclude and matches(rel, self.exclude):
            return f"excluded by {self.source.name}"
        if self.configs and not matches(rel, self.configs):
            return f"not matched by the configs globs of {self.source.name}"
        return None

    def expand(self, paths: Iterable[str | Path]) -> list[tuple[str, str | None]]:
        """Files to lint as (file, skip reason). Folders are walked for the project's configs
        (unlisted files are left out silently); files named explicitly are always listed."""
        out: list[tuple[str, str | None]] = []
        for file, named in walk_paths(paths):
            if named:
                out.append((file, self.excluded(file)))
            else:
                full = os.path.normpath(file)
                if self.excluded(full) is None:
                    out.append((full, None))
        return out

    def options_for(self, file: str | Path, given: dict[str, Any]) -> Options:
        """Options for one file: project values, then matching profiles in order, then ``given``
        (what the command line or the caller set explicitly, which always wins)."""
        values: dict[str, Any] = {
            "only": self.only,
            "skip": self.skip,
            "severity": dict(self.severity),
            "thresholds": {k: dict(v) for k, v in self.thresholds.items()},
        }
        if self.installed:
            values["versions"] = dict(self.installed)
        rel = self.relative(file)
        if rel is not None:
            for prof in self.profiles:
                if matches(rel, prof.globs):
                    for name in ("gpu", "gpus", "rows"):
                        if getattr(prof, name) is not None:
                            values[name] = getattr(prof, name)
                    if prof.gpus is not None:
                        values["gpus_from"] = f"the {self.source.name} profile for {rel}"
                    if prof.launch:
                        values["launch"] = prof.launch
            values["waivers"] = tuple(w for globs, w in self.waivers if matches(rel, globs))
            readers = tuple(dict.fromkeys(s for globs, s in self.readers if matches(rel, globs)))
            if readers:
                values["readers"] = readers
        if self.models:
            values["models"] = self.models
        for name, value in given.items():
            if value is None:
                continue
            if name in ("severity", "thresholds"):
                values[name] = {**values[name], **value}
            elif name == "versions":
                values[name] = {**values.get("versions", {}), **value}
            elif name == "skip":
                values[name] = frozenset(values["skip"]) | frozenset(value)
            elif name == "gpus":
                values[name], values["gpus_from"] = value, "--gpus"
            else:
                values[name] = value
        return Options(**values)


# --------------------------------------------------------------------------- finding the file

def discover(paths: Iterable[str | Path] = ()) -> Project | None:
    paths = list(paths)
    path = find_file(paths[0] if paths else None)
    return load(path) if path else None


# --------------------------------------------------------------------------- reading

def load(path: str | Path) -> Project:
    """Read, validate and resolve a project file; raises ProjectError with positions."""
    path = Path(os.path.abspath(path))
    name = str(path)
    from .load import LoadError, read_source

    try:
        text = read_source(path).text  # guarded: never a FIFO, a device or an endless file
    except LoadError as exc:
        raise ProjectError([(name, exc.line, exc.column, f"cannot read: {exc.reason}")]) from None
    if path.suffix == ".toml":
        data, locate = _read_toml(text, name)
    else:
        data, locate = _read_yaml(text, name)
    _validate(data, name, locate)
    return _resolve(data, path, locate)


def _read_yaml(text: str, name: str):
    from .load import LoadError, load_text

    try:
        docs = load_text(text, name, "yaml")
    except LoadError as exc:
        raise ProjectError([(name, exc.line, exc.column, exc.reason)]) from None
    doc = docs[0]
    if len(docs) > 1:
        raise ProjectError([(name, 1, 1, "holds more than one YAML document")])
    if doc.duplicates:
        d = doc.duplicates[0]
        raise ProjectError([(name, d.second.line, d.second.column,
                             f"key {'.'.join(map(str, d.path))} appears twice")])
    data = doc.data if doc.data is not None else {}

    def locate(path: tuple, on_key: bool = False) -> tuple[int, int]:
        probe = tuple(path)
        while probe:
            entry = doc.entries.get(probe)
            if entry is not None:
                span = entry.key if on_key and entry.key is not None else entry.value
                return span.line, span.column
            probe = probe[:-1]
        return 1, 1

    return data, locate


def _read_toml(text: str, name: str):
    try:
        import tomllib
    except ImportError:  # Python 3.10
        raise ProjectError([(name, _toml_header_line(text), 1,
                             "[tool.cfgcheck] in pyproject.toml needs Python 3.11 or later "
                             "(tomllib); on Python 3.10 put the same settings in cfgcheck.yaml")]) from None
    try:
        whole = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column (\d+)\)", str(exc))
        line, col = (int(m.group(1)), int(m.group(2))) if m else (1, 1)
        raise ProjectError([(name, line, col, f"invalid TOML: {str(exc).split(' (at line')[0]}")]) from None
    data = whole.get("tool", {}).get("cfgcheck", {})
    if not isinstance(data, dict):
        raise ProjectError([(name, _toml_header_line(text), 1, "tool.cfgcheck must be a table")])
    places = _toml_places(text)

    def locate(path: tuple, on_key: bool = False) -> tuple[int, int]:
        probe = tuple(path)
        while probe:
            if probe in places:
                return places[probe]
            probe = probe[:-1]
        return _toml_header_line(text), 1

    return data, locate


def _toml_header_line(text: str) -> int:
    m = _TABLE_LINE.search(text)
    return text[:m.start()].count("\n") + 1 if m else 1


_TOML_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_TOML_KEY = re.compile(r"^(\s*)((?:[A-Za-z0-9_-]+|\"[^\"]*\"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_-]+|\"[^\"]*\"|'[^']*'))*)\s*=")


def _toml_parts(dotted_key: str) -> tuple[str, ...]:
    parts = re.findall(r"\"([^\"]*)\"|'([^']*)'|([A-Za-z0-9_-]+)", dotted_key)
    return tuple(a or b or c for a, b, c in parts)


def _toml_places(text: str) -> dict[tuple, tuple[int, int]]:
    """Key paths inside [tool.cfgcheck] -> (line, column), from table headers and ``key =`` lines.
    Positions only: the values come from tomllib."""
    places: dict[tuple, tuple[int, int]] = {}
    current: tuple | None = None
    arrays: dict[tuple, int] = {}
    depth = 0  # open brackets of a multi-line value: its lines hold no keys of the table
    for lineno, line in enumerate(text.splitlines(), start=1):
        if depth > 0:
            depth += line.count("[") + line.count("{") - line.count("]") - line.count("}")
            continue
        h = _TOML_HEADER.match(line)
        if h:
            parts = _toml_parts(h.group(2))
            if parts[:2] != TABLE:
                current = None
                continue
            rel = parts[2:]
            if h.group(1) == "[[":
                idx = arrays.get(rel, -1) + 1
                arrays[rel] = idx
                rel = rel + (idx,)
            current = rel
            if rel:
                places.setdefault(rel, (lineno, line.index("[") + 1))
            continue
        k = _TOML_KEY.match(line)
        if k and current is not None:
            path = current + _toml_parts(k.group(2))
            places.setdefault(path, (lineno, len(k.group(1)) + 1))
            rest = line[k.end():]
            depth = max(0, rest.count("[") + rest.count("{") - rest.count("]") - rest.count("}"))
    return places


# --------------------------------------------------------------------------- validation

def _validate(data: Any, name: str, locate) -> None:
    import jsonschema  # only when a project file exists

    validator = jsonschema.Draft202012Validator(SCHEMA)
    problems = []
    for err in validator.iter_errors(data):
        path = tuple(err.absolute_path)
        where = ".".join(str(p) for p in path) or "(top level)"
        if err.validator == "additionalProperties" and isinstance(err.instance, dict):
            allowed = set(err.schema.get("properties", {}))
            for extra in sorted((k for k in err.instance if k not in allowed), key=str):
                near = difflib.get_close_matches(str(extra), sorted(allowed), n=1)
                hint = f"; did you mean {near[0]}?" if near else f"; known: {', '.join(sorted(allowed))}"
                line, col = locate(path + (extra,), True)
                problems.append((name, line, col, f"{where}: unknown key {_show(extra)}{hint}"))
            continue
        if err.validator == "propertyNames":
            line, col = locate(path + (err.instance,), True)
            problems.append((name, line, col, f"{where}: {_show(err.instance)} is not a rule id (lowercase words joined by '-')"))
            continue
        line, col = locate(path)
        problems.append((name, line, col, f"{where}: {err.message}"))
    if problems:
        raise ProjectError(problems)


def _resolve(data: dict[str, Any], path: Path, locate) -> Project:
    from .catalogue import load_catalogue
    from .knowledge.hardware import UnknownGpu, find_gpu

    name = str(path)
    rules = load_catalogue()
    problems = []

    def rule_known(rule: str, at: tuple, on_key: bool = False) -> bool:
        if rule in rules:
            return True
        near = difflib.get_close_matches(rule, list(rules), n=1, cutoff=0.6)
        line, col = locate(at, on_key)
        problems.append((name, line, col, f"no rule {rule!r}" + (f"; did you mean {near[0]}?" if near else
                                                                   " (see: cfgcheck rules)")))
        return False

    def globs(value: Any, at: tuple) -> tuple[Glob, ...]:
        out = []
        for i, pattern in enumerate(_globs(value)):
            where = at + (i,) if not isinstance(value, str) else at
            if len(pattern) > MAX_GLOB:
                line, col = locate(where)
                problems.append((name, line, col, f"{dotted(where)}: a glob of {len(pattern):,} "
                                 f"characters; the limit is {MAX_GLOB:,}"))
                continue
            try:
                out.append(compile_glob(pattern))
            except GlobError as exc:
                line, col = locate(where)
                problems.append((name, line, col, f"{dotted(where)}: glob {_show(pattern)}: {exc.reason} "
                                 f"(at character {exc.offset + 1})"))
        return tuple(out)

    rules_sec = data.get("rules") or {}
    only = None
    if "only" in rules_sec:
        only = frozenset(r for i, r in enumerate(rules_sec["only"]) if rule_known(r, ("rules", "only", i)))
    skip = frozenset(r for i, r in enumerate(rules_sec.get("skip", [])) if rule_known(r, ("rules", "skip", i)))
    severity = {r: Severity.parse(v) for r, v in (data.get("severity") or {}).items()
                if rule_known(r, ("severity", r), True)}
    thresholds: dict[str, dict[str, Any]] = {}
    for r, values in (data.get("thresholds") or {}).items():
        if not rule_known(r, ("thresholds", r), True):
            continue
        for tname, value in values.items():
            if tname not in rules[r].thresholds:
                known = ", ".join(sorted(rules[r].thresholds)) or "none"
                line, col = locate(("thresholds", r, tname), True)
                problems.append((name, line, col, f"rule {r} has no threshold {tname!r} (its thresholds: {known})"))
                continue
            thresholds.setdefault(r, {})[tname] = value
    from .knowledge.hardware import declared_gpu
    from .knowledge.models import declared_model

    gpu_types = {}
    for i, g in enumerate(data.get("gpu_types") or []):
        gpu_types[g["name"].strip().lower()] = declared_gpu(g, name)
    models = []
    for i, m in enumerate(data.get("models") or []):
        got = declared_model(m["id"].strip(), m, path.parent, name)
        if isinstance(got, str):
            line, col = locate(("models", i))
            problems.append((name, line, col, f"models[{i}] ({m['id']}): {got}"))
        else:
            models.append((m["id"].strip(), got))
    profiles = []
    for i, prof in enumerate(data.get("profiles") or []):
        gpu = None
        if "gpu" in prof:
            try:
                gpu = gpu_types.get(prof["gpu"].strip().lower()) or find_gpu(prof["gpu"])
            except UnknownGpu as exc:
                line, col = locate(("profiles", i, "gpu"))
                problems.append((name, line, col, str(exc)))
        launch = tuple(str(path.parent / f) for f in _globs(prof.get("launch")))
        for j, f in enumerate(launch):
            reads.note_kind(f)  # for the result cache: a launch file vanishing fails the project
            if not Path(f).is_file():
                at = ("profiles", i, "launch") + ((j,) if isinstance(prof.get("launch"), list) else ())
                line, col = locate(at)
                problems.append((name, line, col, f"launch file {_globs(prof.get('launch'))[j]} not found "
                                                  f"(relative to {path.parent})"))
        profiles.append(Profile(globs=globs(prof["paths"], ("profiles", i, "paths")), gpu=gpu,
                                gpus=prof.get("gpus"), rows=prof.get("rows"), launch=launch))
    waivers = []
    for i, w in enumerate(data.get("waive") or []):
        if rule_known(w["rule"], ("waive", i, "rule")):
            waivers.append((globs(w["files"], ("waive", i, "files")),
                            ProjectWaiver(rule=w["rule"], reason=w["reason"].strip(), key=w.get("key"))))
    readers = []
    for i, r in enumerate(data.get("readers") or []):
        script = (path.parent / r["script"]).resolve()
        reads.note_kind(script)  # for the result cache: a reader script vanishing fails the project
        if not r["script"].strip().lower().endswith(".py"):
            line, col = locate(("readers", i, "script"))
            problems.append((name, line, col, f"readers[{i}].script: {_show(r['script'])} is not a Python "
                                              "file (the script that reads the configs, e.g. src/train.py)"))
        elif not script.is_file():
            line, col = locate(("readers", i, "script"))
            problems.append((name, line, col, f"readers[{i}].script: {_show(r['script'])} not found "
                                              f"(relative to {path.parent})"))
        readers.append((globs(r["configs"], ("readers", i, "configs")), str(script)))
    configs = globs(data.get("configs"), ("configs",))
    exclude = globs(data.get("exclude"), ("exclude",))
    if problems:
        raise ProjectError(problems)
    root = path.parent
    if "baseline" in data:
        reads.note_kind(root / data["baseline"])  # for the result cache: used only when it exists
    return Project(
        source=path, root=root, data=data, configs=configs, exclude=exclude,
        only=only, skip=skip, severity=severity, thresholds=thresholds, profiles=profiles,
        waivers=waivers,
        gate=Severity.parse(data["gate"]) if "gate" in data else None,
        show=Severity.parse(data["show"]) if "show" in data else None,
        baseline=(root / data["baseline"]) if "baseline" in data else None,
        installed={str(k): str(v) for k, v in (data.get("installed") or {}).items()},
        models=tuple(models), gpu_types=gpu_types, readers=readers,
    )
