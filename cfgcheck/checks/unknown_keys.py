"""Keys the detected layout's readers do not accept: typos, odd spelling, renamed or removed keys.

Which reader and which key set:

* trainer-style files, PEFT adapter configs, DeepSpeed and accelerate files: the key lists
  generated from transformers, TRL, PEFT, DeepSpeed and accelerate, plus the keys the scripts of
  the config's own repository declare (dataclass fields, ``add_argument`` options, read with
  ``ast``);
* the recipe runners (axolotl, LLaMA-Factory, torchtune): their own key lists, generated from one
  release each (``runner_keys.json``); inside a torchtune ``_component_`` mapping, the
  parameters of that component.

A "did you mean" is offered only for a near miss that is itself no setting any known reader
takes (``lora_rank`` is LLaMA-Factory's and never becomes ``local_rank``), and whose words each
differ by a slip of the keyboard (``min_lr`` never becomes ``min_p``). A key nothing is close to
is an info: the script that reads the file may declare it. When the repository's argument parsers
are built from its own classes only, its keys are the candidates; when they also take classes
from a package cfgcheck does not read, a near miss is only an info. Inside the sections of a
trainer-style file (``training:``, ``lora:``) only near misses are reported: the section
belongs to the repository's own script.
"""

from __future__ import annotations

from functools import cache, lru_cache
from itertools import filterfalse

from ..layouts import keys_read
from . import check


@cache  # looked up once: a relative import inside a function costs a package lookup per call
def _keys_module():
    from ..knowledge import keys  # the key tables load on first use only

    return keys


@lru_cache(maxsize=1)
def _read_somewhere() -> frozenset[str]:
    """Every key name any known reader takes, and every name a layout reads as a setting."""
    from ..layouts import LAYOUTS

    names: set[str] = set(_keys_module().all_names())  # the key tables' and components'
    for lay in LAYOUTS:
        for specs in lay.fields.values():
            names.update(s.rpartition(".")[2].lstrip("=") for s in specs)
        names.update(lay.sections)
    names.update(_OPTIMIZER_PARAMETERS)
    return frozenset(names)


@lru_cache(maxsize=1)
def _settled_in_sections() -> frozenset[str]:
    """The names a key inside a section of a trainer-style file may have without a word from
    unknown-key: a trainer key, or a name any known reader takes."""
    return frozenset(_keys_module()._table("trainer").keys) | _read_somewhere()


# Parameters of the torch optimizers that configs hand on as keyword arguments (DeepSpeed's
# optimizer.params, an optimizer section of a repository's own script): torch 2.x
# torch/optim/adamw.py AdamW, sgd.py SGD, adagrad.py Adagrad, rmsprop.py RMSprop signatures
_OPTIMIZER_PARAMETERS = frozenset("lr betas eps weight_decay amsgrad momentum dampening nesterov foreach "
                                  "fused maximize capturable differentiable lr_decay alpha centered "
                                  "initial_accumulator_value".split())
# mappings that hold another component's keyword arguments (jsonargparse init_args, *_kwargs,
# DeepSpeed-style params): their keys are that component's, never near misses of ours
_KEYWORD_MAPPINGS = ("kwargs", "init_args", "params")


def _words(text: str) -> list[str]:
    return [w for w in text.lower().replace(".", "_").split("_") if w]


def _edits(a: str, b: str, limit: int) -> int:
    return _keys_module()._osa_distance(a, b, limit)


@lru_cache(maxsize=1)
def _vocabulary() -> frozenset[str]:
    """The words the known settings are made of (``use``, ``qlora``, ``lora``, ``steps``...)."""
    from ..layouts import METHOD_WORDS

    words = {w for name in _read_somewhere() for w in _words(name)}
    return frozenset(words | set(METHOD_WORDS))


def _same_term(x: str, y: str) -> bool:
    """One word in the singular and the plural, or numbered (``beta`` / ``beta1``)."""
    if x + "s" == y or y + "s" == x or x + "es" == y or y + "es" == x:
        return True
    return x.rstrip("0123456789") == y.rstrip("0123456789")


def slip_of_keyboard(key: str, near: str, terms: bool = True) -> bool:
    """Whether KEY could be NEAR mistyped: word by word, each word at most one edit away (two
    for words of eight letters or more); a word joined or split (``batchsize``) counts as one.
    A word of four letters or more that is itself another word of the settings' vocabulary is no
    slip, unless it is the same word in the singular or plural, or numbered (``use_qlora`` is
    not ``use_lora``; ``gradient_accumulation_step`` is ``gradient_accumulation_steps``).
    TERMS=False leaves that test out."""
    a, b = _words(key), _words(near)
    if "".join(a) == "".join(b):
        return True
    if len(a) != len(b):
        return _edits("".join(a), "".join(b), 1) <= 1
    vocabulary = _vocabulary() if terms else frozenset()
    for x, y in zip(a, b):
        if x == y:
            continue
        if terms and len(x) >= 4 and x in vocabulary and not _same_term(x, y):
            return False  # a different term, not a mistyped one
        if _edits(x, y, 2) > (2 if min(len(x), len(y)) >= 8 else 1):
            return False
    return True


