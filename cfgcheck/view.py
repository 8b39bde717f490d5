"""The typed view: one description of a training run, whatever key layout the file used.

Every value carries where it came from (its key path in the document), so a rule can report on
it without knowing how the file spelled it.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from .findings import too_large
from .layouts import BY_NAME, FIELD_TYPES, LAYOUTS, NOT_TRAINING, Layout
from .load import Document, dotted

_NUMBER = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9][0-9_]*(?:\.[0-9_]*)?)(?:[eE][-+]?[0-9]+)?$")
_TRUE = {"true", "yes", "on", "1"}
_FALSE = {"false", "no", "off", "0"}


@dataclass(frozen=True, slots=True)
class Field:
    """One value of the view and where it was written."""

    name: str  # our name, e.g. "adapter.alpha"
    value: Any  # typed: numbers written as text are read as numbers here
    path: tuple  # key path in the document
    written: Any  # the value exactly as loaded
    auto: bool = False  # "auto": filled in at launch
    from_text: bool = False  # a number or boolean that was loaded as text
    # where the value came from: "written" (in this file), "linked" (a file this one names),
    # "launch" (a launch file or script the run is started with), "default" (the runner's own
    # default, with its source in ``note``), "flag" (the command line or the project file), or
    # "assumed" (a guess; ``note`` says it in words). Only "assumed" values can never make an error.
    origin: str = "written"
    note: str = ""  # in words: which file, which default and its source, or what was assumed

    @property
    def key(self) -> str:
        return dotted(self.path)

    @property
    def leaf(self) -> str:
        return str(self.path[-1]) if self.path else ""


@dataclass(slots=True)
class TypeProblem:
    field: Field
    expected: str


@dataclass(slots=True)
class RunView:
    doc: Document
    layout: Layout | None
    fields: dict[str, Field] = field(default_factory=dict)
    method: str | None = None  # "full" | "lora" | "qlora"
    method_stated: bool = False
    method_field: Field | None = None
    type_problems: list[TypeProblem] = field(default_factory=list)
    # numbers beyond findings.MAX_MAGNITUDE: written, but set aside (their Field's value is None)
    out_of_range: list[Field] = field(default_factory=list)
    skipped: str | None = None  # why this document is not a training config
    attached: list["RunView"] = field(default_factory=list)  # configs this one points to
    cache: dict = field(default_factory=dict)  # knowledge looked up once per view (the model)

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

def _score(layout: Layout, data: dict) -> int:
    names = set(data)
    for section, prefixes in layout.sections.items():
        sub = data.get(section)
        if isinstance(sub, dict):
            for key in sub:
                names.add(key)
                names.update(p + str(key) for p in prefixes)
    return sum(layout.signature.get(k, 0) for k in names if isinstance(k, str))


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
    best, best_score = None, 0
    for layout in LAYOUTS:
        s = _score(layout, data)
        if s >= layout.min_score and s > best_score:
            best, best_score = layout, s
    if best is None:
        return None, "no training-config keys found"
    return best, None


# --------------------------------------------------------------------------- building

def _index(layout: Layout, data: dict) -> dict[str, tuple]:
    """Bare names -> first key path that spells them, top level first."""
    index: dict[str, tuple] = {}
    queue: list[tuple[tuple, dict, tuple[str, ...]]] = [((), data, ())]
    while queue:
        base, mapping, prefixes = queue.pop(0)
        for key, value in mapping.items():
            if not isinstance(key, str):
                continue
            path = base + (key,)
            index.setdefault(key, path)
            for pre in prefixes:
                index.setdefault(pre + key, path)
            if isinstance(value, dict) and key in layout.sections and len(base) < 3:
                queue.append((path, value, prefixes + layout.sections[key]))
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


def _add(view: RunView, name: str, path: tuple, written: Any) -> None:
    if name in view.fields:
        return
    source = written
    if view.layout is not None and view.layout.interpolates:
        resolved, value = resolve_interpolation(view.doc.data, written)
        if resolved:
            source = value
    value, ok, auto, from_text = _coerce(name, source)
    huge = ok and too_large(value)  # no rule does arithmetic on a number past any run's range
    f = Field(name=name, value=value if ok and not huge else None, path=path, written=written,
              auto=auto, from_text=from_text)
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


def fill(view: RunView, layout: Layout, data: dict) -> None:
    """Fill the view's fields from one layout's table."""
    index = _index(layout, data) if layout.has_bare_names else {}
    for name, specs in layout.fields.items():
        for spec in specs:
            if spec.startswith("="):
                found, written = _walk(data, tuple(spec[1:].split(".")))
                if found:
                    _add(view, name, tuple(spec[1:].split(".")), written)
                    break
            else:
                path = index.get(spec)
                if path is not None:
                    found, written = _walk(data, path)
                    if isinstance(written, dict):
                        continue  # a section that shares the name, not a value
                    _add(view, name, path, written)
                    break


def _infer_method(view: RunView) -> None:
    layout = view.layout
    stated = view.get("method") or view.get("adapter.kind")
    if stated is not None and isinstance(stated.value, str):
        word = stated.value.strip().lower()
        mapped = {"lora": "lora", "qlora": "qlora", "full": "full", "freeze": None}.get(word)
        if mapped:
            view.method, view.method_stated, view.method_field = mapped, True, stated
        elif word == "freeze":
            view.method_stated, view.method_field = True, stated
            return  # some layers train fully, the others stay frozen: neither full nor adapter
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
        elif layout is not None and layout.name == "peft-adapter":
            view.method = "lora"
        elif layout is not None and layout.name == "trainer":
            view.method = "full"  # no adapter anywhere: every weight trains
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
    _infer_method(view)
    return view
