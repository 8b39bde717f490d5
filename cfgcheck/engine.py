"""Runs the checks of the catalogue over typed views and turns what they report into findings.

Severity is decided here, once: the catalogue's default, a message variant's own level, and the
user's overrides. Locations come from the document, never from a check.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from contextvars import ContextVar
from operator import attrgetter
from pathlib import Path
from typing import Any, Callable, Hashable, Iterable, Iterator

from ._records import guarded_repr
from . import load as loadmod
from . import memo, reads
from . import run as runmod, sweep
from .catalogue import Rule, load_catalogue
from .checks import Table, all_checks, declared
from .findings import FileReport, Finding, Fix, InputProblem, InternalError, Related, Report, Severity, new_finding, shown_data
from .knowledge.hardware import Gpu
from .load import Document, LoadError, dotted, walk_paths
from .scriptfiles import SCRIPT_SUFFIXES
from .view import Field, RunView, build_view
from . import waivers as waivermod


class Options:
    gpu: Gpu | None
    gpus: int | None  # GPUs in the whole job
    rows: int | None  # training rows
    only: frozenset[str] | None  # only these rules
    skip: frozenset[str]  # not these rules
    severity: dict[str, Severity]  # per-rule overrides
    thresholds: dict[str, dict[str, Any]]  # per-rule overrides
    cwd: Path | None
    debug: bool  # re-raise a failing rule instead of reporting it
    waivers: tuple[waivermod.ProjectWaiver, ...]  # from the project configuration
    launch: tuple[str, ...]  # launch files the run is started with (--launch, project file)
    gpus_from: str  # where ``gpus`` came from, in words ("--gpus", "cfgcheck.yaml profile")
    script: Any  # scripts.ScriptLaunch: a launch script in the tree that names this config
    # the same lint reports that script too: findings located at its lines (its arguments override
    # this config) are left to the script's report, so each finding is reported once
    script_linted: bool
    models: tuple  # (id, Architecture) pairs the project configuration declares
    overrides: tuple[str, ...]  # key=value overrides the launch passes (compose.py)
    versions: dict[str, str]  # library -> release the run uses (--installed)
    readers: tuple[str, ...]  # Python scripts that read this config (project file ``readers``)

    # the fields in order: the result cache keys the record by them, ``replaced`` copies them
    _record_fields = ('gpu', 'gpus', 'rows', 'only', 'skip', 'severity', 'thresholds', 'cwd', 'debug', 'waivers', 'launch', 'gpus_from', 'script', 'script_linted', 'models', 'overrides', 'versions', 'readers')

    def __init__(self, gpu=None, gpus=None, rows=None, only=None, skip=frozenset(), severity=None, thresholds=None, cwd=None, debug=False, waivers=(), launch=(), gpus_from="", script=None, script_linted=False, models=(), overrides=(), versions=None, readers=()):
        self.gpu = gpu
        self.gpus = gpus
        self.rows = rows
        self.only = only
        self.skip = skip
        self.severity = {} if severity is None else severity
        self.thresholds = {} if thresholds is None else thresholds
        self.cwd = cwd
        self.debug = debug
        self.waivers = waivers
        self.launch = launch
        self.gpus_from = gpus_from
        self.script = script
        self.script_linted = script_linted
        self.models = models
        self.overrides = overrides
        self.versions = {} if versions is None else versions
        self.readers = readers

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(gpu={self.gpu!r}, gpus={self.gpus!r}, rows={self.rows!r}, only={self.only!r}, skip={self.skip!r}, severity={self.severity!r}, thresholds={self.thresholds!r}, cwd={self.cwd!r}, debug={self.debug!r}, waivers={self.waivers!r}, launch={self.launch!r}, gpus_from={self.gpus_from!r}, script={self.script!r}, script_linted={self.script_linted!r}, models={self.models!r}, overrides={self.overrides!r}, versions={self.versions!r}, readers={self.readers!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.gpu, self.gpus, self.rows, self.only, self.skip, self.severity, self.thresholds, self.cwd, self.debug, self.waivers, self.launch, self.gpus_from, self.script, self.script_linted, self.models, self.overrides, self.versions, self.readers) == (other.gpu, other.gpus, other.rows, other.only, other.skip, other.severity, other.thresholds, other.cwd, other.debug, other.waivers, other.launch, other.gpus_from, other.script, other.script_linted, other.models, other.overrides, other.versions, other.readers)
        return NotImplemented

    __hash__ = None  # a mutable record: compared by value, not a dict key


# --------------------------------------------------------------------------- the check context

_THRESHOLDS_CACHE: dict[int, tuple[Rule, Any, dict[str, Any]]] = {}  # id(rule) -> (rule, overrides, values)


def _thresholds(rule: Rule, options: Options) -> dict[str, Any]:
    """The rule's thresholds with the options' overrides, worked out once per rule and set of
    overrides (checks only read them): a changed override, or another rule object under the same
    id, is worked out afresh."""
    overrides = options.thresholds.get(rule.id) or None
    got = _THRESHOLDS_CACHE.get(id(rule))
    if got is None or got[0] is not rule or got[1] != overrides:
        values = ({name: overrides.get(name, rule.threshold(name)) for name in rule.thresholds}
                  if overrides else {name: rule.threshold(name) for name in rule.thresholds})
        got = _THRESHOLDS_CACHE[id(rule)] = (rule, dict(overrides) if overrides else None, values)
    return got[2]


_NOT_YET = object()  # a ``once`` answer not worked out yet (None is an answer)


class Context:
    """What a check sees: the view, the knowledge, the options, and ``report``.

    ``lint_views`` makes one per view and hands it to each rule in turn, resetting what belongs
    to one rule (its thresholds, its cannot-judge notes, its model assumption), so the answers
    several rules of the same view share (``once``) are worked out once."""

    __slots__ = ("view", "run", "waivers", "waiver_paths", "earlier", "active", "doc", "rule",
                 "options", "_sink", "file", "_thresholds", "_judged_once", "_model_assumption",
                 "_once", "_root")

    def __init__(self, view: RunView, rule: Rule, options: Options, sink: list[Finding],
                 file: str, waivers: list | None = None, earlier: list[Finding] | None = None,
                 active: frozenset[str] = frozenset(),
                 waiver_paths: dict[int, list[tuple]] | None = None):
        self.view = view
        self.run = view.run  # the opened run (cfgcheck.run.OpenedRun): launch context, GPUs
        self.waivers = waivers or []  # waiver comments of this document
        self.waiver_paths = waiver_paths or {}  # target line -> key paths written on it
        self.earlier = earlier or []  # findings of the rules that ran before (stage: last)
        self.active = active  # ids of the rules that run
        self.doc: Document = view.doc
        self.rule = rule
        self.options = options
        self._sink = sink
        self.file = file
        self._thresholds: dict[str, Any] | None = None  # looked up on first use
        self._judged_once: set[str] | None = None  # made on the first cannot_judge
        self._model_assumption = ""  # set when the rule asked for a model matched by name alone
        self._once: dict | None = None  # answers shared by the rules of this view (``once``)
        self._root: tuple | None = None  # where a finding on the whole document goes (_root_place)

    @property
    def thresholds(self) -> dict[str, Any]:
        got = self._thresholds
        if got is None:
            got = self._thresholds = _thresholds(self.rule, self.options)
        return got

    def once(self, kind: Hashable, compute: Callable[[], Any]) -> Any:
        """``compute()``, worked out once for this view whichever rules ask (it may depend on
        the view, the file and the options, never on the rule). It lives as long as the
        view's lint, inside the file's own record of reads, so it never outlives a run."""
        memo_ = self._once
        if memo_ is None:
            value = compute()
            self._once = {kind: value}
            return value
        value = memo_.get(kind, _NOT_YET)
        if value is _NOT_YET:
            value = memo_[kind] = compute()
        return value

    # knowledge --------------------------------------------------------------
    @property
    def gpu(self) -> Gpu | None:
        return self.options.gpu

    @property
    def num_gpus(self) -> tuple[int | None, Field | None]:
        """GPUs in the job, as the opened run resolved them: the command line or project profile,
        then the launch context, then the config itself. (None, None) when nothing says it."""
        run = self.run
        if run is None:
            from .run import open_view

            run = self.run = open_view(self.view, self.file, self.options)
        return run.gpus, run.gpus_field

    def model(self):
        """The base model's architecture when it can be known offline, else None."""
        found = self.view.model_found  # looked up already for this view (plan.model_of keeps it)
        if found is not None:
            arch = found[0]
        else:
            from .plan import model_of  # only rules that need a model pay for it

            arch = model_of(self.view, self.file, self.options.cwd, declared=self.options.models)
        if arch is not None and getattr(arch, "assumed", False) and "model" in self.rule.needs:
            # matched by its name alone: the verdicts of a rule that needs the model rest on it
            self._model_assumption = f"the model is {getattr(arch, 'how', '') or 'matched by its name'}"
        return arch

    # reporting --------------------------------------------------------------
    def report(self, at: Field | tuple | None = None, variant: str = "default", *,
               on: str = "value", fix: Fix | None = None, related: Iterable = (),
               assumed: Iterable[Field | str] = (), **data: Any) -> None:
        """``related``: other Fields (or key paths) where the same cause is written; the engine
        locates them and the finding lists them beside its own location. ``assumed``: the values
        (or words) the verdict rests on that nothing written, linked, launched, flagged or
        defaulted says; with any, the finding is at most a warning and its message names them."""
        span = None
        notes = [self._model_assumption] if self._model_assumption else []
        if assumed:
            for a in assumed:
                if isinstance(a, Field):
                    if a.origin == "assumed":
                        notes.append(a.note or f"{a.name} assumed")
                elif a:
                    notes.append(str(a))
        if isinstance(at, Field):
            if at.origin == "assumed":
                notes.append(at.note or f"{at.name} assumed")
            path = at.path
        elif isinstance(at, waivermod.Waiver):  # a comment: located where it is written
            span = at.span
            paths = self.waiver_paths.get(at.target, []) if at.target else []
            path = min(paths, key=len) if paths else ()
        else:
            path = tuple(at or ())
        others = tuple([r.path if isinstance(r, Field) else tuple(r) for r in related]) if related else ()
        self._sink.append(
            make_finding(self.rule, self.options, self.doc, self.file, path, variant, on, data,
                         fix, span, others, assumptions=tuple(dict.fromkeys(notes)) if notes else ())
        )

    def cannot_judge(self, what: str, **data: Any) -> None:
        """Say once, at info level, that the rule had too little to go on."""
        judged = self._judged_once
        if judged is None:
            judged = self._judged_once = set()
        elif what in judged:
            return
        judged.add(what)
        rule = self.rule
        msg = rule.messages.get("cannot-judge")
        text, hint_text = (msg.message, msg.hint) if msg is not None else ("{rule}: not checked: {reason}", "{reason}")
        if data:
            data = shown_data(data)
            data["reason"] = what
            message, hint = _fill(text, dict(data, rule=rule.id)), _fill(hint_text, data)
        else:  # the common case: the same few notes, file after file
            key = (text, hint_text, rule.id, what)
            got = _JUDGED_TEXT_CACHE.get(key)
            if got is None:
                got = (_fill(text, {"rule": rule.id, "reason": what}), _fill(hint_text, {"reason": what}))
                if len(_JUDGED_TEXT_CACHE) < JUDGED_TEXT_CACHE_SIZE:
                    _JUDGED_TEXT_CACHE[key] = got
            message, hint = got
            data = {"reason": what}
        data["judged"] = False
        root = self._root
        if root is None:
            root = self._root = _root_place(self.doc, self.file)
        file, line, column, note = root
        if note:
            data = dict(data, overrides=note)
        self._sink.append(new_finding(rule.id, Severity.INFO, file, line, column, "", message,
                                      hint, data, (), self.doc.index))


