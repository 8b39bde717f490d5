#!/usr/bin/env python3
"""Regenerate ``cfgcheck/knowledge/known_keys.json`` from the reference libraries.

The linter needs to know which configuration keys the training libraries accept,
across the versions people still run, so that it can say "unknown key `lora_aplha`,
did you mean `lora_alpha`?" and never call a valid (or merely old) key a typo.

Nothing is imported from the libraries.  For every pinned version in ``SCAN`` the
script downloads the published archive with pip::

    pip download --no-deps --only-binary=:all: NAME==VER -d CACHE      (wheels)
    pip download --no-deps --no-binary=:all: --no-build-isolation deepspeed==VER -d CACHE

reads the relevant source files straight out of the zip / tarball and parses them
with :mod:`ast`:

* ``trainer``      - dataclass fields of ``transformers.TrainingArguments`` and
  ``Seq2SeqTrainingArguments``; every TRL dataclass that derives from
  ``TrainingArguments`` (SFTConfig, DPOConfig, GRPOConfig, ...) or from TRL's
  ``ScriptArguments``, plus ``ModelConfig``, ``*ScriptArguments`` and the old
  stand-alone ``PPOConfig``.  Inherited fields are followed through bases defined
  in the same package.
* ``peft-adapter`` - fields of every PEFT class derived from ``PeftConfigMixin``
  (LoraConfig, AdaLoraConfig, ...), with the fields of nested config dataclasses
  as dotted keys (``loftq_config.loftq_bits``).
* ``deepspeed``    - keys read from the JSON config by ``deepspeed/runtime/config.py``:
  the reader functions are followed (calls, returned sub-dicts, module constants)
  and the pydantic config models (``DeepSpeedZeroConfig`` ...) contribute their
  field names and aliases.  Nested keys are dotted (``zero_optimization.stage``).
* ``accelerate``   - fields of ``ClusterConfig`` / ``SageMakerConfig`` in
  ``accelerate/commands/config/config_args.py``, legacy keys that
  ``BaseConfig.process_config`` converts, and the sub-keys of the ``*_config``
  dicts: the string literals ``accelerate config`` writes in ``cluster.py`` plus
  the ``accelerate launch`` options the launcher copies them onto.

The recipe runners (axolotl, LLaMA-Factory, torchtune) are scanned at one release each
(``RUNNERS``) into ``runner_keys.json``, with the release and the files read:

* ``axolotl``       - fields and aliases of the pydantic ``AxolotlInputConfig`` (and its bases)
  in ``axolotl/utils/schemas/config.py``, nested models as dotted keys, and the plugins'
  settings models in ``axolotl/integrations/*/args.py``;
* ``llama-factory`` - dataclass fields of the argument classes ``get_train_args`` parses
  (``llamafactory/hparams/*.py``); its ``TrainingArguments`` derives from transformers', so
  the transformers keys count too; ``llama-factory-v1``: the v1 trainer's own argument classes
  (``llamafactory/v1/config/*_args.py``), a closed set;
* ``torchtune``     - the keys the recipes (``recipes/*.py``) read from their config
  (``cfg.x``, ``cfg.get("x")``), and the parameters of every public function and class of the
  package, the ``_component_`` targets whose sub-keys are their arguments; and the parameters
  of ``torch.optim`` (``optimizer: {_component_: torch.optim.AdamW}``), read from the installed
  torch of the version pyproject.toml pins (``TORCH_VERSION``), located without importing it.

Usage (from the repository root; needs pip and network access to PyPI)::

    python tools/generate_known_keys.py                 # download what is missing, write the JSON
    python tools/generate_known_keys.py --cache DIR     # default ~/.cache/cfgcheck-keys
    python tools/generate_known_keys.py --offline       # use only archives already in the cache
    python tools/generate_known_keys.py --check         # exit 1 if the committed JSON is stale
    python tools/generate_known_keys.py --runners       # the recipe runners' runner_keys.json

To scan another version, edit ``SCAN`` below and rerun.  The output is sorted and
deterministic: the same archives always give the same file.
"""

from __future__ import annotations

import argparse
import ast
import io
import json
import re
import subprocess
import sys
import tarfile
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

# Versions scanned, oldest first.  Pick versions that exist on PyPI (`pip index versions NAME`).
SCAN: dict[str, list[str]] = {
    # 4.50.3 / 4.51.3 bracket the removal of `evaluation_strategy`; 5.14.1 / 5.15.0 that of `warmup_ratio`.
    "transformers": [
        "4.36.2", "4.41.2", "4.46.3", "4.50.3", "4.51.3", "4.57.6",
        "5.0.0", "5.10.4", "5.14.1", "5.15.0", "5.24.0",
    ],
    "trl": [
        "0.9.6", "0.11.4", "0.12.2", "0.15.2", "0.19.1", "0.20.0", "0.23.1", "0.26.2", "0.29.1",
        "1.0.0", "1.8.0", "1.16.0",
    ],
    "peft": ["0.10.0", "0.11.1", "0.13.2", "0.15.2", "0.17.1", "0.19.1", "0.21.2"],
    "deepspeed": ["0.14.5", "0.16.9", "0.19.8"],
    "accelerate": ["0.25.0", "0.30.1", "0.34.2", "1.0.1", "1.6.0", "1.10.1", "1.15.0"],
}
SDIST_ONLY = {"deepspeed"}
LAYOUT_OF = {
    "transformers": "trainer",
    "trl": "trainer",
    "peft": "peft-adapter",
    "deepspeed": "deepspeed",
    "accelerate": "accelerate",
}
REPO_ROOT = Path(__file__).resolve().parents[1]
DEFAULT_OUTPUT = REPO_ROOT / "cfgcheck" / "knowledge" / "known_keys.json"
DEFAULT_CACHE = Path.home() / ".cache" / "cfgcheck-keys"


# --------------------------------------------------------------------------- archives


def fetch(name: str, version: str, cache: Path, offline: bool) -> Path:
    """Return the cached archive of NAME==VERSION, downloading it with pip if needed."""
    cache.mkdir(parents=True, exist_ok=True)
    stem = name.replace("-", "_")
    pattern = f"{stem}-{version}.tar.gz" if name in SDIST_ONLY else f"{stem}-{version}-*.whl"
    found = sorted(cache.glob(pattern))
    if found:
        return found[0]
    if offline:
        raise SystemExit(f"{name}=={version} is not in {cache} and --offline was given")
    cmd = [sys.executable, "-m", "pip", "download", "--no-deps", "-q", "-d", str(cache)]
    if name in SDIST_ONLY:
        # DeepSpeed publishes sdists only; metadata preparation runs its setup without building ops.
        cmd += ["--no-binary=:all:", "--no-build-isolation"]
    else:
        cmd += ["--only-binary=:all:"]
    cmd.append(f"{name}=={version}")
    subprocess.run(cmd, check=True)
    found = sorted(cache.glob(pattern))
    if not found:
        raise SystemExit(f"pip did not leave {pattern} in {cache}")
    return found[0]


