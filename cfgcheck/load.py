"""Bytes to documents: plain values plus, for every key and value, where it stands in the text.

YAML goes through PyYAML's composer (the C one when libyaml is present) so that every node keeps
its marks; we build the values ourselves, which lets us

* never construct an object from a tag (a tag is recorded and ignored),
* see duplicate keys, which PyYAML's own constructor silently drops,
* see plain scalars whose type depends on the YAML version (``1e-4``, ``yes``, ``0777``),
* bound alias expansion and nesting depth.

JSON goes through the standard library's parser (strict: no NaN, no duplicate keys lost) and a
small scanner that records positions once the text is known to be valid.
"""

from __future__ import annotations

import bisect
import codecs
import operator
import os
import re
import stat
from pathlib import Path
from types import MappingProxyType
from typing import Any, Iterable

import yaml

from ._patterns import later
from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from . import reads
from .memo import remembered


def _libyaml_nests_safely() -> bool:
    """libyaml 0.2.5 and later refuse nesting past 1,000 levels; older ones recurse in C."""
    try:
        from yaml import _yaml  # type: ignore[attr-defined]

        return tuple(_yaml.get_version()) >= (0, 2, 5)
    except (ImportError, AttributeError):  # pragma: no cover - depends on how PyYAML was built
        return False


if _libyaml_nests_safely():  # the C composer is several times faster; the pure one gives the same nodes
    from yaml import CSafeLoader as _SafeLoader
else:  # pragma: no cover - the pure composer recurses in Python, which RecursionError bounds
    from yaml import SafeLoader as _SafeLoader  # type: ignore[assignment]

_RESOLVED_MAX = 8192  # plain scalars whose tag is remembered (a hostile file cannot grow it past)


class _YamlLoader(_SafeLoader):  # type: ignore[misc, valid-type]
    """The safe loader's composer with its resolver's per-node work cut down, same nodes.

    A plain scalar's tag depends on its text alone (the safe loader has no path resolvers), so
    the tag found for a text is remembered for the run: configs repeat their keys and values.
    With no path resolvers, descending into and out of a node records nothing."""

    _resolved: dict[str, str] = {}

    def resolve(self, kind, value, implicit, _known=_resolved.get):
        if kind is _ScalarNode and implicit[0]:
            tag = _known(value)
            if tag is None:
                tag = _plain_tag(value)
                resolved = self._resolved
                if len(resolved) < _RESOLVED_MAX:
                    resolved[value] = tag
            return tag
        return _SafeLoader.resolve(self, kind, value, implicit)

    # The composer calls these around every node; with nothing to record they are built-in
    # functions that do nothing of note (no Python frame per node): is_(parent, index) and tuple().
    descend_resolver = staticmethod(operator.is_)
    ascend_resolver = staticmethod(tuple)


def _resolver_table() -> MappingProxyType:
    """The safe loader's implicit resolvers by first character (None: what any other character
    tries), each with the patterns every character tries after its own."""
    own = _SafeLoader.yaml_implicit_resolvers
    anywhere = tuple(own.get(None, []))
    table = {first: tuple(pairs) + anywhere for first, pairs in own.items() if first is not None}
    table[None] = anywhere
    return MappingProxyType(table)


# made at import, whole (a table filled on first use could be read half filled by another thread)
_PLAIN_RESOLVERS = _resolver_table()


def _plain_tag(value: str) -> str:
    """The tag the safe loader's resolver gives a plain scalar (``BaseResolver.resolve`` for an
    implicit scalar with no path resolvers), from its patterns by first character: a text whose
    first character starts no pattern (most keys) is text at once, with no method call and no
    list built. The patterns are the loader's own, fixed for the process like the tags
    remembered above (tests/test_load.py compares it with PyYAML's resolver)."""
    if value.isdigit() and value.isascii() and (value[0] != "0" or len(value) == 1):
        return _INT  # what the int pattern says of decimal digits with no leading zero (the
        # float and timestamp patterns need a '.', ':' or '-'), without trying three of them
    table = _PLAIN_RESOLVERS
    for tag, pattern in table.get(value[:1], table[None]):
        if pattern.match(value):
            return tag
    return _SafeLoader.DEFAULT_SCALAR_TAG


# Limits for hostile input, documented in the README.
MAX_FILE_BYTES = 2 * 1024 * 1024
MAX_NODES = 200_000  # values built, aliases counted every time they are expanded
MAX_DEPTH = 64
MAX_DOCUMENTS = 1_000  # documents in one YAML stream

Path_ = tuple  # a key path: a tuple of str keys and int list indices


class LoadError(Exception):
    """The input cannot be read as YAML or JSON. Carries a 1-based position."""

    def __init__(self, reason: str, line: int = 1, column: int = 1):
        super().__init__(reason)
        self.reason = reason
        self.line = line
        self.column = column


class Span:
    """A stretch of the text: 1-based line and column, 0-based character offsets."""

    line: int
    column: int
    start: int
    end: int

    __slots__ = ('line', 'column', 'start', 'end')

    def __init__(self, line, column, start, end):
        _setattr(self, 'line', line)
        _setattr(self, 'column', column)
        _setattr(self, 'start', start)
        _setattr(self, 'end', end)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(line={self.line!r}, column={self.column!r}, start={self.start!r}, end={self.end!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.line, self.column, self.start, self.end) == (other.line, other.column, other.start, other.end)
        return NotImplemented

    def __hash__(self):
        return hash((self.line, self.column, self.start, self.end))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.line, self.column, self.start, self.end)

    __setstate__ = _frozen_setstate