def _root_place(doc: Document, file: str) -> tuple[str, int, int, str]:
    """(file, line, column, overrides note) of a finding on the whole of DOC, as ``_finding``
    places one at the empty key path: the same for every such finding of the document."""
    line, column = _location(doc, (), "value")
    note = ""
    if doc.origins:
        origin = _origin_of(doc, ())
        if origin is not None and origin != file:
            file = origin
        from .compose import overridden_note

        note = overridden_note(doc, ())
    return file, line, column, note


JUDGED_TEXT_CACHE_SIZE = 4096
# (message template, hint template, rule id, reason) -> the "not checked" note's message and hint
_JUDGED_TEXT_CACHE: dict[tuple[str, str, str, str], tuple[str, str]] = {}


def _fill(template: str, data: dict[str, Any]) -> str:
    try:
        return template.format_map(data)
    except (KeyError, IndexError, ValueError) as exc:  # a catalogue bug, never user input
        raise RuntimeError(f"message template {template!r} cannot be filled: {exc}") from None


def _location(doc: Document, path: tuple, on: str) -> tuple[int, int]:
    entries = doc.entries
    entry = entries.get(path)
    while entry is None:
        if not path:
            return 1, 1
        path = path[:-1]
        entry = entries.get(path)
    if on == "key":
        span = entry.key
        if span is not None:
            return span.line, span.column
    span = entry.value
    return span.line, span.column