def read_sources(archive: Path, package: str) -> dict[str, str]:
    """Map 'pkg/sub/mod.py' -> source text for every .py file of PACKAGE in the archive."""
    out: dict[str, str] = {}
    if archive.suffix == ".whl":
        with zipfile.ZipFile(archive) as zf:
            for info in zf.infolist():
                if info.filename.startswith(package + "/") and info.filename.endswith(".py"):
                    out[info.filename] = zf.read(info).decode("utf-8", "replace")
    else:
        with tarfile.open(archive) as tf:
            for member in tf.getmembers():
                parts = member.name.split("/", 1)
                if len(parts) == 2 and parts[1].startswith(package + "/") and parts[1].endswith(".py"):
                    fh = tf.extractfile(member)
                    if fh is not None:
                        out[parts[1]] = io.TextIOWrapper(fh, "utf-8", errors="replace").read()
    return out


# --------------------------------------------------------------------------- package index


@dataclass
class Module:
    name: str
    tree: ast.Module
    classes: dict[str, ast.ClassDef] = field(default_factory=dict)
    functions: dict[str, ast.FunctionDef] = field(default_factory=dict)
    strings: dict[str, str] = field(default_factory=dict)  # module-level NAME = "literal"
    imports: dict[str, tuple[str, str]] = field(default_factory=dict)  # local -> (module, name)
    star_imports: list[str] = field(default_factory=list)


class Package:
    """The parsed .py files of one package version, with name resolution across its modules."""

    def __init__(self, sources: dict[str, str]):
        self.sources = sources
        self._modules: dict[str, Module | None] = {}
        self.by_name: dict[str, str] = {}
        for path in sources:
            mod = path[:-3].replace("/", ".")
            if mod.endswith(".__init__"):
                mod = mod[: -len(".__init__")]
            self.by_name[mod] = path

    def module(self, name: str) -> Module | None:
        if name in self._modules:
            return self._modules[name]
        path = self.by_name.get(name)
        result = None
        if path is not None:
            try:
                tree = ast.parse(self.sources[path])
            except SyntaxError:
                tree = None
            if tree is not None:
                result = Module(name, tree)
                is_pkg = path.endswith("__init__.py")
                for node in tree.body:
                    self._index_node(result, node, is_pkg)
        self._modules[name] = result
        return result

    def _index_node(self, mod: Module, node: ast.stmt, is_pkg: bool) -> None:
        if isinstance(node, ast.ClassDef):
            mod.classes[node.name] = node
        elif isinstance(node, ast.FunctionDef):
            mod.functions[node.name] = node
        elif isinstance(node, ast.Assign) and isinstance(node.value, ast.Constant):
            if isinstance(node.value.value, str):
                for target in node.targets:
                    if isinstance(target, ast.Name):
                        mod.strings[target.id] = node.value.value
        elif isinstance(node, ast.ImportFrom):
            base = self._absolute(mod.name, node, is_pkg)
            for alias in node.names:
                if alias.name == "*":
                    mod.star_imports.append(base)
                else:
                    mod.imports[alias.asname or alias.name] = (base, alias.name)
        elif isinstance(node, (ast.If, ast.Try)):
            for child in node.body:
                self._index_node(mod, child, is_pkg)

    @staticmethod
    def _absolute(current: str, node: ast.ImportFrom, is_pkg: bool) -> str:
        if not node.level:
            return node.module or ""
        parts = current.split(".")
        if not is_pkg:
            parts = parts[:-1]
        if node.level > 1:
            parts = parts[: len(parts) - (node.level - 1)]
        return ".".join(parts + ([node.module] if node.module else []))

    def lookup(self, modname: str, name: str, _seen: set | None = None):
        """Resolve NAME as seen from MODNAME: ('class'|'function'|'str', module, obj) or ('external', dotted, None)."""
        seen = _seen if _seen is not None else set()
        if (modname, name) in seen:
            return None
        seen.add((modname, name))
        mod = self.module(modname)
        if mod is None:
            return ("external", f"{modname}.{name}", None)
        if name in mod.classes:
            return ("class", mod, mod.classes[name])
        if name in mod.functions:
            return ("function", mod, mod.functions[name])
        if name in mod.strings:
            return ("str", mod, mod.strings[name])
        if name in mod.imports:
            src, orig = mod.imports[name]
            if src in self.by_name:
                return self.lookup(src, orig, seen)
            if f"{src}.{orig}" in self.by_name:
                return None  # a module, not a class
            return ("external", f"{src}.{orig}", None)
        for star in mod.star_imports:
            if star in self.by_name:
                hit = self.lookup(star, name, seen)
                if hit is not None and hit[0] != "external":
                    return hit
        return None

    def all_classes(self):
        for modname in sorted(self.by_name):
            mod = self.module(modname)
            if mod is None:
                continue
            for node in ast.walk(mod.tree):
                if isinstance(node, ast.ClassDef):
                    yield mod, node


def base_name(expr: ast.expr) -> str | None:
    if isinstance(expr, ast.Name):
        return expr.id
    if isinstance(expr, ast.Attribute):
        return expr.attr
    return None


def class_bases(pkg: Package, mod: Module, cls: ast.ClassDef):
    """Yield ('class', module, ClassDef) for bases in the package, ('external', name, None) otherwise."""
    for b in cls.bases:
        name = base_name(b)
        if name is None:
            continue
        hit = pkg.lookup(mod.name, name) if isinstance(b, ast.Name) else None
        if hit is None or hit[0] not in ("class", "external"):
            yield ("external", name, None)
        else:
            yield hit


def ancestry(pkg: Package, mod: Module, cls: ast.ClassDef, depth: int = 0) -> set[str]:
    """Names of all ancestors (package and external), e.g. {'TrainingArguments', 'PeftConfig'}."""
    names: set[str] = set()
    if depth > 20:
        return names
    for kind, where, node in class_bases(pkg, mod, cls):
        if kind == "external":
            names.add(where.rsplit(".", 1)[-1])
        else:
            names.add(node.name)
            names |= ancestry(pkg, where, node, depth + 1)
    return names


def is_classvar(annotation: ast.expr) -> bool:
    text = ast.unparse(annotation)
    return text.startswith("ClassVar") or text.startswith("typing.ClassVar")


