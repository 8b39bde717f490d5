"""SARIF 2.1.0 (OASIS): one run, the whole catalogue as rule metadata, one result per finding.

Fingerprints are stable: a SHA-256 of the finding's identity (rule, file, key path, values),
never of its line, under ``partialFingerprints["cfgcheck/identity/v1"]``. Waived findings are
included with a ``suppressions`` entry carrying the reason, as SARIF provides for.
Columns count Unicode code points (``columnKind``), as cfgcheck's columns do.
"""

from __future__ import annotations

import hashlib
import os
from urllib.parse import quote
from types import MappingProxyType

from .. import __version__
from ..catalogue import load_catalogue
from ..findings import Severity, Tally
from . import whole_output
from .jsonitems import _int_text, _string, data_text, text_of

SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
FINGERPRINT = "cfgcheck/identity/v1"
LEVEL = MappingProxyType({Severity.ERROR: "error", Severity.WARNING: "warning", Severity.INFO: "note"})


def _bytes(text: str) -> bytes:
    """A file name's bytes: as the file system holds them (a name that is not UTF-8 included)."""
    try:
        return os.fsencode(text)
    except UnicodeEncodeError:  # a lone surrogate that is not an undecodable byte
        return text.encode("utf-8", "surrogatepass")


def uri(file: str) -> str:
    """A relative (or absolute-path) URI reference for a file name as cfgcheck reports it; a name
    that is not UTF-8 is percent-encoded byte by byte (RFC 3986 sec. 2.1)."""
    return quote(_bytes(file.replace("\\", "/")), safe="/:@!$&'()*+,;=-._~")


def fingerprint(finding) -> str:
    rule, file, key, values = finding.identity()
    text = "\x1f".join((rule, file.replace("\\", "/"), key, values))
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()


def _rule(rule) -> dict:
    sources = "\n".join(f"- {s}" for s in rule.sources)
    help_text = f"{rule.rationale}\n\nSources:\n{sources}\n\nMore: cfgcheck describe {rule.id}"
    out = {
        "id": rule.id,
        "name": rule.id,
        "shortDescription": {"text": rule.summary},
        "fullDescription": {"text": rule.rationale},
        "help": {"text": help_text},
        "defaultConfiguration": {"level": LEVEL[rule.severity]},
        "properties": {"sources": list(rule.sources)},
    }
    if rule.thresholds:
        out["properties"]["thresholds"] = {
            name: (t.get("value") if isinstance(t, dict) else t) for name, t in rule.thresholds.items()
        }
    return out


def _result(f, index: dict[str, int], suppression: dict | None = None) -> dict:
    text = f.message + (f"\nhint: {f.hint}" if f.hint else "")
    location = {
        "physicalLocation": {
            "artifactLocation": {"uri": uri(f.file)},
            "region": {"startLine": f.line, "startColumn": f.column},
        }
    }
    if f.key:
        location["logicalLocations"] = [{"fullyQualifiedName": f.key, "kind": "member"}]
    out = {
        "ruleId": f.rule,
        "level": LEVEL[f.severity],
        "message": {"text": text},
        "locations": [location],
        "partialFingerprints": {FINGERPRINT: fingerprint(f)},
        "properties": {"key": f.key, "hint": f.hint, "data": f.as_dict()["data"]},
    }
    if getattr(f, "related", ()):
        out["relatedLocations"] = [
            {"id": i, "message": {"text": f"the same cause, also at {r.key}"},
             "physicalLocation": {"artifactLocation": {"uri": uri(f.file)},
                                  "region": {"startLine": r.line, "startColumn": r.column}},
             "logicalLocations": [{"fullyQualifiedName": r.key, "kind": "member"}]}
            for i, r in enumerate(f.related)]
    if f.rule in index:
        out["ruleIndex"] = index[f.rule]
    if suppression is not None:
        out["suppressions"] = [suppression]
    return out


