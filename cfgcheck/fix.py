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
import json
import os
import re
import stat
import tempfile
from dataclasses import dataclass, field
from decimal import Decimal
from pathlib import Path
from typing import Any, Iterable

import yaml

from . import engine
from . import load as loadmod
from .engine import Options
from .findings import Edit, Finding, InputProblem, InternalError, Severity
from .load import Document, Entry, LoadError, Source, dotted

KEEPS_MEANING = "keeps-meaning"
CHANGES_TRAINING = "changes-training"
TIERS = (KEEPS_MEANING, CHANGES_TRAINING)
BATCH_SPLIT = "batch-split"  # the label of the user-requested halving (not a rule of the catalogue)

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

    @property
    def changed(self) -> bool:
        return self.error is None and self.problem is None and self.new_text != self.old_text

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


def _halving(view, document: int) -> tuple[_Planned | None, str | None]:
    """Halve the per-device batch and double accumulation: the effective batch stays the same."""
    pd, ga = view.get("batch.per_device"), view.get("batch.accumulation")
    if pd is None:
        return None, "no per-device batch size is set"
    if pd.auto or not isinstance(pd.value, int) or isinstance(pd.value, bool):
        return None, f"{pd.key} is not a whole number ({pd.written!r})"
    if pd.value < 2 or pd.value % 2:
        return None, (f"{pd.key} {pd.value} is odd: halving it would change the effective batch")
    edits = [Edit(path=pd.path, old=pd.written, new=pd.value // 2)]
    if ga is None:
        edits.append(Edit(path=pd.path[:-1] + ("gradient_accumulation_steps",), old=None, new=2,
                          insert=True, after=pd.path))
        ga_text = "gradient_accumulation_steps: added as 2"
    elif ga.auto or not isinstance(ga.value, int) or isinstance(ga.value, bool):
        return None, f"{ga.key} is {ga.written!r}, not a whole number: cannot double it"
    else:
        edits.append(Edit(path=ga.path, old=ga.written, new=ga.value * 2))
        ga_text = f"{ga.key}: {ga.value} -> {ga.value * 2}"
    summary = (f"{pd.key}: {pd.value} -> {pd.value // 2}, {ga_text} "
               f"(per-device × accumulation stays {pd.value * (ga.value if ga else 1)})")
    return _Planned(BATCH_SPLIT, pd.key, summary, CHANGES_TRAINING, tuple(edits), document, None), None


def _plan(report, *, training: bool,
          halve_batch: bool) -> tuple[list[_Planned], list[Applied], list[str]]:
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
            item, why = _halving(view, view.doc.index)
            if item is not None:
                planned.append(item)
            else:
                notes.append(why)
    # value changes first: a keeps-meaning rewrite of the same value is then already covered
    planned.sort(key=lambda p: p.tier != CHANGES_TRAINING)
    return planned, withheld, notes


# --------------------------------------------------------------------------- rendering values

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
    member = "," + gap + _render_key(key, fmt, akey_raw) + colon + rendered
    end = idx.end(anchor)
    return [_TextEdit(end, end, member, rule)]


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
    """None when every line the edits do not touch is byte-identical in ``new``; else why not."""
    starts = [0] + [m.end() for m in re.finditer("\n", old)]
    touched: set[int] = set()
    for e in edits:
        first = _line_of(starts, e.start)
        last = _line_of(starts, max(e.start, e.end - 1))
        touched.update(range(first, last + 1))
        if e.start == e.end:
            touched.add(first - 1)  # an insertion at a line start sits after the line before
    # lines end at "\n" only, as ``starts`` counts them (str.splitlines also breaks at \x85,
    # \u2028, \x0c..., which would shift every line number after one inside a quoted value)
    a, b = _LINE.findall(old), _LINE.findall(new)
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, a, b, autojunk=False).get_opcodes():
        if tag == "equal":
            continue
        lines = range(i1, i2) if i2 > i1 else range(i1 - 1, i1 + 1)
        if tag == "insert":
            if not any(n in touched for n in lines):
                return f"a line was inserted after line {i1} away from every edit"
        elif any(n not in touched for n in lines):
            bad = next(n for n in lines if n not in touched)
            return f"line {bad + 1} changed but no edit touches it"
    return None


def _finding_key(f: Finding) -> tuple:
    return (f.rule, f.document, tuple(f.path), f.data.get("variant"), f.data.get("reason"))


def _prove(old_text: str, new_text: str, name: str, fmt: str, old_docs: list[Document],
           plans: list[_Planned], edits: list[_TextEdit], before, options: Options) -> list[str]:
    """Raise ProofFailed unless the rewrite is exactly what the plans intend; return notes."""
    rules = [p.rule for p in plans]
    notes: list[str] = []
    try:
        new_docs = loadmod.load_text(new_text, name, fmt)
    except LoadError as exc:
        raise ProofFailed(f"the fixed text does not parse: {exc.reason} at {exc.line}:{exc.column}",
                          rules) from None
    if len(new_docs) != len(old_docs):
        raise ProofFailed(f"{len(old_docs)} documents became {len(new_docs)}", rules)
    for old_doc, new_doc in zip(old_docs, new_docs):
        mine = [p for p in plans if p.document == old_doc.index]
        intended: dict[tuple, tuple[Any, str]] = {}
        for p in mine:
            for e in p.edits:
                intended[tuple(e.path)] = (e.new, p.rule)
        for path, (value, rule) in intended.items():
            got = new_doc.get(path, _MISSING)
            if _diff_paths(value, got):
                raise ProofFailed(f"{dotted(path)} reads back as {got!r}, not {value!r}", [rule])
        for path in _diff_paths(old_doc.data, new_doc.data):
            if any(path[:len(ip)] == ip for ip in intended):
                continue
            # a value with no text of its own (an alias, or merged with <<) that follows an edit
            copy = next((ip for ip in intended if _follows(old_doc, new_doc, path, ip,
                                                           intended[ip][0])), None)
            if copy is None:
                raise ProofFailed(f"{dotted(path) or 'the document'} changed but no fix meant to change it",
                                  rules)
            notes.append(f"{dotted(path)} follows {dotted(copy)} (a YAML alias or merge), "
                         "so it changed too")
    if fmt == "yaml":
        if yaml_comments(old_text) != yaml_comments(new_text):
            raise ProofFailed("the comments are not the same, in the same order", rules)
    why = _outside_lines_identical(old_text, new_text, edits)
    if why:
        raise ProofFailed(why, rules)
    after = engine.lint_text(new_text, name, options, fmt)
    if after.problem is not None or after.internal:
        raise ProofFailed("the fixed text does not lint cleanly: "
                          + (after.problem.reason if after.problem else after.internal[0].error), rules)
    before_keys = {_finding_key(f) for f in before.findings}
    after_keys = {_finding_key(f): f for f in after.findings}
    for p in plans:
        if p.finding is not None and _finding_key(p.finding) in after_keys:
            raise ProofFailed(f"the finding at {p.key or 'the top level'} is still there after the fix",
                              [p.rule])
    for k, f in after_keys.items():
        # info findings are notes (what a rule could not judge), not defects a fix could bring
        if k not in before_keys and f.severity >= Severity.WARNING:
            raise NewFinding(f"the fix brings a new finding: {f.rule} at {f.key}: {f.message}", rules)
    return notes


_MISSING = object()


def _follows(old_doc: Document, new_doc: Document, path: tuple, edited: tuple, value: Any) -> bool:
    """``path`` holds no text of its own (alias or merge) and changed exactly as ``edited`` did."""
    if _diff_paths(new_doc.get(path, _MISSING), value):
        return False
    if _diff_paths(old_doc.get(path, _MISSING), old_doc.get(edited, _MISSING)):
        return False
    own, source = old_doc.entries.get(path), old_doc.entries.get(edited)
    return own is None or (source is not None and own.value == source.value)


# --------------------------------------------------------------------------- the pure core

def fix_text(text: str, name: str = "<text>", options: Options | None = None, *,
             fmt: str | None = None, training: bool = False,
             halve_batch: bool = False) -> FileFix:
    """Fix a decoded text in memory. Never raises for bad input: see FileFix.problem / .error."""
    options = options or Options()
    fmt = fmt or loadmod.guess_format(name, text)
    result = FileFix(file=name, old_text=text, new_text=text)
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
    docs = [v.doc for v in before.views]
    planned, result.withheld, result.notes = _plan(before, training=training,
                                                   halve_batch=halve_batch)
    if not planned:
        return result
    indexes = {d.index: _DocIndex(d) for d in docs}
    by_index = {d.index: d for d in docs}
    accepted: list[_Planned] = []
    edits: list[_TextEdit] = []
    taken: dict[tuple, tuple[Any, str]] = {}  # (document, path) -> (new value, rule)
    for plan in planned:
        doc = by_index[plan.document]
        keys = [(plan.document, tuple(e.path)) for e in plan.edits]
        clash = [k for k in keys if k in taken]
        if clash:
            if plan.tier == KEEPS_MEANING and all(k in taken for k in keys):
                owner = taken[clash[0]][1]
                result.applied.append(Applied(plan.rule, plan.key,
                                              f"{plan.summary} (covered by the {owner} fix)",
                                              plan.tier, ()))
                accepted.append(_Planned(plan.rule, plan.key, plan.summary, plan.tier, (),
                                         plan.document, plan.finding))
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
        mine = [m for m in mine if not any((m.start, m.end, m.text) == (e.start, e.end, e.text)
                                           for e in edits)]
        overlap = [m for m in mine if any(m.start < e.end and e.start < m.end for e in edits)]
        if overlap:
            result.notes.append(f"{plan.rule} at {plan.key}: not applied, it would rewrite text "
                                "another fix already rewrites")
            continue
        accepted.append(plan)
        edits.extend(mine)
        for k, e in zip(keys, plan.edits):
            taken[k] = (e.new, plan.rule)
        result.applied.append(Applied(plan.rule, plan.key, plan.summary, plan.tier,
                                      tuple(dotted(e.path) for e in plan.edits)))
    if not edits:
        return result
    failure: ProofFailed | None = None
    while True:
        try:
            new_text = _apply(text, edits)
            result.notes.extend(_prove(text, new_text, name, fmt, docs, accepted, edits, before,
                                       options))
            break
        except NewFinding as exc:
            # a consequence of the change, not a bug: leave out the fixes that cause it, say
            # why, and prove the rest again
            bad = set(_culprits(text, name, fmt, docs, accepted, edits, before, options)) \
                or {p.rule for p in accepted}
            for plan in accepted:
                if plan.rule in bad:
                    result.notes.append(f"{plan.rule} at {plan.key}: not applied, {exc.reason}")
            accepted = [p for p in accepted if p.rule not in bad]
            edits = [e for e in edits if e.rule not in bad]
            result.applied = [a for a in result.applied if a.rule not in bad]
            if not edits:
                return result
        except ProofFailed as exc:
            failure = exc
            break
    if failure is not None:
        exc = failure
        rules = exc.rules or tuple(p.rule for p in accepted)
        if len(accepted) > 1 and len(set(rules)) > 1:
            rules = _culprits(text, name, fmt, docs, accepted, edits, before, options) or rules
        result.error = InternalError(
            file=name, rule=", ".join(dict.fromkeys(rules)),
            error=f"the fix did not pass the safety proof ({exc.reason}); nothing saved")
        result.applied = []
        return result
    if new_text == text:
        return result
    result.new_text = new_text
    return result


def _culprits(text, name, fmt, docs, accepted, edits, before, options) -> tuple[str, ...]:
    """Prove each fix alone to name the one(s) that fail."""
    bad = []
    for plan in accepted:
        mine = [e for e in edits if e.rule == plan.rule]
        try:
            _prove(text, _apply(text, mine), name, fmt, docs,
                   [p for p in accepted if p.rule == plan.rule], mine, before, options)
        except ProofFailed:
            bad.append(plan.rule)
    return tuple(dict.fromkeys(bad))


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

_BOM_BYTES = {
    "utf-8": codecs.BOM_UTF8,
    "utf-16-le": codecs.BOM_UTF16_LE,
    "utf-16-be": codecs.BOM_UTF16_BE,
    "utf-32-le": codecs.BOM_UTF32_LE,
    "utf-32-be": codecs.BOM_UTF32_BE,
}


def encode(src: Source, text: str) -> bytes:
    """Text back to bytes the way the file was: same encoding, BOM kept (newlines are in the text)."""
    body = text.encode(src.encoding)
    return (_BOM_BYTES[src.encoding] if src.bom else b"") + body


class ChangedOnDisk(Exception):
    pass


def _rename(tmp: str, target: str) -> None:
    """The one step that makes the new file visible (replaced in tests to simulate a crash)."""
    os.replace(tmp, target)


def atomic_write(path: str | Path, data: bytes, expected: bytes) -> None:
    """Write ``data`` to ``path`` through a temp file in the same folder, keeping its mode.

    Refuses (ChangedOnDisk) when the file's bytes are no longer ``expected``. On any failure the
    original stays as it was and the temp file is removed.
    """
    target = os.path.realpath(path)  # a symbolic link keeps pointing at the rewritten file
    with open(target, "rb") as fh:
        if fh.read() != expected:
            raise ChangedOnDisk("the file changed on disk since it was read; not writing")
    mode = stat.S_IMODE(os.stat(target).st_mode)
    folder, base = os.path.split(target)
    fd, tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=".cfgcheck-tmp", dir=folder or ".")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        _rename(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    try:  # make the rename itself durable; not every system lets a folder be opened
        dfd = os.open(folder or ".", os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass


def fix_file(path: str | Path, options: Options | None = None, *, training: bool = False,
             halve_batch: bool = False, write: bool = True) -> FileFix:
    name = str(path)
    try:
        try:
            raw = Path(path).read_bytes()
        except OSError as exc:
            loadmod.read_source(path)  # names the reason (folder, missing, permission) ...
            raise LoadError(f"cannot read: {exc.strerror or exc}") from None  # ... or this
        src = loadmod.decode(raw, name)
    except LoadError as exc:
        return FileFix(file=name, problem=InputProblem(file=name, line=exc.line, column=exc.column,
                                                       reason=exc.reason))
    result = fix_text(src.text, name, options, training=training, halve_batch=halve_batch)
    if not result.changed or not write:
        return result
    data = encode(src, result.new_text)
    if data == raw:
        return result
    try:
        atomic_write(path, data, raw)
    except ChangedOnDisk as exc:
        result.refused = str(exc)
        return result
    except OSError as exc:
        result.refused = f"cannot write: {exc.strerror or exc}; the file is unchanged"
        return result
    result.written = True
    return result


def fix_paths(paths: Iterable[str | Path], options: Options | None = None, *,
              training: bool = False, halve_batch: bool = False, write: bool = True) -> FixReport:
    """Fix files and folders (folders walked as lint walks them), all with the same options."""
    options = options or Options()
    return fix_files([(p, options) for p in engine.expand_paths(paths)], training=training,
                     halve_batch=halve_batch, write=write)


def fix_files(files: Iterable[tuple[str, Options]], *, training: bool = False,
              halve_batch: bool = False, write: bool = True) -> FixReport:
    """Fix each file with its own options (a project's hardware profiles differ per folder)."""
    return FixReport(files=[fix_file(p, o, training=training, halve_batch=halve_batch,
                                     write=write) for p, o in files])


# --------------------------------------------------------------------------- the summary

TRAINING_OPTION = "--allow-training-changes"


def summary_text(report: FixReport, *, dry: bool) -> str:
    """Per file and rule: what was (or, when ``dry``, would be) fixed, withheld or refused."""
    verb = "would fix" if dry else "fixed"
    lines: list[str] = []
    fixes = withheld = 0
    for f in report.files:
        if f.problem is not None:
            p = f.problem
            lines.append(f"{p.file}:{p.line}:{p.column}: input error: {p.reason} (not fixing)")
            continue
        if f.error is not None:
            lines.append(f"{f.file}: internal error in the fix for {f.error.rule}: {f.error.error}"
                         " (a bug in cfgcheck)")
            continue
        body = []
        if f.changed:
            for a in f.applied:
                body.append(f"    {verb}: {a.summary} [{a.rule}]")
            fixes += len(f.applied)
        for a in f.withheld:
            body.append(f"    left as is (changes training, {TRAINING_OPTION}): {a.summary} [{a.rule}]")
        withheld += len(f.withheld)
        for n in f.notes:
            body.append(f"    note: {n}")
        if f.refused:
            body.append(f"    not written: {f.refused}")
        if not body:
            continue
        head = f"{f.file}: " + (f"{len(f.applied)} fix{'es' if len(f.applied) != 1 else ''}"
                                if f.changed else "nothing to fix")
        if f.written:
            head += ", written"
        lines.append(head)
        lines.extend(body)
    changed = len(report.changed)
    tail = (f"cfgcheck fix: {len(report.files)} file{'s' if len(report.files) != 1 else ''} read; "
            f"{changed} {'would change' if dry else 'changed'} ({fixes} fix{'es' if fixes != 1 else ''})")
    if withheld:
        tail += f"; {withheld} left that change training (apply with {TRAINING_OPTION})"
    if report.problems:
        tail += f"; {len(report.problems)} unreadable"
    if report.errors:
        tail += f"; {len(report.errors)} refused by the safety proof"
    lines.append(tail)
    return "\n".join(lines) + "\n"
