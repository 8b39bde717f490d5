"""The typed view: one description of a training run, whatever key layout the file used.

Every value carries where it came from (its key path in the document), so a rule can report on
it without knowing how the file spelled it.
"""

from __future__ import annotations

import re
from types import MappingProxyType
from typing import Any

from ._patterns import later
from ._records import guarded_repr
from .findings import MAX_MAGNITUDE, too_large
from .layouts import (BASE_FILE_KEYS, BY_NAME, FIELD_TYPES, LAYOUTS, METHOD_WORDS, NOT_TRAINING,
                      UNREAD_FORMATS, Layout, UnreadFormat)
from .load import Document, dotted

_NUMBER = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9][0-9_]*(?:\.[0-9_]*)?)(?:[eE][-+]?[0-9]+)?$")
_TRUE = frozenset({"true", "yes", "on", "1"})
_FALSE = frozenset({"false", "no", "off", "0"})


class Field:
    """One value of the view and where it was written. Never changed once made (not frozen only
    because a frozen record's constructor costs twice as much, and a run makes one for every
    value of every file; equality and hashing are a frozen one's)."""

    name: str  # our name, e.g. "adapter.alpha"
    value: Any  # typed: numbers written as text are read as numbers here
    path: tuple  # key path in the document
    written: Any  # the value exactly as loaded
    auto: bool  # "auto": filled in at launch
    from_text: bool  # a number or boolean that was loaded as text
    # where the value came from: "written" (in this file), "linked" (a file this one names),
    # "launch" (a launch file or script the run is started with), "default" (the runner's own
    # default, with its source in ``note``), "flag" (the command line or the project file), or
    # "assumed" (a guess; ``note`` says it in words). Only "assumed" values can never make an error.
    origin: str
    note: str  # in words: which file, which default and its source, or what was assumed

    __slots__ = ('name', 'value', 'path', 'written', 'auto', 'from_text', 'origin', 'note')

    def __init__(self, name, value, path, written, auto=False, from_text=False, origin="written", note=""):
        self.name = name
        self.value = value
        self.path = path
        self.written = written
        self.auto = auto
        self.from_text = from_text
        self.origin = origin
        self.note = note

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, value={self.value!r}, path={self.path!r}, written={self.written!r}, auto={self.auto!r}, from_text={self.from_text!r}, origin={self.origin!r}, note={self.note!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.value, self.path, self.written, self.auto, self.from_text, self.origin, self.note) == (other.name, other.value, other.path, other.written, other.auto, other.from_text, other.origin, other.note)
        return NotImplemented

    def __hash__(self):
        return hash((self.name, self.value, self.path, self.written, self.auto, self.from_text, self.origin, self.note))

    @property
    def key(self) -> str:
        return dotted(self.path)

    @property
    def leaf(self) -> str:
        return str(self.path[-1]) if self.path else ""


