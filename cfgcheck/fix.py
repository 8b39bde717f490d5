"""The fixer: turn the fixes that findings propose into minimal text edits, prove them, write.

Three stages, in the order a formatter trusts them:

1. **Plan** — lint the text in memory, keep the fixes of the tiers asked for (``keeps-meaning``
   always, ``changes-training`` only when asked; ``--halve-batch`` adds a batch-split change),
   drop conflicting or unplaceable edits with a note.
2. **Edit** — every edit becomes a replacement of one character span of the decoded text: a
   scalar's source text, the end of a list (appended items), or a new line/member next to a
   sibling key, at its indentation and in its style. Nothing outside those spans is touched, so
   comments, quoting, flow style, anchors, blank lines and line endings stay as they were.
3. **Prove** — re-parse the new text; its data must equal the old data with exactly the intended
   key paths changed (to the intended values); the ordered comments must be the same; every line
   outside the edited spans must be byte-identical; a re-lint must show each fixed finding gone
   and no new finding. Only then is the file written: atomically, with its encoding, BOM,
   newline style, final newline and mode, and only if it did not change on disk meanwhile.

Nothing here reads argv or prints; ``cli.fix`` formats the :class:`FixReport`.
"""

from __future__ import annotations

import bisect
import codecs
import difflib
import errno
import functools
import json
import os
import re
import stat
import sys
import tempfile
from dataclasses import dataclass, field
from decimal import Decimal
from pathlib import Path
from types import MappingProxyType
from typing import Any, Iterable

import yaml

from . import engine
from . import links
from . import load as loadmod
from .engine import Options
from .findings import Edit, Finding, InputProblem, InternalError, Severity
from .load import Document, Entry, LoadError, Source, dotted

KEEPS_MEANING = "keeps-meaning"
CHANGES_TRAINING = "changes-training"
TIERS = (KEEPS_MEANING, CHANGES_TRAINING)
BATCH_SPLIT = "--halve-batch"  # the label of the user-requested halving: the option, not a rule id

try:
    from yaml import CSafeLoader as _Scanner
except ImportError:  # pragma: no cover - depends on how PyYAML was built
    from yaml import SafeLoader as _Scanner  # type: ignore[assignment]


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class Applied:
    """One fix, as reported: which rule, where, what it changes, its tier."""

    rule: str
    key: str
    summary: str
    tier: str
    paths: tuple[str, ...] = ()  # the dotted key paths the fix sets or inserts

    def as_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "key": self.key, "summary": self.summary, "tier": self.tier,
                "paths": list(self.paths)}


@dataclass
class FileFix:
    """What fixing one file did (or would do)."""

    file: str
    old_text: str = ""
    new_text: str = ""
    applied: list[Applied] = field(default_factory=list)
    withheld: list[Applied] = field(default_factory=list)  # changes-training, not asked for
    notes: list[str] = field(default_factory=list)  # fixes that could not be made, and why
    problem: InputProblem | None = None  # the input does not parse: not fixing
    error: InternalError | None = None  # a proof failed (a bug in cfgcheck): nothing saved
    refused: str | None = None  # the write was refused (file changed on disk, cannot write)
    skipped: str | None = None  # not a training config
    written: bool = False
    links: tuple[str, ...] = ()  # real paths of the files this one links (DeepSpeed, accelerate)
    needs: tuple[tuple[str, str], ...] = ()  # (rule, flag): fixes that need a flag to be judged
    evidence: dict | None = None  # a failed proof: before, after, which check (for a bug report)
    evidence_file: str | None = None  # where the evidence was saved

    @property
    def changed(self) -> bool:
        """The fixed text differs (and, once written, the write was not refused)."""
        return (self.error is None and self.problem is None and self.refused is None
                and self.new_text != self.old_text)

    def diff(self) -> str:
        if not self.changed:
            return ""
        lines = difflib.unified_diff(
            self.old_text.splitlines(keepends=True), self.new_text.splitlines(keepends=True),
            fromfile=self.file, tofile=f"{self.file} (fixed)")
        out = []
        for line in lines:
            out.append(line if line.endswith("\n") else line + "\n\\ No newline at end of file\n")
        return "".join(out)


@dataclass
class FixReport:
    files: list[FileFix] = field(default_factory=list)

    @property
    def changed(self) -> list[FileFix]:
        return [f for f in self.files if f.changed]

    @property
    def problems(self) -> list[FileFix]:
        return [f for f in self.files if f.problem is not None]

    @property
    def errors(self) -> list[FileFix]:
        return [f for f in self.files if f.error is not None]

    @property
    def refused(self) -> list[FileFix]:
        return [f for f in self.files if f.refused is not None]


class ProofFailed(Exception):
    """A rewrite did not pass the safety proof: a bug in a fix, never the user's fault."""

    def __init__(self, reason: str, rules: Iterable[str] = ()):
        super().__init__(reason)
        self.reason = reason
        self.rules = tuple(rules)


class NewFinding(ProofFailed):
    """The rewrite is sound, but what it changes brings a finding of its own (e.g. more memory)."""


class _Unplaceable(Exception):
    """An edit cannot be made as a span edit here (merge key, block list rewritten, ...)."""


# --------------------------------------------------------------------------- planning

@dataclass
class _Planned:
    rule: str
    key: str
    summary: str
    tier: str
    edits: tuple[Edit, ...]
    document: int
    finding: Finding | None  # None for the batch split


def _halving(view, document: int, times: int = 1) -> tuple[_Planned | None, str | None]:
    """Halve the per-device batch ``times`` times and multiply accumulation by as much: the
    effective batch stays the same."""
    pd, ga = view.get("batch.per_device"), view.get("batch.accumulation")
    factor = 2 ** times
    if pd is None:
        return None, "no per-device batch size is set"
    if pd.auto or not isinstance(pd.value, int) or isinstance(pd.value, bool):
        return None, f"{pd.key} is not a whole number ({pd.written!r})"
    if pd.value < factor or pd.value % factor:
        what = "halving it" if times == 1 else f"halving it {times} times (dividing by {factor})"
        return None, (f"{pd.key} {pd.value} is not divisible by {factor}: {what} would change "
                      "the effective batch")
    new_pd = pd.value // factor
    edits = [Edit(path=pd.path, old=pd.written, new=new_pd)]
    if ga is None:
        edits.append(Edit(path=pd.path[:-1] + ("gradient_accumulation_steps",), old=None,
                          new=factor, insert=True, after=pd.path))
        ga_text = f"gradient_accumulation_steps: added as {factor}"
    elif ga.auto or not isinstance(ga.value, int) or isinstance(ga.value, bool):
        return None, f"{ga.key} is {ga.written!r}, not a whole number: cannot double it"
    else:
        edits.append(Edit(path=ga.path, old=ga.written, new=ga.value * factor))
        ga_text = f"{ga.key}: {ga.value} -> {ga.value * factor}"
    summary = (f"{pd.key}: {pd.value} -> {new_pd}, {ga_text} "
               f"(per-device × accumulation stays {pd.value * (ga.value if ga else 1)})")
    return _Planned(BATCH_SPLIT, pd.key, summary, CHANGES_TRAINING, tuple(edits), document, None), None


def _plan(report, *, training: bool,
          halve_batch: int) -> tuple[list[_Planned], list[Applied], list[str]]:
    planned: list[_Planned] = []
    withheld: list[Applied] = []
    for f in report.findings:
        if f.fix is None:
            continue
        item = _Planned(f.rule, f.key, f.fix.summary, f.fix.tier, tuple(f.fix.edits), f.document, f)
        if f.fix.tier == KEEPS_MEANING or (f.fix.tier == CHANGES_TRAINING and training):
            planned.append(item)
        else:
            withheld.append(Applied(f.rule, f.key, f.fix.summary, f.fix.tier,
                                    tuple(dotted(e.path) for e in f.fix.edits)))
    notes = []
    if halve_batch:
        for view in report.views:
            if view.skipped:
                continue
            item, why = _halving(view, view.doc.index, int(halve_batch))
            if item is not None:
                planned.append(item)
            else:
                notes.append(why)
    # value changes first: a keeps-meaning rewrite of the same value is then already covered
    planned.sort(key=lambda p: p.tier != CHANGES_TRAINING)
    return planned, withheld, notes


# --------------------------------------------------------------------------- rendering values

_EXP_NO_DOT = re.compile(r"([-+]?)([0-9]+)(\.[0-9]*)?([eE])([-+]?)([0-9]+)")
_PLAIN_STR = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-/]*")
_COMMENT_PAD = re.compile(r"( {2,})#")
_PROPS = re.compile(r"[&!][^\s,\[\]{}]*\s+")


