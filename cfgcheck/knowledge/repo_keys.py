"""Keys a repository's own training scripts accept, learnt statically from their source.

Many training repositories run their own script: its argument dataclasses and its
``argparse`` options extend the trainer's settings. The Python files of the repository that
holds a config are parsed with :mod:`ast` — never imported or run — for

* the fields of classes decorated with ``@dataclass`` (``HfArgumentParser`` turns each field
  into a key) or an attrs decorator, and of settings classes (pydantic ``BaseModel`` /
  ``BaseSettings``, simple-parsing ``Serializable``, ``NamedTuple``, ``TypedDict``, and their
  subclasses in the same file), with the aliases their ``Field(alias=...)`` give;
* the options of ``add_argument("--max-train-samples", dest=...)`` and ``click.option`` calls
  (the ``dest`` and every long option with dashes turned into underscores);
* the parameters of a function handed to ``fire.Fire`` or ``jsonargparse.CLI``;
* string keys read from a mapping that a YAML / JSON / TOML / OmegaConf loader returned.

Test files (``tests/``, ``test_*.py``, ``conftest.py``) are left out: they read configs, they do not
take them. The repository is the nearest folder above the config that holds ``.git``, ``pyproject.toml``,
``setup.py`` or ``setup.cfg`` (at most six levels up); without one nothing is scanned.

The script that reads a config can also be named: by the launch script that starts it
(``python src/train.py cfg.yaml``) or by the project file (``readers:``). That script and the
modules of its own tree it imports (``from .args import ...``, ``import my_args``; at most
``MAX_READER_FILES`` files, ``MAX_IMPORT_DEPTH`` imports deep) are parsed the same way
(``reader_keys``), wherever they live, so its declared keys are accepted even when the config
sits outside the script's repository or the repository is too big to scan whole.
The work is bounded: at most ``MAX_FILES`` Python files, each at most ``MAX_BYTES``, hidden
folders, virtual environments and ``site-packages`` skipped, at most ``MAX_ENTRIES`` folder
entries looked at.
"""

from __future__ import annotations

import os
from functools import lru_cache
from pathlib import Path
from types import MappingProxyType

# ``ast`` is imported by the functions that read a script: a plain lint never parses Python
from .._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from .. import reads
from ..memo import remembered
from .pins import file_kind

MAX_FILES = 400
MAX_BYTES = 512 * 1024
MAX_ENTRIES = 20_000  # folder entries looked at (a data folder of millions of files stays cheap)
MAX_UP = 6
_MARKERS = (".git", "pyproject.toml", "setup.py", "setup.cfg")
_SKIP_DIRS = frozenset({"node_modules", "site-packages", "venv", ".venv", "env", "build", "dist", "__pycache__"})


class RepoKeys:
    root: str
    keys: frozenset[str]
    sources: dict  # key -> "path/of/file.py ClassName" or "path/of/file.py --option"
    files: int  # Python files parsed
    # why 2e-5 reaches the script as a number whatever YAML version reads it, when the scripts
    # show it: they load configs with OmegaConf only, or turn every value into command-line text
    number_reader: str
    # the libraries whose argument classes the repository's argument parsers are built from
    # ("transformers", "trl", "peft", or "other" for a class imported from a package outside the
    # repository and those libraries; empty when only the repository's own classes, or its
    # argparse options fed with the config's values as command-line text); None when unknown
    reader_libraries: frozenset[str] | None
    # keys known only because a script reads them from a loaded config (``cfg["lr"]``): the
    # script may pass them on to a library, whose release still decides
    read_only: frozenset[str]

    __slots__ = ('root', 'keys', 'sources', 'files', 'number_reader', 'reader_libraries', 'read_only')

    def __init__(self, root, keys, sources, files, number_reader="", reader_libraries=None, read_only=frozenset()):
        _setattr(self, 'root', root)
        _setattr(self, 'keys', keys)
        _setattr(self, 'sources', sources)
        _setattr(self, 'files', files)
        _setattr(self, 'number_reader', number_reader)
        _setattr(self, 'reader_libraries', reader_libraries)
        _setattr(self, 'read_only', read_only)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(root={self.root!r}, keys={self.keys!r}, sources={self.sources!r}, files={self.files!r}, number_reader={self.number_reader!r}, reader_libraries={self.reader_libraries!r}, read_only={self.read_only!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.root, self.keys, self.sources, self.files, self.number_reader, self.reader_libraries, self.read_only) == (other.root, other.keys, other.sources, other.files, other.number_reader, other.reader_libraries, other.read_only)
        return NotImplemented

    def __hash__(self):
        return hash((self.root, self.keys, self.sources, self.files, self.number_reader, self.reader_libraries, self.read_only))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.root, self.keys, self.sources, self.files, self.number_reader, self.reader_libraries, self.read_only)

    __setstate__ = _frozen_setstate