def _finding(rule: str, severity: Severity, doc: Document, file: str, path: tuple, on: str,
             message: str, hint: str, data: dict[str, Any], fix: Fix | None = None,
             span=None, related: tuple = ()) -> Finding:
    """The finding at PATH of DOC (or at SPAN); DATA becomes the finding's own (not copied)."""
    if type(path) is not tuple:
        path = tuple(path)
    if span is not None:
        line, column = span.line, span.column
    else:
        entry = doc.entries.get(path)
        if entry is not None and on != "key":  # the common case of _location, inline
            at = entry.value
            line, column = at.line, at.column
        else:
            line, column = _location(doc, path, on)
    others = tuple([Related(key=dotted(p), line=loc[0], column=loc[1])
                    for p in related for loc in (_location(doc, tuple(p), on),)]) if related else ()
    if span is None and doc.origins:
        # a composed config: the finding belongs to the file that set the value
        origin = _origin_of(doc, path)
        if origin is not None and origin != file:
            file, fix = origin, None  # never edit one file for a value another file sets
        from .compose import overridden_note

        note = overridden_note(doc, path)
        if note:
            data = dict(data, overrides=note)
    return new_finding(rule, severity, file, line, column, dotted(path) if path else "", message,
                       hint, data, path, doc.index, fix, others)


def _origin_of(doc: Document, path: tuple) -> str | None:
    while True:
        if path in doc.origins:
            return doc.origins[path]
        if not path:
            return None
        path = path[:-1]


def make_finding(rule: Rule, options: Options, doc: Document, file: str, path: tuple,
                 variant: str, on: str, data: dict[str, Any], fix: Fix | None,
                 span=None, related: tuple = (), assumptions: tuple[str, ...] = ()) -> Finding:
    """The one place findings are made. A verdict that rests on an assumption is at most a
    warning, whatever the rule, its variant or an override says, and says what it assumed."""
    data = shown_data(data)  # a huge number as its short text, in the message and in the data
    msg = rule.messages[variant]
    severity = options.severity.get(rule.id) or msg.severity or rule.severity
    message = _fill(msg.message, data)
    if assumptions:
        data["assumptions"] = list(assumptions)
        message += " (" + "; ".join([f"assuming {a}" for a in assumptions]) + ")"
        if severity > Severity.WARNING:
            severity = Severity.WARNING
    hint = _fill(msg.hint, data)
    if variant != "default":
        data["variant"] = variant
    return _finding(rule.id, severity, doc, file, path, on, message, hint, data, fix, span, related)


# --------------------------------------------------------------------------- running

_SELECTED_CACHE: dict[tuple, tuple[list[Rule], frozenset[str]]] = {}  # (only, skip) -> rules and their ids, worked out once per run (a cache)


def _selected(options: Options) -> tuple[list[Rule], frozenset[str]]:
    key = (options.only, options.skip)
    got = _SELECTED_CACHE.get(key)
    if got is None:
        rules = [rule for rule_id, rule in load_catalogue().items()
                 if (options.only is None or rule_id in options.only)
                 and rule_id not in options.skip]
        rules.sort(key=lambda r: r.stage == "last")  # stable: catalogue order otherwise
        got = _SELECTED_CACHE[key] = (rules, frozenset(rule.id for rule in rules))
    return got


def active_rules(options: Options) -> list[tuple[Rule, Any]]:
    rules, _ids = _selected(options)
    checks = all_checks()  # looked up each time: a check may be replaced (tests do)
    return [(rule, checks[rule.id]) for rule in rules]


PLAN_CACHE_SIZE = 4096
# (only, skip, method, the declared fields the view has, versions of the check and needs tables)
# -> the (rule, check, runs last) to run on such a view, in order
_PLAN_CACHE: dict[tuple, tuple[tuple[Rule, Any, bool], ...]] = {}
# (id of the needs table, its version) -> every view field a declaration names
_DECLARED_FIELDS_CACHE: dict[tuple[int, int], tuple[Any, frozenset[str]]] = {}