def _float_text(value: float, like: str = "") -> str:
    """A float in the file's style: exponent form when the old text used one, else decimal.

    Exponent form always has a dot in the mantissa and a sign in the exponent (``5.0e-5``,
    ``1.0e+4``): YAML 1.1 (PyYAML) needs both to read a float, YAML 1.2 and JSON accept it.
    """
    if value != value or value in (float("inf"), float("-inf")):
        raise _Unplaceable("not a finite number")
    m = _EXP_NO_DOT.fullmatch(like)
    if m is not None and float(like) == value:  # "12e-5" -> "12.0e-5": the author's digits stay
        sign, whole, frac, letter, esign, digits = m.groups()
        return f"{sign}{whole}{frac if frac and frac != '.' else '.0'}{letter}{esign or '+'}{digits}"
    d = Decimal(repr(float(value)))
    sign, digits, exp = d.as_tuple()
    low = like.lower()
    use_exp = ("e" in low) if like and not low.startswith("0x") else (
        value != 0 and (abs(value) < 1e-4 or abs(value) >= 1e16))
    if use_exp:
        ds = "".join(map(str, digits)).rstrip("0") or "0"
        e10 = exp + len(digits) - 1 if value != 0 else 0
        mant = ds[0] + "." + (ds[1:] or "0")
        letter = "E" if "E" in like else "e"
        return f"{'-' if sign else ''}{mant}{letter}{'-' if e10 < 0 else '+'}{abs(e10)}"
    text = format(d, "f")
    return text if "." in text else text + ".0"


def _yaml_str(value: str, quote: str | None) -> str:
    if quote is None and _PLAIN_STR.fullmatch(value) and value.lower() not in ("y", "n"):
        try:
            if yaml.load(value, Loader=_Scanner) == value:
                return value
        except yaml.YAMLError:
            pass
    if quote == "'" and not _NOT_SINGLE.search(value):
        return "'" + value.replace("'", "''") + "'"
    # JSON's escapes are YAML's too; YAML also breaks lines at NEL, LS, PS and refuses the rest
    return _NOT_DOUBLE.sub(lambda m: f"\\u{ord(m.group()):04x}", json.dumps(value, ensure_ascii=False))


# what a single-quoted YAML scalar cannot hold as is: line breaks and non-printable characters
_NOT_SINGLE = re.compile("[^\t\x20-\x7e\xa0-\ud7ff\ue000-\ufefe\uff00-\ufffd\U00010000-\U0010ffff]")
# what a double-quoted one must escape beyond JSON's escapes (json.dumps handles < 0x20)
_NOT_DOUBLE = re.compile("[\x7f-\x9f\u2028\u2029\ufeff\ufffe\uffff]")


def _render(value: Any, fmt: str, like: Entry | None = None, raw: str = "") -> str:
    """A value as YAML or JSON text, in the style of the value it replaces (``like``)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return _float_text(value, raw if like is not None and like.style in (None, "json") else "")
    if isinstance(value, str):
        if fmt == "json":
            return json.dumps(value, ensure_ascii=False)
        quote = like.style if like is not None and like.style in ("'", '"') else None
        return _yaml_str(value, quote)
    if isinstance(value, list):
        return "[" + ", ".join(_render(v, fmt, like) for v in value) + "]"
    if isinstance(value, dict):
        items = (f"{_render_key(k, fmt)}: {_render(v, fmt, like)}" for k, v in value.items())
        return "{" + ", ".join(items) + "}"
    raise _Unplaceable(f"cannot write a {type(value).__name__}")


def _render_key(key: Any, fmt: str, like_raw: str = "") -> str:
    if fmt == "json":
        return json.dumps(str(key), ensure_ascii=False)
    quote = like_raw[:1] if like_raw[:1] in ("'", '"') else None
    return _yaml_str(str(key), quote)


# --------------------------------------------------------------------------- span edits

@dataclass(frozen=True)
class _TextEdit:
    start: int
    end: int
    text: str
    rule: str
    plan: int = 0  # id() of the _Planned it belongs to


class _DocIndex:
    """Children of every collection entry, in document order."""

    def __init__(self, doc: Document):
        self.doc = doc
        self.children: dict[tuple, list[tuple]] = {}
        for path in doc.entries:
            if path:
                self.children.setdefault(path[:-1], []).append(path)

    def kids(self, path: tuple) -> list[tuple]:
        seen, out = set(), []
        for p in self.children.get(tuple(path), []):
            if p not in seen:  # a duplicate key is listed once
                seen.add(p)
                out.append(p)
        return out

    def flowish(self, entry: Entry) -> bool:
        return entry.flow or self.doc.format == "json"

    def end(self, path: tuple) -> int:
        """Where the text of a value ends (for block collections: their last descendant)."""
        e = self.doc.entries[path]
        if e.kind == "scalar" or self.flowish(e):
            return e.value.end
        kids = self.kids(path)
        return max((self.end(k) for k in kids), default=e.value.end)


def _scalar_start(text: str, entry: Entry) -> tuple[int, str]:
    """Where the scalar's own text starts, after an anchor (``&name``), and what to write first.

    An anchor is kept; a tag (``!!str``) goes with the old value, since it would force the new
    one back to the old type.
    """
    pos, anchors, tagged = entry.value.start, [], False
    while pos < entry.value.end and text[pos] in "&!":
        m = _PROPS.match(text, pos)
        if m is None or m.end() > entry.value.end:
            break
        if text[pos] == "&":
            anchors.append(m.group().strip())
        else:
            tagged = True
        pos = m.end()
    if tagged:
        return entry.value.start, "".join(a + " " for a in anchors)
    return pos, ""


def _line_after(text: str, pos: int) -> tuple[int, str]:
    """The offset just after the line containing ``pos`` ends, and that line's newline."""
    if pos > 0 and text[pos - 1] == "\n":
        return pos, "\r\n" if text[pos - 2:pos] == "\r\n" else "\n"
    nl = text.find("\n", pos)
    if nl < 0:
        return len(text), ""
    rest = text[pos:nl].strip()
    if rest and not rest.startswith("#"):
        raise _Unplaceable("something else follows on the same line")
    return nl + 1, "\r\n" if nl > 0 and text[nl - 1] == "\r" else "\n"


def _indent_of(text: str, pos: int) -> int:
    return pos - (text.rfind("\n", 0, pos) + 1)


def _replace_value(text: str, idx: _DocIndex, path: tuple, edit: Edit, rule: str,
                   fmt: str) -> list[_TextEdit]:
    entry = idx.doc.entries[path]
    new = edit.new
    if entry.kind == "scalar":
        start, lead = _scalar_start(text, entry)
        raw = text[start:entry.value.end]
        if isinstance(new, (list, dict)) or entry.style in ("|", ">"):
            like = None
        else:
            like = entry
        rendered = lead + _render(new, fmt, like, raw)
        if start == entry.value.end and start > 0 and text[start - 1] not in " \t\r\n[{,":
            rendered = " " + rendered  # an empty value ("fp16:") gets the space a value needs
        end = entry.value.end
        pad = _COMMENT_PAD.match(text, end) if fmt == "yaml" and "\n" not in raw else None
        if pad is not None:  # keep an end-of-line comment in its column when the padding allows
            width = max(1, len(pad.group(1)) - (len(rendered) - len(raw)))
            return [_TextEdit(start, pad.end(1), rendered + " " * width, rule)]
        return [_TextEdit(start, end, rendered, rule)]
    old = idx.doc.get(path)
    if entry.kind == "seq" and isinstance(new, list) and isinstance(old, list) \
            and len(new) > len(old) and new[:len(old)] == old:
        return _append_items(text, idx, path, new[len(old):], rule, fmt)
    if idx.flowish(entry):
        start, lead = _scalar_start(text, entry)
        return [_TextEdit(start, entry.value.end, lead + _render(new, fmt), rule)]
    raise _Unplaceable(f"{dotted(path)} is a block collection; rewriting it whole is not done")


def _item_like(idx: _DocIndex, items: list[tuple]) -> Entry | None:
    for p in reversed(items):
        e = idx.doc.entries[p]
        if e.kind == "scalar":
            return e
    return None


def _append_items(text: str, idx: _DocIndex, path: tuple, extra: list, rule: str,
                  fmt: str) -> list[_TextEdit]:
    entry = idx.doc.entries[path]
    items = idx.kids(path)
    like = _item_like(idx, items)
    rendered = [_render(v, fmt, like if isinstance(v, str) and fmt == "yaml" else None)
                for v in extra]  # a new name quoted the way the list's last name is
    if idx.flowish(entry):
        if not items:
            open_at = text.index("[", entry.value.start)
            return [_TextEdit(open_at + 1, open_at + 1, ", ".join(rendered), rule)]
        last_end = idx.end(items[-1])
        own = _own_line_comment(text, idx.doc.entries[items[-1]].value.start, last_end)
        if own is not None:  # "item  # note": the note stays with its item, new items go below
            indent, comma, next_line = own
            body = "".join(f"{indent}{r}" + ("," if comma or i < len(rendered) - 1 else "") + _nl_at(text, next_line)
                           for i, r in enumerate(rendered))
            return ([] if comma else [_TextEdit(last_end, last_end, ",", rule)]) + \
                [_TextEdit(next_line, next_line, body, rule)]
        if len(items) >= 2:
            sep = text[idx.end(items[-2]):idx.doc.entries[items[-1]].value.start]
            if "#" in sep or sep.count(",") != 1:
                sep = ", "
        else:
            open_at = text.rindex("[", entry.value.start, idx.doc.entries[items[0]].value.start + 1)
            gap = text[open_at + 1:idx.doc.entries[items[0]].value.start]
            sep = "," + (gap if gap.strip() == "" and gap else " ")
        return [_TextEdit(last_end, last_end, "".join(sep + r for r in rendered), rule)]
    # a block list: new "- item" lines after the last one, at its dash's indentation
    last = idx.doc.entries[items[-1]]
    dash = last.value.start - 1
    while dash >= 0 and text[dash] in " \t":
        dash -= 1
    line_start = text.rfind("\n", 0, dash) + 1
    if dash < 0 or text[dash] != "-" or text[line_start:dash].strip(" ") != "":
        raise _Unplaceable(f"the items of {dotted(path)} are not one per line")
    gap = text[dash + 1:last.value.start]
    pos, nl = _line_after(text, idx.end(items[-1]))
    prefix = ""
    if not nl:  # the last line has no newline: the file keeps having none
        nl = _newline(text)
        prefix = nl
    lines = [text[line_start:dash] + "-" + gap + r for r in rendered]
    body = prefix + nl.join(lines) + ("" if prefix else nl)
    return [_TextEdit(pos, pos, body, rule)]