def repository_root(config: str | os.PathLike) -> Path | None:
    """The repository that holds CONFIG, or None when no marker is found above it (looked up
    once per folder in a run: ``cfgcheck.memo``)."""
    return _root_of(config, os.path.islink(config))


def _root_of(config: str | os.PathLike, link: bool) -> Path | None:
    if link:  # resolved through the link: its own target's folder
        return _repository_root(config)
    folder = os.path.dirname(os.fspath(config))
    return remembered("repository_root", (folder, os.getcwd() if not os.path.isabs(folder) else ""),
                      lambda: _repository_root(config))


def _repository_root(config: str | os.PathLike) -> Path | None:
    try:
        start = Path(config).resolve().parent
    except (OSError, RuntimeError, ValueError):
        return None
    cur = start
    for _ in range(MAX_UP + 1):
        try:
            for m in _MARKERS:
                reads.note_kind(cur / m)
            if any((cur / m).exists() for m in _MARKERS):
                return cur
        except OSError:
            return None
        if cur.parent == cur:
            break
        cur = cur.parent
    return None


# file names that usually hold a training script's arguments: parsed first, so that a repository
# with much vendored code still has its own scripts read within MAX_FILES
_LIKELY = ("train", "finetune", "fine_tune", "sft", "dpo", "args", "argument", "config", "hparam",
           "param", "option", "setting", "run", "main", "launch", "cli")


def _python_files(root: Path) -> list[Path]:
    """The repository's Python files to parse: at most MAX_FILES of those met within
    MAX_ENTRIES folder entries, likely argument files first, then the shallowest."""
    out: list[Path] = []
    seen = 0
    try:
        for here, dirs, files in os.walk(root, followlinks=False):
            seen += len(dirs) + len(files)
            reads.note_folders(here)  # the result cache re-lists the folders and Python files only
            reads.note_names(here, r".*\.py")
            dirs[:] = sorted(d for d in dirs if not d.startswith(".") and d not in _SKIP_DIRS)
            dirs[:] = [d for d in dirs if d not in ("tests", "test")]  # tests read configs, never take them
            out.extend(Path(here) / name for name in sorted(files) if name.endswith(".py")
                       and not name.startswith("test_") and not name.endswith("_test.py") and name != "conftest.py")
            if seen > MAX_ENTRIES:
                break
    except OSError:
        pass

    def rank(path: Path) -> tuple:
        name = path.stem.lower()
        return (not any(w in name for w in _LIKELY), len(path.relative_to(root).parts), str(path))

    return sorted(out, key=rank)[:MAX_FILES]


@lru_cache(maxsize=4)
def _parse(text: str) -> ast.Module:
    """One parse per source: the readers below each walk the same tree (never changed)."""
    import ast

    return ast.parse(text)


_WALKED_CACHE: dict[int, tuple[ast.AST, list]] = {}  # memo of _walk (a cache, bounded below)


