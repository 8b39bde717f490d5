"""The rule catalogue: one YAML record per rule in ``rules/``, shipped inside the package."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from .findings import Severity

try:
    from yaml import CSafeLoader as _Loader
except ImportError:  # pragma: no cover
    from yaml import SafeLoader as _Loader  # type: ignore[assignment]

REQUIRED = ("id", "summary", "severity", "rationale", "sources", "messages", "examples")


class CatalogueError(Exception):
    pass


@dataclass(frozen=True)
class Message:
    message: str
    hint: str
    severity: Severity | None = None  # a variant may be more severe than the rule's default


@dataclass(frozen=True)
class Rule:
    id: str
    summary: str
    severity: Severity
    rationale: str
    sources: tuple[str, ...]
    messages: dict[str, Message]
    thresholds: dict[str, Any]
    examples: dict[str, list[dict[str, Any]]]
    fix: dict[str, Any] | None = None
    needs: tuple[str, ...] = ()  # "gpu", "model", "rows": what the rule cannot judge without
    path: str = ""
    stage: str = "normal"  # "last": runs after the other rules and sees their findings

    def threshold(self, name: str) -> Any:
        t = self.thresholds[name]
        return t["value"] if isinstance(t, dict) and "value" in t else t


def catalogue_dir() -> Path:
    here = Path(__file__).resolve().parent
    packaged = here / "_catalogue"
    if packaged.is_dir():
        return packaged
    return here.parent / "rules"


def _parse(path: Path) -> Rule:
    data = yaml.load(path.read_text(encoding="utf-8"), Loader=_Loader)
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


@functools.cache
def load_catalogue(folder: str | None = None) -> dict[str, Rule]:
    root = Path(folder) if folder else catalogue_dir()
    rules = {}
    for path in sorted(root.glob("*.yaml")):
        rule = _parse(path)
        rules[rule.id] = rule
    if not rules:
        raise CatalogueError(f"no rules found in {root}")
    return rules