def field_call_kw(value: ast.expr | None, kw: str):
    if isinstance(value, ast.Call):
        for k in value.keywords:
            if k.arg == kw:
                return k.value
    return None


def own_fields(cls: ast.ClassDef) -> list[tuple[str, ast.expr, ast.expr | None]]:
    """(name, annotation, value) of the annotated class attributes that are constructor fields."""
    out = []
    for node in cls.body:
        if not isinstance(node, ast.AnnAssign) or not isinstance(node.target, ast.Name):
            continue
        name = node.target.id
        if name.startswith("_") or is_classvar(node.annotation) or name == "model_config":
            continue
        init = field_call_kw(node.value, "init")
        if isinstance(init, ast.Constant) and init.value is False:
            continue
        out.append((name, node.annotation, node.value))
    return out


def all_fields(pkg: Package, mod: Module, cls: ast.ClassDef, depth: int = 0):
    """Fields including those inherited from bases in the package: name -> (owner ClassDef, module, annotation, value)."""
    result: dict[str, tuple] = {}
    if depth > 20:
        return result
    for kind, where, node in reversed(list(class_bases(pkg, mod, cls))):
        if kind == "class":
            result.update(all_fields(pkg, where, node, depth + 1))
    for name, ann, value in own_fields(cls):
        result[name] = (cls, mod, ann, value)
    return result


def annotation_classes(pkg: Package, mod: Module, ann: ast.expr):
    for node in ast.walk(ann):
        if isinstance(node, ast.Name):
            hit = pkg.lookup(mod.name, node.id)
            if hit and hit[0] == "class":
                yield hit[1], hit[2]
        elif isinstance(node, ast.Constant) and isinstance(node.value, str) and node.value.isidentifier():
            hit = pkg.lookup(mod.name, node.value)
            if hit and hit[0] == "class":
                yield hit[1], hit[2]


def is_dataclass(cls: ast.ClassDef) -> bool:
    return any(base_name(d.func if isinstance(d, ast.Call) else d) == "dataclass" for d in cls.decorator_list)


# --------------------------------------------------------------------------- per library

Found = dict[str, set[str]]  # key -> owners


def add(found: Found, key: str, owner: str) -> None:
    found.setdefault(key, set()).add(owner)


def scan_transformers(pkg: Package) -> Found:
    found: Found = {}
    for modname, clsname in [
        ("transformers.training_args", "TrainingArguments"),
        ("transformers.training_args_seq2seq", "Seq2SeqTrainingArguments"),
    ]:
        mod = pkg.module(modname)
        if mod is None or clsname not in mod.classes:
            continue
        for name in all_fields(pkg, mod, mod.classes[clsname]):
            add(found, name, f"transformers.{clsname}")
    if not found:
        raise SystemExit("no TrainingArguments found in the transformers archive")
    return found


def scan_trl(pkg: Package) -> Found:
    found: Found = {}
    named = {"ModelConfig", "ScriptArguments", "PPOConfig"}
    for mod, cls in pkg.all_classes():
        anc = ancestry(pkg, mod, cls)
        wanted = (
            cls.name in named
            or cls.name.endswith("ScriptArguments")
            or "TrainingArguments" in anc
            or "ScriptArguments" in anc
        )
        if not wanted or not (is_dataclass(cls) or "TrainingArguments" in anc):
            continue
        for name, (owner_cls, _m, _a, _v) in all_fields(pkg, mod, cls).items():
            # The owner is the TRL class that declares the field (subclasses inherit it);
            # fields inherited from transformers are recorded under transformers itself.
            add(found, name, f"trl.{owner_cls.name}")
    # Keys the TRL CLI's YAML loader handles itself before the dataclasses see the file
    # (`env`: environment variables), read as `"key" in config` / `config.pop("key")`.
    for mod, cls in pkg.all_classes():
        if not cls.name.endswith("Parser"):
            continue
        for node in ast.walk(cls):
            key = None
            if isinstance(node, ast.Compare) and isinstance(node.ops[0], ast.In):
                right = node.comparators[0]
                if isinstance(right, ast.Name) and right.id == "config":
                    if isinstance(node.left, ast.Constant) and isinstance(node.left.value, str):
                        key = node.left.value
            elif (
                isinstance(node, ast.Call)
                and isinstance(node.func, ast.Attribute)
                and node.func.attr == "pop"
                and isinstance(node.func.value, ast.Name)
                and node.func.value.id == "config"
                and node.args
                and isinstance(node.args[0], ast.Constant)
                and isinstance(node.args[0].value, str)
            ):
                key = node.args[0].value
            if key:
                add(found, key, f"trl.{cls.name}")
    if not any("trl.SFTConfig" in o for o in found.values()):
        raise SystemExit("no SFTConfig found in the trl archive")
    return found


def scan_peft(pkg: Package) -> Found:
    found: Found = {}
    for mod, cls in pkg.all_classes():
        if cls.name != "PeftConfigMixin" and "PeftConfigMixin" not in ancestry(pkg, mod, cls):
            continue
        for name, (declaring, fmod, ann, _v) in all_fields(pkg, mod, cls).items():
            add(found, name, f"peft.{declaring.name}")  # the declaring class; subclasses inherit
            for nmod, ncls in annotation_classes(pkg, fmod, ann):
                if is_dataclass(ncls) and "PeftConfigMixin" not in ancestry(pkg, nmod, ncls):
                    for sub in all_fields(pkg, nmod, ncls):
                        add(found, f"{name}.{sub}", f"peft.{ncls.name}")
    if not any("peft.LoraConfig" in o for o in found.values()):
        raise SystemExit("no LoraConfig found in the peft archive")
    return found


# DeepSpeed ------------------------------------------------------------------