def _newline(text: str) -> str:
    return "\r\n" if "\r\n" in text else "\n"


def _insert_key(text: str, idx: _DocIndex, edit: Edit, rule: str, fmt: str) -> list[_TextEdit]:
    parent, key = tuple(edit.path[:-1]), edit.path[-1]
    pentry = idx.doc.entries.get(parent)
    if pentry is None or pentry.kind != "map" or not isinstance(idx.doc.get(parent), dict):
        raise _Unplaceable(f"{dotted(parent) or 'the top level'} is not a mapping written here")
    kids = [k for k in idx.kids(parent) if idx.doc.entries[k].key is not None]
    anchor = tuple(edit.after) if edit.after is not None and tuple(edit.after) in kids else (
        kids[-1] if kids else None)
    if idx.flowish(pentry):
        return _insert_flow(text, idx, parent, key, edit.new, anchor, rule, fmt)
    if anchor is None:
        raise _Unplaceable("an empty block mapping")
    aentry = idx.doc.entries[anchor]
    akey_raw = text[aentry.key.start:aentry.key.end]
    indent = text[aentry.key.start - _indent_of(text, aentry.key.start):aentry.key.start]
    if "?" in indent:  # "? key" (a complex key, its value on a ": value" line): align under "?"
        lead, _, after = indent.partition("?")
        if lead.strip(" \t") or after.strip(" \t"):
            raise _Unplaceable(f"{dotted(anchor)} is written as a complex key inside another item")
        indent = lead
    indent = re.sub(r"[^\t]", " ", indent)  # "- key:" in a list item: align under the key
    pos, nl = _line_after(text, idx.end(anchor))
    prefix = ""
    if not nl:
        nl = _newline(text)
        prefix = nl
    head = indent + _render_key(key, fmt, akey_raw) + ":"
    value = edit.new
    block = _block_list_style(text, idx, parent) if isinstance(value, list) and value else None
    if block is not None:
        lines = [head] + [indent + block + _render(v, fmt) for v in value]
    else:
        lines = [head + " " + _render(value, fmt)]
    body = prefix + nl.join(lines) + ("" if prefix else nl)
    return [_TextEdit(pos, pos, body, rule)]


def _block_list_style(text: str, idx: _DocIndex, parent: tuple) -> str | None:
    """The "  - " that a sibling block list puts before its items (relative to its key), or None."""
    for k in idx.kids(parent):
        e = idx.doc.entries[k]
        if e.kind != "seq":
            continue
        if e.flow:
            return None
        first = idx.kids(k)
        if not first or e.key is None:
            continue
        item = idx.doc.entries[first[0]].value.start
        dash = text.rfind("-", 0, item)
        if dash < 0 or text[text.rfind("\n", 0, dash) + 1:dash].strip(" ") != "":
            return None
        offset = _indent_of(text, dash) - _indent_of(text, e.key.start)
        if offset < 0:
            return None
        return " " * offset + "-" + text[dash + 1:item]
    return None


def _insert_flow(text: str, idx: _DocIndex, parent: tuple, key: Any, value: Any,
                 anchor: tuple | None, rule: str, fmt: str) -> list[_TextEdit]:
    pentry = idx.doc.entries[parent]
    if anchor is None:
        open_at = text.index("{", pentry.value.start)
        member = f"{_render_key(key, fmt)}: {_render(value, fmt)}"
        return [_TextEdit(open_at + 1, open_at + 1, member, rule)]
    aentry = idx.doc.entries[anchor]
    kstart = aentry.key.start
    ws = kstart
    while ws > 0 and text[ws - 1] in " \t\r\n":
        ws -= 1
    gap = text[ws:kstart]
    if not gap or (ws > 0 and text[ws - 1] not in ",{"):
        gap = " "
    colon = text[aentry.key.end:aentry.value.start]
    if colon.strip() != ":":
        colon = ": "
    akey_raw = text[aentry.key.start:aentry.key.end]
    rendered = _render(value, fmt)
    if isinstance(value, dict) and value and aentry.kind == "map":
        rendered = _object_like(text, idx, anchor, value, fmt) or rendered
    if isinstance(value, list) and value:
        rendered = _list_like(text, idx, parent, anchor, value, fmt) or rendered
    end = idx.end(anchor)
    own = _own_line_comment(text, aentry.key.start, end)
    if own is not None:  # "key: value  # note": the note stays with its member, the new one goes below
        indent, comma, next_line = own
        line = f"{indent}{_render_key(key, fmt, akey_raw)}{colon}{rendered}" + ("," if comma else "")
        return ([] if comma else [_TextEdit(end, end, ",", rule)]) + \
            [_TextEdit(next_line, next_line, line + _nl_at(text, next_line), rule)]
    member = "," + gap + _render_key(key, fmt, akey_raw) + colon + rendered
    return [_TextEdit(end, end, member, rule)]


def _nl_at(text: str, line_start: int) -> str:
    """The newline the line before ``line_start`` ends with."""
    return "\r\n" if text[line_start - 2:line_start] == "\r\n" else "\n"


def _own_line_comment(text: str, first: int, end: int) -> tuple[str, bool, int] | None:
    """For a flow member or item written alone on its line(s) and followed by a comment there:
    (its indentation, whether a comma follows it, where the next line starts); else None."""
    line_start = text.rfind("\n", 0, first) + 1
    indent = text[line_start:first]
    nl = text.find("\n", end)
    if nl < 0 or indent.strip(" \t"):
        return None
    rest = text[end:nl]
    hash_at = rest.find("#")
    if hash_at < 0:
        return None
    before = rest[:hash_at]
    if before.strip(" \t,") or before.count(",") > 1 or (hash_at and before[-1] not in " \t"):
        return None
    return indent, "," in before, nl + 1


def _object_like(text: str, idx: _DocIndex, sibling: tuple, value: dict, fmt: str) -> str | None:
    """A new mapping laid out like its sibling mapping (one member per line, same indents)."""
    kids = [k for k in idx.kids(sibling) if idx.doc.entries[k].key is not None]
    entry = idx.doc.entries[sibling]
    if not kids or "\n" not in text[entry.value.start:entry.value.end]:
        return None
    first, last = idx.doc.entries[kids[0]], kids[-1]
    opening = text[entry.value.start + 1:first.key.start]
    closing = text[idx.end(last):entry.value.end - 1]
    colon = text[first.key.end:first.value.start]
    if opening.strip() or closing.strip() or colon.strip() != ":":
        return None  # comments or something unusual in between: keep the one-line form
    members = [_render_key(k, fmt) + colon + _render(v, fmt) for k, v in value.items()]
    return "{" + opening + ("," + opening).join(members) + closing + "}"


def _list_like(text: str, idx: _DocIndex, parent: tuple, anchor: tuple, value: list,
               fmt: str) -> str | None:
    """A new list laid out like a sibling list written one item per line (the anchor first)."""
    siblings = [anchor] + [k for k in idx.kids(parent) if k != anchor]
    for k in siblings:
        entry = idx.doc.entries[k]
        items = idx.kids(k)
        if entry.kind != "seq" or not items:
            continue
        if "\n" not in text[entry.value.start:entry.value.end]:
            return None
        opening = text[entry.value.start + 1:idx.doc.entries[items[0]].value.start]
        closing = text[idx.end(items[-1]):entry.value.end - 1]
        if opening.strip() or closing.strip():
            return None
        return "[" + opening + ("," + opening).join(_render(v, fmt) for v in value) + closing + "]"
    return None


def _edits_for(text: str, doc: Document, idx: _DocIndex, plan: _Planned,
               fmt: str) -> list[_TextEdit]:
    out: list[_TextEdit] = []
    for edit in plan.edits:
        path = tuple(edit.path)
        entry = doc.entries.get(path)
        if entry is not None:
            out.extend(_replace_value(text, idx, path, edit, plan.rule, fmt))
        elif edit.insert:
            if doc.get(path, _MISSING) is not _MISSING:
                raise _Unplaceable(f"{dotted(path)} comes from a merge key (<<); edit it where it is written")
            out.extend(_insert_key(text, idx, edit, plan.rule, fmt))
        else:
            raise _Unplaceable(f"{dotted(path)} is not written in this file as such "
                               "(merged with <<, or gone)")
    return _join_commas(text, out)