def _declared_fields(needs: Table) -> frozenset[str]:
    key = (id(needs), needs.version)
    got = _DECLARED_FIELDS_CACHE.get(key)
    if got is None or got[0] is not needs:
        _DECLARED_FIELDS_CACHE.clear()
        got = _DECLARED_FIELDS_CACHE[key] = (needs, frozenset().union(*[n.fields for n in needs.values()]))
    return got[1]


def _plan(options: Options, view: RunView, needs: Any) -> tuple[tuple[Rule, Any, bool], ...]:
    """The rules to run on VIEW, with their checks, in order: a check that declared what it
    needs (checks.Needs) is passed over on a view that lacks it (only on an opened view, whose
    fields and supplied values are all there before any rule runs). Which rules those are
    depends only on the rules selected, the view's method and which of the declared fields it
    has, so the list is worked out once per such kind of view while neither table changes."""
    checks = all_checks()  # looked up each time: a check may be replaced (tests do)
    if not needs:
        rules, _ids = _selected(options)
        return tuple([(rule, checks[rule.id], rule.stage == "last") for rule in rules])
    if type(needs) is Table and type(checks) is Table:
        names = _declared_fields(needs)
        has = names.intersection(view.fields) | names.intersection(view.supplied)
        key = (options.only, options.skip, view.method, has, id(needs), needs.version,
               id(checks), checks.version)
        got = _PLAN_CACHE.get(key)
        if got is not None and got[0] is needs and got[1] is checks:
            return got[2]
    else:  # a table of another kind (tests replace one): worked out for this view alone
        key = has = None
    rules, _ids = _selected(options)
    present = has if has is not None else view.fields.keys() | view.supplied.keys()
    method = view.method
    plan = []
    for rule in rules:
        fn = checks[rule.id]
        need = needs.get(rule.id)
        if need is not None and not need.met(method, present) and fn is need.check:
            continue  # provably nothing to say (tests/test_check_needs.py)
        plan.append((rule, fn, rule.stage == "last"))
    plan = tuple(plan)
    if key is not None:
        if len(_PLAN_CACHE) >= PLAN_CACHE_SIZE:
            _PLAN_CACHE.clear()
        _PLAN_CACHE[key] = (needs, checks, plan)
    return plan


def lint_view(view: RunView, options: Options, file: str, report: FileReport,
              waivers: list | None = None, ran: frozenset[str] = frozenset()) -> None:
    """Run the selected rules on VIEW into REPORT, but for those in RAN (``lint_rest``: they
    have run on this view already; the rules that do run still see every selected rule as
    running, as in one pass). ``lint_views`` of the one view: a failure outside the rules is
    raised to the caller's crash boundary."""
    lint_views([(view, options, file, report, waivers, None)], ran=ran, boundary=False)


class Batch:
    """Files linted together: their rules run rule by rule across the files' views
    (``lint_views``), then each report is completed, in the files' order. A run of many configs
    keeps each rule's code and tables in the processor's caches while it goes over the batch,
    instead of going through every rule again for each file (about a sixth less time over the
    benchmark corpus). What each file gets is what ``lint_view`` file by file gives it."""

    __slots__ = ("jobs", "ends", "size")

    def __init__(self) -> None:
        self.size = 0  # characters of text its files hold (BATCH_TEXT bounds what a batch keeps)
        # (view, options, file, report, waivers): lint_view's arguments, and the record of reads
        # the file's rules note what they read into (None: none)
        self.jobs: list[tuple] = []
        self.ends: list[tuple] = []  # _documents_linted's arguments, once the rules have run

    def run(self) -> None:
        jobs, ends = self.jobs, self.ends
        self.jobs, self.ends, self.size = [], [], 0
        lint_views(jobs)
        for end in ends:
            try:
                _documents_linted(*end)
            except Exception as exc:  # the crash boundary of one file, as in _lint_text
                report, _reasons, file, options, _located = end
                if options.debug:
                    raise
                _crashed(report, file, exc)


def _crashed(report: FileReport, file: str, exc: BaseException) -> None:
    """REPORT made what ``_lint_text`` returns for a file whose lint failed outside the rules:
    the internal error alone."""
    report.findings, report.views, report.waived = [], [], []
    report.problem = report.skipped = report.layout = report.compose_problem = None
    report.internal = [internal_error(file, None, exc)]