def _walk(tree: ast.AST) -> list:
    """Every node of TREE, listed once per tree (the readers each go over them)."""
    import ast

    hit = _WALKED_CACHE.get(id(tree))
    if hit is not None and hit[0] is tree:
        return hit[1]
    nodes = list(ast.walk(tree))
    if len(_WALKED_CACHE) >= 4:
        _WALKED_CACHE.clear()
    _WALKED_CACHE[id(tree)] = (tree, nodes)
    return nodes


def _base_names(cls: ast.ClassDef) -> set[str]:
    import ast

    names = set()
    for b in cls.bases:
        if isinstance(b, ast.Name):
            names.add(b.id)
        elif isinstance(b, ast.Attribute):
            names.add(b.attr)
    return names


def _call_name(node: ast.Call) -> str:
    import ast

    f = node.func
    if isinstance(f, ast.Attribute):
        base = f.value.id if isinstance(f.value, ast.Name) else getattr(f.value, "attr", "")
        return f"{base}.{f.attr}"
    return f.id if isinstance(f, ast.Name) else ""


def readers_of_source(text: str) -> set[str]:
    """How one Python source reads YAML configs: {"yaml"} (PyYAML or transformers' parser,
    values as YAML 1.1 types), {"omegaconf"}, {"cli-text"} (each value formatted into a
    ``--key value`` argument, so the script's own parser converts the text)."""
    import ast

    try:
        tree = _parse(text)
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return set()
    kinds: set[str] = set()
    loads_yaml = False
    for node in _walk(tree):
        if isinstance(node, ast.Call):
            name = _call_name(node)
            if name in ("yaml.safe_load", "yaml.load", "yaml.full_load") or name.endswith(".parse_yaml_file"):
                loads_yaml = True
            elif name in ("OmegaConf.load", "OmegaConf.create", "hydra.main", "compose") or name.endswith(".instantiate"):
                kinds.add("omegaconf")
        elif isinstance(node, ast.FunctionDef):
            for d in node.decorator_list:
                if isinstance(d, ast.Call) and _call_name(d) == "hydra.main":
                    kinds.add("omegaconf")
    cli_text = False
    for node in _walk(tree):
        if isinstance(node, ast.For) and isinstance(node.iter, ast.Call) and _call_name(node.iter).endswith(".items"):
            for inner in ast.walk(node):
                if isinstance(inner, ast.JoinedStr) and inner.values and isinstance(inner.values[0], ast.Constant) \
                        and str(inner.values[0].value).startswith("--"):
                    cli_text = True
    if loads_yaml:
        kinds.add("cli-text" if cli_text else "yaml")
    return kinds


_READER_WORDS = MappingProxyType({
    "omegaconf": "the repository's scripts load their configs with OmegaConf, whose YAML reader takes it as a float",
    "cli-text": "the repository's script turns each value into a command-line argument, whose parser converts the text to a float",
})


# base classes whose annotated fields are settings (pydantic, simple-parsing, typed tuples and
# dictionaries, the transformers argument classes a script extends)
_SETTINGS_BASES = frozenset({"BaseModel", "BaseSettings", "Serializable", "FrozenSerializable", "NamedTuple",
                   "TypedDict", "TrainingArguments", "Seq2SeqTrainingArguments"})
# decorators that make a class's fields settings (dataclasses, pydantic dataclasses, attrs)
_FIELD_DECORATORS = frozenset({"dataclass", "define", "frozen", "mutable", "s", "attrs"})
# calls whose result is a config mapping read from a file: subscripts and .get() on it name keys
_LOADERS = ("yaml.safe_load", "yaml.load", "yaml.full_load", "json.load", "json.loads", "toml.load",
            "tomllib.load", "OmegaConf.load", "OmegaConf.create")
# callables that turn a function's parameters into command-line options
_CLI_FROM_FUNCTION = ("fire.Fire", "Fire", "CLI", "jsonargparse.CLI", "auto_cli")