class Entry:
    """Where one value of the document was written.

    ``value`` and ``key`` (None for list items and the root) are Spans. The loaders record where
    a value stands (the parser's node, or character offsets) and make its Span when it is first
    asked for: a lint reads the positions of the few values its findings name. ``raw``, a
    scalar's source text, is likewise cut from the document's text when asked for (no rule reads
    it for most values).
    """

    __slots__ = ("_value", "_key", "_lines", "_raw", "style", "tag", "kind", "flow")

    def __init__(self, value: Span, key: Span | None = None, raw: "str | _Lines" = "", style: str | None = None,
                 tag: str | None = None, kind: str = "scalar", flow: bool = False):
        self._value = value
        self._key = key
        self._lines = None  # how offsets become lines (a _Lines) for a JSON entry not yet placed
        # the scalar's source text (plain or quoted), "" for collections; or the document's text
        # (a _Lines) that the value's position cuts it from when first asked for
        self._raw = raw
        self.style = style  # None = plain scalar; "'", '"', "|", ">" as in YAML; "json" for JSON
        self.tag = tag  # an explicit tag the author wrote (recorded, never acted on)
        self.kind = kind  # "scalar" | "map" | "seq"
        self.flow = flow  # a collection written in flow style ({...} / [...])

    def _place(self, at: Any) -> Span:
        lines = self._lines
        if lines is None:  # a YAML node: its marks say where it stands
            sm = at.start_mark
            return Span(sm.line + 1, sm.column + 1, sm.index, at.end_mark.index)
        return lines.span(at[0], at[1])  # (start, end) offsets in the JSON text

    @property
    def raw(self) -> str:
        r = self._raw
        if isinstance(r, _Lines):  # the document's text (a _JsonPlaces is one too), not yet cut
            at = self._value
            if at.__class__ is tuple and len(at) == 1:
                self._unplaced()
                at = self._value
            if at.__class__ is Span:
                start, end = at.start, at.end
            elif self._lines is None:  # a YAML node
                start, end = at.start_mark.index, at.end_mark.index
            else:  # (start, end) offsets in the JSON text
                start, end = at
            r = self._raw = r.text[start:end]
        return r

    @raw.setter
    def raw(self, text: str) -> None:
        self._raw = text

    @property
    def value(self) -> Span:
        v = self._value
        if v.__class__ is not Span:
            if v.__class__ is tuple and len(v) == 1:  # (path,): a JSON entry not placed yet
                self._unplaced()
                v = self._value
            v = self._value = self._place(v)
        return v

    def _unplaced(self) -> None:
        """Where a JSON entry made from the parsed values alone stands (``_JsonPlaces``)."""
        value, key = self._lines.offsets(self._value[0])
        self._value = value
        if self._key is _KEYED:
            self._key = key

    @value.setter
    def value(self, span: Span) -> None:
        if isinstance(self._raw, _Lines):
            self.raw  # cut from where the value stood before it moves
        self._value = span

    @property
    def key(self) -> Span | None:
        k = self._key
        if k is not None and k.__class__ is not Span:
            if k is _KEYED:
                self._unplaced()
                k = self._key
            k = self._key = self._place(k)
        return k

    @key.setter
    def key(self, span: Span | None) -> None:
        self._key = span

    @property
    def keyed(self) -> bool:
        """Whether the value is a mapping's member (``key`` is not None), without placing the key."""
        return self._key is not None

    def _fields(self) -> tuple:
        return (self.value, self.key, self.raw, self.style, self.tag, self.kind, self.flow)

    def __eq__(self, other: object) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return self._fields() == other._fields()

    __hash__ = None  # type: ignore[assignment]  # mutable, as the dataclass it replaces

    @guarded_repr
    def __repr__(self) -> str:
        names = ("value", "key", "raw", "style", "tag", "kind", "flow")
        return "Entry(" + ", ".join(f"{n}={v!r}" for n, v in zip(names, self._fields())) + ")"

    def __reduce__(self) -> tuple:
        return (Entry, self._fields())  # placed: the node or the line table stays behind


