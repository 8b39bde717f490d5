"""The typed view: one description of a training run, whatever key layout the file used.

Every value carries where it came from (its key path in the document), so a rule can report on
it without knowing how the file spelled it.
"""

from __future__ import annotations

import re
from typing import Any

from ._records import guarded_repr
from .findings import too_large
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


def _score(layout: Layout, data: dict, top: frozenset | None = None) -> int:
    """The layout's signature weights of the names DATA spells (each name once): its top-level
    keys (``top``, the str keys, when the caller has them), and in the layout's sections their
    keys, prefixed keys and section-local names (every nested section too, for a layout that
    searches all sections)."""
    names = None
    sections = layout.sections
    for section in (data if len(data) < len(sections) else sections):
        prefixes = sections.get(section)
        sub = data.get(section) if prefixes is not None else None
        if isinstance(sub, dict):
            if names is None:
                names = set(data)
            local = layout.section_names.get(section, {})
            for key in sub:
                names.add(key)
                names.update(p + str(key) for p in prefixes)
                if key in local and section not in layout.restricted_sections:
                    names.add(local[key])
    if layout.search_all_sections:  # sections named as the author likes, nested too
        if names is None:
            names = set(data)
        _score_nested(layout, data, names, 0)
    sig = layout.signature
    if names is None:  # no section of this layout: the top-level names alone
        if top is None:
            top = frozenset(k for k in data if isinstance(k, str))
        return sum(sig[k] for k in top if k in sig)
    return sum(sig.get(k, 0) for k in names if isinstance(k, str))


def _score_nested(layout: Layout, mapping: dict, names: set, depth: int) -> None:
    for key, value in mapping.items():
        if not isinstance(key, str) or not isinstance(value, dict) or depth >= _MAX_SECTION_DEPTH - 1:
            continue
        word = section_word(key)
        if word in layout.foreign_sections or word in layout.restricted_sections:
            continue
        local = layout.section_names.get(word, {})
        for sub in value:
            if isinstance(sub, str):
                names.add(sub)
                if sub.lower() in local:
                    names.add(local[sub.lower()])
        _score_nested(layout, value, names, depth + 1)


NOT_READ_YET = "not a format cfgcheck reads (yet)"
_TUNED = ("train_micro_batch_size_per_gpu", "gradient_accumulation_steps", "train_batch_size")


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


def _mapping_keys(data: dict) -> set:
    """The keys of DATA and of the mappings inside it down to the depth _has_target and
    _has_class_path look (a mapping's values that are mappings, three levels down)."""
    keys: set = set()
    stack = [(data, 0)]
    while stack:
        mapping, depth = stack.pop()
        keys.update(mapping)
        if depth < 3:
            stack.extend((v, depth + 1) for v in mapping.values() if isinstance(v, dict))
    return keys


def _matches(fmt: UnreadFormat, data: dict, top_names: frozenset | None = None,
             keys: list | None = None) -> bool:
    """Whether DATA is in FMT (TOP_NAMES: DATA's str keys with dashes as underscores; KEYS: a
    list that holds, or gets, DATA's _mapping_keys; when the caller has them)."""
    if fmt.shape in ("class-path", "composed") and keys is not None and not keys:
        keys.append(_mapping_keys(data))
    if fmt.shape == "class-path":
        if keys is not None and "class_path" not in keys[0]:
            return False  # no mapping has one
        return _has_class_path(data)
    if fmt.shape == "composed":
        defaults = data.get("defaults")
        listed = isinstance(defaults, list) and defaults and all(
            isinstance(x, (str, dict)) for x in defaults)
        named = any(isinstance(data.get(k), str) and data[k].strip().lower().endswith((".yaml", ".yml", ".json"))
                    for k in BASE_FILE_KEYS)  # still there: the base file could not be read
        return bool(listed) or named or (
            "_target_" in keys[0] if keys is not None else _has_target(data))
    if fmt.shape == "tuning-space":
        zero = data.get("zero_optimization")
        stage_list = isinstance(zero, dict) and isinstance(zero.get("stage"), list)
        return stage_list or any(isinstance(data.get(k), list) for k in _TUNED)
    if not fmt.section and top_names is not None:
        names = top_names
    else:
        where = data.get(fmt.section) if fmt.section else data
        if not isinstance(where, dict):
            return False
        names = {k.replace("-", "_") for k in where if isinstance(k, str)}
    hits = names & fmt.marks
    return len(hits) >= fmt.min_hits and (not fmt.required or bool(names & fmt.required))