def _decorator_names(node) -> set[str]:
    import ast

    names = set()
    for d in node.decorator_list:
        target = d.func if isinstance(d, ast.Call) else d
        if isinstance(target, ast.Name):
            names.add(target.id)
        elif isinstance(target, ast.Attribute):
            names.add(target.attr)
    return names


def _field_call(value) -> bool:
    """``attr.ib()`` / ``attrs.field()`` / ``field()``: a field written without an annotation."""
    import ast

    return isinstance(value, ast.Call) and _call_name(value).rpartition(".")[2] in ("ib", "attrib", "field")


def _option_names(node: ast.Call) -> list[str]:
    """The setting names one ``add_argument`` / ``click.option`` call accepts: its ``dest``, and
    each long option with dashes turned into underscores (a config turned into ``--key value``
    text names the option as written, ``grad_accum`` for ``--grad-accum``)."""
    import ast

    options = [a.value for a in node.args if isinstance(a, ast.Constant) and isinstance(a.value, str)]
    dest = next((k.value.value for k in node.keywords if k.arg == "dest"
                 and isinstance(k.value, ast.Constant) and isinstance(k.value.value, str)), None)
    names = [o.lstrip("-").replace("-", "_") for o in options if o.startswith("--")]
    plain = [o for o in options if not o.startswith("-")]
    if dest is None and not names and plain:
        names = [plain[0]]  # a positional argument
    if dest is not None:
        names.insert(0, dest)
    return [n for n in names if n.isidentifier()]


def _function_parameters(fn) -> list[str]:
    a = fn.args
    return [p.arg for p in a.posonlyargs + a.args + a.kwonlyargs if p.arg not in ("self", "cls")]


def _loaded_names(tree) -> set[str]:
    """Names bound to a config mapping a loader returned (``cfg = yaml.safe_load(fh)``)."""
    import ast

    loaded: set[str] = set()
    for node in _walk(tree):
        if isinstance(node, ast.Assign) and isinstance(node.value, ast.Call) and _call_name(node.value) in _LOADERS:
            loaded.update(t.id for t in node.targets if isinstance(t, ast.Name))
    return loaded


def _from_loaded(expr, loaded: set[str]) -> bool:
    """Whether EXPR is a loaded config, a loader's call, or a part of one (``cfg["train"]``)."""
    import ast

    for _ in range(64):
        if isinstance(expr, ast.Call):
            if _call_name(expr) in _LOADERS:
                return True
            expr = expr.func
        elif isinstance(expr, (ast.Subscript, ast.Attribute)):
            expr = expr.value
        else:
            break
    return isinstance(expr, ast.Name) and expr.id in loaded


def _settings_classes(tree) -> set[str]:
    """Names of the classes of one module whose fields are settings (see ``keys_of_source``)."""
    import ast

    classes = {n.name: n for n in _walk(tree) if isinstance(n, ast.ClassDef)}

    def settings_class(cls: ast.ClassDef, seen: frozenset = frozenset()) -> bool:
        if _decorator_names(cls) & _FIELD_DECORATORS:
            return True
        bases = _base_names(cls)
        if bases & _SETTINGS_BASES:
            return True
        return any(b in classes and b not in seen and settings_class(classes[b], seen | {cls.name})
                   for b in bases)

    return {name for name, cls in classes.items() if settings_class(cls)}


def settings_classes_of_source(text: str) -> set[str]:
    try:
        return _settings_classes(_parse(text))
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return set()


