"""Configs that point to other configs: a trainer's ``deepspeed: ds.json``, accelerate's
``deepspeed_config.deepspeed_config_file``. The file named is read and attached to the view
(``RunView.attached``) so rules can check the two together.

What is followed: a relative path (against the folder of the config, then the working folder,
as the launchers themselves resolve it from where they are started) or an absolute path the
config names, when it is a local ``.json``/``.yaml``/``.yml`` file. Never a URL. An inline
mapping (the trainer accepts a DeepSpeed dict in place of a path) is attached too. What could not
be followed is recorded in ``view.links`` for the rules to mention once. Each value read from an
attached file is a ``Field`` with ``origin="linked"`` and the file in ``note``.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path

from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr
from . import load as loadmod, reads
from .load import Document, LoadError
from .view import RunView, build_view

LINK_FIELDS = ("runtime.deepspeed",)

# texts to read in place of linked files (real path -> text): the fixer lints a config against
# the fixed text of the file it links before writing either
_TEXTS: ContextVar[dict] = ContextVar("cfgcheck_linked_texts", default={})


@contextmanager
def linked_texts(texts: dict):
    token = _TEXTS.set(texts or {})
    try:
        yield
    finally:
        _TEXTS.reset(token)
_SUFFIXES = (".json", ".yaml", ".yml")


class Link:
    field: str  # our field name, e.g. "runtime.deepspeed"
    target: str  # what the config wrote, or "(inline)"
    path: str | None  # the file read
    problem: str | None  # why it was not attached

    __slots__ = ('field', 'target', 'path', 'problem')

    def __init__(self, field, target, path=None, problem=None):
        _setattr(self, 'field', field)
        _setattr(self, 'target', target)
        _setattr(self, 'path', path)
        _setattr(self, 'problem', problem)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(field={self.field!r}, target={self.target!r}, path={self.path!r}, problem={self.problem!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.field, self.target, self.path, self.problem) == (other.field, other.target, other.path, other.problem)
        return NotImplemented

    def __hash__(self):
        return hash((self.field, self.target, self.path, self.problem))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.field, self.target, self.path, self.problem)

    __setstate__ = _frozen_setstate


def _inline(doc: Document, prefix: tuple, data: dict) -> Document:
    n = len(prefix)
    entries = {p[n:]: e for p, e in doc.entries.items() if p[:n] == prefix}
    return Document(name=doc.name, format=doc.format, data=data, entries=entries, index=doc.index)


class _Unusable(Exception):
    """A link path that names no file this machine can look at: why, in words."""


def _expand(ref: str) -> Path:
    if ref.startswith("~"):
        try:
            return Path(ref).expanduser()
        except RuntimeError:  # ~user with no such user, or no home folder at all
            user = ref[1:].split("/", 1)[0]
            raise _Unusable(f"{ref} cannot be found: " + (f"there is no user {user!r} (~{user})"
                                                           if user else "the home folder (~) is not known")
                            ) from None
    return Path(ref)


def _exists(p: Path) -> bool:
    try:
        reads.note_kind(p)
        return p.exists()
    except (OSError, ValueError):
        return False


def _candidates(ref: str, file: str, cwd: Path | None) -> list[Path]:
    if "\x00" in ref:
        raise _Unusable(f"{ref!r} holds a NUL character; no file can have that name")
    given = _expand(ref)
    if given.is_absolute():
        return [given]
    out = []
    if file and not file.startswith("<"):
        out.append(Path(file).parent / given)
    out.append((cwd or Path.cwd()) / given)
    seen, uniq = set(), []
    for p in out:
        try:
            key = str(p.resolve()) if _exists(p) else str(p)
        except (OSError, RuntimeError):  # a link loop, a name too long
            key = str(p)
        if key not in seen:
            seen.add(key)
            uniq.append(p)
    return uniq


def _find(candidates: list[Path]) -> tuple[Path | None, list[str]]:
    """The first candidate that is a file, and why the others could not be looked at."""
    why = []
    for p in candidates:
        try:
            reads.note_kind(p)  # a file appearing where nothing was changes the verdict
            if p.is_file():
                return p, why
            if p.exists():  # a folder, a FIFO, a device: never opened
                why.append(f"{p}: not a regular file; not read")
        except OSError as exc:  # a name too long, a folder that may not be searched
            why.append(f"{p}: {exc.strerror or exc}")
        except ValueError as exc:
            why.append(f"{p}: {exc}")
    return None, why


def attach_linked(view: RunView, file: str, cwd: Path | None = None) -> None:
    """Read the configs this view points to and attach their views."""
    links: list[Link] = view.links
    for name in LINK_FIELDS:
        f = view.get(name)
        if f is None and name == "runtime.deepspeed" and isinstance(view.doc.data, dict) \
                and isinstance(view.doc.data.get("deepspeed"), dict):
            # the view keeps no mapping under a bare name; the trainer takes a DeepSpeed dict here
            inline = view.doc.data["deepspeed"]
            sub = build_view(_inline(view.doc, ("deepspeed",), inline), "deepspeed")
            view.attached.append(sub)
            links.append(Link(name, "(inline)"))
            continue
        if f is None or f.value is None:
            continue
        if isinstance(f.value, dict):
            sub = build_view(_inline(view.doc, f.path, f.value), "deepspeed")
            view.attached.append(sub)
            links.append(Link(name, "(inline)"))
            continue
        if not isinstance(f.value, str) or not f.value.strip():
            continue
        ref = f.value.strip()
        if "://" in ref:
            links.append(Link(name, ref, problem="a URL; only local files are read"))
            continue
        if not ref.lower().endswith(_SUFFIXES):
            continue  # a preset name or a flag, not a file
        try:
            candidates = _candidates(ref, file, cwd)
        except _Unusable as exc:
            links.append(Link(name, ref, problem=str(exc)))
            continue
        found, why = _find(candidates)
        if found is None:
            if why:
                links.append(Link(name, ref, problem=f"{ref} cannot be looked up ({'; '.join(why)})"))
                continue
            where = ", ".join(str(p.parent) for p in candidates)
            links.append(Link(name, ref, problem=f"{ref} was not found (looked in {where})"))
            continue
        try:
            given = _TEXTS.get().get(os.path.realpath(found)) if _TEXTS.get() else None
            text = given if given is not None else loadmod.read_source(found).text
            docs = loadmod.load_text(text, str(found))
        except LoadError as exc:
            links.append(Link(name, ref, str(found),
                              problem=f"{found}:{exc.line}:{exc.column}: {exc.reason}"))
            continue
        sub = build_view(docs[0]) if docs else None
        if sub is None or sub.layout is None:
            links.append(Link(name, ref, str(found), problem=f"{found} is not a config cfgcheck reads"
                              + (f" ({sub.skipped})" if sub is not None and sub.skipped else "")))
            continue
        view.attached.append(sub)
        links.append(Link(name, ref, str(found)))