def lint_views(jobs: list[tuple], *, ran: frozenset[str] = frozenset(), boundary: bool = True) -> None:
    """The selected rules on the view of each job (view, options, file, report, waivers, the
    record of reads its rules note what they read into or None), taken rule by rule across the
    jobs: each job's rules run in its own order (its plan, a part of the selected rules' order),
    each into its own report, so every report ends as the job linted alone leaves it. A job's
    report must be its own (one view a report). Jobs whose options select other rules run in
    groups of their own. RAN: rules left out (``lint_view``). A rule that fails is its file's
    internal error; so is any other failure with BOUNDARY, which without it is raised."""
    groups: dict[int, list] = {}
    for job in jobs:
        view, options, file, report, waivers, _record = job
        try:
            plan = _plan(options, view, declared() if view.run is not None else None)
            if ran:
                plan = tuple([p for p in plan if p[0].id not in ran])
            rules, active = _selected(options)
            findings = report.findings
            targets = {w.target for w in waivers or () if w.target}
            paths = waivermod.target_paths(view.doc, targets) if targets else {}
            ctx = Context(view, plan[0][0] if plan else None, options, findings, file, waivers=waivers,
                          active=active, waiver_paths=paths)
        except Exception as exc:  # as lint_view's caller would record it: the document's boundary
            if options.debug or not boundary:
                raise
            report.internal.append(internal_error(file, None, exc))
            continue
        groups.setdefault(id(rules), [rules, []])[1].append([ctx, plan, len(findings), job, paths])
    for rules, items in groups.values():
        if len(items) == 1:  # one view: its plan is the order
            order = [(rule, last, ((items[0], fn),)) for rule, fn, last in items[0][1]]
        else:
            # each rule with the jobs whose plans hold it, in the jobs' order: a plan is a part
            # of the selected rules in their order, so rule by rule each job's rules run in its own
            runs: dict[int, list] = {}
            for item in items:
                for rule, fn, _last in item[1]:
                    got = runs.get(id(rule))
                    if got is None:
                        runs[id(rule)] = [(item, fn)]
                    else:
                        got.append((item, fn))
            order = [(rule, rule.stage == "last", got) for rule in rules
                     if (got := runs.get(id(rule))) is not None]
        for rule, last, jobs_of_rule in order:
            for item, fn in jobs_of_rule:
                ctx = item[0]
                ctx.rule = rule
                ctx._thresholds = ctx._judged_once = None
                ctx._model_assumption = ""
                findings = ctx._sink
                if last:
                    ctx.earlier = findings[item[2]:]
                mark = len(findings)
                record = item[3][5]
                token = reads.resume(record) if record is not None else None
                try:
                    fn(ctx)
                except Exception as exc:  # a bug in a rule: report it and go on with the others
                    options, file, report = item[3][1], item[3][2], item[3][3]
                    if options.debug:
                        raise
                    del findings[mark:]
                    report.internal.append(internal_error(file, rule.id, exc))
                finally:
                    if token is not None:
                        reads.pause(token)
        for item in items:
            view, options, file, report, waivers, _record = item[3]
            try:
                _apply_waivers(waivers or [], item[4], options, report, item[2])
            except Exception as exc:
                if options.debug or not boundary:
                    raise
                report.internal.append(internal_error(file, None, exc))


def internal_error(file: str, rule: str | None, exc: BaseException) -> InternalError:
    """A bug in cfgcheck as a record: the exception, its message and where it was raised."""
    import traceback

    frames = traceback.extract_tb(exc.__traceback__)
    at = f" ({Path(frames[-1].filename).name}:{frames[-1].lineno})" if frames else ""
    try:
        text = str(exc)
    except Exception:  # noqa: BLE001 - an exception that cannot even say what it is
        text = "(no message)"
    if len(text) > 500:
        text = text[:497] + "..."
    return InternalError(file=file, rule=rule, error=f"{type(exc).__name__}: {text}{at}")


def _apply_waivers(waivers: list, targets: dict[int, list[tuple]], options: Options,
                   report: FileReport, start: int) -> None:
    """Move the findings a waiver comment or a project waiver covers to ``report.waived``."""
    if not waivers and not options.waivers:
        return
    kept = []
    for f in report.findings[start:]:
        reason, kind = None, None
        if f.rule != WAIVER_RULE:
            for w in waivers:
                if waivermod.covers(w, f, targets.get(w.target, ())):
                    reason, kind = w.reason or "", "comment"
                    break
            else:
                for pw in options.waivers:
                    if waivermod.project_covers(pw, f):
                        reason, kind = pw.reason, "project"
                        break
        if reason is None:
            kept.append(f)
        else:
            report.waived.append((f, reason, kind))
    report.findings[start:] = kept


WAIVER_RULE = "waiver-comment-problem"
_NO_OVERRIDES = ((), ())  # split_overrides of no overrides: nothing fixed, nothing varying
_FINDING_ORDER = attrgetter("document", "line", "column", "rule")  # how a file's findings are sorted


def lint_documents(docs: list[Document], file: str, options: Options,
                   layout: str | None = None, text: str | None = None,
                   located_in: str | None = None, batch: "Batch | None" = None) -> FileReport:
    """Lint the documents of FILE. ``located_in``: keep only the findings located in that file
    (a launch script lints the runs of the configs it overrides for the findings on its lines).
    ``batch``: a file of one plain document leaves its rules to the batch (``Batch``), and the
    report is complete once ``batch.run()`` has run; any other file is linted at once."""
    report = FileReport(file=file)
    reasons = []
    waivers = waivermod.scan(text) if text and docs and docs[0].format == "yaml" else []
    owners: dict[int, list] = {}  # several documents: each waiver belongs to the one it is in
    if waivers and len(docs) > 1:
        ends = [(r[1], d.index) for d in docs if (r := waivermod.line_range(d))]
        for w in waivers:
            line = w.target or w.line
            owner = next((i for end, i in ends if line <= end), ends[-1][1] if ends else None)
            owners.setdefault(owner, []).append(w)
    open_view = runmod.open_view  # the one open path: links, launch context, defaults
    script_layer = runmod.script_layer

    def run(view: RunView) -> tuple[list[Finding], list[InternalError]]:
        sub = FileReport(file=file)
        if not view.skipped:
            open_view(view, file, options)  # the one open path, for each run of a sweep too
        lint_view(view, options, file, sub)
        return sub.findings, sub.internal

    for doc in docs:
        try:  # the crash boundary of one document: a bug here spares the other documents
            if sweep.is_sweep(doc.data):  # a sweep file: lint its runs
                sweep.lint_sweep(doc, file, run, report, layout)
                continue
            fixed, varying = sweep.split_overrides(options.overrides) if options.overrides else _NO_OVERRIDES
            if varying and not file.startswith("<"):  # list-valued overrides: one run per combination
                from . import compose

                try:
                    base = compose.compose(doc, file, fixed, located=script_layer(file, options))
                except compose.ComposeError as exc:
                    report.compose_problem = str(exc)
                else:
                    sweep.lint_override_sweep(base, file, varying, run, report, layout)
                    continue
            doc = _composed(doc, file, options, report)
            names, cands = sweep.hydra_grid(doc) if not file.startswith("<") else ([], [])
            if names:  # the config's own multirun grid: one run per combination
                sweep.lint_hydra_grid(doc, file, names, cands, run, report, layout)
                continue
            view = build_view(doc, layout)
            if not view.skipped:
                open_view(view, file, options)  # links, launch context, runner defaults, GPUs
            report.views.append(view)
            if view.skipped:
                reasons.append(view.skipped)
                continue
            report.layout = report.layout or view.layout.name
            mine = owners.get(doc.index, []) if len(docs) > 1 else waivers
            if batch is not None and len(docs) == 1:
                # the record of reads the file is read into (the result cache's) takes what its rules read
                batch.jobs.append((view, options, file, report, mine, reads.active_record()))
                batch.ends.append((report, reasons, file, options, located_in))
                batch.size += len(text) if text else 0
                return report  # completed by batch.run()
            lint_view(view, options, file, report, mine)
        except Exception as exc:
            if options.debug:
                raise
            report.internal.append(internal_error(file, None, exc))
    return _documents_linted(report, reasons, file, options, located_in)