def result_text(f, index: dict[str, int], pad: str, file_uri: str | None = None) -> str:
    """``jsonitems.indented(_result(f, index), pad)`` (less its escaping of lone surrogates),
    written straight from the finding: most of what a SARIF log writes. ``file_uri``: the
    finding's ``uri(f.file)``, when the caller knows it."""
    text = f.message + (f"\nhint: {f.hint}" if f.hint else "")
    p1 = pad + "  "
    p2 = p1 + "  "
    p3 = p2 + "  "
    p4 = p3 + "  "
    p5 = p4 + "  "
    rule, key, hint, line, column = f.rule, f.key, f.hint, f.line, f.column
    key_text = _string(key) if type(key) is str else text_of(key, p3)  # the same at any depth
    out = ["{\n", p1, '"ruleId": ', _string(rule) if type(rule) is str else text_of(rule, p1), ",\n",
           p1, '"level": ', _string(LEVEL[f.severity]), ",\n",
           p1, '"message": {\n', p2, '"text": ', _string(text), "\n", p1, "},\n",
           p1, '"locations": [\n', p2, "{\n",
           p3, '"physicalLocation": {\n',
           p4, '"artifactLocation": {\n',
           p5, '"uri": ', _string(uri(f.file) if file_uri is None else file_uri), "\n",
           p4, "},\n",
           p4, '"region": {\n',
           p5, '"startLine": ', _int_text(line) if type(line) is int else text_of(line, p5), ",\n",
           p5, '"startColumn": ', _int_text(column) if type(column) is int else text_of(column, p5), "\n",
           p4, "}\n",
           p3, "}"]
    if key:
        out += [",\n", p3, '"logicalLocations": [\n', p4, "{\n",
                p5, '"fullyQualifiedName": ', key_text, ",\n",
                p5, '"kind": "member"\n', p4, "}\n", p3, "]"]
    out += ["\n", p2, "}\n", p1, "],\n",
            p1, '"partialFingerprints": {\n', p2, '"', FINGERPRINT, '": ', _string(fingerprint(f)), "\n",
            p1, "},\n",
            p1, '"properties": {\n',
            p2, '"key": ', key_text, ",\n",
            p2, '"hint": ', _string(hint) if type(hint) is str else text_of(hint, p2), ",\n",
            p2, '"data": ', data_text(f.data, p2), "\n",
            p1, "}"]
    if getattr(f, "related", ()):
        out += [",\n", p1, '"relatedLocations": ', text_of(_result(f, index)["relatedLocations"], p1)]
    if f.rule in index:
        out += [",\n", p1, '"ruleIndex": ', text_of(index[f.rule], p1)]
    out += ["\n", pad, "}"]
    return "".join(out)


class Writer:
    """The SARIF log written file by file (see ``render.spool``). ``rules``: the catalogue to
    describe (default: the whole catalogue, sorted by id)."""

    def __init__(self, *, rules=None, **_) -> None:
        from .jsonitems import JsonItems

        catalogue = rules if rules is not None else load_catalogue()
        self.rules = [catalogue[r] for r in sorted(catalogue)]
        self.index = {r.id: i for i, r in enumerate(self.rules)}
        self.tally = Tally()
        # the run's results (shown, then waived) and notifications (input errors, then internal)
        self.results, self.waived = JsonItems(indent=6), JsonItems(indent=6)
        self.problems, self.internal = JsonItems(indent=10), JsonItems(indent=10)
        self._uri_of, self._uri = None, ""  # the last file named, and its URI

    def add(self, fr, shown, **_) -> None:
        self.tally.add(fr)
        for f in shown:
            self.finding(f)
        for f, reason, kind in fr.waived:
            self.waived.add(_result(f, self.index, {
                "kind": "inSource" if kind == "comment" else "external",
                "status": "accepted",
                "justification": reason or "(no reason given)",
            }))
        p = fr.problem
        if p is not None:
            self.problems.add({
                "level": "error",
                "message": {"text": f"input error: {p.reason}"},
                "locations": [{"physicalLocation": {"artifactLocation": {"uri": uri(p.file)},
                                                    "region": {"startLine": p.line, "startColumn": p.column}}}],
            })
        for e in fr.internal:
            self.internal.add({
                "level": "error",
                "message": {"text": f"internal error in {e.where}: {e.error}"},
                "locations": [{"physicalLocation": {"artifactLocation": {"uri": uri(e.file)}}}],
            })

    def finding(self, f) -> None:
        file = f.file
        if file != self._uri_of:  # the findings of one file come together
            self._uri_of, self._uri = file, uri(file)
        self.results.add_text(result_text(f, self.index, self.results.pad, self._uri))

    def finish(self, write) -> None:
        from .jsonitems import json_document, spooled

        run = {
            "tool": {"driver": {"name": "cfgcheck", "version": __version__,
                                "semanticVersion": __version__, "rules": [_rule(r) for r in self.rules]}},
            "columnKind": "unicodeCodePoints",
            "invocations": [{"executionSuccessful": not self.tally.internal,
                             "toolExecutionNotifications": spooled("notifications")}],
            "results": spooled("results"),
        }
        doc = {"$schema": SCHEMA_URI, "version": "2.1.0", "runs": [run]}
        json_document(doc, {"notifications": [self.problems, self.internal],
                            "results": [self.results, self.waived]}, write)

    def close(self) -> None:
        for items in (self.results, self.waived, self.problems, self.internal):
            items.close()


def render(report, visible, *, rules=None, **_) -> str:
    """``rules``: the catalogue to describe (default: the whole catalogue, sorted by id)."""
    w = Writer(rules=rules)
    return whole_output(w, report, visible)
