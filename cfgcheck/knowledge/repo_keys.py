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
The work is bounded: at most ``MAX_FILES`` Python files, each at most ``MAX_BYTES``, hidden
folders, virtual environments and ``site-packages`` skipped.
"""

from __future__ import annotations

import ast
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

MAX_FILES = 400
MAX_BYTES = 512 * 1024
MAX_UP = 6
_MARKERS = (".git", "pyproject.toml", "setup.py", "setup.cfg")
_SKIP_DIRS = {"node_modules", "site-packages", "venv", ".venv", "env", "build", "dist", "__pycache__"}


@dataclass(frozen=True)
class RepoKeys:
    root: str
    keys: frozenset[str]
    sources: dict  # key -> "path/of/file.py ClassName" or "path/of/file.py --option"
    files: int  # Python files parsed


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
    try:
        for here, dirs, files in os.walk(root, followlinks=False):
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
    return RepoKeys(root=root, keys=frozenset(keys), sources=keys, files=parsed)


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