def _documents_linted(report: FileReport, reasons: list, file: str, options: Options,
                      located_in: str | None) -> FileReport:
    """The end of ``lint_documents``, once the rules have run on every document."""
    if not report.layout and not report.internal:
        report.skipped = reasons[0] if reasons else "empty file"
    script = options.script
    if located_in is not None:
        report.findings = [f for f in report.findings if f.file == located_in]
    elif script is not None and options.script_linted and script.file != file:
        report.findings = [f for f in report.findings if f.file != script.file]
    report.findings.sort(key=_FINDING_ORDER)
    made = _LETTING_GO.get()
    if made is not None:
        made.append(report)
    return report


# rules whose findings depend on which other rules run: they read ``Context.active`` (which rules
# are selected) or, run last, ``Context.earlier`` (the other rules' findings); a pass by only some
# rules would say something else for them than a pass by all (tests/test_lint_rest.py finds
# every check that reads either)
SELECTION_DEPENDENT = frozenset({"unknown-key", WAIVER_RULE})


def lint_rest(first: FileReport, docs: list[Document], file: str, options: Options,
              ran: frozenset[str], text: str | None = None) -> FileReport | None:
    """``lint_documents(docs, file, options, text=text)`` made from FIRST, the report of the
    same DOCS by the rules RAN alone (``only=RAN``, the other options the same): the other
    selected rules run on FIRST's views, already opened, and their findings join FIRST's in the
    order one pass gives. FIRST is taken over and returned. None (lint again) where the two
    could differ: a rule failed or a document could not be read in FIRST, a document was a
    sweep or grid of runs (their views are not kept), waivers are to be applied, launch-script
    findings are filtered, or a rule of RAN depends on which rules run."""
    if (first.internal or first.problem is not None or len(first.views) != len(docs)
            or options.waivers or options.overrides or options.script is not None
            or ran & SELECTION_DEPENDENT):
        return None
    if any(rule.stage == "last" for rule in _selected(options)[0] if rule.id in ran):
        return None
    if text and docs and docs[0].format == "yaml" and waivermod.scan(text):
        return None
    for view in first.views:
        if view.skipped:
            continue
        try:
            lint_view(view, options, file, first, ran=ran)
        except Exception as exc:  # the crash boundary of one document, as in lint_documents
            if options.debug:
                raise
            first.internal.append(internal_error(file, None, exc))
    first.findings.sort(key=_FINDING_ORDER)
    return first


def _composed(doc: Document, file: str, options: Options, report: FileReport) -> Document:
    """DOC composed (``run.composed``); a named file that cannot be read leaves it as written,
    with the reason kept in the report."""
    out, problem = runmod.composed(doc, file, options)
    if problem:
        report.compose_problem = problem
    return out


def lint_text(text: str, name: str = "<text>", options: Options | None = None,
              fmt: str | None = None, layout: str | None = None, batch: Batch | None = None) -> FileReport:
    """``batch``: as ``lint_documents`` (the report is complete after ``batch.run()``)."""
    options = options or Options()
    with memo.collector_paused():
        return _lint_text(text, name, options, fmt, layout, batch)


def _lint_text(text: str, name: str, options: Options, fmt: str | None,
               layout: str | None, batch: Batch | None = None) -> FileReport:
    try:
        try:
            docs = loadmod.load_text(text, name, fmt)
        except LoadError as exc:
            return FileReport(file=name, problem=InputProblem(file=name, line=exc.line,
                                                              column=exc.column, reason=exc.reason))
        return lint_documents(docs, name, options, layout, text, batch=batch)
    except Exception as exc:  # the crash boundary of one file: a bug in cfgcheck, exit 3
        if options.debug:
            raise
        return FileReport(file=name, internal=[internal_error(name, None, exc)])