def reader_scripts(ctx) -> tuple[str, ...]:
    """The Python scripts said to read this config: the project file's ``readers``, and the
    program of the launch script that starts it."""
    out = list(getattr(ctx.options, "readers", ()) or ())
    script = getattr(ctx.options, "script", None)
    reader = getattr(script, "reader", None)
    if reader and reader not in out:
        out.append(reader)
    return tuple(out)


def repo_keys_of(ctx):
    """The keys the repository's own scripts (and the scripts named as the file's readers)
    declare, looked up once per view whichever rules ask."""
    readers = reader_scripts(ctx)
    return ctx.once(("repo-keys", readers), lambda: _repo_keys_module().keys_for(ctx.file, readers))


@cache
def _repo_keys_module():
    from ..knowledge import repo_keys

    return repo_keys


_KEYS_READ_CACHE: dict[int, tuple] = {}  # id(layout) -> (layout, the keys its fields read)


def _keys_read(layout) -> frozenset[str]:
    got = _KEYS_READ_CACHE.get(id(layout))
    if got is None or got[0] is not layout:
        got = _KEYS_READ_CACHE[id(layout)] = (layout, keys_read(layout))
    return got[1]


class _Judge:
    def __init__(self, ctx, layout: str):
        self.ctx = ctx
        self.layout = layout
        self.keys = _keys_module()
        self.limit = ctx.thresholds.get("suggestion_limit", 200)
        self.asked = 0
        self.past_limit = False
        self.other_term: dict[str, str] = {}  # name -> a near key whose differing word is a term
        # a file parsed into argument dataclasses (TrainingArguments and the script's own): the
        # repository's scripts may declare more of them; a script named as the file's reader (by
        # the launch script that starts it, or the project file) declares them wherever it lives
        readers = reader_scripts(ctx)
        layout = ctx.view.layout
        self.repo = (repo_keys_of(ctx)
                     if layout.trainer_defaults or layout.read_by_own_classes or readers else None)

    def declared_by_repo(self, name: str) -> str | None:
        if self.repo is not None and name in self.repo.keys:
            return self.repo.sources.get(name, "")
        return None

    def reader_open(self) -> bool:
        """The repository's parsers take argument classes from a package cfgcheck cannot see."""
        return self.repo is not None and self.repo.reader_libraries is not None \
            and "other" in self.repo.reader_libraries

    def _repo_nearest(self, name: str) -> str | None:
        if "." in name or self.repo is None or not self.repo.keys:
            return None
        buckets: dict[int, list[str]] = {}
        for key in sorted(self.repo.keys):
            buckets.setdefault(len(key), []).append(key)
        return self.keys._nearest(name.strip().lower(), buckets, self.keys._allowed_edits(len(name)))

    def suggestion(self, name: str, table: str | None = None) -> str | None:
        """A safe nearest key, within the per-document budget of suggestion searches.

        When the repository's parsers are built only from its own classes (and the libraries'),
        the reader's key set is known: the nearest of the repository's keys competes with the
        library's; with only its own classes, the library's keys are no candidates at all."""
        if self.asked >= self.limit:
            self.past_limit = True
            return None
        self.asked += 1
        libs = self.repo.reader_libraries if self.repo is not None else None
        near = self.keys.suggest(name, table or self.layout) if libs is None or libs else None
        mine = self._repo_nearest(name) if libs is not None else None
        if mine is not None and (near is None or self._closer(name, mine, near)):
            near = mine
        if near is None:
            return None
        leaf = name.rpartition(".")[2]
        if leaf in _read_somewhere() and leaf.strip().lower() != near.rpartition(".")[2].lower():
            return None  # a different valid setting of some reader: never "corrected" into another
        if near.lower() != name.strip().lower().replace(" ", "_") and not slip_of_keyboard(name, near):
            if slip_of_keyboard(name, near, terms=False):
                self.other_term[name] = near  # close, but its words are other settings' terms
            return None
        return near

    def _closer(self, name: str, a: str, b: str) -> bool:
        """Whether A is at least as near to NAME as B (by leaf edit distance)."""
        leaf = name.strip().lower()
        return self.keys._osa_distance(leaf, a.lower(), 9) <= self.keys._osa_distance(
            leaf, b.rpartition(".")[2].lower(), 9)

    def report_unknown(self, path: tuple, name: str, title: str, *, quiet_when_far: bool = False,
                       shown_suggestion=None) -> None:
        ctx = self.ctx
        if self.declared_by_repo(path[-1]) is not None:
            return
        near = self.suggestion(name)
        if near is not None and self.reader_open():
            # a class the parser takes comes from a package not scanned: it may declare the key
            ctx.report(path, "near-miss-reader-open", on="key", key=name, suggestion=near)
        elif near is not None and near.lower() == name.strip().lower().replace(" ", "_"):
            ctx.report(path, "spelling", on="key", key=name, shown=repr(path[-1]), suggestion=near)
        elif near is not None:
            ctx.report(path, "typo", on="key", key=name,
                       suggestion=shown_suggestion(near) if shown_suggestion else near)
        elif name in self.other_term:
            ctx.report(path, "near-miss-other-term", on="key", key=name, suggestion=self.other_term[name])
        elif self.past_limit:
            if not quiet_when_far:
                ctx.report(path, "unknown-past-limit", on="key", key=name, layout=title, limit=self.limit)
        elif not quiet_when_far:
            ctx.report(path, "unknown", on="key", key=name, layout=title)