def unread_format(data: Any) -> UnreadFormat | None:
    """The format cfgcheck recognises but does not read that DATA is in, or None."""
    if not isinstance(data, dict):
        return None
    top_names = frozenset(k.replace("-", "_") for k in data if isinstance(k, str))
    keys: list = []  # the mapping keys, found when a format first needs them
    for fmt in UNREAD_FORMATS:
        if _matches(fmt, data, top_names, keys):
            return fmt
    return None


_SCORING_KEYS_CACHE: dict[int, tuple[Layout, frozenset, frozenset]] = {}


def _scoring_keys(layout: Layout) -> tuple[frozenset, frozenset]:
    """(the top-level names LAYOUT's signature weighs, its section names): a document with
    neither (and, for a layout that searches all sections, no mapping at all) scores 0."""
    got = _SCORING_KEYS_CACHE.get(id(layout))
    if got is None or got[0] is not layout:
        got = _SCORING_KEYS_CACHE[id(layout)] = (layout, frozenset(layout.signature), frozenset(layout.sections))
    return got[1], got[2]


def detect_layout(data: Any) -> tuple[Layout | None, str | None]:
    """The layout of a document, or why it is not a training config."""
    if not isinstance(data, dict):
        if data is None:
            return None, "empty document"
        return None, "top level is not a mapping"
    top = {k for k in data if isinstance(k, str)}
    for what, marks in NOT_TRAINING.items():
        if len(top & marks) >= 2 or (what == "github-workflow" and True in data and "jobs" in top):
            return None, f"looks like a {what} file"
    unread = unread_format(data)
    if unread is not None:
        return None, f"{unread.title} ({unread.name}): {NOT_READ_YET}"
    best, best_score = None, 0
    top = frozenset(top)
    nested = any(isinstance(v, dict) for v in data.values())
    for layout in LAYOUTS:
        keys = _scoring_keys(layout)
        if top.isdisjoint(keys[0]) and not (
                nested and (layout.search_all_sections or not keys[1].isdisjoint(data))):
            continue  # no name of its signature at the top, and no section it reads: it scores 0
        s = _score(layout, data, top)
        if s >= layout.min_score and layout.extends and top & layout.extends_marks:
            s += _score(BY_NAME[layout.extends], data, top)
        if s >= layout.min_score and s > best_score:
            best, best_score = layout, s
    if best is None:
        return None, "no training-config keys found"
    return best, None


# --------------------------------------------------------------------------- building

_MAX_SECTION_DEPTH = 4


def _index(layout: Layout, data: dict, values: dict[tuple, Any] | None = None) -> dict[str, list[tuple]]:
    """Bare names -> the key paths that spell them, the preferred one first (VALUES, when given,
    gets the value at each of those paths).

    The top level comes first, then sections breadth-first in file order. Inside a section the
    layout knows, the section's prefixes may be dropped (``lora: {alpha: 32}``) and its
    section-local names count (``model: {name_or_path: ...}``). A restricted section (``eval:``)
    gives only its local names; a foreign one (``ref_model:``, an inline DeepSpeed mapping) and
    everything below it is never searched. With ``search_all_sections`` a mapping under any other
    name is searched for bare names as written.
    """
    index: dict[str, list[tuple]] = {}
    queue: list[tuple[tuple, dict, tuple[str, ...], dict[str, str], bool]] = [((), data, (), {}, False)]

    def put(name: str, path: tuple) -> None:
        paths = index.setdefault(name, [])
        if path not in paths:
            paths.append(path)

    while queue:
        base, mapping, prefixes, local, restricted = queue.pop(0)
        for key, value in mapping.items():
            if not isinstance(key, str):
                continue
            path = base + (key,)
            if values is not None:
                values[path] = value
            if key.lower() in local:
                put(local[key.lower()], path)
            if not restricted:
                put(key, path)
                for pre in prefixes:
                    put(pre + key, path)
            elif key.startswith(("eval_", "per_device_eval", "evaluation_", "logging_", "save_",
                                 "load_best", "metric_for_best", "greater_is_better")):
                put(key, path)  # a full name of an evaluation or checkpoint setting is that setting
            if not isinstance(value, dict) or len(base) >= _MAX_SECTION_DEPTH - 1:
                continue
            lowered = section_word(key)
            if lowered in layout.foreign_sections:
                continue
            named = key in layout.sections or lowered in layout.section_names
            if not named and not layout.search_all_sections:
                continue
            sub_local = layout.section_names.get(lowered, {})
            sub_restricted = restricted or lowered in layout.restricted_sections
            queue.append((path, value, prefixes + layout.sections.get(key, ()), sub_local, sub_restricted))
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


