"""The rule catalogue: one YAML record per rule in ``rules/``, shipped inside the package."""

from __future__ import annotations

import functools
import marshal
import os
import sys
from pathlib import Path
from typing import Any

import yaml

from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .findings import Severity

try:
    from yaml import CSafeLoader as _Loader
except ImportError:  # pragma: no cover
    from yaml import SafeLoader as _Loader  # type: ignore[assignment]

REQUIRED = ("id", "summary", "severity", "rationale", "sources", "messages", "examples")


class CatalogueError(Exception):
    pass


class Message:
    message: str
    hint: str
    severity: Severity | None  # a variant may be more severe than the rule's default

    __slots__ = ('message', 'hint', 'severity')

    def __init__(self, message, hint, severity=None):
        _setattr(self, 'message', message)
        _setattr(self, 'hint', hint)
        _setattr(self, 'severity', severity)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(message={self.message!r}, hint={self.hint!r}, severity={self.severity!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.message, self.hint, self.severity) == (other.message, other.hint, other.severity)
        return NotImplemented

    def __hash__(self):
        return hash((self.message, self.hint, self.severity))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.message, self.hint, self.severity)

    __setstate__ = _frozen_setstate


class Rule:
    id: str
    summary: str
    severity: Severity
    rationale: str
    sources: tuple[str, ...]
    messages: dict[str, Message]
    thresholds: dict[str, Any]
    examples: dict[str, list[dict[str, Any]]]
    fix: dict[str, Any] | None
    needs: tuple[str, ...]  # "gpu", "model", "rows": what the rule cannot judge without
    path: str
    stage: str  # "last": runs after the other rules and sees their findings

    __slots__ = ('id', 'summary', 'severity', 'rationale', 'sources', 'messages', 'thresholds', 'examples', 'fix', 'needs', 'path', 'stage')

    def __init__(self, id, summary, severity, rationale, sources, messages, thresholds, examples, fix=None, needs=(), path="", stage="normal"):
        _setattr(self, 'id', id)
        _setattr(self, 'summary', summary)
        _setattr(self, 'severity', severity)
        _setattr(self, 'rationale', rationale)
        _setattr(self, 'sources', sources)
        _setattr(self, 'messages', messages)
        _setattr(self, 'thresholds', thresholds)
        _setattr(self, 'examples', examples)
        _setattr(self, 'fix', fix)
        _setattr(self, 'needs', needs)
        _setattr(self, 'path', path)
        _setattr(self, 'stage', stage)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(id={self.id!r}, summary={self.summary!r}, severity={self.severity!r}, rationale={self.rationale!r}, sources={self.sources!r}, messages={self.messages!r}, thresholds={self.thresholds!r}, examples={self.examples!r}, fix={self.fix!r}, needs={self.needs!r}, path={self.path!r}, stage={self.stage!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.id, self.summary, self.severity, self.rationale, self.sources, self.messages, self.thresholds, self.examples, self.fix, self.needs, self.path, self.stage) == (other.id, other.summary, other.severity, other.rationale, other.sources, other.messages, other.thresholds, other.examples, other.fix, other.needs, other.path, other.stage)
        return NotImplemented

    def __hash__(self):
        return hash((self.id, self.summary, self.severity, self.rationale, self.sources, self.messages, self.thresholds, self.examples, self.fix, self.needs, self.path, self.stage))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.id, self.summary, self.severity, self.rationale, self.sources, self.messages, self.thresholds, self.examples, self.fix, self.needs, self.path, self.stage)

    __setstate__ = _frozen_setstate

    def threshold(self, name: str) -> Any:
        t = self.thresholds[name]
        return t["value"] if isinstance(t, dict) and "value" in t else t


def catalogue_dir() -> Path:
    here = Path(__file__).resolve().parent
    packaged = here / "_catalogue"
    if packaged.is_dir():
        return packaged
    return here.parent / "rules"


def _read(path: Path) -> Any:
    return yaml.load(path.read_text(encoding="utf-8"), Loader=_Loader)


def _parse(path: Path, data: Any = None) -> Rule:
    if data is None:
        data = _read(path)
    if not isinstance(data, dict):
        raise CatalogueError(f"{path}: not a mapping")
    missing = [k for k in REQUIRED if k not in data]
    if missing:
        raise CatalogueError(f"{path}: missing {', '.join(missing)}")
    if path.stem != data["id"]:
        raise CatalogueError(f"{path}: file name must be the rule id {data['id']!r}")
    messages = {}
    for variant, m in data["messages"].items():
        sev = Severity.parse(m["severity"]) if "severity" in m else None
        messages[variant] = Message(message=m["message"], hint=m["hint"], severity=sev)
    return Rule(
        id=data["id"],
        summary=data["summary"],
        severity=Severity.parse(data["severity"]),
        rationale=str(data["rationale"]).strip(),
        sources=tuple(data["sources"]),
        messages=messages,
        thresholds=data.get("thresholds") or {},
        examples=data["examples"],
        fix=data.get("fix"),
        needs=tuple(data.get("needs") or ()),
        path=str(path),
        stage=str(data.get("stage") or "normal"),
    )


# The records as parsed, kept beside them like Python keeps bytecode (and written only when Python
# writes bytecode), so a cold start does not parse every record: each entry is reused only while
# its file has the same size and modification time. marshal holds plain data only.
_CACHE_NAME = f"catalogue.{sys.implementation.cache_tag}.marshal"
_CACHE_FORMAT = 1


def _cached_records(root: Path, paths: list[Path]) -> list[tuple[Path, Any]]:
    cache_file = root / "__pycache__" / _CACHE_NAME
    try:
        cached = marshal.loads(cache_file.read_bytes())
        if not (isinstance(cached, dict) and cached.get("format") == _CACHE_FORMAT):
            cached = {}
    except (OSError, ValueError, EOFError, TypeError):
        cached = {}
    old = cached.get("records", {})
    fresh: dict[str, tuple[int, int, Any]] = {}
    out = []
    for path in paths:
        st = path.stat()
        hit = old.get(path.name)
        if hit is not None and hit[0] == st.st_size and hit[1] == st.st_mtime_ns:
            data = hit[2]
        else:
            data = _read(path)
        fresh[path.name] = (st.st_size, st.st_mtime_ns, data)
        out.append((path, data))
    if fresh != old and not sys.dont_write_bytecode:
        try:
            blob = marshal.dumps({"format": _CACHE_FORMAT, "records": fresh})
            cache_file.parent.mkdir(exist_ok=True)
            tmp = cache_file.with_suffix(f".{os.getpid()}.tmp")
            tmp.write_bytes(blob)
            os.replace(tmp, cache_file)
        except (OSError, ValueError):  # a read-only install, or data marshal cannot hold
            pass
    return out


@functools.cache
def load_catalogue(folder: str | None = None) -> dict[str, Rule]:
    root = Path(folder) if folder else catalogue_dir()
    rules = {}
    paths = sorted(root.glob("*.yaml"))
    for path, data in _cached_records(root, paths):
        rule = _parse(path, data)
        rules[rule.id] = rule
    if not rules:
        raise CatalogueError(f"no rules found in {root}")
    return rules
