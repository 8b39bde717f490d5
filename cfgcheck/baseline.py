"""Baselines: record today's findings so that later runs report only new ones.

A finding is matched by its identity (rule, file, key path, values; see ``Finding.identity``),
never by its line, so edits elsewhere in a file do not bring recorded findings back. Files are
recorded relative to the folder of the baseline file, so the baseline works from any working
folder and on any machine. Matching counts: if a file held a finding twice when recorded and
holds it three times now, one is new.
"""

from __future__ import annotations

import json
import os
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from .engine import Report
from .findings import Finding

KIND = "cfgcheck-baseline"
VERSION = 1


class BaselineError(Exception):
    def __init__(self, file: str, reason: str):
        self.file, self.reason = file, reason
        super().__init__(f"{file}:1:1: baseline: {reason}")


def _rel(file: str, folder: Path) -> str:
    if file.startswith("<"):  # "<text>", "<mapping>": in-memory, no path
        return file
    full = os.path.abspath(file)
    try:
        return Path(os.path.relpath(full, folder)).as_posix()
    except ValueError:  # another drive on Windows
        return Path(full).as_posix()


def key_of(finding: Finding, folder: Path) -> tuple[str, str, str, str]:
    rule, file, key, values = finding.identity()
    return (rule, _rel(file, folder), key, values)


@dataclass
class Baseline:
    path: Path
    known: Counter

    def filter(self, report: Report) -> int:
        """Remove the findings the baseline holds from ``report``; returns how many."""
        folder = self.path.parent
        left = Counter(self.known)
        hidden = 0
        for fr in report.files:
            kept = []
            for f in fr.findings:
                k = key_of(f, folder)
                if left[k] > 0:
                    left[k] -= 1
                    fr.baselined += 1
                    hidden += 1
                else:
                    kept.append(f)
            fr.findings = kept
        return hidden


def save(report: Report, path: str | Path) -> int:
    """Write every finding of ``report`` to ``path``; returns how many were written."""
    path = Path(os.path.abspath(path))
    folder = path.parent
    rows = []
    for f in report.findings:
        rule, file, key, values = key_of(f, folder)
        rows.append({"rule": rule, "file": file, "key": key, "values": json.loads(values),
                     "message": f.message})
    rows.sort(key=lambda r: (r["file"], r["rule"], r["key"], json.dumps(r["values"], sort_keys=True)))
    doc = {"kind": KIND, "version": VERSION, "findings": rows}
    text = json.dumps(doc, indent=2, ensure_ascii=False, sort_keys=False) + "\n"
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)
    return len(rows)


def load(path: str | Path) -> Baseline:
    path = Path(os.path.abspath(path))
    name = str(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise BaselineError(name, "no such file (write one with --save-baseline)") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise BaselineError(name, f"cannot read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise BaselineError(name, f"invalid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}") from None
    if not isinstance(doc, dict) or doc.get("kind") != KIND:
        raise BaselineError(name, f"not a cfgcheck baseline (no \"kind\": \"{KIND}\")")
    if doc.get("version") != VERSION:
        raise BaselineError(name, f"baseline version {doc.get('version')!r}; this cfgcheck reads version {VERSION}")
    known: Counter = Counter()
    for i, row in enumerate(doc.get("findings") or []):
        try:
            values = json.dumps(row["values"], sort_keys=True, default=str)
            known[(row["rule"], row["file"], row["key"], values)] += 1
        except (KeyError, TypeError):
            raise BaselineError(name, f"finding {i} lacks rule, file, key or values") from None
    return Baseline(path=path, known=known)