def keys_of_source(text: str, label: str = "") -> dict[str, str]:
    """Setting names declared in one Python source: key -> where (file and class or option).

    Read shapes: fields of dataclasses (``field(default=...)`` or plain defaults), attrs classes
    (annotated or ``attr.ib()``), pydantic models and settings, simple-parsing ``Serializable``
    classes, ``NamedTuple`` / ``TypedDict`` classes and subclasses of any of these defined in
    the same source; ``add_argument`` and ``click.option`` options (``dest`` and every long
    option); the parameters of a function handed to ``fire.Fire`` or ``jsonargparse.CLI``; and
    string keys read from a mapping a YAML / JSON / TOML / OmegaConf loader returned
    (``cfg["lr"]``, ``cfg.get("min_lr")``).
    """
    import ast

    try:
        tree = _parse(text)
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return {}
    found: dict[str, str] = {}
    functions = {n.name: n for n in _walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))}
    settings = _settings_classes(tree)

    loaded = _loaded_names(tree)

    def from_loaded(expr) -> bool:
        return _from_loaded(expr, loaded)

    for node in _walk(tree):
        if isinstance(node, ast.ClassDef) and node.name in settings:
            for item in node.body:
                name = None
                if isinstance(item, ast.AnnAssign) and isinstance(item.target, ast.Name):
                    if "ClassVar" not in ast.unparse(item.annotation):
                        name = item.target.id
                elif isinstance(item, ast.Assign) and _field_call(item.value) and len(item.targets) == 1 \
                        and isinstance(item.targets[0], ast.Name):
                    name = item.targets[0].id
                if name and not name.startswith("_"):
                    found.setdefault(name, f"{label} {node.name}".strip())
                    value = getattr(item, "value", None)
                    for kw in value.keywords if isinstance(value, ast.Call) else ():
                        # pydantic Field(alias=...), simple-parsing field(alias=...)
                        if kw.arg in ("alias", "validation_alias") and isinstance(kw.value, ast.Constant) \
                                and isinstance(kw.value.value, str) and kw.value.value.lstrip("-").isidentifier():
                            found.setdefault(kw.value.value.lstrip("-"), f"{label} {node.name}".strip())
        elif isinstance(node, ast.Call):
            called = _call_name(node)
            if isinstance(node.func, ast.Attribute) and node.func.attr == "add_argument" \
                    or called in ("click.option", "option"):
                names = _option_names(node)
                shown = next((a.value for a in node.args if isinstance(a, ast.Constant)), names[0] if names else "")
                for n in names:
                    found.setdefault(n, f"{label} {shown}".strip())
            elif called in _CLI_FROM_FUNCTION and node.args and isinstance(node.args[0], ast.Name):
                target = node.args[0].id
                if target in functions:
                    for n in _function_parameters(functions[target]):
                        found.setdefault(n, f"{label} {target}()".strip())
            elif isinstance(node.func, ast.Attribute) and node.func.attr in ("get", "pop", "setdefault") \
                    and node.args and isinstance(node.args[0], ast.Constant) \
                    and isinstance(node.args[0].value, str) and from_loaded(node.func.value):
                if node.args[0].value.isidentifier():
                    found.setdefault(node.args[0].value, f"{label} read from the loaded config".strip())
        elif isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Constant) \
                and isinstance(node.slice.value, str) and from_loaded(node.value):
            if node.slice.value.isidentifier():
                found.setdefault(node.slice.value, f"{label} read from the loaded config".strip())
    return found


_LIBRARIES = MappingProxyType({"transformers": ("transformers",), "trl": ("trl", "transformers"), "peft": ("peft",)})


