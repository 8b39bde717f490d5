"""Output written file by file: each section of a format in a ``Spool``, joined at the end.

Every format puts its sections in an order that is not the files' order (text and GitHub print
all input errors before the first finding; JSON lists the files after the findings; SARIF
describes the invocation, which says whether a rule failed, before its results), so a run that
must not hold its reports writes each report's pieces into the section they belong to as the
report arrives, and the output is those sections in order once the last file is done. A spool
keeps its first ``MEMORY_LIMIT`` characters in memory and the rest in an anonymous temporary
file (where none can be made, in memory): the memory of a run stays flat however many files it
lints, and nothing reaches the output before the run is complete (a run that fails half way
prints no half document).

JSON documents are written the same way: ``JsonItems`` holds the items of one list, each
already indented for its place, and ``json_document`` writes a skeleton with the lists spliced
in, byte for byte what ``findings.json_text`` gives for the whole document.
"""

from __future__ import annotations

from typing import Any, Callable, Iterator

from ..findings import escape_surrogates as _escape_surrogates, json_text

MEMORY_LIMIT = 64 * 1024  # characters a spool keeps in memory before it moves to a file
READ_SIZE = 64 * 1024  # characters read back at a time


class Spool:
    """Text appended in pieces and read back once, in order."""

    __slots__ = ("_parts", "_size", "_file", "pieces_written")

    def __init__(self) -> None:
        self._parts: list[str] = []
        self._size = 0
        self._file: Any = None
        self.pieces_written = 0

    def write(self, text: str) -> None:
        self.pieces_written += 1
        if self._file is not None:
            self._file.write(text)
            return
        self._parts.append(text)
        self._size += len(text)
        if self._size > MEMORY_LIMIT:
            self._move_to_file()

    def _move_to_file(self) -> None:
        import tempfile

        try:  # text with lone surrogates (file names that are not UTF-8) reads back unchanged
            f = tempfile.TemporaryFile("w+", encoding="utf-8", errors="surrogatepass", newline="")
            f.write("".join(self._parts))
        except OSError:  # no temporary folder to write in: the spool stays in memory
            self._size = -(1 << 62)
            return
        self._parts, self._size, self._file = [], 0, f

    def __bool__(self) -> bool:
        return self.pieces_written > 0

    def read(self) -> Iterator[str]:
        """The text written, in pieces of at most about READ_SIZE characters."""
        if self._file is None:
            if self._parts:
                yield "".join(self._parts)
            return
        self._file.flush()
        self._file.seek(0)
        while True:
            piece = self._file.read(READ_SIZE)
            if not piece:
                return
            yield piece

    def close(self) -> None:
        self._parts = []
        if self._file is not None:
            self._file.close()
            self._file = None


# --------------------------------------------------------------------------- JSON items

# The items of a JSON output are written by ``indented`` below, not by ``json.dumps``: with an
# indent, the standard library encodes in pure Python (its C encoder only writes unindented
# JSON), which was most of the time a JSON or SARIF output took. ``indented`` lays out the
# plain values an output holds (str, int, float, bool, None, list, tuple, dict) byte for byte
# as ``findings.json_text`` does; any other value goes to ``json_text`` itself.
_INF = float("inf")
_string: Callable[[str], str] = None  # type: ignore[assignment]  # json's string writer, on first use


def _load_string_writer() -> None:
    global _string
    from json.encoder import encode_basestring  # the C encoder's own, where it is built

    _string = encode_basestring
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


def indented(value: Any, pad: str = "") -> str:
    """``findings.json_text(value)`` with every line after the first starting with PAD: the
    text of a value nested at PAD's indentation of a document ``json_text`` writes."""
    if _string is None:
        _load_string_writer()
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
        if _string is None:
            _load_string_writer()

    def add(self, item: Any) -> None:
        pad = self.pad
        text = _value_text(item, pad)
        if not text.isascii():
            text = _escape_surrogates(text)
        self.spool.write((",\n" if self.spool else "") + pad + text)

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