def _join_commas(text: str, edits: list[_TextEdit]) -> list[_TextEdit]:
    """A "," inserted right after a value that is also rewritten (with the padding before its
    comment) becomes part of that rewrite: "true  # c" -> "false, # c"."""
    commas = [e for e in edits if e.start == e.end and e.text == ","]
    if not commas:
        return edits
    out = [e for e in edits if e not in commas]
    for c in commas:
        host = next((i for i, e in enumerate(out) if e.start < c.start < e.end
                     and text[c.start:e.end].strip(" \t") == ""), None)
        if host is None:
            out.append(c)
            continue
        e = out[host]
        head, pad = e.text[:len(e.text.rstrip(" "))], e.text[len(e.text.rstrip(" ")):]
        out[host] = _TextEdit(e.start, e.end, head + "," + (pad[1:] if len(pad) > 1 else pad), e.rule)
    return out


def _apply(text: str, edits: list[_TextEdit]) -> str:
    ordered = sorted(edits, key=lambda e: (e.start, e.end))
    for a, b in zip(ordered, ordered[1:]):
        if b.start < a.end:
            raise ProofFailed(f"two edits overlap at offset {b.start}", {a.rule, b.rule})
    out, pos = [], 0
    for e in ordered:
        out.append(text[pos:e.start])
        out.append(e.text)
        pos = e.end
    out.append(text[pos:])
    return "".join(out)


# --------------------------------------------------------------------------- the proof

def yaml_comments(text: str) -> list[str]:
    """Every comment of a YAML text, in order: a ``#`` outside every token, to the line's end."""
    spans = []
    try:
        for tok in yaml.scan(text, Loader=_Scanner):
            if tok.start_mark.index != tok.end_mark.index:
                spans.append((tok.start_mark.index, tok.end_mark.index))
    except yaml.YAMLError as exc:
        raise ProofFailed(f"the text no longer scans as YAML: {exc}") from None
    spans.sort()
    out, pos = [], 0
    spans.append((len(text), len(text)))
    for start, end in spans:
        gap_from = pos
        i = text.find("#", gap_from, start)
        while i >= 0:
            if i == 0 or text[i - 1] in " \t\r\n\ufeff":
                nl = text.find("\n", i)
                stop = len(text) if nl < 0 or nl > start else nl
                out.append(text[i:stop].rstrip("\r"))
                i = text.find("#", stop, start) if stop < start else -1
            else:
                i = text.find("#", i + 1, start)
        pos = max(pos, end)
    return out


def _diff_paths(a: Any, b: Any, path: tuple = ()) -> list[tuple]:
    if type(a) is not type(b):
        return [path]
    if isinstance(a, dict):
        out = []
        for k in list(a) + [k for k in b if k not in a]:
            if k not in a or k not in b:
                out.append(path + (k,))
            else:
                out.extend(_diff_paths(a[k], b[k], path + (k,)))
        return out
    if isinstance(a, list):
        if len(a) != len(b):
            return [path]
        out = []
        for i, (x, y) in enumerate(zip(a, b)):
            out.extend(_diff_paths(x, y, path + (i,)))
        return out
    if isinstance(a, float) and a != a and b != b:  # .nan is unchanged though nan != nan
        return []
    return [] if a == b else [path]


def _line_of(starts: list[int], offset: int) -> int:
    return bisect.bisect_right(starts, offset) - 1


_LINE = re.compile(r"[^\n]*\n|[^\n]+\Z")


def _outside_lines_identical(old: str, new: str, edits: list[_TextEdit]) -> str | None:
    """None when every line the edits do not touch is byte-identical in ``new``; else why not.

    Linear in the text: each untouched line of ``old`` must sit in ``new`` at its offset shifted
    by the length change of the edits before it, and ``new`` must be exactly as long as the
    edits make it.
    """
    ordered = sorted(edits, key=lambda e: (e.start, e.end))
    if len(new) != len(old) + sum(len(e.text) - (e.end - e.start) for e in ordered):
        return "the fixed text is not as long as its edits make it"
    # lines end at "\n" only (str.splitlines also breaks at \x85, \u2028, \x0c..., which would
    # shift every line number after one inside a quoted value)
    starts = [0] + [m.end() for m in re.finditer("\n", old)]
    touched: set[int] = set()
    for e in ordered:
        first = _line_of(starts, e.start)
        last = _line_of(starts, max(e.start, e.end - 1))
        touched.update(range(first, last + 1))
        if e.start == e.end:
            touched.add(first - 1)  # an insertion at a line start sits after the line before
    shifts = [0]  # cumulative length change after each edit, in start order
    for e in ordered:
        shifts.append(shifts[-1] + len(e.text) - (e.end - e.start))
    begins = [e.start for e in ordered]
    for n, start in enumerate(starts):
        if n in touched or start >= len(old) and n:
            continue
        end = starts[n + 1] if n + 1 < len(starts) else len(old)
        shift = shifts[bisect.bisect_right(begins, start)] if begins else 0
        if new[start + shift:end + shift] != old[start:end]:
            return f"line {n + 1} changed but no edit touches it"
    return None


def _finding_key(f: Finding) -> tuple:
    return (f.rule, f.document, tuple(f.path), f.data.get("variant"), f.data.get("reason"))


class _Shared(Exception):
    """A training-changing edit reaches other settings through an alias or a merge key (<<)."""

    def __init__(self, plans: list, where: str):
        super().__init__(where)
        self.plans = plans
        self.where = where


def _prove_text(old_text: str, new_text: str, name: str, fmt: str, old_docs: list[Document],
                plans: list[_Planned], edits: list[_TextEdit]) -> tuple[list[Document], list[str]]:
    """Raise ProofFailed unless the new text is exactly what the plans intend (without linting).

    Returns the new documents and notes (values that follow an alias of an edited value).
    """
    rules = [p.rule for p in plans]
    notes: list[str] = []
    try:
        new_docs = loadmod.load_text(new_text, name, fmt)
    except LoadError as exc:
        raise ProofFailed(f"the fixed text does not parse: {exc.reason} at {exc.line}:{exc.column}",
                          rules) from None
    if len(new_docs) != len(old_docs):
        raise ProofFailed(f"{len(old_docs)} documents became {len(new_docs)}", rules)
    by_doc: dict[int, list[_Planned]] = {}
    for p in plans:
        by_doc.setdefault(p.document, []).append(p)
    for old_doc, new_doc in zip(old_docs, new_docs):
        mine = by_doc.get(old_doc.index, [])
        if not mine:
            if old_doc.data != new_doc.data and _diff_paths(old_doc.data, new_doc.data):
                raise ProofFailed(f"document {old_doc.index + 1} changed but no fix meant to change it",
                                  rules)
            continue
        intended: dict[tuple, tuple[Any, _Planned]] = {}
        for p in mine:
            for e in p.edits:
                intended[tuple(e.path)] = (e.new, p)
        for path, (value, plan) in intended.items():
            got = new_doc.get(path, _MISSING)
            if _diff_paths(value, got):
                raise ProofFailed(f"{dotted(path)} reads back as {got!r}, not {value!r}", [plan.rule])
        shared: list[_Planned] = []
        for path in _diff_paths(old_doc.data, new_doc.data):
            if any(path[:len(ip)] == ip for ip in intended):
                continue
            # a value with no text of its own (an alias, or merged with <<) that follows an edit
            copy = next((ip for ip in intended if _follows(old_doc, new_doc, path, ip,
                                                           intended[ip][0])), None)
            if copy is None:
                raise ProofFailed(f"{dotted(path) or 'the document'} changed but no fix meant to change it",
                                  rules)
            plan = intended[copy][1]
            if plan.tier == CHANGES_TRAINING:
                if plan not in shared:
                    shared.append(plan)
                continue
            notes.append(f"{dotted(path)} follows {dotted(copy)} (a YAML alias or merge), "
                         "so it changed too")
        if shared:
            raise _Shared(shared, "the value is shared through a YAML anchor or merge key (<<) "
                                  "with another section; change it where the anchor is written")
    if fmt == "yaml":
        if yaml_comments(old_text) != yaml_comments(new_text):
            raise ProofFailed("the comments are not the same, in the same order", rules)
    why = _outside_lines_identical(old_text, new_text, edits)
    if why:
        raise ProofFailed(why, rules)
    return new_docs, notes


def _finding_keys(report) -> dict[tuple, Finding]:
    return {_finding_key(f): f for f in report.findings}


def _lint_after(new_text: str, name: str, options: Options, fmt: str, linked: dict, rules):
    with links.linked_texts(linked):
        after = engine.lint_text(new_text, name, options, fmt)
    if after.problem is not None or after.internal:
        raise ProofFailed("the fixed text does not lint cleanly: "
                          + (after.problem.reason if after.problem else after.internal[0].error), rules)
    return after


