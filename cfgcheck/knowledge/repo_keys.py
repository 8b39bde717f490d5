"""Keys a repository's own training scripts accept, learnt statically from their source.

Many training repositories run their own script: its argument dataclasses and its
``argparse`` options extend the trainer's settings. The Python files of the repository that
holds a config are parsed with :mod:`ast` — never imported or run — for

* the fields of classes decorated with ``@dataclass`` (``HfArgumentParser`` turns each field
  into a key), and of pydantic-style settings classes (annotated fields of a class whose base is
  named ``BaseModel`` or ``BaseSettings``);
* the options of ``add_argument("--max-train-samples", dest=...)`` calls (the key is the
  ``dest``, else the long option with dashes turned into underscores).

The repository is the nearest folder above the config that holds ``.git``, ``pyproject.toml``,
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

import ast
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

MAX_FILES = 400
MAX_BYTES = 512 * 1024
MAX_ENTRIES = 20_000  # folder entries looked at (a data folder of millions of files stays cheap)
MAX_UP = 6
_MARKERS = (".git", "pyproject.toml", "setup.py", "setup.cfg")
_SKIP_DIRS = {"node_modules", "site-packages", "venv", ".venv", "env", "build", "dist", "__pycache__"}


@dataclass(frozen=True)
class RepoKeys:
    root: str
    keys: frozenset[str]
    sources: dict  # key -> "path/of/file.py ClassName" or "path/of/file.py --option"
    files: int  # Python files parsed
    # why 2e-5 reaches the script as a number whatever YAML version reads it, when the scripts
    # show it: they load configs with OmegaConf only, or turn every value into command-line text
    number_reader: str = ""


def repository_root(config: str | os.PathLike) -> Path | None:
    """The repository that holds CONFIG, or None when no marker is found above it."""
    try:
        start = Path(config).resolve().parent
    except (OSError, RuntimeError, ValueError):
        return None
    cur = start
    for _ in range(MAX_UP + 1):
        try:
            if any((cur / m).exists() for m in _MARKERS):
                return cur
        except OSError:
            return None
        if cur.parent == cur:
            break
        cur = cur.parent
    return None


def _python_files(root: Path) -> list[Path]:
    out: list[Path] = []
    seen = 0
    try:
        for here, dirs, files in os.walk(root, followlinks=False):
            seen += len(dirs) + len(files)
            if seen > MAX_ENTRIES:
                return out
            dirs[:] = sorted(d for d in dirs if not d.startswith(".") and d not in _SKIP_DIRS)
            for name in sorted(files):
                if name.endswith(".py"):
                    out.append(Path(here) / name)
                    if len(out) >= MAX_FILES:
                        return out
    except OSError:
        pass
    return out


def _base_names(cls: ast.ClassDef) -> set[str]:
    names = set()
    for b in cls.bases:
        if isinstance(b, ast.Name):
            names.add(b.id)
        elif isinstance(b, ast.Attribute):
            names.add(b.attr)
    return names


def _is_dataclass(cls: ast.ClassDef) -> bool:
    for d in cls.decorator_list:
        target = d.func if isinstance(d, ast.Call) else d
        name = target.id if isinstance(target, ast.Name) else getattr(target, "attr", None)
        if name == "dataclass":
            return True
    return False


def _call_name(node: ast.Call) -> str:
    f = node.func
    if isinstance(f, ast.Attribute):
        base = f.value.id if isinstance(f.value, ast.Name) else getattr(f.value, "attr", "")
        return f"{base}.{f.attr}"
    return f.id if isinstance(f, ast.Name) else ""


def readers_of_source(text: str) -> set[str]:
    """How one Python source reads YAML configs: {"yaml"} (PyYAML or transformers' parser,
    values as YAML 1.1 types), {"omegaconf"}, {"cli-text"} (each value formatted into a
    ``--key value`` argument, so the script's own parser converts the text)."""
    try:
        tree = ast.parse(text)
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return set()
    kinds: set[str] = set()
    loads_yaml = False
    for node in ast.walk(tree):
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
    for node in ast.walk(tree):
        if isinstance(node, ast.For) and isinstance(node.iter, ast.Call) and _call_name(node.iter).endswith(".items"):
            for inner in ast.walk(node):
                if isinstance(inner, ast.JoinedStr) and inner.values and isinstance(inner.values[0], ast.Constant) \
                        and str(inner.values[0].value).startswith("--"):
                    cli_text = True
    if loads_yaml:
        kinds.add("cli-text" if cli_text else "yaml")
    return kinds


_READER_WORDS = {
    "omegaconf": "the repository's scripts load their configs with OmegaConf, whose YAML reader takes it as a float",
    "cli-text": "the repository's script turns each value into a command-line argument, whose parser converts the text to a float",
}


def keys_of_source(text: str, label: str = "") -> dict[str, str]:
    """Setting names declared in one Python source: key -> where (file and class or option)."""
    try:
        tree = ast.parse(text)
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        return {}
    found: dict[str, str] = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ClassDef) and (
            _is_dataclass(node) or _base_names(node) & {"BaseModel", "BaseSettings"}
        ):
            for item in node.body:
                if isinstance(item, ast.AnnAssign) and isinstance(item.target, ast.Name):
                    name = item.target.id
                    if not name.startswith("_") and "ClassVar" not in ast.unparse(item.annotation):
                        found.setdefault(name, f"{label} {node.name}".strip())
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr == "add_argument"):
            dest = next((k.value.value for k in node.keywords if k.arg == "dest"
                         and isinstance(k.value, ast.Constant) and isinstance(k.value.value, str)), None)
            options = [a.value for a in node.args if isinstance(a, ast.Constant) and isinstance(a.value, str)]
            if dest is None:
                longs = [o for o in options if o.startswith("--")]
                plain = [o for o in options if not o.startswith("-")]
                chosen = longs[0][2:] if longs else (plain[0] if plain else None)
                dest = chosen.replace("-", "_") if chosen else None
            if dest and dest.isidentifier():
                found.setdefault(dest, f"{label} {options[0] if options else dest}".strip())
    return found


