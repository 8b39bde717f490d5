"""Waiver comments: ``# cfgcheck: waive RULE[, RULE...] because REASON``.

A waiver written at the end of a line applies to that line; one written on a line of its own
applies to the next line that holds a key (several waiver lines may stand one above the other).
It waives the named rules for the key on its target line and everything nested under it.

Comments are found in the raw text by a small line scanner, without building a second YAML
tree: ``#`` starts a comment only outside quoted scalars, outside block scalars (``|`` / ``>``)
and at the start of a line or after whitespace, as in the YAML spec. The scanner never raises;
text it cannot make sense of is simply not a waiver.

The project configuration carries waivers for JSON files (which cannot hold comments): each names
a rule, file globs, an optional key and a reason; those are matched in ``apply``.
"""

from __future__ import annotations

from typing import Iterable

from ._patterns import later
from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .findings import Finding
from .load import Document, Span

MARK = "cfgcheck:"
_VERB = later(r"^cfgcheck:\s*(?P<verb>[A-Za-z-]*)\s*(?P<rest>.*)$")
_RULES_AND_REASON = later(
    r"^(?P<rules>[a-z0-9][a-z0-9-]*(?:\s*,\s*[a-z0-9][a-z0-9-]*)*)\s*(?:because\b\s*(?P<reason>.*))?$"
)
_SPECIAL = later(r"[#'\"\[{|>]")
_BLOCK_START = later(r"(?:^|[:?-]\s)\s*(?:[&!][^\s]*\s+)*[|>][1-9+-]{0,2}$")


