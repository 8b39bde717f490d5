"""Span edits: every edit of a fix becomes the replacement of one character span of the decoded
text (a scalar's source text, the end of a list, a new line or member next to a sibling key), at
its indentation and in its style. Nothing outside those spans is touched, so comments, quoting,
flow style, anchors, blank lines and line endings stay as they were."""

from __future__ import annotations

import bisect
import re
from typing import Any

from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr
from ..findings import Edit
from ..load import Document, Entry, dotted
from .results import ProofFailed, _Planned
from .values import _render, _render_key, _Unplaceable


_MISSING = object()  # what a document holds at a path it does not have
_COMMENT_PAD = re.compile(r"( {2,})#")
_PROPS = re.compile(r"[&!][^\s,\[\]{}]*\s+")


class _TextEdit:
    """One replacement of text (a record class written out: ``cfgcheck._records``)."""

    start: int
    end: int
    text: str
    rule: str
    plan: int  # id() of the _Planned it belongs to

    __slots__ = ('start', 'end', 'text', 'rule', 'plan',)

    def __init__(self, start, end, text, rule, plan=0):
        _setattr(self, 'start', start)
        _setattr(self, 'end', end)
        _setattr(self, 'text', text)
        _setattr(self, 'rule', rule)
        _setattr(self, 'plan', plan)

    def __repr__(self):
        return f"{type(self).__qualname__}(start={self.start!r}, end={self.end!r}, text={self.text!r}, rule={self.rule!r}, plan={self.plan!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.start, self.end, self.text, self.rule, self.plan) == (other.start, other.end, other.text, other.rule, other.plan)
        return NotImplemented

    def __hash__(self):
        return hash((self.start, self.end, self.text, self.rule, self.plan))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.start, self.end, self.text, self.rule, self.plan)

    __setstate__ = _frozen_setstate


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


def _overlaps(starts: list[tuple[int, int]], m: _TextEdit) -> bool:
    i = bisect.bisect_left(starts, (m.start, -1))
    for j in (i - 1, i):
        if 0 <= j < len(starts):
            s, e = starts[j]
            if m.start < e and s < m.end:
                return True
    return False