@lru_cache(maxsize=64)
def _scan(root: str) -> RepoKeys:
    keys: dict[str, str] = {}
    readers: set[str] = set()
    files = _python_files(Path(root))
    parsed = 0
    for path in files:
        try:
            if path.is_symlink() or not path.is_file() or path.stat().st_size > MAX_BYTES:
                continue
            text = path.read_text(encoding="utf-8", errors="replace")
        except OSError:
            continue
        parsed += 1
        rel = os.path.relpath(path, root)
        for key, where in keys_of_source(text, rel).items():
            keys.setdefault(key, where)
        readers |= readers_of_source(text)
    # one way of reading only: a repository that also reads YAML as PyYAML types says nothing
    only = readers - {"yaml"} if "yaml" not in readers else set()
    reader = _READER_WORDS[sorted(only)[0]] if len(only) == 1 else ""
    return RepoKeys(root=root, keys=frozenset(keys), sources=keys, files=parsed, number_reader=reader)


MAX_READER_FILES = 40
MAX_IMPORT_DEPTH = 3


def _local_imports(tree: ast.AST, script: Path, top: Path) -> list[Path]:
    """Files of the script's own tree that it imports (relative imports, or module names found
    as files beside the script or under TOP); other imports are libraries and left alone."""
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
                    if cand is not None and cand.is_file():
                        out.append(cand)
                        break
    return out


@lru_cache(maxsize=64)
def reader_keys(script: str) -> RepoKeys | None:
    """The keys SCRIPT (a Python file) and the modules of its own tree it imports declare; None
    when the script cannot be read."""
    path = Path(script)
    try:
        if not path.is_file():
            return None
    except (OSError, ValueError):
        return None
    top = repository_root(path) or path.parent
    keys: dict[str, str] = {}
    readers: set[str] = set()
    queue, seen, parsed = [(path, 0)], {path.resolve()}, 0
    while queue and parsed < MAX_READER_FILES:
        here, depth = queue.pop(0)
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
            keys.setdefault(key, where)
        readers |= readers_of_source(text)
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
    return RepoKeys(root=str(top), keys=frozenset(keys), sources=keys, files=parsed, number_reader=reader)


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
    return RepoKeys(root=parts[0].root, keys=frozenset().union(*(p.keys for p in parts)), sources=sources,
                    files=sum(p.files for p in parts),
                    number_reader=readers.pop() if len(readers) == 1 else "")


def keys_for(config: str | os.PathLike, readers: tuple[str, ...] = ()) -> RepoKeys | None:
    """The keys CONFIG's repository declares, with those of the scripts named as its readers."""
    return merged([repo_keys(config)] + [reader_keys(str(r)) for r in readers])


def repo_keys(config: str | os.PathLike) -> RepoKeys | None:
    """The keys the scripts of CONFIG's repository declare (None for text without a file)."""
    text = str(config)
    if not text or text.startswith("<"):
        return None
    try:
        if not Path(text).is_file():
            return None
    except (OSError, ValueError):
        return None
    root = repository_root(text)
    return _scan(str(root)) if root is not None else None