class DeepSpeedReader:
    """Follows DeepSpeed's config readers from ``DeepSpeedConfig._initialize_params``.

    A value is either a path into the JSON config (tuple of keys; () is the root)
    or a string constant.  Every time a key is read from a path, path+key is recorded.
    """

    MAX_DEPTH = 10

    def __init__(self, pkg: Package):
        self.pkg = pkg
        self.found: Found = {}
        self._done: set = set()

    def record(self, path: tuple, owner: str) -> None:
        if path:
            add(self.found, ".".join(path), owner)

    # -- values
    def string(self, mod: Module, env: dict, expr: ast.expr) -> str | None:
        if isinstance(expr, ast.Constant) and isinstance(expr.value, str):
            return expr.value
        if isinstance(expr, ast.Name):
            val = env.get(expr.id)
            if isinstance(val, str):
                return val
            if val is None:
                hit = self.pkg.lookup(mod.name, expr.id)
                if hit and hit[0] == "str":
                    return hit[2]
        if isinstance(expr, ast.BinOp) and isinstance(expr.op, ast.Add):
            left, right = self.string(mod, env, expr.left), self.string(mod, env, expr.right)
            if left is not None and right is not None:
                return left + right
        return None

    def value(self, mod: Module, env: dict, expr: ast.expr, owner: str, depth: int):
        """Path (tuple) or string or None for EXPR; records the keys it reads."""
        s = self.string(mod, env, expr)
        if s is not None:
            return s
        if isinstance(expr, ast.Name):
            val = env.get(expr.id)
            return val if isinstance(val, tuple) else None
        if isinstance(expr, ast.Attribute) and isinstance(expr.value, ast.Name) and expr.value.id == "self":
            val = env.get("self." + expr.attr)
            return val if isinstance(val, tuple) else None
        if isinstance(expr, ast.Subscript):
            base = self.value(mod, env, expr.value, owner, depth)
            key = self.string(mod, env, expr.slice)
            if isinstance(base, tuple) and key is not None:
                self.record(base + (key,), owner)
                return base + (key,)
            return None
        if isinstance(expr, ast.IfExp):
            for branch in (expr.body, expr.orelse):
                v = self.value(mod, env, branch, owner, depth)
                if isinstance(v, tuple):
                    return v
            return None
        if isinstance(expr, ast.DictComp) and len(expr.generators) == 1:
            gen = expr.generators[0]
            if isinstance(gen.target, ast.Name) and isinstance(gen.iter, (ast.Tuple, ast.List)):
                keys = [self.string(mod, env, e) for e in gen.iter.elts]
                v = expr.value
                if isinstance(v, ast.Call) and isinstance(v.func, ast.Attribute) and v.func.attr == "get":
                    base = self.value(mod, env, v.func.value, owner, depth)
                    if isinstance(base, tuple):
                        for k in keys:
                            if k is not None:
                                self.record(base + (k,), owner)
                        return base  # a view of the same mapping
            return None
        if isinstance(expr, ast.Call):
            return self.call(mod, env, expr, owner, depth)
        return None

    def call(self, mod: Module, env: dict, call: ast.Call, owner: str, depth: int):
        func = call.func
        if isinstance(func, ast.Attribute) and func.attr in ("get", "pop", "setdefault") and call.args:
            base = self.value(mod, env, func.value, owner, depth)
            key = self.string(mod, env, call.args[0])
            if isinstance(base, tuple) and key is not None:
                self.record(base + (key,), owner)
                return base + (key,)
            return None
        if isinstance(func, ast.Attribute) and func.attr in ("copy", "deepcopy") and call.args:
            return self.value(mod, env, call.args[0], owner, depth)
        if isinstance(func, ast.Name) and func.id == "dict" and len(call.args) == 1:
            return self.value(mod, env, call.args[0], owner, depth)
        args = [self.value(mod, env, a, owner, depth) for a in call.args]
        if (
            isinstance(func, ast.Attribute)
            and isinstance(func.value, ast.Name)
            and func.value.id == "self"
            and env.get("__class__") is not None
        ):
            cls = env["__class__"]
            method = next((n for n in cls.body if isinstance(n, ast.FunctionDef) and n.name == func.attr), None)
            if method is not None and any(isinstance(v, tuple) for v in args):
                return self.run_function(mod, method, [None] + args, {}, owner, depth + 1, cls)
            return None
        if not isinstance(func, ast.Name):
            return None
        kwargs = {k.arg: self.value(mod, env, k.value, owner, depth) for k in call.keywords if k.arg}
        star = [self.value(mod, env, k.value, owner, depth) for k in call.keywords if k.arg is None]
        if not any(isinstance(v, (tuple, str)) for v in args + list(kwargs.values()) + star):
            return None
        hit = self.pkg.lookup(mod.name, func.id)
        if not hit:
            return None
        kind, where, node = hit
        if kind == "function":
            # Generic helpers (get_scalar_param ...) read on behalf of their caller.
            callee = owner if where.name.endswith("config_utils") else f"deepspeed.{func.id}"
            return self.run_function(where, node, args, kwargs, callee, depth + 1)
        if kind == "class":
            if self.is_model(where, node):
                for path in star:
                    if isinstance(path, tuple):
                        self.model_fields(where, node, path)
                return None
            init = next((n for n in node.body if isinstance(n, ast.FunctionDef) and n.name == "__init__"), None)
            if init is not None:
                self.run_function(where, init, [None] + args, kwargs, f"deepspeed.{node.name}", depth + 1, node)
        return None

    def is_model(self, mod: Module, cls: ast.ClassDef) -> bool:
        anc = ancestry(self.pkg, mod, cls)
        return "DeepSpeedConfigModel" in anc or "BaseModel" in anc

    def model_fields(self, mod: Module, cls: ast.ClassDef, path: tuple, depth: int = 0) -> None:
        if depth > 6:
            return
        owner = f"deepspeed.{cls.name}"
        for name, (_o, fmod, ann, value) in all_fields(self.pkg, mod, cls).items():
            names = [name]
            alias = field_call_kw(value, "alias")
            if isinstance(alias, ast.Constant) and isinstance(alias.value, str):
                names.append(alias.value)
            for n in names:
                self.record(path + (n,), owner)
            for nmod, ncls in annotation_classes(self.pkg, fmod, ann):
                if self.is_model(nmod, ncls) and ncls is not cls:
                    for n in names:
                        self.model_fields(nmod, ncls, path + (n,), depth + 1)

    def run_function(
        self,
        mod: Module,
        fn: ast.FunctionDef,
        args: list,
        kwargs: dict,
        owner: str,
        depth: int,
        cls=None,
        seed: dict | None = None,
    ):
        if depth > self.MAX_DEPTH:
            return None
        params = [a.arg for a in fn.args.posonlyargs + fn.args.args]
        env: dict = {"__class__": cls, **(seed or {})}
        for p, v in zip(params, args):
            env[p] = v
        for p, v in kwargs.items():
            if p in params:
                env[p] = v
        # Defaults that are string constants (e.g. def get_x(param_dict, name=SOME_KEY)).
        defaults = fn.args.defaults
        for p, d in zip(params[len(params) - len(defaults):], defaults):
            if env.get(p) is None:
                env[p] = self.string(mod, env, d)
        sig = (mod.name, fn.name, fn.lineno, tuple(repr(env.get(p)) for p in params))
        if sig in self._done:
            return None
        self._done.add(sig)
        ret = None
        for _ in range(2):  # two passes so later assignments reach earlier loops
            for node in ast.walk(fn):
                if isinstance(node, ast.Assign):
                    v = self.value(mod, env, node.value, owner, depth)
                    for t in node.targets:
                        if isinstance(t, ast.Name) and (v is not None or t.id not in env):
                            env[t.id] = v
                elif isinstance(node, ast.Compare) and len(node.ops) == 1:
                    if isinstance(node.ops[0], (ast.In, ast.NotIn)):
                        container = node.comparators[0]
                        if isinstance(container, ast.Call) and isinstance(container.func, ast.Attribute) and container.func.attr == "keys":
                            container = container.func.value
                        base = self.value(mod, env, container, owner, depth)
                        key = self.string(mod, env, node.left)
                        if isinstance(base, tuple) and key is not None:
                            self.record(base + (key,), owner)
                elif isinstance(node, ast.Call):
                    self.value(mod, env, node, owner, depth)
                elif isinstance(node, ast.Return) and node.value is not None and ret is None:
                    v = self.value(mod, env, node.value, owner, depth)
                    if isinstance(v, tuple):
                        ret = v
        return ret