def _component_keys(ctx, judge: _Judge, section: tuple, mapping: dict) -> None:
    """Sub-keys of a ``_component_`` mapping: the component's parameters, when they are known."""
    target = mapping.get("_component_")
    comps = judge.keys._table(judge.layout).components
    info = comps.get(target) if isinstance(target, str) else None
    if info is None or info["open"]:
        return  # a component outside the scanned package, or one that takes any keyword
    params = set(info["params"])
    for key in mapping:
        if not isinstance(key, str) or key == "_component_" or key in params:
            continue
        path = section + (key,)
        if isinstance(mapping[key], dict):
            continue
        near = None
        if judge.asked < judge.limit:
            judge.asked += 1
            limit = judge.keys._allowed_edits(len(key))
            buckets: dict[int, list[str]] = {}
            for p in sorted(params):
                buckets.setdefault(len(p), []).append(p)
            near = judge.keys._nearest(key.lower(), buckets, limit)
            if near is not None and not slip_of_keyboard(key, near):
                near = None
        if near is not None:
            ctx.report(path, "typo", on="key", key=".".join(path), suggestion=near)
        else:
            ctx.report(path, "not-a-parameter", on="key", key=".".join(path), component=target)


class _Lazy:
    """The judge of one view, made when a key first needs one (most files have none)."""

    __slots__ = ("ctx", "layout", "judge")

    def __init__(self, ctx, layout: str):
        self.ctx, self.layout, self.judge = ctx, layout, None

    def __call__(self) -> _Judge:
        if self.judge is None:
            self.judge = _Judge(self.ctx, self.layout)
        return self.judge


@check("unknown-key")
def unknown_key(ctx) -> None:
    view = ctx.view
    layout = view.layout
    if layout is None:
        return
    keys = _keys_module()
    table_name = layout.key_table  # the key table of the layout's libraries
    known = keys.table_of(table_name) if table_name is not None else None
    if known is None:
        return
    doc = ctx.doc
    data = doc.data if isinstance(doc.data, dict) else None
    sections = layout.sections
    check_current = "key-not-in-release" not in ctx.active
    # top-level keys whose keys are judged another way: a section of the file's own script
    # (training:, lora:), a torchtune `_component_` mapping
    special: set = set()
    if data is not None:
        if layout.search_all_sections and sections:
            special.update(h for h in sections.keys() & data.keys() if isinstance(data[h], dict))
        if known.components:
            special.update(h for h, v in data.items() if isinstance(v, dict) and "_component_" in v)
    paths, table = known.paths, known.keys
    judge = _Lazy(ctx, table_name)
    entries = doc.entries
    if special or check_current:
        unsettled = _unsettled(entries, paths, special, table, check_current)
    else:  # every known key path is settled: the others, in the document's order, by C code
        unsettled = filterfalse(paths.__contains__, entries)
    for path in unsettled:
        entry = entries[path]
        if not path or not entry.keyed:
            continue
        last = path[-1]
        if not isinstance(last, str):
            continue
        try:
            parent = ".".join(path[:-1])  # a list item (an int) on the way: no key name
        except TypeError:
            continue
        _judge_key(ctx, judge, known, path, parent, f"{parent}.{last}" if parent else last,
                   data, check_current)


def _unsettled(entries: dict, paths: dict, special: set, table: dict, check_current: bool):
    """The written key paths that are not plainly a known key (in the document's order): a
    known key written inside a special section, or one not current when that is judged here,
    is looked at too. (``paths`` maps a path to a name, never to None.)"""
    for path in entries:
        name = paths.get(path)  # a known key, written where its parent has keys
        if name is not None and (not special or path[0] not in special) \
                and (not check_current or table[name][2]):
            continue
        yield path