class Waiver:
    """One waiver comment: where it is, what it names and which line it applies to."""

    line: int  # 1-based line of the comment
    column: int  # 1-based column of the '#'
    offset: int  # 0-based character offset of the '#'
    text: str  # the comment without '#', stripped
    rules: tuple[str, ...]
    reason: str | None
    problem: str | None  # set when the comment starts with "cfgcheck:" but does not parse
    target: int | None  # the line the waiver applies to (None: no key follows)


    def __init__(self, line, column, offset, text, rules=(), reason=None, problem=None, target=None):
        _setattr(self, 'line', line)
        _setattr(self, 'column', column)
        _setattr(self, 'offset', offset)
        _setattr(self, 'text', text)
        _setattr(self, 'rules', rules)
        _setattr(self, 'reason', reason)
        _setattr(self, 'problem', problem)
        _setattr(self, 'target', target)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(line={self.line!r}, column={self.column!r}, offset={self.offset!r}, text={self.text!r}, rules={self.rules!r}, reason={self.reason!r}, problem={self.problem!r}, target={self.target!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.line, self.column, self.offset, self.text, self.rules, self.reason, self.problem, self.target) == (other.line, other.column, other.offset, other.text, other.rules, other.reason, other.problem, other.target)
        return NotImplemented

    def __hash__(self):
        return hash((self.line, self.column, self.offset, self.text, self.rules, self.reason, self.problem, self.target))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr


    @property
    def span(self) -> Span:
        return Span(line=self.line, column=self.column, start=self.offset,
                    end=self.offset + len(self.text) + 1)


class ProjectWaiver:
    """A waiver from the project configuration (the way to waive a finding in a JSON file)."""

    rule: str
    reason: str
    key: str | None  # dotted key; None waives the rule for the whole file

    __slots__ = ('rule', 'reason', 'key')

    # the fields in order: the result cache keys the record by them, ``replaced`` copies them
    _record_fields = ('rule', 'reason', 'key')

    def __init__(self, rule, reason, key=None):
        _setattr(self, 'rule', rule)
        _setattr(self, 'reason', reason)
        _setattr(self, 'key', key)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(rule={self.rule!r}, reason={self.reason!r}, key={self.key!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.rule, self.reason, self.key) == (other.rule, other.reason, other.key)
        return NotImplemented

    def __hash__(self):
        return hash((self.rule, self.reason, self.key))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.rule, self.reason, self.key)

    __setstate__ = _frozen_setstate


# --------------------------------------------------------------------------- scanning


def comments(text: str) -> list[tuple[int, int, int, str, bool]]:
    """Every comment: (line, column, offset, body, whole_line). ``body`` excludes the '#'."""
    out = []
    quote: str | None = None  # an open multi-line quoted scalar: "'" or '"'
    block_indent: int | None = None  # inside a block scalar: content is indented more than this
    content_indent: int | None = None  # ... and at least this, once its first line is seen
    flow = 0  # depth of open flow collections ([...] / {...}), which may span lines
    offset = 0
    for lineno, line in enumerate(text.splitlines(keepends=True), start=1):
        start_offset = offset
        offset += len(line)
        body = line.rstrip("\r\n")
        if block_indent is not None:
            stripped = body.strip()
            indent = len(body) - len(body.lstrip(" "))
            if not stripped:
                continue
            if content_indent is None and indent > block_indent:
                content_indent = indent  # the first content line fixes the indentation
            if content_indent is not None and indent >= content_indent:
                continue
            block_indent = content_indent = None
        if quote is None and not flow and not _SPECIAL.search(body):
            continue  # nothing on this line can open a string, a collection, a block or a comment
        i, n = 0, len(body)
        plain = False  # inside a plain scalar (it ends at ": ", " #", or a flow indicator)
        comment_at = None
        while i < n:
            ch = body[i]
            if quote is not None:
                if quote == '"' and ch == "\\":
                    i += 2
                    continue
                if ch == quote:
                    if quote == "'" and i + 1 < n and body[i + 1] == "'":
                        i += 2
                        continue
                    quote = None
                i += 1
                continue
            if ch == "#" and (i == 0 or body[i - 1] in " \t"):
                comment_at = i
                break
            after = body[i + 1] if i + 1 < n else " "
            if plain:
                if ch == ":" and (after in " \t" or (flow and after in ",[]{}")):
                    plain = False
                elif flow and ch in ",[]{}":
                    plain = False
                    flow += 1 if ch in "[{" else -1 if ch in "]}" else 0
                i += 1
                continue
            if ch in " \t":
                pass
            elif ch in "[{":
                flow += 1
            elif ch in "]}":
                flow = max(0, flow - 1)
            elif ch == "," and flow:
                pass
            elif ch in "'\"":
                quote = ch
            elif ch in "-?:" and (after in " \t" or (flow and ch == ":")):
                pass  # an indicator
            elif ch in "&!*|>":  # anchor, tag, alias, block indicator: one token
                while i + 1 < n and body[i + 1] not in " \t":
                    i += 1
            else:
                plain = True
            i += 1
        code = body[:comment_at] if comment_at is not None else body
        if comment_at is not None:
            out.append((lineno, comment_at + 1, start_offset + comment_at, body[comment_at + 1:],
                        not code.strip()))
        m = _BLOCK_START.search(code.rstrip()) if quote is None and not flow else None
        if m:
            block_indent = _owner_indent(code)
            digits = [c for c in m.group(0)[-2:] if c.isdigit()]
            # an explicit indentation indicator fixes the content indentation at once
            content_indent = block_indent + int(digits[0]) if digits else None
    return out


def _owner_indent(code: str) -> int:
    """The indentation a block scalar's content must exceed (its key's or its dash's column)."""
    indent = len(code) - len(code.lstrip(" "))
    rest = code[indent:]
    while rest.startswith(("- ", "? ")):
        after = rest[2:].lstrip(" ")
        if after[:1] in ("|", ">"):
            return indent
        indent += len(rest) - len(after)
        rest = after
    return indent


def scan(text: str) -> list[Waiver]:
    """The waiver comments of a YAML text, each with the line it applies to."""
    if MARK not in text:  # the common case costs one substring search
        return []
    found = comments(text)
    by_line = {c[0]: c for c in found}
    lines = text.splitlines()
    waivers = []
    for line, column, offset, body, whole in found:
        text_ = body.strip()
        if not text_.startswith(MARK):
            continue
        w = _parse(line, column, offset, text_)
        target = line
        if whole:
            target = None
            for j in range(line + 1, len(lines) + 1):
                content = lines[j - 1].strip()
                if not content:
                    continue
                c = by_line.get(j)
                if c is not None and c[4]:  # another comment line: look past it
                    continue
                if content in ("---", "..."):
                    break
                target = j
                break
        waivers.append(Waiver(**{**w.__dict__, "target": target}))
    return waivers


def _parse(line: int, column: int, offset: int, text: str) -> Waiver:
    base = dict(line=line, column=column, offset=offset, text=text)
    m = _VERB.match(text)
    verb = m.group("verb") if m else ""
    if verb != "waive":
        return Waiver(**base, problem=f"unknown word {verb!r} after 'cfgcheck:' (only 'waive' is understood)"
                      if verb else "nothing after 'cfgcheck:'")
    rest = m.group("rest").strip()
    m2 = _RULES_AND_REASON.match(rest)
    if not m2:
        return Waiver(**base, problem="expected rule ids separated by commas, then 'because' and a reason")
    rules = tuple(r.strip() for r in m2.group("rules").split(","))
    reason = (m2.group("reason") or "").strip() or None
    return Waiver(**base, rules=rules, reason=reason)


# --------------------------------------------------------------------------- matching


def target_paths(doc: Document, lines: Iterable[int]) -> dict[int, list[tuple]]:
    """For each line: the key paths written on it (keys whose key starts there, list items that
    start there). One pass over the document, however many lines are asked for."""
    wanted = set(lines)
    out: dict[int, list[tuple]] = {line: [] for line in wanted}
    if not wanted:
        return out
    for path, entry in doc.entries.items():
        if not path:
            continue
        line = entry.key.line if entry.key is not None else entry.value.line
        if line in wanted:
            out[line].append(path)
    return out


def line_range(doc: Document) -> tuple[int, int] | None:
    """First and last line on which the document has a value; None for an empty document."""
    if () not in doc.entries:
        return None
    lines = [e.value.line for e in doc.entries.values()]
    return min(lines), max(lines)


def covers(waiver: Waiver, finding: Finding, paths: Iterable[tuple]) -> bool:
    if finding.rule not in waiver.rules or waiver.target is None:
        return False
    if finding.line == waiver.target:
        return True
    fp = tuple(finding.path)
    return any(fp[:len(p)] == p for p in paths)


def project_covers(waiver: ProjectWaiver, finding: Finding) -> bool:
    if finding.rule != waiver.rule:
        return False
    if not waiver.key:
        return True
    k = finding.key
    return k == waiver.key or k.startswith(waiver.key + ".") or k.startswith(waiver.key + "[")