def lint_script(path: str | Path, options: Options | None = None) -> FileReport:
    """A launch script: each training command's ``--key value`` arguments are linted like a flat
    trainer config located at the script's lines, with the launch context the command gives. A
    command inside a ``for`` loop is one run per round; its findings are merged the way a sweep's
    are (``sweep.merge_runs``): once, saying in which rounds they appear."""
    from .scripts import ScriptNotRead, ScriptTooLarge, read_script
    from .sweep import merge_runs

    options = options or Options()
    name = str(path)
    try:
        launches = read_script(path)
    except ScriptTooLarge as exc:
        return FileReport(file=name, skipped=exc.reason)
    except ScriptNotRead as exc:
        return FileReport(file=name, skipped=f"not read: {exc.reason}" + (f" (line {exc.line})" if exc.line else ""))
    except LoadError as exc:
        return FileReport(file=name, problem=InputProblem(file=name, line=exc.line,
                                                          column=exc.column, reason=exc.reason))
    report = FileReport(file=name)
    groups: dict[int, list] = {}
    for sl in launches:
        groups.setdefault(sl.at, []).append(sl)
    for i, rounds in enumerate(groups.values()):
        if len(rounds) == 1:
            _lint_launch(rounds[0], i, name, options, report)
            continue
        runs = []
        for sl in rounds:
            one = FileReport(file=name)
            _lint_launch(sl, i, name, options, one)
            runs.append((sl.run, one.findings))
            report.views += one.views
            report.internal += one.internal
            report.layout = report.layout or one.layout
        merge_runs(runs, len(rounds), report, "the loop")
    if not report.layout and not report.internal:
        report.skipped = ("a shell script that starts no training" if not launches
                          else "a launch script with no trainer arguments of its own")
    report.findings.sort(key=_FINDING_ORDER)
    return report


def _lint_launch(sl, index: int, name: str, options: Options, report: FileReport) -> None:
    from ._records import replaced

    from .run import open_view
    from .scripts import script_document

    try:  # the crash boundary of one launch: a bug here spares the others
        if _lint_overridden_configs(sl, options, report):
            return  # its arguments override the configs it starts: linted with their runs
        doc = script_document(sl, index)
        if doc is None:
            return
        view = build_view(doc, "trainer")
        report.views.append(view)
        report.layout = report.layout or "launch script"
        open_view(view, name, replaced(options, script=sl))
        lint_view(view, options, name, report)
    except Exception as exc:
        if options.debug:
            raise
        report.internal.append(internal_error(name, None, exc))


def _lint_overridden_configs(sl, options: Options, report: FileReport) -> bool:
    """Lint the runs of the configs a launch starts with its overriding arguments, keeping the
    findings located at the script's lines. False when the launch overrides no readable config."""
    from ._records import replaced

    from .scripts import overrides_of

    if not overrides_of(sl):
        return False
    done = False
    for config in sl.configs:
        try:
            src = loadmod.read_source(config)
            docs = loadmod.load_text(src.text, config)
        except LoadError:
            continue  # the config's own lint says why it cannot be read
        sub = lint_documents(docs, config, replaced(options, script=sl),
                             located_in=sl.file)
        report.findings += sub.findings
        report.internal += sub.internal
        report.views += sub.views
        report.layout = report.layout or "launch script"
        done = True
    return done


def lint_file(path: str | Path, options: Options | None = None, batch: Batch | None = None) -> FileReport:
    """``batch``: as ``lint_documents`` (the report is complete after ``batch.run()``)."""
    options = options or Options()
    name = str(path)
    if name.lower().endswith(SCRIPT_SUFFIXES) and not os.path.isdir(path):
        with memo.collector_paused():
            return lint_script(path, options)
    try:
        try:
            src = loadmod.read_source(path)
        except LoadError as exc:
            if exc.reason == loadmod.IS_A_FOLDER:  # a folder named as a config: can it be listed?
                try:
                    _listable(path)
                except LoadError as unlistable:
                    exc = unlistable
            return FileReport(file=name, problem=InputProblem(file=name, line=exc.line,
                                                              column=exc.column, reason=exc.reason))
        return lint_text(src.text, name, options, batch=batch)
    except Exception as exc:  # the crash boundary of one file (reading it, here)
        if options.debug:
            raise
        return FileReport(file=name, internal=[internal_error(name, None, exc)])


def expand_paths(paths: Iterable[str | Path]) -> list[str]:
    """The files ``walk_paths`` finds."""
    return [f for f, _named in walk_paths(paths)]


def _listable(path: str | Path) -> None:
    try:
        with os.scandir(path):
            pass
    except OSError as exc:
        raise LoadError(f"folder cannot be listed: {exc.strerror or exc}") from None


def lint_paths(paths: Iterable[str | Path], options: Options | None = None, *,
               options_for: Callable[[str], Options] | None = None, jobs: int | str = 1,
               keep_views: bool = True) -> Report:
    """Lint files and folders; ``options_for(file)`` gives per-file options when they differ.

    ``jobs`` > 1 spreads the files over processes, reports in the same order. ``keep_views=False``
    drops each file's views (and with them its parsed documents) once its rules have run, so
    memory stays flat however many files there are; a process pool never sends them back.
    """
    options = options or Options()
    pick = options_for or (lambda _file: options)
    pairs = [(p, pick(p)) for p in expand_paths(paths)]
    return Report(files=list(lint_files(pairs, jobs=jobs, keep_views=keep_views)))


def let_go(views: Iterable[RunView]) -> None:
    """Cut each view from its opened run. The two refer to each other, a cycle that would leave
    a file's documents, entries and positions to the cycle collector, which walks them all before
    it frees them (over 2,000 benchmark files its passes took 0.10 s of a 1.2 s run with the
    cycle, 0.02 s without). For views no one reads again (the pool's workers do the same in
    ``parallel._strip``, which does not import the engine)."""
    for view in views:
        view.run = None


def drop_views(report: FileReport) -> FileReport:
    """REPORT without its views, which are then freed at once (``let_go``)."""
    let_go(report.views)
    report.views = []
    return report


_LETTING_GO: ContextVar[list[FileReport] | None] = ContextVar("cfgcheck_letting_go", default=None)