def _add(view: RunView, name: str, path: tuple, written: Any, note: str = "") -> None:
    if name in view.fields:
        return
    source = written
    if view.layout is not None and view.layout.interpolates:
        resolved, value = resolve_interpolation(view.doc.data, written)
        if resolved:
            source = value
    value, ok, auto, from_text = _coerce(name, source)
    huge = ok and too_large(value)  # no rule does arithmetic on a number past any run's range
    guess = view.doc.assumed.get(tuple(path)) if view.doc.assumed else None
    f = Field(name=name, value=value if ok and not huge else None, path=path, written=written,
              auto=auto, from_text=from_text, note=guess or note,
              origin="assumed" if guess else "written")
    view.fields[name] = f
    if huge:
        view.out_of_range.append(f)
    if not ok:
        view.type_problems.append(TypeProblem(f, FIELD_TYPES.get(name, "any")))


_INTERP = re.compile(r"\$\{([^${}]+)\}")


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


_FILL_PLAN_CACHE: dict[int, tuple[dict, tuple, dict, dict]] = {}


def _fill_plan(layout: Layout) -> tuple[tuple, dict, dict]:
    """LAYOUT's field table made ready: ((name, ((root path or None, bare name or None), ...)),
    ...) in table order, and which fields a bare name, or a top-level key that starts a root path,
    can fill (their places in that order)."""
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
            plan.append((name, tuple(compiled)))
        got = _FILL_PLAN_CACHE[id(fields)] = (fields, tuple(plan), by_name, by_root)
    return got[1], got[2], got[3]


def fill(view: RunView, layout: Layout, data: dict) -> None:
    """Fill the view's fields from one layout's table."""
    values: dict[tuple, Any] = {}
    index = _index(layout, data, values) if layout.has_bare_names else {}
    kind = data.get(layout.kind_key) if layout.kind_key else None
    other_kind = isinstance(kind, str) and kind.strip().upper() not in layout.kinds_described
    plan, by_name, by_root = _fill_plan(layout)
    # only the fields a name of this file can fill, in table order
    hits: set[int] = set()
    for key in index:
        hits.update(by_name.get(key, ()))
    for key in data:
        hits.update(by_root.get(key, ()))
    for i in sorted(hits):
        name, specs = plan[i]
        if other_kind and name not in layout.fields_for_any_kind:
            continue  # the table describes other kinds: these keys mean something else here
        for path, bare in specs:
            if path is not None:
                found, written = _walk(data, path)
                if found:
                    _add(view, name, path, written)
                    break
            else:
                paths = [p for p in index.get(bare, ()) if not isinstance(values[p], dict)]
                if paths:  # (a mapping is a section that shares the name, not a value)
                    _add(view, name, paths[0], values[paths[0]], _also(values, paths))
                    break


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
    if layout_name:
        layout, why = BY_NAME[layout_name], None
        if not isinstance(doc.data, dict):
            layout, why = None, "top level is not a mapping"
    else:
        layout, why = detect_layout(doc.data)
    view = RunView(doc=doc, layout=layout, skipped=why)
    if layout is None:
        return view
    fill(view, layout, doc.data)
    _model_from_builder(view, layout, doc.data)
    _infer_method(view)
    return view
