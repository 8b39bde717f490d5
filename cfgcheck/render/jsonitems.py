"""JSON documents written file by file: ``JsonItems`` holds the items of one list in a
``spool.Spool``, each already indented for its place, and ``json_document`` writes a skeleton
with the lists spliced in, byte for byte what ``findings.json_text`` gives for the whole
document.
"""

from __future__ import annotations

from json.encoder import encode_basestring as _string  # the C encoder's own, where it is built
from typing import Any, Callable

from ..findings import _plain, escape_surrogates as _escape_surrogates, json_text
from .spool import Spool

# The items of a JSON output are written by ``indented`` below, not by ``json.dumps``: with an
# indent, the standard library encodes in pure Python (its C encoder only writes unindented
# JSON), which was most of the time a JSON or SARIF output took. ``indented`` lays out the
# plain values an output holds (str, int, float, bool, None, list, tuple, dict) byte for byte
# as ``findings.json_text`` does; any other value goes to ``json_text`` itself.
_INF = float("inf")
_int_text = int.__repr__
_float_repr = float.__repr__


def _float_text(value: float) -> str:
    if value != value:
        return "NaN"
    if value == _INF:
        return "Infinity"
    if value == -_INF:
        return "-Infinity"
    return _float_repr(value)


def _key_text(key: Any) -> str:
    """A dict key as ``json.dumps`` writes it (keys that are not strings converted as it does)."""
    if isinstance(key, str):
        return _string(key)
    if isinstance(key, float):
        return _string(_float_text(key))
    if key is True:
        return '"true"'
    if key is False:
        return '"false"'
    if key is None:
        return '"null"'
    if isinstance(key, int):
        return _string(_int_text(key))
    raise TypeError(f"keys must be str, int, float, bool or None, not {key.__class__.__name__}")


def _value_text(value: Any, pad: str) -> str:
    """VALUE as ``json.dumps(value, indent=2, ensure_ascii=False)`` writes it, each line after
    the first starting with PAD (the indentation of the line VALUE starts on)."""
    t = type(value)
    if t is str:
        return _string(value)
    if t is dict:
        if not value:
            return "{}"
        inner = pad + "  "
        parts = []
        for k, v in value.items():
            tv = type(v)
            if tv is str:
                v = _string(v)
            elif tv is int:
                v = _int_text(v)
            elif v is None:
                v = "null"
            else:
                v = _value_text(v, inner)
            parts.append((_string(k) if type(k) is str else _key_text(k)) + ": " + v)
        return "{\n" + inner + (",\n" + inner).join(parts) + "\n" + pad + "}"
    if t is list or t is tuple:
        if not value:
            return "[]"
        inner = pad + "  "
        parts = [_string(v) if type(v) is str else _value_text(v, inner) for v in value]
        return "[\n" + inner + (",\n" + inner).join(parts) + "\n" + pad + "]"
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    if t is int:
        return _int_text(value)
    if t is float:
        return _float_text(value)
    # a subclass of a plain type, or a value json.dumps refuses: the standard library decides
    return json_text(value).replace("\n", "\n" + pad)  # JSON strings hold no raw line break


def text_of(value: Any, pad: str) -> str:
    """``_value_text`` with a string's own quick path (a field that is nearly always text)."""
    return _string(value) if type(value) is str else _value_text(value, pad)


def data_text(data: Any, pad: str) -> str:
    """The text ``_value_text`` gives for a finding's ``as_dict()["data"]``, written straight
    from the finding's data (its plain values, the common case, as they are)."""
    if not data:
        return "{}"
    inner = pad + "  "
    between = ",\n" + inner
    text = "{\n" + inner
    first = True
    for k, v in data.items():
        t = type(v)
        if t is str:
            v = _string(v)
        elif t is int:
            v = _int_text(v)
        elif t is float:
            v = _float_text(v)
        elif v is None:
            v = "null"
        elif t is bool:
            v = "true" if v else "false"
        else:
            v = _value_text(_plain(v), inner)
        k = _string(k) if type(k) is str else _key_text(k)
        if first:
            text = f"{text}{k}: {v}"
            first = False
        else:
            text = f"{text}{between}{k}: {v}"
    return f"{text}\n{pad}}}"


def indented(value: Any, pad: str = "") -> str:
    """``findings.json_text(value)`` with every line after the first starting with PAD: the
    text of a value nested at PAD's indentation of a document ``json_text`` writes."""
    text = _value_text(value, pad)
    if not text.isascii():
        text = _escape_surrogates(text)
    return text


class JsonItems:
    """The items of one JSON list, at a known indentation (the list's key at ``indent`` spaces,
    its items two further), as ``json.dumps(..., indent=2)`` lays them out."""

    __slots__ = ("spool", "pad")

    def __init__(self, indent: int) -> None:
        self.spool = Spool()
        self.pad = " " * (indent + 2)

    def add(self, item: Any) -> None:
        pad = self.pad
        text = _value_text(item, pad)
        if not text.isascii():
            text = _escape_surrogates(text)
        self.spool.write((",\n" if self.spool else "") + pad + text)

    def add_text(self, text: str) -> None:
        """An item already written as ``_value_text(item, self.pad)`` writes it."""
        if not text.isascii():
            text = _escape_surrogates(text)
        self.spool.write((",\n" if self.spool else "") + self.pad + text)

    def close(self) -> None:
        self.spool.close()


_MARK = "\x00cfgcheck spooled list {}\x00"


def json_document(doc: dict, lists: dict[str, list[JsonItems]], write: Callable[[str], None]) -> None:
    """Write ``json_text(doc)`` with each value ``doc`` holds as ``spooled(name)`` replaced by
    the concatenation of ``lists[name]`` (a list of item holders, joined in order)."""
    import json

    text = json_text(doc)
    for name, holders in lists.items():
        marker = json.dumps(_MARK.format(name), ensure_ascii=False)
        head, found, text = text.partition(marker)
        if not found:
            raise ValueError(f"no place for the list {name!r} in the document")
        write(head)
        filled = [h for h in holders if h.spool]
        if not filled:
            write("[]")
            continue
        outer = filled[0].pad[:-2]
        write("[\n")
        for i, h in enumerate(filled):
            if i:
                write(",\n")
            for piece in h.spool.read():
                write(piece)
        write("\n" + outer + "]")
    write(text + "\n")


def spooled(name: str) -> str:
    """The placeholder of a spooled list in a skeleton document (see ``json_document``)."""
    return _MARK.format(name)