def scan_deepspeed(pkg: Package) -> Found:
    mod = pkg.module("deepspeed.runtime.config")
    if mod is None or "DeepSpeedConfig" not in mod.classes:
        raise SystemExit("no DeepSpeedConfig in the deepspeed archive")
    cls = mod.classes["DeepSpeedConfig"]
    methods = {n.name: n for n in cls.body if isinstance(n, ast.FunctionDef)}
    reader = DeepSpeedReader(pkg)
    reader.run_function(mod, methods["_initialize_params"], [None, ()], {}, "deepspeed.DeepSpeedConfig", 0, cls)
    if "__init__" in methods:
        # __init__ reads a few blocks itself (elasticity) through self._param_dict.
        reader.run_function(mod, methods["__init__"], [None], {}, "deepspeed.DeepSpeedConfig", 0, cls, {"self._param_dict": ()})
    found = reader.found
    # Newer releases keep the old readers but reject removed blocks up front
    # (module dicts such as _REMOVED_TOP_LEVEL_CONFIG_KEYS / _REMOVED_ZERO_CONFIG_KEYS).
    for node in mod.tree.body:
        if not (isinstance(node, ast.Assign) and isinstance(node.value, ast.Dict)):
            continue
        names = [t.id for t in node.targets if isinstance(t, ast.Name)]
        if not any(n.startswith("_REMOVED") and n.endswith("KEYS") for n in names):
            continue
        prefix = "zero_optimization." if any("ZERO" in n for n in names) else ""
        for k in node.value.keys:
            key = reader.string(mod, {}, k) if k is not None else None
            if key is None:
                continue
            full = prefix + key
            for known in [x for x in found if x == full or x.startswith(full + ".")]:
                del found[known]
    return found


# accelerate -----------------------------------------------------------------

DICT_PREFIX = {"fsdp_config": "fsdp_", "fp8_config": "fp8_", "dynamo_config": "dynamo_"}
GROUP_TO_DICT = {
    "deepspeed_args": "deepspeed_config",
    "fsdp_args": "fsdp_config",
    "megatron_lm_args": "megatron_lm_config",
    "fp8_args": "fp8_config",
    "mpirun_args": "mpirun_config",
    "parallelism_config_args": "parallelism_config",
}


def scan_accelerate(pkg: Package) -> Found:
    found: Found = {}
    mod = pkg.module("accelerate.commands.config.config_args")
    if mod is None or "ClusterConfig" not in mod.classes:
        raise SystemExit("no ClusterConfig in the accelerate archive")
    dict_fields: set[str] = set()
    for clsname in ("ClusterConfig", "SageMakerConfig"):
        if clsname not in mod.classes:
            continue
        for name, (_o, _m, ann, _v) in all_fields(pkg, mod, mod.classes[clsname]).items():
            add(found, name, f"accelerate.{clsname}")
            if name.endswith("_config") and "dict" in ast.unparse(ann).lower():
                dict_fields.add(name)
    # Legacy keys that BaseConfig.process_config converts before the unknown-key check.
    base = mod.classes.get("BaseConfig")
    fields_now = set(found)
    for node in ast.walk(base) if base is not None else []:
        key = None
        if isinstance(node, ast.Compare) and isinstance(node.ops[0], (ast.In, ast.NotIn)):
            if isinstance(node.left, ast.Constant) and isinstance(node.left.value, str):
                key = node.left.value
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "pop":
            if node.args and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str):
                key = node.args[0].value
        if key and key not in fields_now:
            add(found, key, "accelerate.BaseConfig.process_config")
    # Sub-keys written by `accelerate config` (cluster.py): NAME_config["key"] / NAME_config[prefix + "key"].
    cluster = pkg.module("accelerate.commands.config.cluster")
    for fn in [n for n in ast.walk(cluster.tree) if isinstance(n, ast.FunctionDef)] if cluster else []:
        # `prefix` is reassigned within one function ("dynamo_", then "megatron_lm_" ...): use the
        # assignment that precedes each subscript.
        assigned = sorted(
            (n.lineno, t.id, n.value.value)
            for n in ast.walk(fn)
            if isinstance(n, ast.Assign) and isinstance(n.value, ast.Constant) and isinstance(n.value.value, str)
            for t in n.targets
            if isinstance(t, ast.Name)
        )

        def prefix_at(name: str, line: int) -> str | None:
            value = None
            for lineno, var, text in assigned:
                if lineno > line:
                    break
                if var == name:
                    value = text
            return value

        for node in ast.walk(fn):
            if not (isinstance(node, ast.Subscript) and isinstance(node.value, ast.Name)):
                continue
            dname = node.value.id
            if dname not in dict_fields:
                continue
            s = node.slice
            key = None
            if isinstance(s, ast.Constant) and isinstance(s.value, str):
                key = s.value
            elif isinstance(s, ast.BinOp) and isinstance(s.op, ast.Add) and isinstance(s.right, ast.Constant):
                if isinstance(s.left, ast.Name):
                    pre = prefix_at(s.left.id, node.lineno)
                    key = pre + s.right.value if pre is not None else None
            if key:
                add(found, f"{dname}.{key}", "accelerate config (cluster.py)")
    # Sub-keys the launcher copies onto `accelerate launch` options of the matching group.
    launch = pkg.module("accelerate.commands.launch")
    for node in ast.walk(launch.tree) if launch else []:
        if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "add_argument"):
            continue
        group = node.func.value.id if isinstance(node.func.value, ast.Name) else ""
        opts = [a.value for a in node.args if isinstance(a, ast.Constant) and isinstance(a.value, str)]
        long = [o[2:].replace("-", "_") for o in opts if o.startswith("--")]
        if not long:
            continue
        dest = long[0]
        target = GROUP_TO_DICT.get(group)
        if target is None and dest.startswith("dynamo_"):
            target = "dynamo_config"
        if target is None or target not in dict_fields:
            continue
        add(found, f"{target}.{dest}", "accelerate launch option")
        prefix = DICT_PREFIX.get(target)
        if prefix and dest.startswith(prefix):
            # The launcher adds the prefix itself, so the short form is read too.
            add(found, f"{target}.{dest[len(prefix):]}", "accelerate launch option")
    return found


