"""Composed configs: a ``defaults:`` list, a base file the config names, and ``key=value`` overrides.

The result is one Document whose values are what the loader would see, and whose every key path
remembers the file that set it (``Document.origins``) and the files it overrode
(``Document.overrides``), so a finding is located in the file that set the value.

How the loaders compose, as followed here:

* a ``defaults:`` list (Hydra 1.1+, "The Defaults List"): ``- name`` merges ``name.yaml`` at the
  root; ``- group: option`` merges ``group/option.yaml`` under ``group`` (``group@pkg`` under
  ``pkg``, ``@_global_`` at the root; ``override``/``optional`` prefixes are accepted; a null
  option is skipped); ``_self_`` marks where this file's own values go, at the end when absent.
  Group files are looked up from the primary config's folder, plain names from the including file's;
  an ``optional`` entry whose file is missing is skipped, and Hydra's own ``hydra/...`` groups
  (launchers, sweepers) are not read.
  Dicts merge key by key; any other value (lists too) is replaced, as OmegaConf's merge does.
* a base file named by ``_base_``, ``base_config``, ``extends``, ``inherit_from`` or
  ``base`` (a path ending in .yaml/.yml/.json, or a list of them): read first, this file overrides.
* ``key=value`` overrides (the launch command line): ``a.b=1`` sets, ``+a.b=1`` adds, ``++a.b=1``
  sets or adds, ``~a.b`` removes; the value is read as a YAML scalar. ``group=option`` for a group
  the defaults list names picks that group's other file instead (Hydra's group override).
* the arguments of a launch script that starts the config (``scripts.override_document``): a
  layer applied last, each value located at the script line that wrote it.
* a runner's experiment folder (a layout's ``experiment_root``): the file is read over the
  runner's defaults file, a top-level key replacing the default's whole value
  (``compose_over_defaults``, called by the engine).

Only local files are read, at most ``MAX_FILES`` of them, ``MAX_DEPTH`` levels of nesting. A file
that cannot be found or read leaves the document as written, with the reason
(``compose_problem``), and the layout detection then names it as a composed config it cannot read.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from ._patterns import later
from ._records import guarded_repr
from . import load as loadmod, reads
from .layouts import BASE_FILE_KEYS
from .load import Document, LoadError

MAX_FILES = 32
MAX_DEPTH = 6
BASE_KEYS = BASE_FILE_KEYS
_SUFFIXES = (".yaml", ".yml", ".json")
# the loader that composes these files reads 2e-5 as a number (OmegaConf's YAML reader)
OMEGACONF_READER = "the file is composed by an OmegaConf-based loader, whose YAML reader takes it as a float"


class ComposeError(Exception):
    pass


class _State:
    primary_dir: Path
    files: list[str]
    docs: dict[str, Document]
    defaults_list: bool  # composed through a defaults: list (an OmegaConf-based loader)
    # ``group=option`` overrides that choose another option of a group the defaults list names
    choices: dict[str, str]

    __slots__ = ('primary_dir', 'files', 'docs', 'defaults_list', 'choices')

    def __init__(self, primary_dir, files=None, docs=None, defaults_list=False, choices=None):
        self.primary_dir = primary_dir
        self.files = [] if files is None else files
        self.docs = {} if docs is None else docs
        self.defaults_list = defaults_list
        self.choices = {} if choices is None else choices

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(primary_dir={self.primary_dir!r}, files={self.files!r}, docs={self.docs!r}, defaults_list={self.defaults_list!r}, choices={self.choices!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.primary_dir, self.files, self.docs, self.defaults_list, self.choices) == (other.primary_dir, other.files, other.docs, other.defaults_list, other.choices)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


class _Layer:
    """Merged values with the file and Entry behind every key path."""

    data: Any
    origin: dict[tuple, tuple]  # path -> (file, doc, path in that doc)
    chain: dict[tuple, list[str]]  # path -> files that set it, in order

    __slots__ = ('data', 'origin', 'chain')

    def __init__(self, data=None, origin=None, chain=None):
        self.data = data
        self.origin = {} if origin is None else origin
        self.chain = {} if chain is None else chain

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(data={self.data!r}, origin={self.origin!r}, chain={self.chain!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.data, self.origin, self.chain) == (other.data, other.origin, other.chain)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


def _layer_of(doc: Document, file: str, data: Any, base: tuple = ()) -> _Layer:
    layer = _Layer(data=data)

    def walk(value: Any, path: tuple, doc_path: tuple) -> None:
        layer.origin[path] = (file, doc, doc_path)
        layer.chain[path] = [file]
        if isinstance(value, dict):
            for k, v in value.items():
                walk(v, path + (k,), doc_path + (k,))

    walk(data, base, ())
    return layer


def _merge(into: _Layer, top: _Layer) -> _Layer:
    """TOP's values over INTO's: dicts key by key, anything else replaced (OmegaConf's merge)."""
    if into.data is None:
        return top
    out = _Layer()

    def chain(path: tuple) -> list[str]:
        seen = into.chain.get(path, [])
        return seen + [f for f in top.chain.get(path, []) if f not in seen]

    def copy(layer: _Layer, value: Any, path: tuple) -> Any:
        if path in layer.origin:
            out.origin[path] = layer.origin[path]
        if path in layer.chain:
            out.chain[path] = list(layer.chain[path])
        if isinstance(value, dict):
            for k, v in value.items():
                copy(layer, v, path + (k,))
        return value

    def merge(a: Any, b: Any, path: tuple) -> Any:
        if isinstance(a, dict) and isinstance(b, dict):
            res = {}
            for k, v in a.items():
                res[k] = merge(v, b[k], path + (k,)) if k in b else copy(into, v, path + (k,))
            for k, v in b.items():
                if k not in a:
                    res[k] = copy(top, v, path + (k,))
            origin = top.origin.get(path) or into.origin.get(path)
            if origin is not None:
                out.origin[path] = origin
            out.chain[path] = chain(path)
            return res
        result = copy(top, b, path)
        out.chain[path] = chain(path)
        return result

    out.data = merge(into.data, top.data, ())
    return out


def _read(path: Path, state: _State) -> tuple[Document, str]:
    if len(state.files) >= MAX_FILES:
        raise ComposeError(f"more than {MAX_FILES} files to compose")
    name = str(path)
    if name in state.docs:
        return state.docs[name], name
    try:
        src = loadmod.read_source(path)
        docs = loadmod.load_text(src.text, name)
    except LoadError as exc:
        raise ComposeError(f"{name}:{exc.line}:{exc.column}: {exc.reason}") from None
    if not docs or not isinstance(docs[0].data, dict):
        raise ComposeError(f"{name} is not a mapping")
    state.files.append(name)
    state.docs[name] = docs[0]
    return docs[0], name


def _find(name: str, folders: list[Path]) -> Path:
    text = name.strip()
    if "://" in text:
        raise ComposeError(f"{text} is a URL; only local files are read")
    candidates = []
    for folder in folders:
        base = (folder / text).expanduser()
        candidates += [base] if base.suffix in _SUFFIXES else [base.with_name(base.name + s) for s in (".yaml", ".yml")]
    for c in candidates:
        try:
            reads.note_kind(c)
            if c.is_file():
                return c
        except (OSError, ValueError):  # a name too long, a NUL byte: not a file we can read
            continue
    raise ComposeError(f"{text} was not found (looked in {', '.join(sorted({str(f) for f in folders}))})")


def _entry_key(entry: Any) -> tuple[str, Any] | None:
    """('group[@pkg]', option) for a dict entry of a defaults list."""
    found = _entry(entry)
    return (found[0], found[1]) if found is not None else None


def _entry(entry: Any) -> tuple[str, Any, bool] | None:
    """('group[@pkg]', option, optional) for a dict entry of a defaults list."""
    if isinstance(entry, dict) and len(entry) == 1:
        (k, v), = entry.items()
        if isinstance(k, str):
            k = k.strip()
            optional = False
            for word in ("override ", "optional "):
                if k.startswith(word):
                    optional = optional or word == "optional "
                    k = k[len(word):].strip()
            return k, v, optional
    return None


# Hydra's own groups (launchers, sweepers, logging) come from Hydra and its plugins, not from the
# config folder, and set nothing the training run reads (Hydra 1.1+, "The hydra package")
_HYDRA_GROUPS = ("hydra/",)


def _compose_file(doc: Document, file: str, state: _State, depth: int) -> _Layer:
    if depth > MAX_DEPTH:
        raise ComposeError(f"defaults nested more than {MAX_DEPTH} deep")
    data = dict(doc.data)
    here = Path(file).parent
    layers: list[_Layer] = []
    # a base file named by the config: read first
    for key in BASE_KEYS:
        value = data.get(key)
        names = [value] if isinstance(value, str) else value if isinstance(value, list) else []
        names = [n for n in names if isinstance(n, str) and n.strip().lower().endswith(_SUFFIXES)]
        if not names:
            continue
        data.pop(key)
        for n in names:
            sub, subname = _read(_find(n, [here]), state)
            layers.append(_compose_file(sub, subname, state, depth + 1))
    defaults = data.pop("defaults", None) if isinstance(data.get("defaults"), list) else None
    if defaults is not None:
        state.defaults_list = True
    own = _layer_of(doc, file, {k: v for k, v in data.items()})
    if defaults is None:
        layers.append(own)
    else:
        placed = False
        for entry in defaults:
            if entry == "_self_":
                layers.append(own)
                placed = True
                continue
            if isinstance(entry, str):
                sub, subname = _read(_find(entry, [here, state.primary_dir]), state)
                layers.append(_compose_file(sub, subname, state, depth + 1))
                continue
            found = _entry(entry)
            if found is None:
                raise ComposeError(f"a defaults entry cfgcheck cannot read: {entry!r}")
            group, option, optional = found
            if group.lstrip("/").startswith(_HYDRA_GROUPS):
                continue
            group, _, package = group.partition("@")
            option = state.choices.get(group.lstrip("/"), option)
            options = option if isinstance(option, list) else [option]
            for opt in options:
                if opt is None:
                    continue
                if not isinstance(opt, (str, int, float)) or isinstance(opt, bool):
                    raise ComposeError(f"a defaults entry cfgcheck cannot read: {entry!r}")
                rel = f"{group.lstrip('/')}/{opt}"
                try:
                    where = _find(rel, [state.primary_dir, here])
                except ComposeError:
                    if optional:  # Hydra skips an optional entry whose file is not there
                        continue
                    raise
                sub, subname = _read(where, state)
                inner = _compose_file(sub, subname, state, depth + 1)
                target = package or group.lstrip("/")
                prefix = () if target in ("_global_", "") else tuple(target.replace("/", ".").split("."))
                layers.append(_nest(inner, prefix))
        if not placed:
            layers.append(own)  # Hydra 1.1+: _self_ goes last when the list does not name it
    merged = _Layer()
    for layer in layers:
        merged = _merge(merged, layer)
    return merged


def _nest(layer: _Layer, prefix: tuple) -> _Layer:
    if not prefix:
        return layer
    data = layer.data
    for part in reversed(prefix):
        data = {part: data}
    out = _Layer(data=data)
    for p, o in layer.origin.items():
        out.origin[prefix + p] = o
    for p, c in layer.chain.items():
        out.chain[prefix + p] = c
    return out


_FLOAT = later(r"^[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?$")


def override_value(raw: str) -> Any:
    """An override's value as the command-line loaders read it: a YAML scalar, and a number for
    any text that spells one (``1e-4`` too: Hydra's override grammar reads it as a float)."""
    import yaml

    try:
        value = yaml.safe_load(raw) if raw.strip() else None
    except yaml.YAMLError:
        return raw
    if isinstance(value, str) and _FLOAT.match(value.strip()):
        return float(value.strip().replace("_", ""))
    return value


def _group_choices(doc: Document, overrides: list[str], state: _State) -> list[str]:
    """Hydra's ``group=option`` (``optim=hot``) picks another option of a group the primary
    defaults list names, read from ``group/option.yaml`` beside it (Hydra 1.1+, "Overriding a
    config group"); it sets no value. -> the overrides that remain (values to set)."""
    defaults = doc.data.get("defaults") if isinstance(doc.data, dict) else None
    groups = set()
    for entry in defaults if isinstance(defaults, list) else ():
        pair = _entry_key(entry)
        if pair is not None:
            groups.add(pair[0].partition("@")[0].lstrip("/"))
    rest = []
    for item in overrides:
        key, eq, raw = item.strip().partition("=")
        key = key.strip()
        option = raw.strip()
        if eq and key in groups and option and "," not in option:
            try:
                _find(f"{key}/{option}", [state.primary_dir])
            except ComposeError:
                rest.append(item)
                continue
            state.choices[key] = option
            continue
        rest.append(item)
    return rest


def _apply_overrides(merged: _Layer, overrides: list[str], label: str) -> None:
    for item in overrides:
        text = item.strip()
        if text.startswith("~"):
            path = tuple(text[1:].split("=", 1)[0].strip().split("."))
            _set(merged, path, None, label, remove=True)
            continue
        if "=" not in text:
            raise ComposeError(f"override {item!r} is not key=value")
        key, _, raw = text.partition("=")
        key = key.lstrip("+").strip()
        _set(merged, tuple(key.split(".")), override_value(raw), label)


def _set(merged: _Layer, path: tuple, value: Any, label: str, remove: bool = False) -> None:
    cur = merged.data
    for part in path[:-1]:
        nxt = cur.get(part) if isinstance(cur, dict) else None
        if not isinstance(nxt, dict):
            if remove:
                return
            nxt = {}
            cur[part] = nxt
        cur = nxt
    if remove:
        cur.pop(path[-1], None)
        return
    cur[path[-1]] = value
    for p in [p for p in merged.origin if p[:len(path)] == path and len(p) > len(path)]:
        del merged.origin[p]
    merged.origin.pop(path, None)
    merged.chain[path] = merged.chain.get(path, []) + [label]


def composes(data: Any) -> bool:
    """Whether a document names other files to compose with."""
    if not isinstance(data, dict):
        return False
    if isinstance(data.get("defaults"), list) and data["defaults"]:
        return True
    if data.keys().isdisjoint(BASE_KEYS):
        return False  # (an absent key names nothing: the loop below would find nothing)
    for key in BASE_KEYS:
        value = data.get(key)
        names = [value] if isinstance(value, str) else value if isinstance(value, list) else []
        if any(isinstance(n, str) and n.strip().lower().endswith(_SUFFIXES) for n in names):
            return True
    return False


def _apply_located(merged: _Layer, located: Document) -> None:
    """The launch script's arguments over the composed config, each located where it was written;
    the note names the script line and the config line it overrode."""
    for path, entry in located.entries.items():
        if not path or entry.kind != "scalar":
            continue
        value = _value_at(located.data, path)
        before = merged.origin.get(path)
        if before is not None and merged.chain.get(path):
            src_file, src_doc, doc_path = before
            old = src_doc.entries.get(doc_path)
            if old is not None and merged.chain[path][-1] == src_file:
                merged.chain[path][-1] = f"{src_file}:{old.value.line}"
        label = f"{located.name}:{entry.value.line}"
        _set(merged, path, value, label)
        merged.origin[path] = (located.name, located, path)


def compose(doc: Document, file: str, overrides: list[str] | tuple[str, ...] = (),
            override_label: str = "the command line", located: Document | None = None) -> Document:
    """DOC composed with the files it names, the overrides and a launch script's located
    arguments (applied last); raises ComposeError."""
    state = _State(primary_dir=Path(file).parent)
    state.files.append(file)
    state.docs[file] = doc
    overrides = _group_choices(doc, list(overrides or ()), state)
    merged = _compose_file(doc, file, state, 0)
    if overrides:
        _apply_overrides(merged, list(overrides), override_label)
    if located is not None:
        _apply_located(merged, located)
    entries, origins, chains, assumed = {}, {}, {}, {}
    ambiguities = []
    for path, (src_file, src_doc, doc_path) in merged.origin.items():
        entry = src_doc.entries.get(doc_path)
        if entry is not None:
            entries[path] = entry
        if src_doc.assumed and doc_path in src_doc.assumed:
            assumed[path] = src_doc.assumed[doc_path]
        origins[path] = src_file
        chain = merged.chain.get(path, [])
        if len(chain) > 1 and not isinstance(_value_at(merged.data, path), dict):
            chains[path] = chain
        for amb in src_doc.ambiguities:
            if amb.path == doc_path:
                ambiguities.append(type(amb)(path=path, kind=amb.kind, raw=amb.raw,
                                             yaml11=amb.yaml11, yaml12=amb.yaml12))
    for path, chain in merged.chain.items():
        if path not in origins:  # set by an override: located at the top of the primary file
            origins[path] = file
            chains[path] = chain
    return Document(name=doc.name, format=doc.format, data=merged.data, entries=entries,
                    duplicates=list(doc.duplicates), ambiguities=ambiguities, tags=list(doc.tags),
                    index=doc.index, origins=origins, overrides=chains,
                    composed_from=list(state.files),
                    number_reader=OMEGACONF_READER if state.defaults_list else "", assumed=assumed)


def experiment_root_of(absolute: str) -> str | None:
    """The name two folders above the file at ABSOLUTE (a normalised absolute path): the ROOT of
    ``<root>/<method>/<name>/`` were it a runner's experiment folder; None when there is none."""
    parts = absolute.split(os.sep)  # ["", ..., root, method, name, file] for "/.../root/m/n/file"
    return parts[-4] if len(parts) >= 4 else None


def in_experiment_folder(absolute: str, root: str) -> bool:
    """Whether the file at ABSOLUTE (a normalised absolute path) lies in
    ``<root>/<method>/<name>/``: the name two folders above its own is ROOT."""
    return experiment_root_of(absolute) == root


def experiment_base(file: str, root: str, names: tuple[str, ...]) -> str | None:
    """The runner's defaults file for FILE in ``<root>/<method>/<name>/``, when it exists."""
    absolute = os.path.abspath(file)
    if not in_experiment_folder(absolute, root):
        return None
    folder = Path(absolute).parent
    if len(folder.parents) < 2 or folder.parents[1].name != root:
        return None
    top = folder.parents[2] if len(folder.parents) > 2 else folder.parents[1]
    for name in names:
        cand = top / name
        try:
            reads.note_kind(cand)
            if cand.is_file() and cand.resolve() != Path(file).resolve():
                return str(cand)
        except (OSError, ValueError):
            continue
    return None


def compose_over_defaults(doc: Document, file: str, base_file: str) -> Document:
    """DOC read over BASE_FILE the way a ``{**defaults, **config}`` loader does: a top-level key
    DOC writes replaces the default's whole value; raises ComposeError."""
    state = _State(primary_dir=Path(file).parent)
    state.files.append(file)
    state.docs[file] = doc
    base_doc, base_name = _read(Path(base_file), state)
    own = dict(doc.data)
    base = _layer_of(base_doc, base_name, {k: v for k, v in base_doc.data.items() if k not in own})
    for path in [p for p in base.origin if p and p[0] in own]:
        del base.origin[path]
    merged = _merge(base, _layer_of(doc, file, own))
    entries, origins = {}, {}
    for path, (src_file, src_doc, doc_path) in merged.origin.items():
        entry = src_doc.entries.get(doc_path)
        if entry is not None:
            entries[path] = entry
        origins[path] = src_file
    return Document(name=doc.name, format=doc.format, data=merged.data, entries=entries,
                    duplicates=list(doc.duplicates), ambiguities=list(doc.ambiguities), tags=list(doc.tags),
                    index=doc.index, origins=origins, overrides={}, composed_from=list(state.files))


def _value_at(data: Any, path: tuple) -> Any:
    for part in path:
        if not isinstance(data, dict) or part not in data:
            return None
        data = data[part]
    return data


def overridden_note(doc: Document, path: tuple) -> str:
    """'run.yaml overrides base.yaml' for a value set in more than one file, else ''."""
    chain = doc.overrides.get(tuple(path))
    if not chain:
        return ""
    names = [os.path.basename(c) if os.sep in c else c for c in chain]
    return f"{names[-1]} overrides {', '.join(reversed(names[:-1]))}"