@contextmanager
def views_let_go() -> Iterator[None]:
    """Within: each report ``lint_documents`` makes has its views cut from their opened runs on
    the way out (as ``drop_views`` does, the views themselves left in place), for a caller that
    keeps none of those views, as fixing keeps only texts and findings. Nested, the outermost
    lets go."""
    if _LETTING_GO.get() is not None:
        yield
        return
    made: list[FileReport] = []
    token = _LETTING_GO.set(made)
    try:
        yield
    finally:
        _LETTING_GO.reset(token)
        for report in made:
            let_go(report.views)


def lint_files(pairs: list[tuple[str, Options]], *, jobs: int | str = 1,
               keep_views: bool = True, cache: Any = None) -> Iterator[FileReport]:
    """(file, options) pairs -> their reports, in order, each as soon as it is ready (serially,
    BATCH_FILES files at a time: ``Batch``). ``jobs``: a number of processes, or "auto" (the
    usable CPUs; serial for a short list of files). What lies around the files (repository
    roots, pinned releases) is looked up once per folder.

    ``cache``: a ``cache.Store``; a file whose stored report still holds is not linted again
    (such a report has no views), the others are linted and stored."""
    with memo.scope():
        if cache is not None:
            yield from _lint_files_cached(pairs, jobs, keep_views, cache)
            return
        if jobs != 1 and len(pairs) > 1:
            from .parallel import lint_files_parallel, worker_count

            workers = worker_count(jobs, len(pairs))
            if workers > 1:
                yield from lint_files_parallel(pairs, workers, lint_file=lint_file, prepare=active_rules,
                                               lint_chunk=lint_together)
                return
        for start in range(0, len(pairs), BATCH_FILES):
            yield from lint_together(pairs[start:start + BATCH_FILES], keep_views)


def lint_together(pairs: list[tuple[str, Options]], keep_views: bool = False) -> list[FileReport]:
    """``lint_file`` of each (file, options) pair, the files linted together (one ``Batch``)."""
    return [report for report, _facts in _linted_together(pairs, False, keep_views)]


def _linted_together(pairs: list[tuple[str, Options]], recorded: bool,
                     keep_views: bool = True) -> list[tuple[FileReport, dict | None]]:
    """(report, its record of reads when RECORDED, else None) of each pair, the files linted in
    one batch (run early should their text pass BATCH_TEXT), with the collector paused."""
    batch = Batch()
    done: list[tuple[FileReport, dict | None]] = []
    with memo.collector_paused():  # as lint_text pauses it for one file
        for path, opts in pairs:
            if recorded:
                with reads.recording() as facts:
                    done.append((lint_file(path, opts, batch), facts))
            else:
                done.append((lint_file(path, opts, batch), None))
            if batch.size > BATCH_TEXT:  # large files: linted as soon as they fill the batch
                batch.run()
        batch.run()
        if not keep_views:  # freed before the collector runs again: it never walks them
            for report, _facts in done:
                drop_views(report)
    return done


# files linted together (``Batch``): measured over the 2,000 configs of bench/run.py, in one
# process, 8 files a batch 0.45 s, 32 0.41 s, 128 0.41 s against 0.50 s file by file; a batch
# holds its files' documents and views until its rules have run
BATCH_FILES = 32
# and no more text than this (characters) before its rules run: a batch of large files keeps no
# more in memory than about one of them (the benchmark's configs hold 700 characters or so)
BATCH_TEXT = 256 * 1024


# --------------------------------------------------------------------------- with the result cache

def lint_file_recorded(path: str | Path, options: Options | None = None) -> tuple[FileReport, dict]:
    """``lint_file`` and the facts about the disk its report rests on (reads.py)."""
    with reads.recording() as facts:
        report = lint_file(path, options)
    return report, facts


def _lint_recorded_in_worker(path: str, options: Options) -> FileReport:
    """For a process pool: the report carries its facts back in ``_reads``."""
    report, facts = lint_file_recorded(path, options)
    report._reads = facts  # type: ignore[attr-defined]
    return report


def _lint_files_cached(pairs: list[tuple[str, Options]], jobs: int | str, keep_views: bool,
                       store: Any) -> Iterator[FileReport]:
    from .cache import lint_cached

    many = None
    if jobs != 1 and len(pairs) > 1:
        from .parallel import lint_files_parallel, worker_count

        def many(misses: list[tuple[str, Options]]) -> Iterator[tuple[FileReport, dict]]:
            workers = worker_count(jobs, len(misses))  # the files left to lint decide
            if workers <= 1:
                yield from (lint_file_recorded(path, opts) for path, opts in misses)
                return
            for report in lint_files_parallel(misses, workers, lint_file=_lint_recorded_in_worker,
                                              prepare=active_rules, lint_chunk=_lint_together_recorded):
                yield report, report.__dict__.pop("_reads", {})

    # serially, BATCH_FILES files at a time: the misses among them linted together
    for report in lint_cached(pairs, store, lint_file_recorded, many or _lint_batches_recorded,
                              window=0 if many else BATCH_FILES):
        if not keep_views:
            drop_views(report)
        yield report


def _lint_together_recorded(pairs: list[tuple[str, Options]]) -> list[FileReport]:
    """For a process pool: ``_lint_recorded_in_worker`` of each pair, the files linted together."""
    out = []
    for report, facts in _lint_batches_recorded(pairs):
        report._reads = facts  # type: ignore[attr-defined]
        out.append(report)
    return out


def _lint_batches_recorded(misses: list[tuple[str, Options]]) -> Iterator[tuple[FileReport, dict]]:
    """``lint_file_recorded`` of each (file, options), BATCH_FILES files at a time (``Batch``):
    each file's rules note what they read into the record its read began."""
    for start in range(0, len(misses), BATCH_FILES):
        yield from _linted_together(misses[start:start + BATCH_FILES], True)