def _prove(old_text: str, new_text: str, name: str, fmt: str, old_docs: list[Document],
           plans: list[_Planned], edits: list[_TextEdit], before, options: Options,
           linked: dict | None = None) -> tuple[list[str], dict[tuple, Finding], Any]:
    """The whole proof: the text (see _prove_text), then a re-lint. Returns notes and the
    findings the fixed text has that the old one had not (any severity): the caller decides,
    per finding, which fix brought it."""
    rules = [p.rule for p in plans]
    _docs, notes = _prove_text(old_text, new_text, name, fmt, old_docs, plans, edits)
    after = _lint_after(new_text, name, options, fmt, linked or {}, rules)
    after_keys = _finding_keys(after)
    for p in plans:
        if p.finding is not None and _finding_key(p.finding) in after_keys:
            raise ProofFailed(f"the finding at {p.key or 'the top level'} is still there after the fix",
                              [p.rule])
    before_keys = _finding_keys(before)
    new = {}
    for k, f in after_keys.items():
        if k in before_keys:
            continue
        if f.data.get("judged") is False:  # a "not checked" note flags no value
            continue
        new[k] = f  # any severity, info included: no fix may write a value a rule flags
    return notes, new, after


_MISSING = object()


def _follows(old_doc: Document, new_doc: Document, path: tuple, edited: tuple, value: Any) -> bool:
    """``path`` holds no text of its own (alias or merge) and changed exactly as ``edited`` did."""
    if _diff_paths(new_doc.get(path, _MISSING), value):
        return False
    if _diff_paths(old_doc.get(path, _MISSING), old_doc.get(edited, _MISSING)):
        return False
    own, source = old_doc.entries.get(path), old_doc.entries.get(edited)
    return own is None or (source is not None and own.value == source.value)


def _blame(text: str, name: str, fmt: str, options: Options, accepted: list[_Planned],
           edits: list[_TextEdit], new: dict[tuple, Finding],
           linked: dict) -> dict[int, tuple[list[Finding], str]]:
    """Which fix brought each new finding: id(plan) -> (findings, how it was told).

    A document's findings depend on that document (and its linked files) only, so a finding of
    document d is blamed on d's fixes: the only one, or the one that brings it when applied
    alone. The "alone" tries run for every document at once (try k applies the k-th candidate of
    every document), so the cost is one lint per candidate of the busiest document, not per fix.
    """
    out: dict[int, tuple[list[Finding], str]] = {}

    def blame(plan, f, how):
        out.setdefault(id(plan), ([], how))[0].append(f)

    per_doc: dict[int, list[_Planned]] = {}
    for p in accepted:
        if p.edits:
            per_doc.setdefault(p.document, []).append(p)
    open_: dict[int, list[Finding]] = {}
    for f in new.values():
        cands = per_doc.get(f.document, [])
        if len(cands) == 1:
            blame(cands[0], f, "alone")
        elif cands:
            open_.setdefault(f.document, []).append(f)
    if not open_:
        return out
    rounds = max(len(per_doc[d]) for d in open_)
    found: set[int] = set()
    for k in range(rounds):
        trial = [per_doc[d][k] for d in open_ if k < len(per_doc[d])]
        ids = {id(p) for p in trial}
        mine = [e for e in edits if e.plan in ids]
        try:
            after = _lint_after(_apply(text, mine), name, options, fmt, linked, ())
        except ProofFailed:
            continue
        keys = _finding_keys(after)
        for p in trial:
            for f in open_[p.document]:
                if _finding_key(f) in keys:
                    blame(p, f, "alone")
                    found.add(id(f))
    for d, fs in open_.items():
        for f in fs:
            if id(f) not in found:  # only the fixes together bring it: all of them go
                for p in per_doc[d]:
                    blame(p, f, "together")
    return out


# --------------------------------------------------------------------------- the pure core

def fix_text(text: str, name: str = "<text>", options: Options | None = None, *,
             fmt: str | None = None, training: bool = False, halve_batch: int = 0,
             linked_before: dict | None = None, linked_after: dict | None = None,
             check_stable: bool = True) -> FileFix:
    """Fix a decoded text in memory. Never raises for bad input: see FileFix.problem / .error.

    ``linked_before`` / ``linked_after``: the texts of linked files (real path -> text) to lint
    with, as they are and as they will be once fixed (files fixed together).
    """
    halve_batch = int(halve_batch)
    lead = "\ufeff" if text.startswith("\ufeff") else ""  # a second byte-order mark: kept as is
    body = text[len(lead):]
    cr_only = "\r" in body and "\n" not in body
    if cr_only:  # old Mac line ends: fixed as "\n" lines (one for one), written back as "\r"
        body = body.replace("\r", "\n")
    elif re.search("\r(?!\n)", body):
        result = FileFix(file=name, old_text=text, new_text=text)
        before = engine.lint_text(text, name, options or Options(), fmt)
        if before.problem is not None:
            result.problem = before.problem
        elif any(f.fix is not None for f in before.findings) or halve_batch:
            result.notes.append("not fixed: its lines end in a mix of CR and LF; make them "
                                "one kind, then fix again")
        return result
    result = _fix_body(body, name, options, fmt=fmt, training=training, halve_batch=halve_batch,
                       linked_before=linked_before, linked_after=linked_after,
                       check_stable=check_stable)
    if cr_only:
        result.old_text, result.new_text = text, lead + result.new_text.replace("\n", "\r")
    elif lead:
        result.old_text, result.new_text = text, lead + result.new_text
    if result.evidence is not None:
        after = result.evidence["after"]
        result.evidence = dict(result.evidence, before=text,
                               after=lead + (after.replace("\n", "\r") if cr_only else after))
    return result


def _fix_body(text: str, name: str, options: Options | None, *, fmt: str | None, training: bool,
              halve_batch: int, linked_before: dict | None, linked_after: dict | None,
              check_stable: bool, linted=None) -> FileFix:
    options = options or Options()
    fmt = fmt or loadmod.guess_format(name, text)
    linked_before = linked_before or {}
    linked_after = linked_after if linked_after is not None else linked_before
    result = FileFix(file=name, old_text=text, new_text=text)
    if linted is not None:  # the stability pass: the proof's re-lint of this very text
        before = linted
    else:
        with links.linked_texts(linked_before):
            before = engine.lint_text(text, name, options, fmt)
    if before.problem is not None:
        result.problem = before.problem
        return result
    if before.internal:
        e = before.internal[0]
        result.error = InternalError(file=name, rule=e.rule,
                                     error=f"rule failed while checking, not fixing: {e.error}")
        return result
    if before.skipped:
        result.skipped = before.skipped
    result.links = _linked_paths(before)
    result.needs = _needed_flags(before, options)
    docs = [v.doc for v in before.views]
    planned, result.withheld, result.notes = _plan(before, training=training,
                                                   halve_batch=halve_batch)
    if not planned:
        return result
    indexes = {d.index: _DocIndex(d) for d in docs}
    by_index = {d.index: d for d in docs}
    accepted: list[_Planned] = []
    edits: list[_TextEdit] = []
    spans: set[tuple] = set()  # (start, end, text) of every edit made, for the alias dedup
    starts: list[tuple[int, int]] = []  # sorted (start, end) of the edits made, for overlaps
    taken: dict[tuple, tuple[Any, str]] = {}  # (document, path) -> (new value, rule)
    applied: dict[int, Applied] = {}
    for plan in planned:
        doc = by_index[plan.document]
        keys = [(plan.document, tuple(e.path)) for e in plan.edits]
        clash = [k for k in keys if k in taken]
        if clash:
            if plan.tier == KEEPS_MEANING and all(k in taken for k in keys):
                owner = taken[clash[0]][1]
                covered = _Planned(plan.rule, plan.key, plan.summary, plan.tier, (),
                                   plan.document, plan.finding)
                accepted.append(covered)
                applied[id(covered)] = Applied(plan.rule, plan.key,
                                               f"{plan.summary} (covered by the {owner} fix)",
                                               plan.tier, ())
                continue
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, another fix already "
                                f"changes {dotted(clash[0][1])}")
            continue
        twice = {tuple(d.path) for d in doc.duplicates}
        dup = next((e for e in plan.edits if any(tuple(e.path)[:len(t)] == t for t in twice)), None)
        if dup is not None:
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, {dotted(dup.path)} is "
                                "written twice (duplicate-key); keep one, then fix again")
            continue
        stale = [e for e in plan.edits if not e.insert and
                 _diff_paths(doc.get(tuple(e.path), _MISSING), e.old)]
        if stale:
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, {dotted(stale[0].path)} "
                                "no longer holds the value the rule saw")
            continue
        if plan.tier == KEEPS_MEANING and _tagged(text, doc, plan):
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, the value carries an "
                                "explicit tag (!!...); its author chose the type")
            continue
        if plan.tier == CHANGES_TRAINING and _shared(doc, plan):
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, the value is shared "
                                "through a YAML anchor; change it where the anchor is written")
            continue
        try:
            mine = _edits_for(text, doc, indexes[plan.document], plan, fmt)
        except _Unplaceable as exc:
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, {exc}")
            continue
        # the same rewrite reached twice (an alias and its anchor) is made once
        mine = [m for m in mine if (m.start, m.end, m.text) not in spans]
        if any(_overlaps(starts, m) for m in mine):
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, it would rewrite text "
                                "another fix already rewrites")
            continue
        mine = [_TextEdit(m.start, m.end, m.text, m.rule, id(plan)) for m in mine]
        accepted.append(plan)
        edits.extend(mine)
        for m in mine:
            spans.add((m.start, m.end, m.text))
            bisect.insort(starts, (m.start, m.end))
        for k, e in zip(keys, plan.edits):
            taken[k] = (e.new, plan.rule)
        applied[id(plan)] = Applied(plan.rule, plan.key, plan.summary, plan.tier,
                                    tuple(dotted(e.path) for e in plan.edits))
    if not edits:
        result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
        return result
    while True:
        new_text = _apply(text, edits)
        try:
            notes, new, after = _prove(text, new_text, name, fmt, docs, accepted, edits, before, options,
                                linked_after)
        except _Shared as exc:
            bad = {id(p) for p in exc.plans}
            for p in exc.plans:
                result.notes.append(f"{p.rule} at {p.key}: not applied, {exc.where}")
        except ProofFailed as exc:
            return _failed(result, exc, text, new_text, accepted, edits, docs, name, fmt)
        else:
            if not new:
                break
            # a consequence of a change, not a bug: leave out the fix that brings each new
            # finding (decided per finding), say which finding, and prove the rest again
            blamed = _blame(text, name, fmt, options, accepted, edits, new, linked_after)
            bad = set(blamed)
            for p in accepted:
                if id(p) in blamed:
                    fs, how = blamed[id(p)]
                    why = "together with the other fixes of this document, " if how == "together" else ""
                    what = "; ".join(f"{f.rule} at {f.key or 'the top level'}: {f.message}" for f in fs)
                    result.notes.append(f"{p.rule} at {p.key}: not applied, {why}it would bring "
                                        f"{'a new finding' if len(fs) == 1 else 'new findings'}: {what}")
            if not bad:  # cannot happen: every new finding belongs to a document with fixes
                return _failed(result, ProofFailed("a new finding that no fix brings",
                                                   [p.rule for p in accepted]),
                               text, new_text, accepted, edits, docs, name, fmt)
        accepted = [p for p in accepted if id(p) not in bad]
        edits = [e for e in edits if e.plan not in bad]
        if not edits:
            result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
            return result
    result.notes.extend(notes)
    if new_text != text:
        _say_as_written(new_text, name, fmt, accepted, applied)
    result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
    if new_text == text:
        return result
    if check_stable:
        # a formatter's safe mode: fixing the fixed text again must change nothing
        again = _fix_body(new_text, name, options, fmt=fmt, training=training, halve_batch=0,
                          linked_before=linked_after, linked_after=linked_after,
                          check_stable=False, linted=after)
        if again.error is not None or again.new_text != new_text:
            why = again.error.error if again.error is not None else \
                "fixing the fixed text changes it again: " + "; ".join(a.summary for a in again.applied)
            return _failed(result, ProofFailed(why, [p.rule for p in accepted]), text, new_text,
                           accepted, edits, docs, name, fmt, check="stability")
    result.new_text = new_text
    return result