SCANNERS = {
    "transformers": scan_transformers,
    "trl": scan_trl,
    "peft": scan_peft,
    "deepspeed": scan_deepspeed,
    "accelerate": scan_accelerate,
}


# Recipe runners ----------------------------------------------------------------
#
# The runners are scanned at one release each (the one the layouts' notes cite); their key
# lists go to ``runner_keys.json`` with the release and the files they come from.

RUNNERS: dict[str, str] = {"axolotl": "0.19.0", "llamafactory": "0.9.5", "torchtune": "0.6.1"}
RUNNER_LAYOUT = {"axolotl": "axolotl", "llamafactory": "llama-factory", "torchtune": "torchtune"}
DEFAULT_RUNNER_OUTPUT = REPO_ROOT / "cfgcheck" / "knowledge" / "runner_keys.json"


def _pydantic_like(pkg: Package, mod: Module, cls: ast.ClassDef) -> bool:
    return "BaseModel" in ancestry(pkg, mod, cls) or cls.name == "BaseModel"


def _field_aliases(value: ast.expr | None) -> list[str]:
    out = []
    for kw in ("alias", "validation_alias"):
        v = field_call_kw(value, kw)
        if isinstance(v, ast.Constant) and isinstance(v.value, str):
            out.append(v.value)
    return out


def _model_keys(pkg: Package, mod: Module, cls: ast.ClassDef, owner: str, found: Found,
                prefix: str = "", depth: int = 0) -> None:
    """Fields (and aliases) of a pydantic model, nested models as dotted keys."""
    for name, (declaring, fmod, ann, value) in all_fields(pkg, mod, cls).items():
        for key in [name, *_field_aliases(value)]:
            add(found, prefix + key, f"{owner}.{declaring.name}")
        if depth < 2:
            for nmod, ncls in annotation_classes(pkg, fmod, ann):
                if _pydantic_like(pkg, nmod, ncls) or is_dataclass(ncls):
                    # a list of models is a list of mappings: its items are not dotted keys
                    if "list" in ast.unparse(ann).lower():
                        continue
                    _model_keys(pkg, nmod, ncls, owner, found, f"{prefix}{name}.", depth + 1)


def scan_axolotl(pkg: Package) -> tuple[Found, list[str]]:
    found: Found = {}
    files = []
    mod = pkg.module("axolotl.utils.schemas.config")
    if mod is None or "AxolotlInputConfig" not in mod.classes:
        raise SystemExit("no AxolotlInputConfig in the axolotl archive")
    _model_keys(pkg, mod, mod.classes["AxolotlInputConfig"], "axolotl", found)
    files.append("axolotl/utils/schemas/config.py AxolotlInputConfig (and its bases)")
    # plugins add their own settings models (axolotl/integrations/*/args.py), merged at load time
    for modname in sorted(pkg.by_name):
        if modname.startswith("axolotl.integrations.") and modname.endswith(".args"):
            pmod = pkg.module(modname)
            for cls in (pmod.classes.values() if pmod else ()):
                if _pydantic_like(pkg, pmod, cls):
                    _model_keys(pkg, pmod, cls, "axolotl", found)
            files.append(pkg.by_name[modname])
    return found, files


def _scan_argument_classes(pkg: Package, classes: list[tuple[str, str]], origin: str,
                           what: str) -> tuple[Found, list[str]]:
    """The fields of each (module, class), every one noted as ORIGIN.<declaring class>."""
    found: Found = {}
    files = []
    for modname, clsname in classes:
        mod = pkg.module(modname)
        if mod is None or clsname not in mod.classes:
            raise SystemExit(f"no {what}{clsname} in the llamafactory archive")
        for name, (declaring, _m, _a, _v) in all_fields(pkg, mod, mod.classes[clsname]).items():
            add(found, name, f"{origin}.{declaring.name}")
        files.append(f"{pkg.by_name[modname]} {clsname}")
    return found, files


def scan_llamafactory(pkg: Package) -> tuple[Found, list[str]]:
    return _scan_argument_classes(pkg, [
        ("llamafactory.hparams.model_args", "ModelArguments"),
        ("llamafactory.hparams.data_args", "DataArguments"),
        ("llamafactory.hparams.training_args", "TrainingArguments"),
        ("llamafactory.hparams.finetuning_args", "FinetuningArguments"),
        ("llamafactory.hparams.generating_args", "GeneratingArguments"),
        ("llamafactory.hparams.evaluation_args", "EvaluationArguments"),
    ], "llamafactory", "")


def scan_llamafactory_v1(pkg: Package) -> tuple[Found, list[str]]:
    """LLaMA-Factory's v1 trainer: the dataclasses ``llamafactory/v1/config/arg_parser.py`` get_args
    parses with HfArgumentParser.parse_dict (extra keys refused unless ALLOW_EXTRA_KEYS is set)."""
    return _scan_argument_classes(pkg, [
        ("llamafactory.v1.config.model_args", "ModelArguments"),
        ("llamafactory.v1.config.data_args", "DataArguments"),
        ("llamafactory.v1.config.training_args", "TrainingArguments"),
        ("llamafactory.v1.config.sample_args", "SampleArguments"),
    ], "llamafactory.v1", "v1 ")


def _signature(node: ast.FunctionDef | ast.ClassDef, pkg: Package, mod: Module, depth: int = 0):
    """(parameter names, takes **kwargs) of a function, or of a class's __init__."""
    if isinstance(node, ast.ClassDef):
        init = next((n for n in node.body if isinstance(n, ast.FunctionDef) and n.name == "__init__"), None)
        if init is None:
            if is_dataclass(node):
                return [n for n, _a, _v in own_fields(node)], False
            for kind, where, base in class_bases(pkg, mod, node):
                if kind == "class" and depth < 5:
                    return _signature(base, pkg, where, depth + 1)
            return None
        node = init
    a = node.args
    names = [x.arg for x in a.posonlyargs + a.args + a.kwonlyargs if x.arg not in ("self", "cls")]
    return names, a.kwarg is not None