def parsers_of_source(text: str) -> tuple[dict[str, str], dict[str, list[str]], list[str]]:
    """(names imported -> their module, classes defined -> their base names, the class names
    handed to an argument parser built from classes: ``HfArgumentParser((A, B))`` and the
    parsers that extend it: any ``...Parser...`` called with classes)."""
    import ast

    try:
        tree = _parse(text)
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return {}, {}, []
    imports: dict[str, str] = {}
    classes: dict[str, list[str]] = {}
    handed: list[str] = []
    loaded = _loaded_names(tree)
    for node in _walk(tree):
        built = _built_from_config(node, loaded)
        if built:
            handed.append("?" + built)  # kept when it is a settings class or a library's class
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            for alias in node.names:
                imports[alias.asname or alias.name] = node.module
        elif isinstance(node, ast.ImportFrom):
            for alias in node.names:
                imports[alias.asname or alias.name] = "."  # a module of this repository
        elif isinstance(node, ast.Import):
            for alias in node.names:  # import transformers / import transformers as tf
                imports[alias.asname or alias.name.split(".")[0]] = alias.name if alias.asname \
                    else alias.name.split(".")[0]
        elif isinstance(node, ast.ClassDef):
            classes[node.name] = sorted(filter(None, (_class_name(b) for b in node.bases)))
        elif isinstance(node, ast.Call) and "Parser" in _call_name(node).rpartition(".")[2] and node.args:
            first = node.args[0]
            items = first.elts if isinstance(first, (ast.Tuple, ast.List)) else [first]
            names = [_class_name(i) for i in items]
            if all(isinstance(n, str) and n.rpartition(".")[2][:1].isupper() for n in names):
                handed.extend(names)
    # transformers.TrainingArguments: the class of the module the name stands for
    for name in [n for n in handed + [b for bs in classes.values() for b in bs] if "." in n]:
        head = name.split(".")[0].lstrip("?")
        imports.setdefault(name.lstrip("?"), imports.get(head, head))
    return imports, classes, handed


def _class_name(node) -> str | None:
    """``Name`` -> "Name"; ``module.Name`` -> "module.Name"; anything else None."""
    import ast

    if isinstance(node, ast.Name):
        return node.id
    if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name):
        return f"{node.value.id}.{node.attr}"
    return None


# class methods that build a settings object from a file or a mapping (simple-parsing
# Serializable.load, pydantic model_validate / parse_obj / parse_file, dataclass-wizard from_dict)
_BUILDERS = ("load", "load_yaml", "from_yaml", "from_dict", "from_file", "model_validate", "parse_obj",
             "parse_file")


def _built_from_config(node, loaded: set[str]) -> str | None:
    """The class a call builds from a config: ``Settings(**cfg)`` (CFG a loaded config),
    ``Settings.load(path)``, ``Settings.model_validate(data)``, ``OmegaConf.structured(Settings)``."""
    import ast

    if not isinstance(node, ast.Call):
        return None
    f = node.func
    if isinstance(f, ast.Name) and f.id[:1].isupper() and any(
            k.arg is None and _from_loaded(k.value, loaded) for k in node.keywords):
        return f.id
    if isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name) and f.value.id[:1].isupper():
        if f.attr in _BUILDERS:
            return f.value.id
        if f.value.id == "OmegaConf" and f.attr == "structured" and node.args \
                and isinstance(node.args[0], ast.Name):
            return node.args[0].id
    return None


def _reader_libraries(imports: dict[str, str], classes: dict[str, list[str]], handed: list[str],
                      local: set[str], settings: set[str] = frozenset()) -> frozenset[str] | None:
    """The libraries behind the classes handed to the parsers (see ``RepoKeys``); LOCAL holds
    the module names of the repository's own files."""
    kept = []
    for name in handed:
        if name.startswith("?"):  # a class built from a config: a settings class or a library's
            name = name[1:]
            module = imports.get(name, "")
            if name not in settings and module.split(".")[0] not in _LIBRARIES:
                continue
        kept.append(name)
    handed = kept
    if not handed:
        return None
    out: set[str] = set()

    def resolve(name: str, depth: int = 0) -> None:
        if depth > 8:
            return
        if name in classes:
            for base in classes[name]:
                resolve(base, depth + 1)
            return
        module = imports.get(name)
        if module is None or module == "." or module in local:
            return  # a builtin base (object), or a class of this repository
        top = module.split(".")[0]
        if top in _LIBRARIES:
            out.update(_LIBRARIES[top])
        elif name.rpartition(".")[2] not in _SETTINGS_BASES:  # pydantic's BaseModel, simple-parsing's Serializable:
            out.add("other")  # the fields are the repository's own

    for name in handed:
        resolve(name)
    return frozenset(out)