def _say_as_written(new_text: str, name: str, fmt: str, accepted: list[_Planned],
                    applied: dict[int, Applied]) -> None:
    """Make each summary's "KEY: OLD -> NEW" / "KEY: added as NEW" show NEW exactly as written.

    A rule words its summary before the fixer renders the value; where the two differ (the
    number style, JSON quotes), the summary takes the text that is in the file now.
    """
    try:
        docs = {d.index: d for d in loadmod.load_text(new_text, name, fmt)}
    except LoadError:
        return
    for plan in accepted:
        a = applied.get(id(plan))
        doc = docs.get(plan.document)
        if a is None or doc is None or not plan.edits:
            continue
        summary = a.summary
        keys = [dotted(e.path) for e in plan.edits]
        for e, key in zip(plan.edits, keys):
            entry = doc.entries.get(tuple(e.path))
            if entry is None:
                continue
            written = _PROPS_LEAD.sub("", new_text[entry.value.start:entry.value.end])
            if "\n" in written or "\r" in written:
                continue  # a collection written over several lines: the rule's words stay
            m = re.search(r"(?:^|, )" + re.escape(key) + r": (?:added as |(?:[^,]*?) -> )", summary)
            if m is None:
                continue
            start = m.end()
            stops = [len(summary)]
            for other in keys:
                if other != key:
                    i = summary.find(f", {other}: ", start)
                    if i >= 0:
                        stops.append(i)
            i = summary.find(" (", start)
            if i >= 0:
                stops.append(i)
            end = min(stops)
            if summary[start:end] != written:
                summary = summary[:start] + written + summary[end:]
        if summary != a.summary:
            applied[id(plan)] = Applied(a.rule, a.key, summary, a.tier, a.paths)


_PROPS_LEAD = re.compile(r"^(?:[&!][^\s,\[\]{}]*\s+)+")


def _overlaps(starts: list[tuple[int, int]], m: _TextEdit) -> bool:
    i = bisect.bisect_left(starts, (m.start, -1))
    for j in (i - 1, i):
        if 0 <= j < len(starts):
            s, e = starts[j]
            if m.start < e and s < m.end:
                return True
    return False


def _failed(result: FileFix, exc: ProofFailed, text: str, new_text: str, accepted, edits, docs,
            name: str, fmt: str, check: str = "proof") -> FileFix:
    rules = exc.rules or tuple(p.rule for p in accepted)
    if len({p.rule for p in accepted}) > 1:
        rules = _culprits(text, name, fmt, docs, accepted, edits) or rules
    result.error = InternalError(
        file=name, rule=", ".join(dict.fromkeys(rules)),
        error=f"the fix did not pass the safety proof ({exc.reason}); nothing saved")
    result.evidence = {"file": name, "check": check, "reason": exc.reason,
                       "rules": list(dict.fromkeys(rules)), "before": text, "after": new_text}
    result.applied = []
    return result


def _culprits(text, name, fmt, docs, accepted, edits) -> tuple[str, ...]:
    """Prove each fix's text alone to name the one(s) that fail (only after a failed proof)."""
    bad = []
    for plan in accepted:
        mine = [e for e in edits if e.plan == id(plan)]
        if not mine:
            continue
        try:
            _prove_text(text, _apply(text, mine), name, fmt, docs, [plan], mine)
        except (ProofFailed, _Shared):
            bad.append(plan.rule)
    return tuple(dict.fromkeys(bad))


def _linked_paths(report) -> tuple[str, ...]:
    out = []
    for view in report.views:
        for link in view.links:  # the typed record of what the config links (cfgcheck.run)
            if link.path and link.problem is None:
                out.append(os.path.realpath(link.path))
    return tuple(dict.fromkeys(out))


_FLAG = re.compile(r"--(gpus|gpu|rows)\b")
_FLAG_ARG = MappingProxyType({"--gpu": "--gpu NAME (see: cfgcheck gpus)", "--gpus": "--gpus N", "--rows": "--rows N"})


def _needed_flags(report, options: Options) -> tuple[tuple[str, str], ...]:
    """(rule, flag) for each rule that proposes fixes but could not judge this file without a
    flag its "not checked" note names."""
    from .catalogue import load_catalogue

    catalogue = load_catalogue()
    out = []
    for f in report.findings:
        if f.data.get("judged") is not False:
            continue
        rule = catalogue.get(f.rule)
        if rule is None or not rule.fix:
            continue
        for flag in _FLAG.findall(str(f.data.get("reason", ""))):
            out.append((f.rule, "--" + flag))
    return tuple(dict.fromkeys(out))


def _tagged(text: str, doc: Document, plan: _Planned) -> bool:
    for e in plan.edits:
        entry = doc.entries.get(tuple(e.path))
        if entry is not None and entry.kind == "scalar" and re.match(
                r"(?:&[^\s]*\s+)*!", text[entry.value.start:entry.value.end]):
            return True
    return False


def _shared(doc: Document, plan: _Planned) -> bool:
    """An edited value that other paths reach too (a YAML alias of the same node)."""
    for e in plan.edits:
        entry = doc.entries.get(tuple(e.path))
        if entry is None:
            continue
        if any(p != tuple(e.path) and other.value == entry.value for p, other in doc.entries.items()):
            return True
    return False


# --------------------------------------------------------------------------- files

_BOM_BYTES = MappingProxyType({
    "utf-8": codecs.BOM_UTF8,
    "utf-16-le": codecs.BOM_UTF16_LE,
    "utf-16-be": codecs.BOM_UTF16_BE,
    "utf-32-le": codecs.BOM_UTF32_LE,
    "utf-32-be": codecs.BOM_UTF32_BE,
})


def encode(src: Source, text: str) -> bytes:
    """Text back to bytes the way the file was: same encoding, BOM kept (newlines are in the text)."""
    body = text.encode(src.encoding)
    return (_BOM_BYTES[src.encoding] if src.bom else b"") + body


class ChangedOnDisk(Exception):
    pass


class WriteRefused(Exception):
    """The file may not be replaced as it is (not writable, other hard links, owner, xattrs)."""


_AT_FDCWD, _RENAME_EXCHANGE = -100, 2


def _exchange(tmp: str, target: str) -> bool:
    """Swap ``tmp`` and ``target`` in one step (Linux renameat2 RENAME_EXCHANGE); False where the
    system or file system cannot."""
    fn = _renameat2()
    if fn is None:
        return False
    import ctypes

    if fn(_AT_FDCWD, os.fsencode(tmp), _AT_FDCWD, os.fsencode(target), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.EXDEV):
        return False
    raise OSError(err, os.strerror(err), target)