def scan_torchtune(pkg: Package, recipes: dict[str, str]) -> tuple[Found, list[str], dict]:
    found: Found = {}
    # top-level keys: what the recipes read from their config (cfg.x, cfg.get("x"), cfg["x"])
    for path in sorted(recipes):
        try:
            tree = ast.parse(recipes[path])
        except SyntaxError:
            continue
        owner = "torchtune recipe " + path.rsplit("/", 1)[-1][:-3]
        for node in ast.walk(tree):
            key = None
            if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "cfg":
                if node.attr not in ("get", "pop", "keys", "items", "values"):
                    key = node.attr
            elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                  and node.func.attr in ("get", "pop") and isinstance(node.func.value, ast.Name)
                  and node.func.value.id == "cfg" and node.args
                  and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str)):
                key = node.args[0].value
            elif (isinstance(node, ast.Subscript) and isinstance(node.value, ast.Name) and node.value.id == "cfg"
                  and isinstance(node.slice, ast.Constant) and isinstance(node.slice.value, str)):
                key = node.slice.value
            if key:
                add(found, key, owner)
    # components: the parameters of every public function and class, under its public name
    components: dict[str, dict] = {}
    partials: dict[tuple[str, str], ast.Call] = {}  # qlora_x = partial(lora_x, quantize_base=True)
    for modname in sorted(pkg.by_name):
        mod = pkg.module(modname)
        for node in (mod.tree.body if mod else ()):
            if (isinstance(node, ast.Assign) and isinstance(node.value, ast.Call)
                    and base_name(node.value.func) == "partial" and node.value.args):
                for t in node.targets:
                    if isinstance(t, ast.Name):
                        partials[(modname, t.id)] = node.value

    def resolve(modname: str, name: str, depth: int = 0):
        mod = pkg.module(modname)
        if mod is None or depth > 5:
            return None
        if (modname, name) in partials:
            inner = base_name(partials[(modname, name)].args[0])
            return resolve(modname, inner, depth + 1) if inner else None
        if name in mod.imports:
            src, orig = mod.imports[name]
            if src in pkg.by_name:
                return resolve(src, orig, depth + 1)
        hit = pkg.lookup(modname, name)
        return hit if hit and hit[0] in ("class", "function") else None

    components = _components(pkg, partials, resolve)
    return found, ["recipes/*.py (keys read from the recipe config)", "torchtune/**.py (component parameters)"], components


def _components(pkg: Package, partials: dict, resolve) -> dict[str, dict]:
    """{public name: {params, open}} for every public function and class of PKG."""
    components: dict[str, dict] = {}
    for modname in sorted(pkg.by_name):
        if any(part.startswith("_") for part in modname.split(".")):
            continue
        mod = pkg.module(modname)
        if mod is None:
            continue
        names = set(mod.classes) | set(mod.functions) | set(mod.imports) \
            | {n for (m, n) in partials if m == modname}
        for name in sorted(names):
            if name.startswith("_"):
                continue
            hit = resolve(modname, name)
            if not hit or hit[0] not in ("class", "function"):
                continue
            sig = _signature(hit[2], pkg, hit[1])
            if sig is None:
                continue
            params, varkw = sig
            components[f"{modname}.{name}"] = {"params": sorted(set(params)), "open": varkw}
    return components


# The optimizers and schedulers component recipes name (``optimizer: {_component_: torch.optim.AdamW}``):
# read from the torch the project pins (pyproject.toml), located without importing it.
TORCH_VERSION = "2.13.0"


def scan_torch_optim() -> tuple[dict[str, dict], str]:
    import importlib.util
    import re

    spec = importlib.util.find_spec("torch")  # finds the installed package; runs none of it
    if spec is None or not spec.submodule_search_locations:
        raise SystemExit("torch is not installed; install the pinned torch to scan torch.optim")
    root = Path(list(spec.submodule_search_locations)[0])
    found = re.search(r"__version__\s*=\s*'([^'+]+)", (root / "version.py").read_text(encoding="utf-8"))
    if not found or found.group(1) != TORCH_VERSION:
        raise SystemExit(f"torch {found.group(1) if found else '?'} is installed; the scan reads {TORCH_VERSION}")
    sources = {f"torch/optim/{p.relative_to(root / 'optim').as_posix()}": p.read_text(encoding="utf-8")
               for p in sorted((root / "optim").rglob("*.py"))}
    pkg = Package(sources)

    def resolve(modname: str, name: str, depth: int = 0):
        mod = pkg.module(modname)
        if mod is None or depth > 5:
            return None
        if name in mod.imports:
            src, orig = mod.imports[name]
            if src in pkg.by_name:
                return resolve(src, orig, depth + 1)
        hit = pkg.lookup(modname, name)
        return hit if hit and hit[0] in ("class", "function") else None

    return _components(pkg, {}, resolve), f"torch {TORCH_VERSION} torch/optim/**.py (installed; optimizer and scheduler parameters)"


def read_recipes(archive: Path) -> dict[str, str]:
    out = {}
    with zipfile.ZipFile(archive) as zf:
        for info in zf.infolist():
            if info.filename.startswith("recipes/") and info.filename.endswith(".py") \
                    and "/dev/" not in info.filename:
                out[info.filename] = zf.read(info).decode("utf-8", "replace")
    return out


def runner_requires(archive: Path) -> dict[str, str]:
    """{library: specifier} of the scanned libraries the runner's wheel requires (its METADATA
    Requires-Dist lines without an extra marker)."""
    out: dict[str, str] = {}
    with zipfile.ZipFile(archive) as zf:
        meta = next((n for n in zf.namelist() if n.endswith(".dist-info/METADATA")), None)
        text = zf.read(meta).decode("utf-8", "replace") if meta else ""
    for line in text.splitlines():
        if not line.startswith("Requires-Dist:") or "extra ==" in line:
            continue
        req = line.split(":", 1)[1].split(";")[0].strip()
        m = re.match(r"([A-Za-z0-9_.-]+)\s*(?:\[[^]]*\])?\s*\(?([^)]*)\)?", req)
        if m and m.group(1).lower() in SCAN and m.group(2).strip():
            out[m.group(1).lower()] = ",".join(sorted(x.strip() for x in m.group(2).split(",")))
    return dict(sorted(out.items()))