@reads.memo(maxsize=64)
def _scan(root: str) -> RepoKeys:
    keys: dict[str, str] = {}
    readers: set[str] = set()
    all_imports: dict[str, str] = {}
    all_classes: dict[str, list[str]] = {}
    all_handed: list[str] = []
    modules: set[str] = set()
    options = False  # some script declares argparse options
    settings: set[str] = set()  # settings classes (dataclasses, pydantic models, ...) defined
    files = _python_files(Path(root))
    parsed = 0
    for path in files:
        try:
            reads.note_file(path)
            if path.is_symlink() or not path.is_file() or path.stat().st_size > MAX_BYTES:
                continue
            text = path.read_text(encoding="utf-8", errors="replace")
        except OSError:
            continue
        parsed += 1
        rel = os.path.relpath(path, root)
        for key, where in keys_of_source(text, rel).items():
            if key not in keys or keys[key].endswith("read from the loaded config"):
                keys[key] = where  # a declaration wins over a read
        options = options or "add_argument" in text
        readers |= readers_of_source(text)
        imp, cls, handed = parsers_of_source(text)
        settings |= settings_classes_of_source(text)
        all_imports.update(imp)
        all_classes.update(cls)
        all_handed.extend(handed)
        modules.add(rel[:-3].replace(os.sep, ".").removesuffix(".__init__"))
        modules.add(Path(rel).stem)
    libraries = _reader_libraries(all_imports, all_classes, all_handed, modules, settings)
    if libraries is None and "cli-text" in readers and options:
        # a config turned into ``--key value`` text for the script's own argparse options: the
        # options are the reader's whole key set
        libraries = frozenset()
    # one way of reading only: a repository that also reads YAML as PyYAML types says nothing
    only = readers - {"yaml"} if "yaml" not in readers else set()
    reader = _READER_WORDS[sorted(only)[0]] if len(only) == 1 else ""
    read_only = frozenset(k for k, where in keys.items() if where.endswith("read from the loaded config"))
    return RepoKeys(root=root, keys=frozenset(keys), sources=keys, files=parsed, number_reader=reader,
                    reader_libraries=libraries, read_only=read_only)


MAX_READER_FILES = 40
MAX_IMPORT_DEPTH = 3


def _local_imports(tree: ast.AST, script: Path, top: Path) -> list[Path]:
    """Files of the script's own tree that it imports (relative imports, or module names found
    as files beside the script or under TOP); other imports are libraries and left alone."""
    import ast

    out: list[Path] = []
    for node in ast.walk(tree):
        names: list[tuple[int, str]] = []
        if isinstance(node, ast.ImportFrom):
            names.append((node.level, node.module or ""))
            if node.module is None or node.level:
                names += [(node.level, f"{node.module}.{a.name}" if node.module else a.name) for a in node.names]
        elif isinstance(node, ast.Import):
            names += [(0, a.name) for a in node.names]
        for level, dotted_name in names:
            if level:
                base = script.parent
                for _ in range(level - 1):
                    base = base.parent
                bases = [base]
            else:
                bases = [script.parent, top]
            rel = Path(*dotted_name.split(".")) if dotted_name else Path()
            for b in bases:
                for cand in (b / rel.with_suffix(".py") if dotted_name else None, b / rel / "__init__.py"):
                    if cand is not None:
                        reads.note_kind(cand)  # a module appearing where none was changes the keys
                    if cand is not None and cand.is_file():
                        out.append(cand)
                        break
    return out