class Ambiguity:
    """A plain scalar that YAML 1.1 and YAML 1.2 readers take differently."""

    path: Path_
    kind: str  # "exponent-without-dot" | "word-boolean" | "leading-zero-octal" | "base-60"
    raw: str
    yaml11: Any  # what PyYAML (YAML 1.1) gives
    yaml12: Any  # what a YAML 1.2 core-schema reader gives

    __slots__ = ('path', 'kind', 'raw', 'yaml11', 'yaml12')

    def __init__(self, path, kind, raw, yaml11, yaml12):
        self.path = path
        self.kind = kind
        self.raw = raw
        self.yaml11 = yaml11
        self.yaml12 = yaml12

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(path={self.path!r}, kind={self.kind!r}, raw={self.raw!r}, yaml11={self.yaml11!r}, yaml12={self.yaml12!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.path, self.kind, self.raw, self.yaml11, self.yaml12) == (other.path, other.kind, other.raw, other.yaml11, other.yaml12)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


class Duplicate:
    path: Path_  # path of the key that appears twice
    first: Span
    second: Span
    first_value: Any
    second_value: Any

    __slots__ = ('path', 'first', 'second', 'first_value', 'second_value')

    def __init__(self, path, first, second, first_value, second_value):
        self.path = path
        self.first = first
        self.second = second
        self.first_value = first_value
        self.second_value = second_value

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(path={self.path!r}, first={self.first!r}, second={self.second!r}, first_value={self.first_value!r}, second_value={self.second_value!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.path, self.first, self.second, self.first_value, self.second_value) == (other.path, other.first, other.second, other.first_value, other.second_value)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


class Document:
    """One YAML document (or the JSON file): values and where each was written."""

    name: str
    format: str  # "yaml" | "json"
    data: Any
    entries: dict[Path_, Entry]
    duplicates: list[Duplicate]
    ambiguities: list[Ambiguity]
    tags: list[tuple[Path_, str]]
    index: int  # position of this document in a multi-document stream
    # composed documents (compose.py): the file that set each key path, and for a value set in
    # more than one file, those files in the order they were applied
    origins: dict[Path_, str]
    overrides: dict[Path_, list[str]]
    composed_from: list[str]
    number_reader: str  # why the loader reads 2e-5 as a number, when it does (compose.py)
    # values nothing states for sure (a launch script's ``${LR:-2e-4}`` default): path -> in words
    assumed: dict[Path_, str]

    __slots__ = ('name', 'format', 'data', 'entries', 'duplicates', 'ambiguities', 'tags', 'index', 'origins', 'overrides', 'composed_from', 'number_reader', 'assumed')

    def __init__(self, name, format, data, entries=None, duplicates=None, ambiguities=None, tags=None, index=0, origins=None, overrides=None, composed_from=None, number_reader="", assumed=None):
        self.name = name
        self.format = format
        self.data = data
        self.entries = {} if entries is None else entries
        self.duplicates = [] if duplicates is None else duplicates
        self.ambiguities = [] if ambiguities is None else ambiguities
        self.tags = [] if tags is None else tags
        self.index = index
        self.origins = {} if origins is None else origins
        self.overrides = {} if overrides is None else overrides
        self.composed_from = [] if composed_from is None else composed_from
        self.number_reader = number_reader
        self.assumed = {} if assumed is None else assumed

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, format={self.format!r}, data={self.data!r}, entries={self.entries!r}, duplicates={self.duplicates!r}, ambiguities={self.ambiguities!r}, tags={self.tags!r}, index={self.index!r}, origins={self.origins!r}, overrides={self.overrides!r}, composed_from={self.composed_from!r}, number_reader={self.number_reader!r}, assumed={self.assumed!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.format, self.data, self.entries, self.duplicates, self.ambiguities, self.tags, self.index, self.origins, self.overrides, self.composed_from, self.number_reader, self.assumed) == (other.name, other.format, other.data, other.entries, other.duplicates, other.ambiguities, other.tags, other.index, other.origins, other.overrides, other.composed_from, other.number_reader, other.assumed)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    def entry(self, path: Path_) -> Entry | None:
        return self.entries.get(tuple(path))

    def get(self, path: Path_, default: Any = None) -> Any:
        cur = self.data
        for part in path:
            if isinstance(cur, dict) and part in cur:
                cur = cur[part]
            elif isinstance(cur, list) and isinstance(part, int) and 0 <= part < len(cur):
                cur = cur[part]
            else:
                return default
        return cur


class Source:
    """A file's text as decoded, with what is needed to write it back the same way."""

    name: str
    text: str
    encoding: str
    bom: bool
    newline: str

    __slots__ = ('name', 'text', 'encoding', 'bom', 'newline')

    def __init__(self, name, text, encoding="utf-8", bom=False, newline="\n"):
        self.name = name
        self.text = text
        self.encoding = encoding
        self.bom = bom
        self.newline = newline

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, text={self.text!r}, encoding={self.encoding!r}, bom={self.bom!r}, newline={self.newline!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.text, self.encoding, self.bom, self.newline) == (other.name, other.text, other.encoding, other.bom, other.newline)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def dotted(path: Path_) -> str:
    """``("training", "lr")`` -> ``training.lr``; list items as ``[0]``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


# --------------------------------------------------------------------------- bytes -> text

_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)


def decode(raw: bytes, name: str, limit: int = MAX_FILE_BYTES, what: str = "a config file") -> Source:
    """Decode a file's bytes; UTF-8 by default, UTF-16/32 when a BOM says so."""
    if len(raw) > limit:
        raise LoadError(f"file is {len(raw):,} bytes, over the {limit:,}-byte limit for {what}")
    encoding, bom = "utf-8", False
    for mark, enc in _BOMS:
        if raw.startswith(mark):
            encoding, bom = enc, True
            raw = raw[len(mark):]
            break
    if b"\x00" in raw and not bom:
        # NUL bytes without a BOM: UTF-16 without a mark, or a binary file.
        raise LoadError("file holds NUL bytes: binary, or UTF-16 without a byte-order mark")
    try:
        text = raw.decode(encoding)
    except UnicodeDecodeError as exc:
        before = raw[: exc.start].decode(encoding, errors="replace")
        line = before.count("\n") + 1
        column = len(before) - (before.rfind("\n") + 1) + 1
        raise LoadError(
            f"not valid {encoding.upper()}: byte 0x{raw[exc.start]:02x} at offset {exc.start}",
            line,
            column,
        ) from None
    newline = "\r\n" if "\r\n" in text else "\n"
    return Source(name=name, text=text, encoding=encoding, bom=bom, newline=newline)


_SEPARATORS = tuple({os.sep, os.altsep or os.sep})
_OPEN_FLAGS = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0) | getattr(os, "O_CLOEXEC", 0)
IS_A_FOLDER = "is a folder, not a file"  # read_source's reason for a folder


def read_source(path: str | Path, limit: int = MAX_FILE_BYTES, what: str = "a config file") -> Source:
    """Read a regular file, never more than the size limit (a FIFO or /dev/zero cannot hang us)."""
    # a name as the walk gives it is opened as it is; a Path object, "" or a trailing slash are
    # taken as Path reads them ("dir/" is "dir", "" is ".")
    p = path if path.__class__ is str and path and not path.endswith(_SEPARATORS) else Path(path)
    try:
        try:
            st = os.lstat(p)  # before opening: a device or a pipe is never opened
            if stat.S_ISLNK(st.st_mode):
                st = os.stat(p)  # what the link leads to (FileNotFoundError: to nothing)
                link = True
            else:
                link = False
            if stat.S_ISDIR(st.st_mode):
                raise LoadError(IS_A_FOLDER)
            if not stat.S_ISREG(st.st_mode):
                raise LoadError("not a regular file (a device, pipe or socket); not read")
            size = st.st_size
            if size > limit:
                raise LoadError(f"file is {size:,} bytes, over the {limit:,}-byte limit for {what}")
            # the file's size and one byte more in one read (a buffered reader would set aside
            # the whole limit for each file); never blocks should a pipe have replaced the file
            fd = os.open(p, _OPEN_FLAGS)
            try:
                raw = os.read(fd, size + 1)
                if len(raw) > size:  # it grew after the stat: read on, never past the limit
                    parts = [raw]
                    got = len(raw)
                    while got <= limit:
                        more = os.read(fd, limit + 1 - got)
                        if not more:
                            break
                        parts.append(more)
                        got += len(more)
                    raw = b"".join(parts)
            finally:
                os.close(fd)
        except BaseException:
            reads.note_file(p)  # what stood there instead, for the result cache
            raise
    except LoadError:
        raise
    except IsADirectoryError:
        raise LoadError(IS_A_FOLDER) from None
    except FileNotFoundError:
        if os.path.islink(p):
            raise LoadError("broken symbolic link: its target does not exist") from None
        raise LoadError("no such file") from None
    except PermissionError:
        raise LoadError("permission denied") from None
    except OSError as exc:
        raise LoadError(f"cannot read: {exc.strerror or exc}") from None
    reads.note_bytes(p, raw)  # the bytes used, for the result cache
    if p.__class__ is str:  # what the rules would look the file up for again (pins.file_kind)
        remembered("file_kind", p, lambda: (True, link))
    return decode(raw, str(path), limit, what)


# --------------------------------------------------------------------------- format choice

def guess_format(name: str, text: str) -> str:
    suffix = os.path.splitext(name)[1].lower()
    if suffix in (".json", ".jsonc"):
        return "json"
    if suffix in (".yaml", ".yml"):
        return "yaml"
    stripped = text.lstrip()
    if stripped[:1] in ("{", "["):
        return "json"
    return "yaml"


def load_text(text: str, name: str = "<text>", fmt: str | None = None) -> list[Document]:
    """Parse text into documents. Raises LoadError for input that is not valid."""
    fmt = fmt or guess_format(name, text)
    if fmt == "json":
        return [_load_json(text, name)]
    return _load_yaml(text, name)


def load_path(path: str | Path) -> tuple[Source, list[Document]]:
    src = read_source(path)
    return src, load_text(src.text, src.name)


# --------------------------------------------------------------------------- YAML

# Plain scalars whose reading differs between YAML 1.1 (PyYAML) and the YAML 1.2 core schema.
_EXP_NO_DOT = re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$")
_CORE_FLOAT = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?$")
# a quick test that passes every text _EXP_NO_DOT matches (a digit, an e, nothing but digits after)
_MAYBE_EXP = re.compile(r"[-+]?[0-9][0-9_.]*[eE]").match
_WORD_BOOL = MappingProxyType({"yes": True, "no": False, "on": True, "off": False})
_STD_TAGS = frozenset({
    "tag:yaml.org,2002:str",
    "tag:yaml.org,2002:int",
    "tag:yaml.org,2002:float",
    "tag:yaml.org,2002:bool",
    "tag:yaml.org,2002:null",
    "tag:yaml.org,2002:map",
    "tag:yaml.org,2002:seq",
    "tag:yaml.org,2002:timestamp",
    "tag:yaml.org,2002:binary",
    "tag:yaml.org,2002:merge",
    "tag:yaml.org,2002:value",
    "tag:yaml.org,2002:omap",
    "tag:yaml.org,2002:pairs",
    "tag:yaml.org,2002:set",
})
_MERGE = "tag:yaml.org,2002:merge"
# the tags of the numbers, booleans and nulls a mapping's member is read as in place (_mapping)
_READ_HERE = frozenset({"tag:yaml.org,2002:int", "tag:yaml.org,2002:float", "tag:yaml.org,2002:bool",
                        "tag:yaml.org,2002:null"})

_constructor = yaml.constructor.SafeConstructor()


def _mark_span(node: yaml.Node) -> Span:
    sm, em = node.start_mark, node.end_mark
    return Span(line=sm.line + 1, column=sm.column + 1, start=sm.index, end=em.index)


def _line_column(text: str, offset: int) -> tuple[int, int]:
    offset = max(0, min(offset, len(text)))
    line_start = text.rfind("\n", 0, offset) + 1
    return text.count("\n", 0, offset) + 1, offset - line_start + 1


def _one_line(reason: str) -> str:
    return " ".join(str(reason).split())


def _problem_position(exc: yaml.YAMLError, text: str) -> tuple[int, int, str]:
    if isinstance(exc, yaml.reader.ReaderError):  # a character YAML does not allow
        line, column = _line_column(text, exc.position)
        char = exc.character
        code = ord(char) if isinstance(char, str) else char
        return line, column, f"character #x{code:04x} is not allowed in YAML ({exc.reason})"
    mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
    problem = getattr(exc, "problem", None) or str(exc)
    context = getattr(exc, "context", None)
    reason = f"{context}: {problem}" if context and problem else (problem or context or "invalid YAML")
    if "maximum nesting depth" in reason:  # libyaml's own guard, past our limit anyway
        reason = f"nested more than {MAX_DEPTH} levels deep"
    if mark is None:
        return 1, 1, _one_line(reason)
    return mark.line + 1, mark.column + 1, _one_line(reason)


def _load_yaml(text: str, name: str) -> list[Document]:
    loader = _YamlLoader(text)
    source = _Lines(text)  # what the documents' scalars cut their source text from
    docs: list[Document] = []
    count = 0  # values built in the whole stream: the alias bound holds across documents
    try:
        index = 0
        while loader.check_node():
            if index >= MAX_DOCUMENTS:
                m = loader.peek_event().start_mark
                raise LoadError(f"more than {MAX_DOCUMENTS:,} documents in one stream; refused",
                                m.line + 1, m.column + 1)
            node = loader.get_node()
            doc = Document(name=name, format="yaml", data=None, index=index)
            if node is not None:
                builder = _YamlBuilder(doc, text, source)
                builder.count = count
                doc.data = builder.build(node, (), None, 0)
                count = builder.count
            docs.append(doc)
            index += 1
    except yaml.YAMLError as exc:
        line, column, reason = _problem_position(exc, text)
        raise LoadError(f"invalid YAML: {reason}", line, column) from None
    except RecursionError:
        raise LoadError(f"nesting deeper than the parser can follow (limit {MAX_DEPTH})") from None
    finally:
        loader.dispose()
    if not docs:
        docs.append(Document(name=name, format="yaml", data=None))
    return docs


_STR = "tag:yaml.org,2002:str"
_NULL = "tag:yaml.org,2002:null"
_BOOL = "tag:yaml.org,2002:bool"
_INT = "tag:yaml.org,2002:int"
_FLOAT = "tag:yaml.org,2002:float"
_ScalarNode = yaml.ScalarNode
_SequenceNode = yaml.SequenceNode
_BOOL_WORDS = MappingProxyType(dict(yaml.constructor.SafeConstructor.bool_values))


def _start(node: yaml.Node) -> tuple[int, int]:
    m = node.start_mark
    return m.line + 1, m.column + 1


class _YamlBuilder:
    def __init__(self, doc: Document, text: str, source: "_Lines | None" = None):
        self.doc = doc
        self.text = text
        self.source = source if source is not None else _Lines(text)
        self.count = 0
        self.entries = doc.entries
        self.open: set[int] = set()  # collection nodes being built: an alias back to one is a cycle

    def build(self, node: yaml.Node, path: Path_, knode: yaml.Node | None, depth: int) -> Any:
        """NODE's value; its Entry (placed by NODE and its key node KNODE) goes in the document."""
        if depth > MAX_DEPTH:
            raise LoadError(f"nested more than {MAX_DEPTH} levels deep", *_start(node))
        self.count += 1
        if self.count > MAX_NODES:
            raise LoadError(
                f"document expands to more than {MAX_NODES:,} values (aliases multiply them); refused",
                *_start(node))
        tag = node.tag
        explicit = None
        if tag not in _STD_TAGS:
            explicit = tag
            self.doc.tags.append((path, tag))
        if node.__class__ is _ScalarNode:
            style = node.style or None
            self.entries[path] = Entry(node, knode, self.source, style, explicit)
            if tag == _STR and (style or not _MAYBE_EXP(node.value)):
                return node.value  # the common case: text with nothing to report
            return self._scalar(node, path)
        key = id(node)
        if key in self.open:
            raise LoadError("an alias refers to a collection that contains it (a cycle); refused",
                            *_start(node))
        self.open.add(key)
        try:
            if node.__class__ is _SequenceNode:
                self.entries[path] = Entry(node, knode, "", None, explicit, "seq", bool(node.flow_style))
                depth += 1
                build = self.build
                return [build(item, path + (i,), None, depth) for i, item in enumerate(node.value)]
            self.entries[path] = Entry(node, knode, "", None, explicit, "map", bool(node.flow_style))
            return self._mapping(node, path, depth)
        finally:
            self.open.discard(key)

    def _mapping(self, node: yaml.Node, path: Path_, depth: int) -> dict:
        out: dict[Any, Any] = {}
        merged: dict[Any, Any] | None = None
        depth += 1
        build = self.build
        entries = self.entries
        text = self.text
        source = self.source  # the text a scalar's raw is cut from, when asked for
        # a scalar value (text, a number, a boolean or null, with no tag written) is read here
        # rather than by build()
        inline = depth <= MAX_DEPTH
        for knode, vnode in node.value:
            ktag = knode.tag
            if ktag == _STR and knode.__class__ is _ScalarNode:
                key = knode.value  # the common case: a plain key
            elif ktag == _MERGE:
                if merged is None:
                    merged = {}
                self._merge(vnode, path, merged, depth - 1)
                continue
            else:
                if knode.__class__ is _ScalarNode:
                    key = self._scalar(knode, None)
                    if isinstance(key, (list, dict)):
                        key = knode.value
                else:
                    # complex keys are not used by any training config; keep their source text
                    key = text[knode.start_mark.index:knode.end_mark.index]
                if not isinstance(key, (str, int, float, bool)) and key is not None:
                    key = str(key)
            child = path + (key,)
            # a key written again: where it was written last (its entry, until replaced below)
            again = entries[child]._key if key in out else None
            if inline and vnode.__class__ is _ScalarNode and self.count < MAX_NODES:
                vtag = vnode.tag
                if vtag == _STR:
                    style = vnode.style or None
                    value = vnode.value
                    if style or not _MAYBE_EXP(value):
                        self.count += 1
                        entries[child] = Entry(vnode, knode, source, style)
                    else:
                        value = build(vnode, child, knode, depth)
                elif vtag in _READ_HERE:  # a number, boolean or null: what build() does for it
                    self.count += 1
                    entries[child] = Entry(vnode, knode, source, vnode.style or None)
                    value = self._scalar(vnode, child)
                else:
                    value = build(vnode, child, knode, depth)
            else:
                value = build(vnode, child, knode, depth)
            if again is not None:
                self.doc.duplicates.append(
                    Duplicate(child, _mark_span(again), _mark_span(knode), out[key], value)
                )
            out[key] = value
        if merged:
            for k, v in merged.items():  # explicit keys win over merged ones (YAML merge-key rules)
                out.setdefault(k, v)
        return out

    def _merge(self, vnode: yaml.Node, path: Path_, merged: dict, depth: int) -> None:
        sources = vnode.value if isinstance(vnode, yaml.SequenceNode) else [vnode]
        for src in sources:
            if not isinstance(src, yaml.MappingNode):
                raise LoadError("a merge key (<<) needs a mapping or a list of mappings", *_start(src))
            # merged values are written elsewhere: their positions stay those of the anchor
            sub = _YamlBuilder(Document(name=self.doc.name, format="yaml", data=None), self.text, self.source)
            sub.count = self.count
            sub.open = self.open
            value = sub.build(src, path, None, depth + 1)
            self.count = sub.count
            for k, v in value.items():
                merged.setdefault(k, v)

    def _scalar(self, node: yaml.ScalarNode, path: Path_ | None) -> Any:
        """The value of a scalar (PATH None for a key: a key's reading is not reported)."""
        tag = node.tag
        text = node.value
        if tag == _STR or tag not in _STD_TAGS:
            if path is not None and not node.style and tag == _STR:
                if _EXP_NO_DOT.match(text) and _CORE_FLOAT.match(text):
                    self.doc.ambiguities.append(
                        Ambiguity(path, "exponent-without-dot", text, text, float(text))
                    )
            return text
        if tag == _NULL:
            return None
        try:
            if tag == _INT:
                if text.isdigit() and text.isascii() and (text[0] != "0" or text == "0"):
                    return int(text)  # what the constructor gives, without its detours
                value = _constructor.construct_yaml_int(node)
                if path is not None and not node.style:
                    plain = text.replace("_", "")
                    digits = plain.lstrip("+-")
                    if ":" in plain:
                        self.doc.ambiguities.append(Ambiguity(path, "base-60", text, value, text))
                    elif len(digits) > 1 and digits.startswith("0") and digits.isdigit():
                        self.doc.ambiguities.append(
                            Ambiguity(path, "leading-zero-octal", text, value, int(plain, 10))
                        )
                return value
            if tag == _BOOL:
                value = _BOOL_WORDS.get(text.lower())
                if value is None:
                    value = _constructor.construct_yaml_bool(node)
                if path is not None and not node.style and text.lower() in _WORD_BOOL:
                    self.doc.ambiguities.append(Ambiguity(path, "word-boolean", text, value, text))
                return value
            if tag == _FLOAT:
                if "_" not in text and ":" not in text:
                    try:
                        return float(text)  # what the constructor gives for such text
                    except ValueError:
                        pass  # .inf, .nan and the like
                value = _constructor.construct_yaml_float(node)
                if path is not None and not node.style and ":" in text:
                    self.doc.ambiguities.append(Ambiguity(path, "base-60", text, value, text))
                return value
        except (ValueError, OverflowError) as exc:  # e.g. an integer with more digits than Python reads
            why = _one_line(exc).split(";")[0]
            raise LoadError(f"value cannot be read: {why}", *_start(node)) from None
        # timestamps, binary and the like: keep the text, construct nothing
        return text


# --------------------------------------------------------------------------- JSON

# strings first, so that a word inside a string is never taken for the token
_JSON_CONSTANT = later(r'"(?:[^"\\]|\\.)*"|(-?Infinity|NaN)')
_JSON_LONG_INT = later(r'"(?:[^"\\]|\\.)*"|(-?[0-9]{4000,})')


def _json_token_offset(text: str, why: str) -> int:
    """Where the token a ValueError speaks of stands (the json module does not say)."""
    pattern = _JSON_CONSTANT if "not valid JSON" in why else _JSON_LONG_INT
    for m in pattern.finditer(text):
        if m.group(1):
            return m.start(1)
    return 0


def _reject_constant(name: str) -> Any:
    raise ValueError(f"{name} is not valid JSON")


def _load_json(text: str, name: str) -> Document:
    import json  # YAML-only runs do not pay for it

    body = text[1:] if text.startswith("\ufeff") else text
    repeated: list = []  # an object that repeats a key (one is enough)

    def members(pairs: list) -> dict:
        out = dict(pairs)
        if len(out) != len(pairs):
            repeated.append(True)
        return out

    try:  # a repeated key: the last value, as here; the scan below reports the repetition
        data = json.loads(body, parse_constant=_reject_constant, object_pairs_hook=members)
    except json.JSONDecodeError as exc:
        raise LoadError(f"invalid JSON: {exc.msg}", exc.lineno, exc.colno) from None
    except ValueError as exc:  # NaN/Infinity, or an integer longer than Python reads
        line, column = _line_column(text, _json_token_offset(text, str(exc)))
        raise LoadError(f"invalid JSON: {_one_line(exc).split(';')[0]}", line, column) from None
    except RecursionError:
        raise LoadError(f"nested more than {MAX_DEPTH} levels deep") from None
    doc = Document(name=name, format="json", data=data)
    if repeated or not _json_unplaced(text, doc):
        doc.entries.clear()
        _json_entries(text, doc)  # placed now: the scan reports the repetitions, or the depth
    return doc


def _json_string(literal: str) -> str:
    if "\\" not in literal:  # no escapes: the text between the quotes is the string
        return literal[1:-1]
    import json

    return json.loads(literal)


class _Lines:
    """A document's text: character offsets -> 1-based lines and columns (the line starts are found
    when first asked), and the source text of the scalars cut from it when asked for."""

    __slots__ = ("text", "starts")

    def __init__(self, text: str):
        self.text = text
        self.starts: list[int] | None = None

    def span(self, start: int, end: int) -> Span:
        starts = self.starts
        if starts is None:
            starts = self.starts = [0] + [m.end() for m in re.finditer("\n", self.text)]
        line = bisect.bisect_right(starts, start)
        return Span(line=line, column=start - starts[line - 1] + 1, start=start, end=end)


# the tokens of JSON text: a string, an opening or closing bracket, a number or word; what lies
# between them (white space, ':' and ',') is passed over
_JSON_TOKEN = later(
    r'("[^"\\]*(?:\\.[^"\\]*)*")|([{[])|([}\]])'
    r"|(-?(?:0|[1-9][0-9]*)(?:\.[0-9]+)?(?:[eE][-+]?[0-9]+)?|true|false|null)",
    re.S)


# a token of valid JSON text and, before it, what lies between tokens: a string, a bracket, or a
# number or word (which runs up to the next white space, separator or closing bracket)
_JSON_NEXT = re.compile(r'[ \t\n\r,:]*+("[^"\\]*+(?:\\.[^"\\]*+)*+"|[{}\[\]]|[^ \t\n\r,:\]}]++)', re.S)


class _NotAligned(Exception):
    """The text's tokens do not follow the parsed values one for one (a repeated key), or the
    nesting is past the limit: the full scan says what and where."""


def _json_entries(text: str, doc: Document) -> None:
    """Record the position of every key and value of TEXT, already known to be valid JSON, as
    offsets (placed on lines when asked), and the keys an object repeats.

    The parsed values say what comes next, so the tokens are only counted off: an object's
    '{', then each key and its value, then '}'. A text whose tokens outnumber its values repeats
    a key; it goes through the full scan, which reports the repetitions."""
    lines = _Lines(text)
    entries = doc.entries
    spans = map(_SPAN_OF_TOKEN, _JSON_NEXT.finditer(text, 1 if text.startswith("\ufeff") else 0))
    step = spans.__next__

    def walk(value: Any, path: Path_, key_at: tuple[int, int] | None, depth: int) -> None:
        if depth > MAX_DEPTH:
            raise _NotAligned
        start, end = step()
        cls = value.__class__
        if cls is dict:
            depth += 1
            inline = depth <= MAX_DEPTH  # members that are not containers are placed here
            for k, v in value.items():
                at = step()
                c = v.__class__
                if inline and c is not dict and c is not list:
                    s, t = step()
                    e = Entry((s, t), at, lines, "json")
                    e._lines = lines
                    entries[path + (k,)] = e
                else:
                    walk(v, path + (k,), at, depth)
            e = Entry((start, step()[1]), key_at, "", "json", None, "map")
        elif cls is list:
            depth += 1
            inline = depth <= MAX_DEPTH
            i = 0
            for v in value:
                c = v.__class__
                if inline and c is not dict and c is not list:
                    s, t = step()
                    e = Entry((s, t), None, lines, "json")
                    e._lines = lines
                    entries[path + (i,)] = e
                else:
                    walk(v, path + (i,), None, depth)
                i += 1
            e = Entry((start, step()[1]), key_at, "", "json", None, "seq")
        else:
            e = Entry((start, end), key_at, lines, "json")
        e._lines = lines
        entries[path] = e

    try:
        walk(doc.data, (), None, 0)
        if next(spans, None) is None:
            return
    except (_NotAligned, StopIteration):
        pass
    finally:
        # WALK refers to itself through its closure: emptied, the cell no longer holds it, so the
        # function, the token iterator and the text are freed on return instead of waiting for
        # the cycle collector with the document's entries (tests/test_drop_views.py)
        del walk
    entries.clear()
    _json_entries_scan(text, doc)


_SPAN_OF_TOKEN = operator.methodcaller("span", 1)

# the key of a JSON member not placed yet (its entry's value is then (path,): ``_JsonPlaces``)
_KEYED = object()


class _JsonPlaces(_Lines):
    """A JSON document's text and parsed values, for entries made from the values alone (their
    value ``(path,)``, their key ``_KEYED``): the text is scanned for where every value stands
    when the first position (or source text) is asked for. A lint asks for the few its findings
    name, and many files have none; the root's own place is known without the scan (the text
    stripped of white space). It refers to no entry of the document (no cycle to collect)."""

    __slots__ = ("data", "found")

    def __init__(self, text: str, data: Any):
        super().__init__(text)
        self.data = data
        self.found: dict | None = None

    def offsets(self, path: Path_) -> tuple:
        """(the value's offsets, the key's or None) of the entry at PATH."""
        found = self.found
        if found is None:
            scanned = Document(name="", format="json", data=self.data)
            _json_entries(self.text, scanned)  # the same scan as a document placed at once
            found = self.found = scanned.entries
            self.data = None
        e = found.get(path)
        if e is None:  # (not reached: the scan and the values agree on every path)
            return (0, 0), None
        return e._value, e._key


def _json_unplaced(text: str, doc: Document) -> bool:
    """Give DOC (valid JSON that repeats no key) an entry for each value, in the order the scan
    gives them, each placed when it is first asked where it stands (``_JsonPlaces``); False,
    with the entries half made, for a document nested past the limit (the scan says where)."""
    places = _JsonPlaces(text, doc.data)
    entries = doc.entries

    def walk(value: Any, path: Path_, keyed: bool, depth: int) -> None:
        if depth > MAX_DEPTH:
            raise _NotAligned
        cls = value.__class__
        if cls is dict or cls is list:
            depth += 1
            if depth > MAX_DEPTH and value:
                raise _NotAligned  # its members are past the limit
            members = cls is dict  # an object's members have keys, an array's items do not
            key = _KEYED if members else None
            for k, v in value.items() if members else enumerate(value):
                c = v.__class__
                child = path + (k,)
                if c is dict or c is list:
                    walk(v, child, members, depth)
                else:
                    e = Entry((child,), key, places, "json")
                    e._lines = places
                    entries[child] = e
            e = Entry((path,), _KEYED if keyed else None, "", "json", None, "map" if members else "seq")
        else:
            e = Entry((path,), None, places, "json")
        e._lines = places
        entries[path] = e

    try:
        walk(doc.data, (), False, 0)
    except _NotAligned:
        return False
    finally:
        del walk  # (a closure that refers to itself: freed on return, not by the collector)
    # the root's place needs no scan: the text without the white space around it (the
    # "not checked" notes of every file stand there)
    begin = 1 if text.startswith("\ufeff") else 0
    stripped = text[begin:].lstrip(" \t\n\r")
    entries[()]._value = (len(text) - len(stripped), len(text.rstrip(" \t\n\r")))
    return True


def _json_entries_scan(text: str, doc: Document) -> None:
    """``_json_entries`` token by token, with no help from the parsed values: finds the keys an
    object repeats and where the nesting passes the limit."""
    lines = _Lines(text)
    entries = doc.entries
    stack: list[tuple] = []  # the states of the containers around the innermost open one
    depth = 0  # containers open
    # the innermost open container: its path, where it starts, where its own key stands, whether
    # it is an object, and in it the next item's index, or the next member's key and its place
    base: Path_ = ()
    start = 0
    own_key: tuple[int, int] | None = None
    in_map = False
    index = 0
    key: str = ""
    key_at: tuple[int, int] | None = None
    want_key = False
    seen: dict[str, tuple[int, int]] = {}  # the open object's keys so far
    for m in _JSON_TOKEN.finditer(text, 1 if text.startswith("\ufeff") else 0):
        kind = m.lastindex
        if kind == 1 and want_key:  # a member's key
            lit = m.group(1)
            key = lit[1:-1] if "\\" not in lit else _json_string(lit)
            key_at = m.span()
            want_key = False
            first = seen.get(key)
            if first is not None:
                child = base + (key,)
                doc.duplicates.append(Duplicate(child, lines.span(*first), lines.span(*key_at),
                                                None, doc.get(child)))
            seen[key] = key_at
            continue
        if kind == 3:  # the innermost container ends
            e = Entry((start, m.end()), own_key, "", "json", None, "map" if in_map else "seq")
            e._lines = lines
            entries[base] = e
            depth -= 1
            if not depth:
                break
            base, start, own_key, in_map, index, key, key_at, seen = stack.pop()
            want_key = in_map  # the container was the value of a member, or an item
            if not in_map:
                index += 1
            continue
        # a value: where it goes
        if not depth:
            path, at = (), None
        elif in_map:
            path, at = base + (key,), key_at
        else:
            path, at = base + (index,), None
        if depth > MAX_DEPTH:
            sp = lines.span(m.start(), m.start())
            raise LoadError(f"nested more than {MAX_DEPTH} levels deep", sp.line, sp.column)
        if kind == 2:  # a container begins
            if depth:
                stack.append((base, start, own_key, in_map, index, key, key_at, seen))
            depth += 1
            base, start, own_key = path, m.start(), at
            in_map = m.group(2) == "{"
            index, want_key = 0, in_map
            if in_map:
                seen = {}
            continue
        e = Entry(m.span(), at, m.group(), "json")
        e._lines = lines
        entries[path] = e
        if not depth:
            break
        if in_map:
            want_key = True
        else:
            index += 1


# --------------------------------------------------------------------------- finding files

CONFIG_SUFFIXES = (".yaml", ".yml", ".json")


def walk_paths(paths: Iterable[str | Path], suffixes: tuple[str, ...] = CONFIG_SUFFIXES) -> list[tuple[str, bool]]:
    """(file, named) pairs: files as given (named True); folders walked for files ending in
    ``suffixes`` (configs by default), sorted, hidden folders skipped (named False). A folder that
    cannot be listed is kept (named True), so that reading it reports why."""
    out: list[tuple[str, bool]] = []

    def unlistable(exc: OSError) -> None:
        if exc.filename is not None:
            out.append((str(exc.filename), True))

    for p in paths:
        p = Path(p)
        reads.note_kind(p)  # for the result cache: what the walk saw decides the files linted
        if p.is_dir():
            for root, dirs, files in os.walk(p, onerror=unlistable):
                reads.note_walk(root)
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                lead = None
                for f in sorted(files):
                    if f.lower().endswith(suffixes):
                        if lead is None:  # str(Path(root) / f) without a path object a file
                            head = str(Path(root))
                            lead = "" if head == "." else head if head.endswith(_SEPARATORS) else head + os.sep
                        out.append((lead + f, False))
        else:
            out.append((str(p), True))
    return out