def build_runners(cache: Path, offline: bool) -> dict:
    layouts: dict[str, dict] = {}
    for lib, version in RUNNERS.items():
        archive = fetch(lib, version, cache, offline)
        pkg = Package(read_sources(archive, lib))
        components = None
        if lib == "torchtune":
            found, files, components = scan_torchtune(pkg, read_recipes(archive))
            optim, where = scan_torch_optim()
            components.update(optim)
            files = files + [where]
        else:
            found, files = {"axolotl": scan_axolotl, "llamafactory": scan_llamafactory}[lib](pkg)
        print(f"{lib} {version}: {len(found)} keys", file=sys.stderr)
        entry = {
            "source": f"{lib} {version} (wheel from PyPI)",
            "files": files,
            "keys": {k: sorted(v) for k, v in sorted(found.items())},
        }
        requires = runner_requires(archive)
        if requires:
            # the releases of the scanned libraries the runner installs with: a key it passes on
            # to them is judged against those releases, not the newest
            entry["requires"] = requires
        if lib == "llamafactory":
            # TrainingArguments derives from transformers' Seq2SeqTrainingArguments: those keys too
            entry["also"] = "transformers"
            entry["closed"] = True  # the parser raises on keys no dataclass takes
        if components is not None:
            entry["components"] = dict(sorted(components.items()))
        layouts[RUNNER_LAYOUT[lib]] = entry
        if lib == "llamafactory":  # the v1 trainer in the same release: its own closed argument set
            found, files = scan_llamafactory_v1(pkg)
            print(f"{lib} {version} v1: {len(found)} keys", file=sys.stderr)
            layouts["llama-factory-v1"] = {
                "source": f"{lib} {version} (wheel from PyPI)", "files": files, "closed": True,
                "keys": {k: sorted(v) for k, v in sorted(found.items())}}
    return {"format": 1, "generated_by": "tools/generate_known_keys.py", "layouts": layouts}


def dump_runners(data: dict) -> str:
    lines = ["{", f' "format": {data["format"]},', f' "generated_by": {json.dumps(data["generated_by"])},',
             ' "layouts": {']
    items = sorted(data["layouts"].items())
    for li, (layout, entry) in enumerate(items):
        lines.append(f"  {json.dumps(layout)}: {{")
        parts = []
        for field_name in ("source", "files", "requires", "also", "closed"):
            if field_name in entry:
                parts.append(f"   {json.dumps(field_name)}: {json.dumps(entry[field_name])}")
        for big in ("keys", "components"):
            if big in entry:
                rows = [f"    {json.dumps(k)}: {json.dumps(v, sort_keys=True, separators=(',', ':'))}"
                        for k, v in entry[big].items()]
                parts.append(f"   {json.dumps(big)}: {{\n" + ",\n".join(rows) + "\n   }")
        lines.append(",\n".join(parts))
        lines.append("  }" + ("," if li < len(items) - 1 else ""))
    lines += [" }", "}"]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- assembly


def build(cache: Path, offline: bool) -> dict:
    # layout -> key -> library -> {"owners": set, "versions": [..]}
    table: dict[str, dict[str, dict[str, dict]]] = {}
    for lib, versions in SCAN.items():
        layout = LAYOUT_OF[lib]
        for version in versions:
            archive = fetch(lib, version, cache, offline)
            pkg = Package(read_sources(archive, lib))
            found = SCANNERS[lib](pkg)
            print(f"{lib} {version}: {len(found)} keys", file=sys.stderr)
            for key, owners in found.items():
                entry = table.setdefault(layout, {}).setdefault(key, {}).setdefault(lib, {"owners": set(), "versions": []})
                entry["owners"] |= owners
                entry["versions"].append(version)
    layouts: dict[str, dict] = {}
    for layout, keys in sorted(table.items()):
        out_keys = {}
        for key, libs in sorted(keys.items()):
            owners = sorted({o for e in libs.values() for o in e["owners"]})
            accepted = {}
            gaps = {}
            for lib, e in libs.items():
                order = SCAN[lib]
                seen = sorted(e["versions"], key=order.index)
                first, last = seen[0], seen[-1]
                accepted[lib] = [first, last]
                missing = [v for v in order[order.index(first): order.index(last) + 1] if v not in seen]
                if lib == "trl" and "transformers" in libs:
                    # TRL configs inherit TrainingArguments; a TrainingArguments field that one TRL
                    # version does not redeclare is still accepted there, so no gap is recorded.
                    missing = []
                if missing:
                    gaps[lib] = missing
            item = {"owners": owners, "accepted": dict(sorted(accepted.items()))}
            if gaps:
                item["absent"] = dict(sorted(gaps.items()))
            out_keys[key] = item
        layouts[layout] = out_keys
    return {
        "format": 1,
        "generated_by": "tools/generate_known_keys.py",
        "scanned": {lib: list(v) for lib, v in SCAN.items()},
        "layouts": layouts,
    }


def dump(data: dict) -> str:
    """Sorted, one key per line: compact yet readable in a diff."""
    lines = ["{"]
    lines.append(f' "format": {data["format"]},')
    lines.append(f' "generated_by": {json.dumps(data["generated_by"])},')
    lines.append(f' "scanned": {json.dumps(data["scanned"], sort_keys=True)},')
    lines.append(' "layouts": {')
    layout_items = sorted(data["layouts"].items())
    for li, (layout, keys) in enumerate(layout_items):
        lines.append(f"  {json.dumps(layout)}: {{")
        key_items = sorted(keys.items())
        for ki, (key, item) in enumerate(key_items):
            comma = "," if ki < len(key_items) - 1 else ""
            lines.append(f"   {json.dumps(key)}: {json.dumps(item, sort_keys=True, separators=(',', ':'))}{comma}")
        lines.append("  }" + ("," if li < len(layout_items) - 1 else ""))
    lines.append(" }")
    lines.append("}")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cache", type=Path, default=DEFAULT_CACHE, help="where downloaded archives are kept")
    ap.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="JSON file to write")
    ap.add_argument("--offline", action="store_true", help="do not call pip; use the cache only")
    ap.add_argument("--check", action="store_true", help="compare with the existing file instead of writing")
    ap.add_argument("--runners", action="store_true",
                    help="only the recipe runners' lists (runner_keys.json; --output defaults to it)")
    ns = ap.parse_args(argv)
    if ns.runners:
        if ns.output == DEFAULT_OUTPUT:
            ns.output = DEFAULT_RUNNER_OUTPUT
        text = dump_runners(build_runners(ns.cache.expanduser(), ns.offline))
    else:
        text = dump(build(ns.cache.expanduser(), ns.offline))
    if ns.check:
        current = ns.output.read_text(encoding="utf-8") if ns.output.exists() else ""
        if current != text:
            print(f"{ns.output} is out of date; rerun without --check", file=sys.stderr)
            return 1
        return 0
    ns.output.write_text(text, encoding="utf-8")
    total = {k: len(v.get("keys", v)) for k, v in json.loads(text)["layouts"].items()}
    print(f"wrote {ns.output}: {total}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