def _judge_key(ctx, judge: _Lazy, known, path: tuple, parent: str, name: str, data,
               check_current: bool) -> None:
    """One written key that is not plainly a known one."""
    layout = ctx.view.layout
    sections = layout.sections
    head = path[0]
    if len(path) == 1:
        value = data.get(head) if data is not None else None
        if isinstance(value, dict) and "_component_" in value:
            _component_keys(ctx, judge(), path, value)
            return
    if layout.search_all_sections and head in sections and data is not None \
            and isinstance(data.get(head), dict):
        if len(path) > 1 and not _settled_section_key(layout, path, sections) \
                and not isinstance(ctx.doc.get(path), dict):
            _section_key(ctx, judge(), path, sections)
        return  # the section itself: the file's own structure, not a key
    if parent not in known.groups:
        return  # a free-form mapping (optimizer.params, fsdp_config of the trainer, ...)
    info = known.info(name)
    if info is None and parent:
        # a section whose reader drops (or adds) a prefix: axolotl reads fsdp_config's
        # `fsdp_offload_params` as `offload_params` (0.19.0 utils/schemas/validation.py)
        for pre in sections.get(path[-2], ()):
            leaf = path[-1]
            other = leaf[len(pre):] if leaf.startswith(pre) else pre + leaf
            info = known.info(f"{parent}.{other}") or info
    if info is not None:
        # key-not-in-release judges known keys against the release in use; this note
        # stays for runs that leave that rule out
        if check_current and not info.current:
            ctx.report(path, "not-current", on="key", key=name, versions=info.versions_text())
        return
    if name in _keys_read(layout):
        return  # a key cfgcheck reads for this layout (recipe scripts pass it on): not unknown
    judge().report_unknown(path, name, layout.title)


def _settled_section_key(layout, path: tuple, sections: dict) -> bool:
    """Whether a key inside a section has nothing to be told, whatever the file's repository:
    it is a trainer key or a name some reader takes, written with or without the section's
    prefix, or it sits in another component's keyword arguments (``_section_key`` says the same
    first)."""
    leaf = path[-1]
    settled = _settled_in_sections()
    if leaf in settled:
        return True
    prefixes = sections.get(path[-2], ()) if len(path) >= 2 else ()
    if any(p + leaf in settled for p in prefixes if not leaf.startswith(p)):
        return True
    return any(str(p).lower() in layout.foreign_sections or str(p).lower().endswith(_KEYWORD_MAPPINGS)
               for p in path[:-1])


def _section_key(ctx, judge: _Judge, path: tuple, sections: dict) -> None:
    """A key inside a section of a trainer-style file: a near miss of a trainer key is reported."""
    keys = judge.keys
    leaf = path[-1]
    layout = ctx.view.layout
    if any(str(p).lower() in layout.foreign_sections or str(p).lower().endswith(_KEYWORD_MAPPINGS)
           for p in path[:-1]):
        return  # another component's keyword arguments, or a section of another part of the run
    prefixes = sections.get(path[-2], ()) if len(path) >= 2 else ()
    spellings = [leaf] + [p + leaf for p in prefixes if not leaf.startswith(p)]
    if any(keys.lookup(s, "trainer") is not None or s in _read_somewhere() for s in spellings):
        return
    if judge.declared_by_repo(leaf) is not None:
        return
    local = ctx.view.layout.section_names.get(str(path[-2]).lower(), {}) if len(path) >= 2 else {}
    if leaf in local:
        return
    if local and judge.asked < judge.limit:
        # a near miss of the section's own local names (training: {num_epoch} -> num_epochs)
        judge.asked += 1
        buckets: dict[int, list[str]] = {}
        for name in sorted(local):
            buckets.setdefault(len(name), []).append(name)
        near = keys._nearest(leaf.lower(), buckets, keys._allowed_edits(len(leaf)))
        if near is not None and slip_of_keyboard(leaf, near) and near not in ("r",):
            ctx.report(path, "typo", on="key", key=".".join(path), suggestion=near)
            return
    for spelling in spellings:
        near = judge.suggestion(spelling)
        if near is None:
            continue
        shown = near
        for p in prefixes:  # written without the section's prefix: suggest it without too
            if spelling != leaf and near.startswith(p):
                shown = near[len(p):]
        if judge.reader_open():
            ctx.report(path, "near-miss-reader-open", on="key", key=".".join(path), suggestion=shown)
        elif near.lower() == spelling.strip().lower().replace(" ", "_"):
            ctx.report(path, "spelling", on="key", key=".".join(path), shown=repr(leaf), suggestion=shown)
        else:
            ctx.report(path, "typo", on="key", key=".".join(path), suggestion=shown)
        return