@functools.cache
def _renameat2():
    if not sys.platform.startswith("linux"):
        return None
    try:
        import ctypes

        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    return fn


def _exchange_supported(folder: str) -> bool:
    """Whether ``folder`` allows the atomic exchange (for the documentation and tests)."""
    a = tempfile.NamedTemporaryFile(dir=folder, delete=False)
    b = tempfile.NamedTemporaryFile(dir=folder, delete=False)
    a.close()
    b.close()
    try:
        return _exchange(a.name, b.name)
    except OSError:
        return False
    finally:
        for n in (a.name, b.name):
            try:
                os.unlink(n)
            except OSError:
                pass


def _rename(tmp: str, target: str) -> bool:
    """The one step that makes the new file visible (replaced in tests to simulate a crash).

    True when the files were swapped (the old one is now at ``tmp``), False when ``tmp``
    replaced ``target``.
    """
    if _exchange(tmp, target):
        return True
    os.replace(tmp, target)
    return False


def _before_rename(target: str) -> None:
    """Called after the temp file is complete, just before the final re-check (a test hook)."""


def _read_bounded(fd: int) -> bytes:
    chunks, size = [], 0
    while size <= loadmod.MAX_FILE_BYTES:
        chunk = os.read(fd, 1 << 16)
        if not chunk:
            break
        chunks.append(chunk)
        size += len(chunk)
    return b"".join(chunks)


def _state(st: os.stat_result) -> tuple:
    return (st.st_ino, st.st_dev, st.st_size, st.st_mtime_ns)


def check_writable(path: str | Path) -> None:
    """Raise WriteRefused when replacing ``path`` would do more than change its bytes."""
    target = os.path.realpath(path)
    try:
        st = os.stat(target)
    except OSError as exc:
        raise WriteRefused(f"cannot write: {exc.strerror or exc}; the file is unchanged") from None
    if not stat.S_ISREG(st.st_mode):
        raise WriteRefused("not a regular file")
    if st.st_nlink > 1:
        raise WriteRefused(f"the file has {st.st_nlink} hard links; replacing it would split "
                           "them (fix a copy, or remove the other links)")
    if not os.access(target, os.W_OK) or not st.st_mode & 0o222:  # read-only: even for root
        raise WriteRefused(f"the file is read-only or not writable by you "
                           f"(mode {stat.S_IMODE(st.st_mode):04o})")
    if st.st_uid != os.geteuid() and os.geteuid() != 0:
        raise WriteRefused(f"the file belongs to another user (uid {st.st_uid}); replacing it "
                           "would change its owner")
    if not os.access(os.path.dirname(target) or ".", os.W_OK | os.X_OK):
        raise WriteRefused("its folder is not writable, so it cannot be replaced atomically")


def _copy_metadata(src_fd: int, st: os.stat_result, tmp: str) -> None:
    """Mode, group (and owner, as root) and extended attributes of the original onto ``tmp``."""
    os.chmod(tmp, stat.S_IMODE(st.st_mode))
    tst = os.stat(tmp)
    if (tst.st_uid, tst.st_gid) != (st.st_uid, st.st_gid):
        try:
            os.chown(tmp, st.st_uid if os.geteuid() == 0 else -1, st.st_gid)
        except OSError:
            raise WriteRefused(f"cannot keep the file's group (gid {st.st_gid})") from None
        os.chmod(tmp, stat.S_IMODE(st.st_mode))  # chown may clear set-id bits
    if hasattr(os, "listxattr"):
        try:
            names = os.listxattr(src_fd)
        except OSError:
            names = []
        for n in names:
            try:
                value = os.getxattr(src_fd, n)
                try:
                    if os.getxattr(tmp, n) == value:
                        continue  # already there (a security label the folder gives every file)
                except OSError:
                    pass
                os.setxattr(tmp, n, value)
            except OSError as exc:
                raise WriteRefused(f"cannot keep the extended attribute {n} "
                                   f"({exc.strerror or exc})") from None