class TypeProblem:
    field: Field
    expected: str

    __slots__ = ('field', 'expected')

    def __init__(self, field, expected):
        self.field = field
        self.expected = expected

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(field={self.field!r}, expected={self.expected!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.field, self.expected) == (other.field, other.expected)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


class RunView:
    doc: Document
    layout: Layout | None
    fields: dict[str, Field]
    method: str | None  # "full" | "lora" | "qlora"
    method_stated: bool
    method_field: Field | None
    type_problems: list[TypeProblem]
    # numbers beyond findings.MAX_MAGNITUDE: written, but set aside (their Field's value is None)
    out_of_range: list[Field]
    skipped: str | None  # why this document is not a training config
    attached: list["RunView"]  # configs this one points to
    # what the config names and what could not be followed (links.Link records)
    links: list
    # values the file does not write but the run has: from a linked file, the launch context,
    # the runner's defaults, or an assumption (each Field says which in ``origin`` and ``note``)
    supplied: dict[str, Field]
    model_found: tuple | None  # (Architecture or None,) once the model was looked up
    run: Any  # the opened run (cfgcheck.run.OpenedRun) this view belongs to

    __slots__ = ('doc', 'layout', 'fields', 'method', 'method_stated', 'method_field', 'type_problems', 'out_of_range', 'skipped', 'attached', 'links', 'supplied', 'model_found', 'run')

    def __init__(self, doc, layout, fields=None, method=None, method_stated=False, method_field=None, type_problems=None, out_of_range=None, skipped=None, attached=None, links=None, supplied=None, model_found=None, run=None):
        self.doc = doc
        self.layout = layout
        self.fields = {} if fields is None else fields
        self.method = method
        self.method_stated = method_stated
        self.method_field = method_field
        self.type_problems = [] if type_problems is None else type_problems
        self.out_of_range = [] if out_of_range is None else out_of_range
        self.skipped = skipped
        self.attached = [] if attached is None else attached
        self.links = [] if links is None else links
        self.supplied = {} if supplied is None else supplied
        self.model_found = model_found
        self.run = run

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(doc={self.doc!r}, layout={self.layout!r}, fields={self.fields!r}, method={self.method!r}, method_stated={self.method_stated!r}, method_field={self.method_field!r}, type_problems={self.type_problems!r}, out_of_range={self.out_of_range!r}, skipped={self.skipped!r}, attached={self.attached!r}, links={self.links!r}, supplied={self.supplied!r}, model_found={self.model_found!r}, run={self.run!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.doc, self.layout, self.fields, self.method, self.method_stated, self.method_field, self.type_problems, self.out_of_range, self.skipped, self.attached, self.links, self.supplied, self.model_found, self.run) == (other.doc, other.layout, other.fields, other.method, other.method_stated, other.method_field, other.type_problems, other.out_of_range, other.skipped, other.attached, other.links, other.supplied, other.model_found, other.run)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key

    def effective(self, name: str) -> Field | None:
        """The written value when there is one, else what the run supplies (default, launch...)."""
        f = self.fields.get(name)
        if f is not None and (f.value is not None or f.auto and name not in self.supplied):
            return f
        return self.supplied.get(name, f)

    def effective_value(self, name: str, default: Any = None) -> Any:
        f = self.effective(name)
        if f is None or f.value is None:
            return default
        return f.value

    def effective_on(self, name: str) -> bool:
        return self.effective_value(name) is True

    def get(self, name: str) -> Field | None:
        return self.fields.get(name)

    def value(self, name: str, default: Any = None) -> Any:
        f = self.fields.get(name)
        if f is None or f.value is None:
            return default
        return f.value

    def has(self, name: str) -> bool:
        f = self.fields.get(name)
        return f is not None and f.value is not None

    def is_on(self, name: str) -> bool:
        return self.value(name) is True

    @property
    def is_adapter(self) -> bool:
        return self.method in ("lora", "qlora")


# --------------------------------------------------------------------------- detection

_CAMEL = re.compile(r"(?<=[a-z0-9])(?=[A-Z])")


_SECTION_WORD_CACHE: dict[str, str] = {}


def section_word(key: str) -> str:
    """A section name as the tables spell it: lower case, CamelCase split (TrainingArguments ->
    training_arguments), dashes as underscores."""
    word = _SECTION_WORD_CACHE.get(key)
    if word is None:
        word = _CAMEL.sub("_", key).lower().replace("-", "_")
        if len(_SECTION_WORD_CACHE) < 4096:  # the names files use are few; a hostile file's stay bounded
            _SECTION_WORD_CACHE[key] = word
    return word


_SCORING_CACHE: dict[int, tuple[Layout, tuple]] = {}
_NO_NAMES: MappingProxyType = MappingProxyType({})


def _scoring(layout: Layout) -> tuple:
    """LAYOUT's scoring tables made ready: (signature, its names, the section names, the names
    each key of a section counts as, the section-local names by section word, the section words
    a nested search passes over). Only signature names are kept anywhere, since every other name
    scores 0; the per-section tables fill as sections are met."""
    got = _SCORING_CACHE.get(id(layout))
    if got is None or got[0] is not layout:
        sig = layout.signature
        got = _SCORING_CACHE[id(layout)] = (layout, (
            sig, frozenset(sig), frozenset(layout.sections), {}, {},
            layout.foreign_sections | layout.restricted_sections))
    return got[1]


def _section_counts(layout: Layout, tables: tuple, section: str) -> dict:
    """Key -> the signature names a key of SECTION (a name of ``layout.sections``) counts as:
    itself, itself after each of the section's prefixes, and its section-local name (not in a
    restricted section)."""
    counts = tables[3].get(section)
    if counts is None:
        sig = tables[0]
        found: dict[str, set] = {}
        for name in sig:
            found.setdefault(name, set()).add(name)
            for p in layout.sections[section]:
                if name.startswith(p):
                    found.setdefault(name[len(p):], set()).add(name)
        if section not in layout.restricted_sections:
            for key, name in layout.section_names.get(section, {}).items():
                if name in sig:
                    found.setdefault(key, set()).add(name)
        counts = tables[3][section] = {k: tuple(v) for k, v in found.items()}
    return counts


def _local_counts(layout: Layout, tables: tuple, word: str) -> Any:
    """The section-local names of section WORD that are signature names (lower-case key -> name)."""
    local = tables[4].get(word)
    if local is None:
        if word not in layout.section_names:
            return _NO_NAMES  # (any word a file uses: not kept, so a hostile file's stay bounded)
        sig = tables[0]
        local = tables[4][word] = {k: v for k, v in layout.section_names[word].items() if v in sig}
    return local


def _text_keys(mapping: dict) -> bool:
    """Whether every key of MAPPING is text."""
    try:
        "".join(mapping)
    except TypeError:
        return False
    return True


def _score(layout: Layout, data: dict, top: frozenset | None = None, subs: list | None = None) -> int:
    """The layout's signature weights of the names DATA spells (each name once): its top-level
    keys (``top``, the top-level keys, when the caller has them), and in the layout's sections
    their keys, prefixed keys and section-local names (every nested section too, for a layout that
    searches all sections; ``subs``: DATA's (text key, mapping) items, when the caller has them)."""
    tables = _scoring(layout)
    sig = tables[0]
    # (only text can be a signature name: the other keys of TOP drop out here)
    found = set(tables[1].intersection(data if top is None else top))
    for section in tables[2].intersection(data):
        sub = data[section]
        if isinstance(sub, dict) and sub:
            counts = _section_counts(layout, tables, section)
            for key in counts.keys() & sub.keys():
                found.update(counts[key])
            prefixes = layout.sections[section]
            if prefixes and not _text_keys(sub):  # a prefix glued to a number may be a name
                found.update(n for n in (p + str(k) for k in sub if not isinstance(k, str) for p in prefixes)
                             if n in sig)
    if layout.search_all_sections:  # sections named as the author likes, nested too
        _score_nested(layout, tables, _sections_of(data) if subs is None else subs, found)
    return sum(map(sig.__getitem__, found))


def _sections_of(mapping: dict) -> list:
    """MAPPING's (text key, mapping) items."""
    return [(k, v) for k, v in mapping.items() if isinstance(v, dict) and isinstance(k, str)]


def _score_nested(layout: Layout, tables: tuple, subs: list, found: set) -> None:
    """The names of every mapping below the top (SUBS: the top level's sections) down to
    _MAX_SECTION_DEPTH, but for those under a foreign or restricted section."""
    sig, skipped, known = tables[0], tables[5], tables[4]
    for depth in range(_MAX_SECTION_DEPTH - 1):
        below = []
        for key, value in subs:
            word = _SECTION_WORD_CACHE.get(key) or section_word(key)
            if word in skipped:
                continue
            found.update(sig.keys() & value.keys())
            local = known.get(word)
            if local is None:
                local = _local_counts(layout, tables, word)
            if local:
                for sub in value:
                    if isinstance(sub, str):
                        name = local.get(sub.lower())
                        if name is not None:
                            found.add(name)
            if depth < _MAX_SECTION_DEPTH - 2:
                below += _sections_of(value)
        if not below:
            return
        subs = below


NOT_READ_YET = "not a format cfgcheck reads (yet)"
_TUNED = ("train_micro_batch_size_per_gpu", "gradient_accumulation_steps", "train_batch_size")
_MARKER_KEYS = ("_target_", "class_path")


def _has_target(data: Any, depth: int = 0) -> bool:
    if not isinstance(data, dict) or depth > 3:
        return False
    return "_target_" in data or any(_has_target(v, depth + 1) for v in data.values())


def _has_class_path(data: Any, depth: int = 0) -> bool:
    if not isinstance(data, dict) or depth > 3:
        return False
    if isinstance(data.get("class_path"), str) and "init_args" in data:
        return True
    return any(_has_class_path(v, depth + 1) for v in data.values())


def _marker_keys(data: dict) -> frozenset:
    """Which of _MARKER_KEYS are keys of DATA or of the mappings inside it down to the depth
    _has_target and _has_class_path look (a mapping's values that are mappings, three levels down)."""
    found: set = set()
    level = [data]
    for depth in range(4):
        below = []
        for mapping in level:
            if "_target_" in mapping:
                found.add("_target_")
            if "class_path" in mapping:
                found.add("class_path")
            if depth < 3:
                below += [v for v in mapping.values() if isinstance(v, dict)]
        if not below:
            break
        level = below
    return frozenset(found)


def _matches(fmt: UnreadFormat, data: dict, top_names: frozenset | None = None,
             keys: list | None = None) -> bool:
    """Whether DATA is in FMT (TOP_NAMES: DATA's str keys with dashes as underscores; KEYS: a
    list that holds, or gets, which of _MARKER_KEYS DATA's mappings have; when the caller has them)."""
    shape = fmt.shape
    if shape:
        if shape in ("class-path", "composed") and keys is not None and not keys:
            keys.append(_marker_keys(data))
        if shape == "class-path":
            if keys is not None and "class_path" not in keys[0]:
                return False  # no mapping has one
            return _has_class_path(data)
        if shape == "composed":
            defaults = data.get("defaults")
            listed = isinstance(defaults, list) and defaults and all(
                isinstance(x, (str, dict)) for x in defaults)
            named = not data.keys().isdisjoint(BASE_FILE_KEYS) and any(
                isinstance(data.get(k), str) and data[k].strip().lower().endswith((".yaml", ".yml", ".json"))
                for k in BASE_FILE_KEYS)  # still there: the base file could not be read
            return bool(listed) or named or (
                "_target_" in keys[0] if keys is not None else _has_target(data))
        if shape == "tuning-space":
            zero = data.get("zero_optimization")
            stage_list = isinstance(zero, dict) and isinstance(zero.get("stage"), list)
            return stage_list or not data.keys().isdisjoint(_TUNED) and any(
                isinstance(data.get(k), list) for k in _TUNED)
    if not fmt.section and top_names is not None:
        names = top_names
    else:
        where = data.get(fmt.section) if fmt.section else data
        if not isinstance(where, dict):
            return False
        names = {k.replace("-", "_") for k in where if isinstance(k, str)}
    if fmt.required and names.isdisjoint(fmt.required):
        return False
    return len(names & fmt.marks) >= fmt.min_hits


def _top_names(data: dict) -> frozenset:
    """DATA's text keys with dashes as underscores."""
    try:
        if "-" not in "".join(data):
            return frozenset(data)
    except TypeError:
        pass
    return frozenset(k.replace("-", "_") for k in data if isinstance(k, str))


def unread_format(data: Any, data_shape: tuple | None = None) -> UnreadFormat | None:
    """The format cfgcheck recognises but does not read that DATA is in, or None. DATA_SHAPE:
    ``shape(data)``, when the caller has it: which formats the keys leave open is then worked out
    once per structure (``_open_formats``), and only those that also read values are tried."""
    if not isinstance(data, dict):
        return None
    top_names = _top_names(data)
    keys: list = []  # which marker keys the mappings have, found when a format first needs them
    if data_shape is not None:
        open_ = _OPEN_FORMATS_BY_SHAPE_CACHE.get(data_shape)
        if open_ is None:
            open_ = _kept(_OPEN_FORMATS_BY_SHAPE_CACHE, data_shape, _open_formats(data, top_names))
        for fmt in open_:
            if not fmt.shape or _matches(fmt, data, top_names, keys):
                return fmt
        return None
    for fmt in UNREAD_FORMATS:
        if not fmt.shape:  # (the quick refusals of _matches, without the call)
            if fmt.section:
                if not isinstance(data.get(fmt.section), dict):
                    continue
            elif fmt.required and top_names.isdisjoint(fmt.required):
                continue
        if _matches(fmt, data, top_names, keys):
            return fmt
    return None


def _open_formats(data: dict, top_names: frozenset) -> tuple[UnreadFormat, ...]:
    """The formats of UNREAD_FORMATS, in order, that DATA's keys leave open, up to the first one
    the keys alone settle: a format judged by its marking keys matches or not by those keys (its
    section's, or the top-level ones with dashes as underscores), and ends the list when it
    matches; one of a special shape stays when the keys it reads its values at are there
    (``_matches`` then decides on the values). A pure function of ``shape(data)``."""
    marker = _marker_keys(data)
    out = []
    for fmt in UNREAD_FORMATS:
        kind = fmt.shape
        if kind == "class-path":
            if "class_path" in marker:
                out.append(fmt)
        elif kind == "composed":
            if "defaults" in data or not data.keys().isdisjoint(BASE_FILE_KEYS) or "_target_" in marker:
                out.append(fmt)
        elif kind == "tuning-space":
            if "zero_optimization" in data or not data.keys().isdisjoint(_TUNED):
                out.append(fmt)
        elif kind:
            out.append(fmt)  # a shape not described here: tried on every document
        elif _matches(fmt, data, top_names):
            out.append(fmt)
            break  # it matches whatever the values: no later format is reached
    return tuple(out)


_OPEN_FORMATS_BY_SHAPE_CACHE: dict[tuple, tuple] = {}


# --------------------------------------------------------------------------- key structure

# Detection and the field index read only a document's key structure: the keys of each mapping
# in order and which values are mappings, down to the depth they search. Configs made from one
# template share it, so what those two work out is kept per structure (and per layout).
_SHAPE_DEPTH = 5  # levels of mappings recorded; deeper ones are recorded as a mapping only
_SHAPE_MAX_KEYS = 2048  # a document with more keys is not kept (memory stays bounded)
_SHAPE_MEMO_MAX = 256  # structures kept per table


class _NoShape(Exception):
    pass


def _shape_of(mapping: dict, depth: int, budget: list) -> tuple:
    keys = tuple(mapping)
    try:
        "".join(keys)  # (1, 1.0 and True are equal keys but different names: only text is kept)
    except TypeError:
        raise _NoShape from None
    budget[0] -= len(keys)
    if budget[0] < 0:
        raise _NoShape
    if depth >= _SHAPE_DEPTH - 1:
        subs = tuple([k for k, v in mapping.items() if isinstance(v, dict)])
        return (keys, subs) if subs else keys
    subs = tuple([(k, _shape_of(v, depth + 1, budget)) for k, v in mapping.items() if isinstance(v, dict)])
    return (keys, subs) if subs else keys


def shape(data: Any) -> tuple | None:
    """DATA's key structure (a mapping's keys in order; with mapping values, (its keys, (key, that
    value's structure) for each)), the same for two documents exactly when detection and the field
    index see the same keys; None for data that is not a mapping, a key that is not text within
    the recorded depth, or a document too large to keep."""
    if not isinstance(data, dict):
        return None
    try:
        return _shape_of(data, 0, [_SHAPE_MAX_KEYS])
    except _NoShape:
        return None


def _kept(memo: dict, key: Any, value: Any) -> Any:
    if len(memo) >= _SHAPE_MEMO_MAX:
        memo.clear()
    memo[key] = value
    return value


# every word NOT_TRAINING looks for: a document with none of them is none of those files
_NOT_TRAINING_WORDS = frozenset().union(*NOT_TRAINING.values())
_DETECTION_CACHE: dict[str, tuple] = {}


def _detection() -> tuple:
    """(each signature name -> the places in LAYOUTS of the layouts it is one of; each section
    name -> the same; the places of the layouts that search every section; all of those names)."""
    got = _DETECTION_CACHE.get("tables")
    if got is None:
        by_sig: dict[str, set] = {}
        by_section: dict[str, set] = {}
        for i, layout in enumerate(LAYOUTS):
            for name in layout.signature:
                by_sig.setdefault(name, set()).add(i)
            for name in layout.sections:
                by_section.setdefault(name, set()).add(i)
        got = _DETECTION_CACHE["tables"] = (
            by_sig, by_section, frozenset(i for i, lay in enumerate(LAYOUTS) if lay.search_all_sections),
            frozenset(by_sig), frozenset(by_section))
    return got


_BEST_BY_SHAPE_CACHE: dict[tuple, Any] = {}


def detect_layout(data: Any, data_shape: tuple | None = None) -> tuple[Layout | None, str | None]:
    """The layout of a document, or why it is not a training config (DATA_SHAPE: ``shape(data)``,
    when the caller has it: the scoring, which reads only the keys, is then done once per
    structure)."""
    if not isinstance(data, dict):
        if data is None:
            return None, "empty document"
        return None, "top level is not a mapping"
    top = frozenset(data)  # (a key that is not text matches no word below)
    if not top.isdisjoint(_NOT_TRAINING_WORDS):
        for what, marks in NOT_TRAINING.items():
            if len(top & marks) >= 2 or (what == "github-workflow" and True in data and "jobs" in top):
                return None, f"looks like a {what} file"
    unread = unread_format(data, data_shape)
    if unread is not None:
        return None, f"{unread.title} ({unread.name}): {NOT_READ_YET}"
    if data_shape is not None:
        best = _BEST_BY_SHAPE_CACHE.get(data_shape, _NO_NAMES)
        if best is _NO_NAMES:
            best = _kept(_BEST_BY_SHAPE_CACHE, data_shape, _best_layout(data, top))
    else:
        best = _best_layout(data, top)
    if best is None:
        return None, "no training-config keys found"
    return best, None


def _best_layout(data: dict, top: frozenset) -> Layout | None:
    """The layout that scores highest on DATA's keys (TOP: its top-level keys), or None."""
    by_sig, by_section, search_all, sig_names, section_names = _detection()
    # the layouts that can score: a name of its signature at the top, or a section it reads
    places: set[int] = set()
    for name in sig_names.intersection(top):
        places.update(by_sig[name])
    subs = _sections_of(data)
    if subs or any(isinstance(v, dict) for v in data.values()):
        places.update(search_all)
        for name in section_names.intersection(top):
            places.update(by_section[name])
    best, best_score = None, 0
    for i in sorted(places):
        layout = LAYOUTS[i]
        s = _score(layout, data, top, subs)
        if s >= layout.min_score and layout.extends and top & layout.extends_marks:
            s += _score(BY_NAME[layout.extends], data, top, subs)
        if s >= layout.min_score and s > best_score:
            best, best_score = layout, s
    return best


# --------------------------------------------------------------------------- building

_MAX_SECTION_DEPTH = 4


_FULL_NAMES = ("eval_", "per_device_eval", "evaluation_", "logging_", "save_", "load_best", "metric_for_best",
               "greater_is_better")


def _index(layout: Layout, data: dict, wanted: Any, values: dict[tuple, Any]) -> dict[str, list[tuple]]:
    """Bare names (those in WANTED) -> the key paths that spell them with a value that is not a
    mapping (a mapping is a section that shares the name), the preferred one first; VALUES gets
    the value at each of those paths.

    The top level comes first, then sections breadth-first in file order. Inside a section the
    layout knows, the section's prefixes may be dropped (``lora: {alpha: 32}``) and its
    section-local names count (``model: {name_or_path: ...}``). A restricted section (``eval:``)
    gives only its local names; a foreign one (``ref_model:``, an inline DeepSpeed mapping) and
    everything below it is never searched. With ``search_all_sections`` a mapping under any other
    name is searched for bare names as written.
    """
    index: dict[str, list[tuple]] = {}
    sections, section_names = layout.sections, layout.section_names
    foreign, restricted_words = layout.foreign_sections, layout.restricted_sections
    search_all = layout.search_all_sections
    queue: list[tuple[tuple, dict, tuple[str, ...], Any, bool]] = [((), data, (), None, False)]
    for base, mapping, prefixes, local, restricted in queue:  # (the queue grows as it is read)
        deep = len(base) >= _MAX_SECTION_DEPTH - 1
        for key, value in mapping.items():
            if not isinstance(key, str):
                continue
            if isinstance(value, dict):
                if deep:
                    continue
                lowered = section_word(key)
                if lowered in foreign:
                    continue
                if not search_all and key not in sections and lowered not in section_names:
                    continue
                queue.append((base + (key,), value, prefixes + sections.get(key, ()),
                              section_names.get(lowered) or None, restricted or lowered in restricted_words))
                continue
            names = []
            if local is not None:
                name = local.get(key.lower())
                if name is not None and name in wanted:
                    names.append(name)
            if not restricted:
                if key in wanted:
                    names.append(key)
                for pre in prefixes:
                    if pre + key in wanted:
                        names.append(pre + key)
            elif key.startswith(_FULL_NAMES) and key in wanted:
                names.append(key)  # a full name of an evaluation or checkpoint setting is that setting
            if names:
                path = base + (key,)
                values[path] = value
                for name in names:
                    paths = index.get(name)
                    if paths is None:
                        index[name] = [path]
                    elif path not in paths:
                        paths.append(path)
    return index


def _walk(data: Any, path: tuple) -> tuple[bool, Any]:
    cur = data
    for part in path:
        if isinstance(cur, dict) and part in cur:
            cur = cur[part]
        else:
            return False, None
    return True, cur


def _coerce(name: str, written: Any) -> tuple[Any, bool, bool, bool]:
    """-> (value, ok, auto, from_text)."""
    kind = FIELD_TYPES.get(name, "any")
    if written is None:
        return None, True, False, False
    if isinstance(written, str) and written.strip().lower() == "auto":
        return None, True, True, False
    if kind == "any":
        return written, True, False, False
    if kind in ("int", "number"):
        if isinstance(written, bool):
            return written, False, False, False
        if isinstance(written, (int, float)):
            if kind == "int" and isinstance(written, float) and written.is_integer():
                return int(written), True, False, False
            return written, kind == "number" or isinstance(written, int), False, False
        if isinstance(written, str) and _NUMBER.match(written.strip()):
            v = float(written.strip().replace("_", ""))
            if kind == "int" and v.is_integer():
                return int(v), True, False, True
            return v, kind == "number", False, True
        return written, False, False, False
    if kind == "bool":
        if isinstance(written, bool):
            return written, True, False, False
        if isinstance(written, str) and written.strip().lower() in _TRUE | _FALSE:
            return written.strip().lower() in _TRUE, True, False, True
        return written, False, False, False
    if kind == "str":
        if isinstance(written, (dict, list)):
            return written, False, False, False
        return written if isinstance(written, str) else str(written), True, False, False
    if kind == "names":
        if isinstance(written, str):
            return written, True, False, False
        if isinstance(written, list) and all(isinstance(x, str) for x in written):
            return list(written), True, False, False
        return written, False, False, False
    return written, True, False, False


def _also(values: dict[tuple, Any], paths: list[tuple]) -> str:
    """A note when the same setting is written in more than one place with different values
    (VALUES: the value at each path)."""
    if len(paths) < 2:
        return ""
    first = values[paths[0]]
    others = [p for p in paths[1:] if values[p] != first]
    if not others:
        return ""
    where = ", ".join(f"{dotted(p)}: {values[p]!r}" for p in others[:3])
    return f"{dotted(paths[0])} is used (the top level first, then the first section); also written: {where}"


# the types a value of each field type is used as written in (a text value once it is not "auto")
_AS_WRITTEN: MappingProxyType[str, frozenset] = MappingProxyType({
    "any": frozenset({type(None), bool, int, float, str, list, dict}),
    "int": frozenset({type(None), int}),
    "number": frozenset({type(None), int, float}),
    "bool": frozenset({type(None), bool}),
    "str": frozenset({type(None), str}),
    "names": frozenset({type(None), str}),
})


_INTERP = later(r"\$\{([^${}]+)\}")


def resolve_interpolation(data: Any, written: Any, depth: int = 0) -> tuple[bool, Any]:
    """``${a.b}`` -> the value at a.b in the same file (OmegaConf's node interpolation).

    A value that is one interpolation takes the type of its target; interpolations inside a
    longer text are replaced by the target's text. Resolvers (``${oc.env:X}``), relative paths
    (``${.x}``) and targets outside the file stay as written. -> (resolved, value).
    """
    if not isinstance(written, str) or "${" not in written or depth > 8:
        return False, written
    whole = _INTERP.fullmatch(written.strip())

    def target(expr: str) -> tuple[bool, Any]:
        expr = expr.strip()
        if ":" in expr or expr.startswith("."):
            return False, None
        found, value = _walk(data, tuple(expr.split(".")))
        if not found or isinstance(value, (dict, list)):
            return False, None
        ok, value2 = resolve_interpolation(data, value, depth + 1)
        return True, value2 if ok else value

    if whole:
        ok, value = target(whole.group(1))
        return (True, value) if ok else (False, written)
    parts, pos, out = list(_INTERP.finditer(written)), 0, ""
    for m in parts:
        ok, value = target(m.group(1))
        if not ok:
            return False, written
        out += written[pos:m.start()] + str(value)
        pos = m.end()
    return True, out + written[pos:]


_FILL_PLAN_CACHE: dict[int, tuple[dict, tuple, dict, dict, int]] = {}


def _fill_plan(layout: Layout) -> tuple[tuple, dict, dict, int]:
    """LAYOUT's field table made ready: ((name, ((root path or None, bare name or None), ...),
    field type, the types a value is used as written in), ...) in table order, which fields a
    bare name, or a top-level key that starts a root path, can fill (their places in that order),
    and the length of its longest root path."""
    fields = layout.fields
    got = _FILL_PLAN_CACHE.get(id(fields))
    if got is None or got[0] is not fields:
        plan, by_name, by_root = [], {}, {}
        for i, (name, specs) in enumerate(fields.items()):
            compiled = []
            for spec in specs:
                if spec.startswith("="):
                    path = tuple(spec[1:].split("."))
                    compiled.append((path, None))
                    by_root.setdefault(path[0], []).append(i)
                else:
                    compiled.append((None, spec))
                    by_name.setdefault(spec, []).append(i)
            kind = FIELD_TYPES.get(name, "any")
            plan.append((name, tuple(compiled), kind, _AS_WRITTEN.get(kind, frozenset())))
        deepest = max((len(p) for _n, specs, _k, _w in plan for p, _b in specs if p is not None), default=0)
        got = _FILL_PLAN_CACHE[id(fields)] = (fields, tuple(plan), by_name, by_root, deepest)
    return got[1], got[2], got[3], got[4]


_CHOICES_BY_SHAPE_CACHE: dict[tuple, tuple] = {}


def _choices(layout: Layout, data: dict) -> list[tuple]:
    """The fields of LAYOUT's table that DATA's keys fill, in table order: (the field's place in
    the table, the key path its value is read at, every path that spells it when there are
    several (the first is used), else None). Reads only DATA's keys."""
    plan, by_name, by_root, _deepest = _fill_plan(layout)
    # (a table with bare names has them in by_name; a mapping is a section that shares a name,
    # not a value, so the index holds only paths to other values)
    index = _index(layout, data, by_name, {}) if by_name else _NO_NAMES
    # only the fields a name of this file can fill, in table order
    hits: set[int] = set()
    for key in index:
        hits.update(by_name[key])
    if by_root:
        for key in by_root.keys() & data.keys():
            hits.update(by_root[key])
    out = []
    for i in sorted(hits):
        for path, bare in plan[i][1]:
            if path is None:
                paths = index.get(bare)
                if not paths:
                    continue
                out.append((i, paths[0], tuple(paths) if len(paths) > 1 else None))
            else:
                found, _written = _walk(data, path)
                if not found:
                    continue
                out.append((i, path, None))
            break
    return out


def _at(data: dict, path: tuple) -> Any:
    """The value at PATH, a path _choices found in DATA."""
    for part in path:
        data = data[part]
    return data


def fill(view: RunView, layout: Layout, data: dict, data_shape: tuple | None = None) -> None:
    """Fill the view's fields from one layout's table (a Field for each value found, typed by
    ``_coerce``). DATA_SHAPE: ``shape(data)``, when the caller has it: which paths fill which
    fields is then worked out once per structure."""
    plan, _by_name, _by_root, deepest = _fill_plan(layout)
    if data_shape is None or deepest > _SHAPE_DEPTH:
        choices = _choices(layout, data)
    else:
        key = (id(layout), data_shape)
        got = _CHOICES_BY_SHAPE_CACHE.get(key)
        if got is None or got[0] is not layout:
            got = _kept(_CHOICES_BY_SHAPE_CACHE, key, (layout, _choices(layout, data)))
        choices = got[1]
    kind = data.get(layout.kind_key) if layout.kind_key else None
    other_kind = isinstance(kind, str) and kind.strip().upper() not in layout.kinds_described
    fields = view.fields
    assumed = view.doc.assumed
    interpolates = view.layout is not None and view.layout.interpolates
    for i, path, paths in choices:
        name, specs, kind, plain = plan[i]
        if other_kind and name not in layout.fields_for_any_kind:
            continue  # the table describes other kinds: these keys mean something else here
        if name in fields:
            continue
        written = data[path[0]] if len(path) == 1 else _at(data, path)
        note = _also({p: _at(data, p) for p in paths}, paths) if paths is not None else ""
        source = written
        if interpolates and isinstance(written, str) and "${" in written:
            resolved, value = resolve_interpolation(view.doc.data, written)
            if resolved:
                source = value
        t = type(source)
        if t in plain and (t is not str or source.strip().lower() != "auto"):
            value, ok, auto, from_text = source, True, False, False  # what _coerce gives, without its tests
            # no rule does arithmetic on a number past any run's range
            if t is int:
                huge = source > MAX_MAGNITUDE or source < -MAX_MAGNITUDE
            else:
                huge = t is float and too_large(source)
        else:
            value, ok, auto, from_text = _coerce(name, source)
            huge = ok and too_large(value)
        guess = assumed.get(path) if assumed else None
        f = Field(name, None if huge or not ok else value, path, written, auto, from_text,
                  "assumed" if guess else "written", guess or note)
        fields[name] = f
        if huge:
            view.out_of_range.append(f)
        if not ok:
            view.type_problems.append(TypeProblem(f, kind))


def _model_from_builder(view: RunView, layout: Layout, data: dict) -> None:
    """The model of a component recipe: the one its builder builds, else its checkpoint folder."""
    if view.has("model.ref") or (not layout.builder_models and not layout.model_dir):
        return
    builder = view.get("model.builder")
    if builder is not None and isinstance(builder.value, str):
        last = builder.value.rsplit(".", 1)[-1]
        base = re.sub(r"^q?lora_", "", last)
        for pattern, ref in layout.builder_models:
            if re.match(pattern, base):  # the whole name: code_llama2_7b is not llama2_7b
                view.fields["model.ref"] = Field(
                    name="model.ref", value=ref, path=builder.path, written=builder.written,
                    note=f"{ref}: the model the builder {last} builds")
                return
    if layout.model_dir:
        path = tuple(layout.model_dir.split("."))
        found, written = _walk(data, path)
        value = written
        if found and layout.interpolates:
            resolved, target = resolve_interpolation(data, written)
            value = target if resolved else written
        if found and isinstance(value, str) and value.strip() and "${" not in value:
            view.fields["model.ref"] = Field(name="model.ref", value=value.strip(), path=path,
                                             written=written, note="the checkpoint folder (its config.json)")


def _infer_method(view: RunView) -> None:
    layout = view.layout
    stated = view.get("method") or view.get("adapter.kind")
    if stated is not None and isinstance(stated.value, str):
        word = stated.value.strip().lower()
        words = layout.method_values if layout is not None else METHOD_WORDS
        mapped = words.get(word)
        if mapped == "partial":
            view.method_stated, view.method_field = True, stated
            return  # some layers train fully, the others stay frozen: neither full nor adapter
        if mapped:
            view.method, view.method_stated, view.method_field = mapped, True, stated
    builder = view.get("model.builder")
    if view.method is None and layout is not None and layout.method_patterns and builder is not None \
            and isinstance(builder.value, str):
        for pattern, method in layout.method_patterns:
            if re.search(pattern, builder.value):
                view.method, view.method_stated, view.method_field = method, True, builder
                break
        else:
            view.method, view.method_stated, view.method_field = "full", True, builder
    if view.method is None:
        enabled = view.get("adapter.enabled")
        adapter_keys = any(
            view.has(n) for n in ("adapter.rank", "adapter.alpha", "adapter.targets")
        )
        if enabled is not None and enabled.value is False:
            view.method, view.method_field = "full", enabled
            view.method_stated = True
        elif (enabled is not None and enabled.value is True) or adapter_keys:
            view.method = "lora"
            view.method_stated = enabled is not None
            view.method_field = enabled
        elif layout is not None and layout.default_method and stated is None:
            view.method = layout.default_method
    bits = view.value("quant.bits")
    quantised = view.is_on("quant.load_4bit") or view.is_on("quant.load_8bit") or bits in (2, 3, 4, 5, 6, 8)
    if view.method == "lora" and quantised:
        view.method = "qlora"


def build_view(doc: Document, layout_name: str | None = None) -> RunView:
    data_shape = shape(doc.data)
    if layout_name:
        layout, why = BY_NAME[layout_name], None
        if not isinstance(doc.data, dict):
            layout, why = None, "top level is not a mapping"
    else:
        layout, why = detect_layout(doc.data, data_shape)
    view = RunView(doc=doc, layout=layout, skipped=why)
    if layout is None:
        return view
    fill(view, layout, doc.data, data_shape)
    _model_from_builder(view, layout, doc.data)
    _infer_method(view)
    return view