@reads.memo(maxsize=64)
def reader_keys(script: str) -> RepoKeys | None:
    """The keys SCRIPT (a Python file) and the modules of its own tree it imports declare; None
    when the script cannot be read."""
    import ast

    path = Path(script)
    try:
        reads.note_kind(path)
        if not path.is_file():
            return None
    except (OSError, ValueError):
        return None
    top = repository_root(path) or path.parent
    keys: dict[str, str] = {}
    readers: set[str] = set()
    all_imports: dict[str, str] = {}
    all_classes: dict[str, list[str]] = {}
    all_handed: list[str] = []
    settings: set[str] = set()
    modules: set[str] = set()
    queue, seen, parsed = [(path, 0)], {path.resolve()}, 0
    while queue and parsed < MAX_READER_FILES:
        here, depth = queue.pop(0)
        reads.note_file(here)
        try:
            if here.stat().st_size > MAX_BYTES:
                continue
            text = here.read_text(encoding="utf-8", errors="replace")
        except OSError:
            continue
        parsed += 1
        try:
            rel = os.path.relpath(here, top)
        except ValueError:
            rel = str(here)
        for key, where in keys_of_source(text, rel).items():
            if key not in keys or keys[key].endswith("read from the loaded config"):
                keys[key] = where  # a declaration wins over a read
        readers |= readers_of_source(text)
        imp, cls, handed = parsers_of_source(text)
        all_imports.update(imp)
        all_classes.update(cls)
        all_handed.extend(handed)
        settings |= settings_classes_of_source(text)
        modules.add(Path(rel).stem)
        modules.add(rel[:-3].replace(os.sep, ".").removesuffix(".__init__"))
        if depth >= MAX_IMPORT_DEPTH:
            continue
        try:
            tree = ast.parse(text)
        except (SyntaxError, ValueError, RecursionError, MemoryError):
            continue
        for dep in _local_imports(tree, here, top):
            r = dep.resolve()
            if r not in seen:
                seen.add(r)
                queue.append((dep, depth + 1))
    only = readers - {"yaml"} if "yaml" not in readers else set()
    reader = _READER_WORDS[sorted(only)[0]] if len(only) == 1 else ""
    libraries = _reader_libraries(all_imports, all_classes, all_handed, modules, settings)
    read_only = frozenset(k for k, where in keys.items() if where.endswith("read from the loaded config"))
    return RepoKeys(root=str(top), keys=frozenset(keys), sources=keys, files=parsed, number_reader=reader,
                    reader_libraries=libraries, read_only=read_only)


def merged(parts: list[RepoKeys]) -> RepoKeys | None:
    """One key set from several scans (the repository's and the named reader scripts')."""
    parts = [p for p in parts if p is not None]
    if not parts:
        return None
    if len(parts) == 1:
        return parts[0]
    sources: dict[str, str] = {}
    for p in parts:
        for k, v in p.sources.items():
            sources.setdefault(k, v)
    readers = {p.number_reader for p in parts if p.number_reader}
    known = [p.reader_libraries for p in parts if p.reader_libraries is not None]
    declared = {k for p in parts for k in p.keys - p.read_only}
    return RepoKeys(root=parts[0].root, keys=frozenset().union(*(p.keys for p in parts)), sources=sources,
                    files=sum(p.files for p in parts),
                    number_reader=readers.pop() if len(readers) == 1 else "",
                    reader_libraries=frozenset().union(*known) if known else None,
                    read_only=frozenset().union(*(p.read_only for p in parts)) - declared)


def keys_for(config: str | os.PathLike, readers: tuple[str, ...] = ()) -> RepoKeys | None:
    """The keys CONFIG's repository declares, with those of the scripts named as its readers."""
    return merged([repo_keys(config)] + [reader_keys(str(r)) for r in readers])


def repo_keys(config: str | os.PathLike) -> RepoKeys | None:
    """The keys the scripts of CONFIG's repository declare (None for text without a file)."""
    text = str(config)
    if not text or text.startswith("<"):
        return None
    try:
        reads.note_kind(text)
        is_file, is_link = file_kind(text)  # one look at the disk for both questions
        if not is_file:
            return None
    except (OSError, ValueError):
        return None
    root = _root_of(text, is_link)
    return _scan(str(root)) if root is not None else None