def atomic_write(path: str | Path, data: bytes, expected: bytes) -> None:
    """Replace ``path`` by ``data`` through a temp file in the same folder.

    What is guaranteed (docs/robustness.md, "Writing"): the file is replaced only if its bytes
    are still ``expected`` when the temp file is complete, re-read just before the rename; mode,
    group, owner and extended attributes stay (or nothing is written: WriteRefused); a write into
    the old file between that re-read and the rename is detected after the rename and the other
    writer's bytes are put back (ChangedOnDisk). On any failure the original stays and the temp
    file is removed.
    """
    target = os.path.realpath(path)  # a symbolic link keeps pointing at the rewritten file
    check_writable(target)
    fd0 = os.open(target, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    try:
        st = os.fstat(fd0)
        if not stat.S_ISREG(st.st_mode) or _read_bounded(fd0) != expected:
            raise ChangedOnDisk("the file changed on disk since it was read; not writing")
        tmp = _temp_beside(target, data)
        try:
            _copy_metadata(fd0, st, tmp)
            _before_rename(target)
            # the final re-check: same file (inode), same bytes, right before the rename
            fd1 = os.open(target, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
            try:
                st1 = os.fstat(fd1)
                if (st1.st_ino, st1.st_dev) != (st.st_ino, st.st_dev) or _read_bounded(fd1) != expected:
                    raise ChangedOnDisk("the file changed on disk while the fix was written; "
                                        "not writing")
                swapped = _rename(tmp, target) is True
                if swapped:  # the file we displaced is now at tmp: was it still the one we checked?
                    shown = os.lstat(tmp)
                    if (shown.st_ino, shown.st_dev) != (st1.st_ino, st1.st_dev):
                        _exchange(tmp, target)  # another program replaced it meanwhile: theirs back
                        raise ChangedOnDisk("another program replaced the file while the fix was "
                                            "written; its version stays and nothing was fixed")
                after = os.fstat(fd1)  # the old file, now displaced: written to in the window?
                if (after.st_size, after.st_mtime_ns) != (st1.st_size, st1.st_mtime_ns):
                    os.lseek(fd1, 0, os.SEEK_SET)
                    theirs = _read_bounded(fd1)
                    _put_back(target, theirs, st)
                    raise ChangedOnDisk("another program wrote to the file while it was being "
                                        "replaced; its version was put back and nothing was fixed")
                if swapped:
                    os.unlink(tmp)
            finally:
                os.close(fd1)
        except BaseException:
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
            raise
    finally:
        os.close(fd0)
    _sync_folder(os.path.dirname(target))


def _temp_beside(target: str, data: bytes) -> str:
    """A new file in the target's folder holding ``data``, flushed to disk (removed on failure)."""
    folder, base = os.path.split(target)
    fd, tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=".cfgcheck-tmp", dir=folder or ".")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return tmp


def _put_back(target: str, data: bytes, st: os.stat_result) -> None:
    tmp = _temp_beside(target, data)
    try:
        os.chmod(tmp, stat.S_IMODE(st.st_mode))
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _sync_folder(folder: str) -> None:
    try:  # make the rename itself durable; not every system lets a folder be opened
        dfd = os.open(folder or ".", os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass


@dataclass
class _Item:
    path: str
    options: Options
    result: FileFix
    src: Source | None = None
    real: str = ""


def _read(path: str | Path) -> tuple[Source | None, FileFix | None]:
    name = str(path)
    try:
        return loadmod.read_source(path), None  # the guarded reader lint uses
    except LoadError as exc:
        return None, FileFix(file=name, problem=InputProblem(file=name, line=exc.line,
                                                             column=exc.column, reason=exc.reason))


def fix_file(path: str | Path, options: Options | None = None, *, training: bool = False,
             halve_batch: int = 0, write: bool = True) -> FileFix:
    return fix_files([(path, options or Options())], training=training, halve_batch=halve_batch,
                     write=write).files[0]


def fix_paths(paths: Iterable[str | Path], options: Options | None = None, *,
              training: bool = False, halve_batch: int = 0, write: bool = True) -> FixReport:
    """Fix files and folders (folders walked as lint walks them), all with the same options."""
    options = options or Options()
    return fix_files([(p, options) for p in engine.expand_paths(paths)], training=training,
                     halve_batch=halve_batch, write=write)


def fix_files(files: Iterable[tuple[str, Options]], *, training: bool = False,
              halve_batch: int = 0, write: bool = True) -> FixReport:
    """Fix each file with its own options (a project's hardware profiles differ per folder).

    A config and the files it links (its DeepSpeed or accelerate file), when both are given, are
    fixed as one group: each is proven against the others' fixed text, and they are written
    together or not at all, whatever order their names come in.
    """
    items: list[_Item] = []
    for path, options in files:
        src, problem = _read(path)
        if problem is not None:
            items.append(_Item(str(path), options, problem))
            continue
        res = fix_text(src.text, str(path), options, training=training, halve_batch=halve_batch)
        items.append(_Item(str(path), options, res, src, os.path.realpath(path)))
    for group in _groups(items):
        _fix_group(group, training=training, halve_batch=halve_batch)
    if write:
        done: set[int] = set()
        for group in _groups(items):
            _write_group(group)
            done.update(id(i) for i in group)
        for item in items:
            if id(item) not in done:
                _write_group([item])
    for item in items:
        _save_evidence(item.result)
    return FixReport(files=[i.result for i in items])


def _groups(items: list[_Item]) -> list[list[_Item]]:
    """Files given together that link each other (union of the links, either direction)."""
    by_real = {i.real: i for i in items if i.src is not None}
    parent = {id(i): id(i) for i in items}

    def root(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for i in items:
        for link in i.result.links:
            j = by_real.get(link)
            if j is not None and j is not i:
                parent[root(id(i))] = root(id(j))
    groups: dict[int, list[_Item]] = {}
    for i in items:
        groups.setdefault(root(id(i)), []).append(i)
    return [g for g in groups.values() if len(g) > 1]


_GROUP_ROUNDS = 4


def _fix_group(group: list[_Item], *, training: bool, halve_batch: int) -> None:
    """Fix linked files against each other's fixed text until nothing moves."""
    members = [i for i in group if i.src is not None]
    old = {i.real: i.src.text for i in members}
    proposed = {i.real: i.result.new_text for i in members}
    for _ in range(_GROUP_ROUNDS):
        moved = False
        for i in members:
            others = {k: v for k, v in proposed.items() if k != i.real}
            res = fix_text(i.src.text, i.path, i.options, training=training, halve_batch=halve_batch,
                           linked_before={k: v for k, v in old.items() if k != i.real},
                           linked_after=others)
            if res.new_text != proposed[i.real]:
                moved = True
            proposed[i.real] = res.new_text
            i.result = res
        if not moved:
            break
    else:
        _undo_group(members, "its fixes and those of the files it is linked with ({names}) do "
                             "not settle; fix them one at a time")
        return
    # a member left unchanged is proven against the others' fixed text here: together, the
    # group must bring no finding that none of them had
    for i in members:
        if proposed[i.real] != old[i.real]:
            continue  # its own proof ran against the others' fixed text
        others_new = {k: v for k, v in proposed.items() if k != i.real}
        if others_new == {k: v for k, v in old.items() if k != i.real}:
            continue
        with links.linked_texts({k: v for k, v in old.items() if k != i.real}):
            before = engine.lint_text(old[i.real], i.path, i.options)
        with links.linked_texts(others_new):
            after = engine.lint_text(old[i.real], i.path, i.options)
        was = _finding_keys(before)
        new = [f for k, f in _finding_keys(after).items()
               if k not in was and f.data.get("judged") is not False]
        if new:
            f = new[0]
            _undo_group(members, "together with the files it is linked with ({names}) it would "
                                 f"bring a new finding in {i.path}: {f.rule} at {f.key or 'the top level'}: "
                                 f"{f.message}")
            return


def _undo_group(members: list[_Item], why: str) -> None:
    """Fix none of the linked files, and say why in each."""
    for i in members:
        names = ", ".join(j.path for j in members if j is not i)
        i.result.notes.append("not fixed: " + why.replace("{names}", names))
        i.result.new_text = i.result.old_text
        i.result.applied = []


def _write_group(group: list[_Item]) -> None:
    """Write every changed member, or none: checked first, rolled back if a later one fails."""
    todo = [i for i in group if i.src is not None and i.result.changed]
    if not todo:
        return
    broken = [i for i in group if i.result.error is not None or i.result.problem is not None]
    if broken and len(group) > 1:
        for i in todo:
            i.result.refused = (f"the linked file {broken[0].path} could not be fixed, and "
                                "linked files are fixed together or not at all")
        return
    data = {}
    for i in todo:
        data[id(i)] = encode(i.src, i.result.new_text)
        try:
            check_writable(i.path)
        except WriteRefused as exc:
            i.result.refused = str(exc)
    refused = [i for i in todo if i.result.refused]
    if refused:
        for i in todo:
            if not i.result.refused:
                i.result.refused = (f"the linked file {refused[0].path} cannot be written, and "
                                    "linked files are fixed together or not at all")
        return
    written: list[_Item] = []
    for i in todo:
        expected = encode(i.src, i.src.text)
        if data[id(i)] == expected:
            continue
        try:
            atomic_write(i.path, data[id(i)], expected)
        except (ChangedOnDisk, WriteRefused) as exc:
            i.result.refused = str(exc)
        except OSError as exc:
            i.result.refused = f"cannot write: {exc.strerror or exc}; the file is unchanged"
        if i.result.refused:
            for j in written:  # put the linked files written so far back as they were
                try:
                    atomic_write(j.path, encode(j.src, j.src.text), data[id(j)])
                    j.result.written = False
                    j.result.refused = (f"written, then put back: the linked file {i.path} could "
                                        "not be written")
                except (ChangedOnDisk, WriteRefused, OSError):
                    j.result.notes.append(f"the linked file {i.path} could not be written; this "
                                          "one was, and could not be put back")
            for j in todo:
                if j is not i and not j.result.written and not j.result.refused:
                    j.result.refused = f"the linked file {i.path} could not be written"
            return
        i.result.written = True
        written.append(i)


def _save_evidence(result: FileFix) -> None:
    """A failed proof is a bug in cfgcheck: keep what it saw for the bug report."""
    ev = result.evidence
    if ev is None or result.evidence_file is not None:
        return
    body = (f"cfgcheck fix: a rewrite failed its safety proof; nothing was written.\n"
            f"file: {ev['file']}\ncheck: {ev['check']}\nreason: {ev['reason']}\n"
            f"rules: {', '.join(ev['rules'])}\n\n"
            f"===== before =====\n{ev['before']}\n===== after (not written) =====\n{ev['after']}\n")
    try:
        fd, where = tempfile.mkstemp(prefix="cfgcheck-proof-", suffix=".txt")
        with os.fdopen(fd, "w", encoding="utf-8", errors="backslashreplace") as fh:
            fh.write(body)
    except OSError:
        return
    result.evidence_file = where
    if result.error is not None:
        result.error = InternalError(file=result.error.file, rule=result.error.rule,
                                     error=f"{result.error.error}; evidence for a bug report "
                                           f"saved in {where}")


# --------------------------------------------------------------------------- the summary

TRAINING_OPTION = "--allow-training-changes"


def summary_text(report: FixReport, *, dry: bool) -> str:
    """Per file and rule: what was (or, when ``dry``, would be) fixed, withheld or refused."""
    from .findings import printable as P  # a key or file name never starts a line of its own

    verb = "would fix" if dry else "fixed"
    lines: list[str] = []
    fixes = withheld = 0
    for f in report.files:
        if f.problem is not None:
            p = f.problem
            lines.append(f"{P(p.file)}:{p.line}:{p.column}: input error: {P(p.reason)} (not fixing)")
            continue
        if f.error is not None:
            lines.append(f"{P(f.file)}: internal error in the fix for {f.error.rule}: {P(f.error.error)}"
                         " (a bug in cfgcheck)")
            continue
        body = []
        if f.changed:
            for a in f.applied:
                body.append(f"    {verb}: {P(a.summary)} [{a.rule}]")
            fixes += len(f.applied)
        for a in f.withheld:
            body.append(f"    left as is (changes training, {TRAINING_OPTION}): {P(a.summary)} [{a.rule}]")
        withheld += len(f.withheld)
        for n in f.notes:
            body.append(f"    note: {P(n)}")
        if f.refused:
            body.append(f"    not written: {P(f.refused)}")
        if not body:
            continue
        if f.changed:
            head = f"{P(f.file)}: {len(f.applied)} fix{'es' if len(f.applied) != 1 else ''}"
        elif f.refused:
            head = f"{P(f.file)}: {len(f.applied)} fix{'es' if len(f.applied) != 1 else ''} not written"
        elif f.withheld:
            head = (f"{P(f.file)}: no fix applied; {len(f.withheld)} left that change training "
                    f"({TRAINING_OPTION})")
        elif any(a.rule for a in f.applied) or f.notes:
            head = f"{P(f.file)}: no fix applied"
        else:
            head = f"{P(f.file)}: nothing to fix"
        if f.written:
            head += ", written"
        lines.append(head)
        lines.extend(body)
    needs: dict[tuple[str, str], int] = {}
    for f in report.files:
        for k in f.needs:
            needs[k] = needs.get(k, 0) + 1
    for (rule, flag), n in needs.items():
        lines.append(f"note: {rule} could not judge {n} file{'s' if n != 1 else ''} without "
                     f"{flag}, so it proposed no fix there; pass {_FLAG_ARG.get(flag, flag)}")
    changed = len(report.changed)
    tail = (f"cfgcheck fix: {len(report.files)} file{'s' if len(report.files) != 1 else ''} read; "
            f"{changed} {'would change' if dry else 'changed'} ({fixes} fix{'es' if fixes != 1 else ''})")
    if withheld:
        tail += f"; {withheld} left that change training (apply with {TRAINING_OPTION})"
    if report.problems:
        tail += f"; {len(report.problems)} unreadable"
    if report.errors:
        tail += f"; {len(report.errors)} refused by the safety proof"
    if report.refused:
        tail += f"; {len(report.refused)} not written"
    lines.append(tail)
    return "\n".join(lines) + "\n"
