"""The fixer: turn the fixes that findings propose into minimal text edits, prove them, write.

Three stages, in the order a formatter trusts them:

1. **Plan** — lint the text in memory, keep the fixes of the tiers asked for (``keeps-meaning``
   always, ``changes-training`` only when asked; ``--halve-batch`` adds a batch-split change),
   drop conflicting or unplaceable edits with a note.
2. **Edit** — every edit becomes a replacement of one character span of the decoded text: a
   scalar's source text, the end of a list (appended items), or a new line/member next to a
   sibling key, at its indentation and in its style. Nothing outside those spans is touched, so
   comments, quoting, flow style, anchors, blank lines and line endings stay as they were.
3. **Prove** — re-parse the new text; its data must equal the old data with exactly the intended
   key paths changed (to the intended values); the ordered comments must be the same; every line
   outside the edited spans must be byte-identical; a re-lint must show each fixed finding gone
   and no new finding. Only then is the file written: atomically, with its encoding, BOM,
   newline style, final newline and mode, and only if it did not change on disk meanwhile.

The stages live in their own modules: ``plan`` (the fixes taken), ``values`` and ``edits`` (the
span edits), ``proof`` (the proof, the stability check, a failed proof's evidence), ``write`` (the
atomic write), ``results`` (the records they share). This module holds the entry points that run
them: :func:`fix_text` for a text in memory, :func:`fix_files` for files, linked ones together.
Nothing here reads argv or prints; ``render.fixes.summary_text`` words the :class:`FixReport`.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Iterable

from .. import engine
from .. import links
from .. import memo
from ..catalogue import load_catalogue
from .. import load as loadmod
from ..engine import Options
from ..findings import InputProblem, InternalError
from ..load import LoadError, Source, dotted
from .edits import _apply
from .plan import _declares_fix, _plan, _take
from .proof import (_Remains, _blame, _failed, _finding_keys, _lint_parsed, _prove, _save_evidence, _Shared,
                    _unstable, yaml_comments)
from .results import (BATCH_SPLIT, CHANGES_TRAINING, KEEPS_MEANING, TIERS, Applied, FileFix,
                      FixReport, NewFinding, ProofFailed, _Item, _Planned)
from .write import ChangedOnDisk, WriteRefused, _write_group, atomic_write, check_writable, encode

__all__ = (
    "KEEPS_MEANING", "CHANGES_TRAINING", "TIERS", "BATCH_SPLIT",
    "Applied", "FileFix", "FixReport", "ProofFailed", "NewFinding",
    "fix_text", "fix_file", "fix_paths", "fix_files",
    "yaml_comments", "encode", "check_writable", "atomic_write", "ChangedOnDisk", "WriteRefused",
)


def fix_text(text: str, name: str = "<text>", options: Options | None = None, *,
             fmt: str | None = None, training: bool = False, halve_batch: int = 0,
             linked_before: dict | None = None, linked_after: dict | None = None,
             check_stable: bool = True) -> FileFix:
    """Fix a decoded text in memory. Never raises for bad input: see FileFix.problem / .error.

    ``linked_before`` / ``linked_after``: the texts of linked files (real path -> text) to lint
    with, as they are and as they will be once fixed (files fixed together).
    """
    with memo.collector_paused(), engine.views_let_go():  # the result keeps no view
        return _fix_text(text, name, options, fmt=fmt, training=training, halve_batch=halve_batch,
                         linked_before=linked_before, linked_after=linked_after,
                         check_stable=check_stable)


def _fix_text(text: str, name: str, options: Options | None, *, fmt: str | None, training: bool,
              halve_batch: int, linked_before: dict | None, linked_after: dict | None,
              check_stable: bool, first: tuple | None = None) -> FileFix:
    """``first``: (documents, report) of ``_first_passes`` for TEXT, or None; used only where
    the text is fixed as it was read (no byte-order mark or old Mac line ends rewritten first)."""
    halve_batch = int(halve_batch)
    lead = "\ufeff" if text.startswith("\ufeff") else ""  # a second byte-order mark: kept as is
    body = text[len(lead):]
    cr_only = "\r" in body and "\n" not in body
    if cr_only:  # old Mac line ends: fixed as "\n" lines (one for one), written back as "\r"
        body = body.replace("\r", "\n")
    elif re.search("\r(?!\n)", body):
        result = FileFix(file=name, old_text=text, new_text=text)
        before = engine.lint_text(text, name, options or Options(), fmt)
        if before.problem is not None:
            result.problem = before.problem
        elif any(f.fix is not None for f in before.findings) or halve_batch:
            result.notes.append("not fixed: its lines end in a mix of CR and LF; make them "
                                "one kind, then fix again")
        return result
    result = _fix_body(body, name, options, fmt=fmt, training=training, halve_batch=halve_batch,
                       linked_before=linked_before, linked_after=linked_after,
                       check_stable=check_stable,
                       first=None if lead or cr_only else first)  # made of the text as read
    if cr_only:
        result.old_text, result.new_text = text, lead + result.new_text.replace("\n", "\r")
    elif lead:
        result.old_text, result.new_text = text, lead + result.new_text
    if result.evidence is not None:
        after = result.evidence["after"]
        result.evidence = dict(result.evidence, before=text,
                               after=lead + (after.replace("\n", "\r") if cr_only else after))
    return result


def _fix_body(text: str, name: str, options: Options | None, *, fmt: str | None, training: bool,
              halve_batch: int, linked_before: dict | None, linked_after: dict | None,
              check_stable: bool, linted=None, first: tuple | None = None) -> FileFix:
    options = options or Options()
    fmt = fmt or loadmod.guess_format(name, text)
    linked_before = linked_before or {}
    linked_after = linked_after if linked_after is not None else linked_before
    result = FileFix(file=name, old_text=text, new_text=text)
    if linted is not None:  # the stability pass: the proof's re-lint of this very text
        before = linted
    else:
        before = _lint_before(text, name, options, fmt, linked_before, training, halve_batch, first)
    if before.problem is not None:
        result.problem = before.problem
        return result
    if before.internal:
        e = before.internal[0]
        result.error = InternalError(file=name, rule=e.rule,
                                     error=f"rule failed while checking, not fixing: {e.error}")
        return result
    if before.skipped:
        result.skipped = before.skipped
    result.links = _linked_paths(before)
    result.needs = _needed_flags(before, options)
    docs = [v.doc for v in before.views]
    planned, result.withheld, result.notes = _plan(before, training=training,
                                                   halve_batch=halve_batch)
    if not planned:
        return result
    accepted, edits, applied = _take(planned, docs, text, fmt, result.notes)
    if not edits:
        result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
        return result
    while True:
        new_text = _apply(text, edits)
        try:
            notes, new, after, new_docs = _prove(text, new_text, name, fmt, docs, accepted, edits,
                                                 before, options, linked_after)
        except _Shared as exc:
            bad = {id(p) for p in exc.plans}
            for p in exc.plans:
                result.notes.append(f"{p.rule} at {p.key}: not applied, {exc.where}")
        except _Remains as exc:
            # another fix of the file may undo what this one does (a dtype the GPU lacks changed
            # under a storage dtype set to match it): proven alone, its finding goes, so it is a
            # consequence of the others, not a bug; leave it out, say why, prove the rest again
            p = exc.plan
            if len(accepted) < 2 or not _clears_alone(text, name, fmt, docs, p, edits, before,
                                                      options, linked_after):
                return _failed(result, exc, text, new_text, accepted, edits, docs, name, fmt)
            bad = {id(p)}
            others = "; ".join(dict.fromkeys(f"{q.rule} at {q.key}" for q in accepted if q is not p))
            result.notes.append(f"{p.rule} at {p.key}: not applied, together with the other fixes of "
                                f"this document ({others}) its finding would still be there")
        except ProofFailed as exc:
            return _failed(result, exc, text, new_text, accepted, edits, docs, name, fmt)
        else:
            if not new:
                break
            # a consequence of a change, not a bug: leave out the fix that brings each new
            # finding (decided per finding), say which finding, and prove the rest again
            blamed = _blame(text, name, fmt, options, accepted, edits, new, linked_after)
            bad = set(blamed)
            for p in accepted:
                if id(p) in blamed:
                    fs, how = blamed[id(p)]
                    why = "together with the other fixes of this document, " if how == "together" else ""
                    what = "; ".join(f"{f.rule} at {f.key or 'the top level'}: {f.message}" for f in fs)
                    result.notes.append(f"{p.rule} at {p.key}: not applied, {why}it would bring "
                                        f"{'a new finding' if len(fs) == 1 else 'new findings'}: {what}")
            if not bad:  # cannot happen: every new finding belongs to a document with fixes
                return _failed(result, ProofFailed("a new finding that no fix brings",
                                                   [p.rule for p in accepted]),
                               text, new_text, accepted, edits, docs, name, fmt)
        accepted = [p for p in accepted if id(p) not in bad]
        edits = [e for e in edits if e.plan not in bad]
        if not edits:
            result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
            return result
    result.notes.extend(notes)
    if new_text != text:
        _say_as_written(new_docs, new_text, accepted, applied)
    result.applied = [applied[id(p)] for p in accepted if id(p) in applied]
    if new_text == text:
        return result
    if check_stable:  # a formatter's safe mode: fixing the fixed text again must change nothing
        def refix(fixed: str) -> FileFix:  # the proof's re-lint of the fixed text is reused
            return _fix_body(fixed, name, options, fmt=fmt, training=training, halve_batch=0,
                             linked_before=linked_after, linked_after=linked_after,
                             check_stable=False, linted=after)

        why = _unstable(new_text, refix)
        if why is not None:
            return _failed(result, ProofFailed(why, [p.rule for p in accepted]), text, new_text,
                           accepted, edits, docs, name, fmt, check="stability")
    result.new_text = new_text
    return result


def _clears_alone(text: str, name: str, fmt: str, docs: list, plan: _Planned, edits: list,
                  before, options: Options, linked: dict | None) -> bool:
    """Whether PLAN's edits alone pass the proof's text steps and clear its finding (any new
    finding they bring is judged later, with the fixes that stay)."""
    mine = [e for e in edits if e.plan == id(plan)]
    if not mine:
        return False
    try:
        _prove(text, _apply(text, mine), name, fmt, docs, [plan], mine, before, options, linked)
    except (ProofFailed, _Shared):
        return False
    return True


def _lint_before(text: str, name: str, options: Options, fmt: str, linked: dict, training: bool,
                 halve_batch: int, first: tuple | None = None):
    """The lint of the text before fixing: by every rule that runs wherever a fix is to be made.

    Only rules whose catalogue record has ``fix:`` propose fixes (``_plan`` takes no other), so
    the rules that fix run first; when they leave nothing to make, their report says all a fix
    run shows (what is left as is, the flags they need, why nothing is made), and the other
    rules need not run. Otherwise the other rules run too (``engine.lint_rest``: on the views
    already opened, where that gives what one pass by every rule gives, else a lint of the text
    by every rule), as the proof compares the fixed text's findings with all of the old text's.
    A rule that fails makes the whole lint run, so the failure reported is the one lint reports.
    FIRST: (the documents, their report by the fixing rules) when ``_first_passes`` made them.
    """
    fixing = _fixing_options(options)
    with links.linked_texts(linked):
        if fixing is None:
            return engine.lint_text(text, name, options, fmt)
        if first is not None:
            docs, first = first
        else:
            docs = _loaded(text, name, fmt)
            if docs is None:  # the input error (or a bug of ours) as lint reports it
                return engine.lint_text(text, name, options, fmt)
            first = _lint_parsed(docs, text, name, fixing)
        if not first.internal and not _plan(first, training=training, halve_batch=halve_batch)[0]:
            return first
        try:  # the other rules on the views the fixing rules judged, as one pass by all would say
            whole = engine.lint_rest(first, docs, name, options, fixing.only, text)
        except Exception:  # a bug in cfgcheck: the lint of every rule reports it, as lint does
            whole = None
        if whole is not None:
            return whole
        return _lint_parsed(docs, text, name, options)  # the same documents, by every rule


def _loaded(text: str, name: str, fmt: str) -> list | None:
    """The documents of TEXT, or None when it cannot be loaded (or loading fails)."""
    try:
        return loadmod.load_text(text, name, fmt)
    except Exception:  # LoadError, or a bug in cfgcheck: lint_text reports either
        return None


_FIXING_CACHE: dict[int, tuple[Options, Options | None]] = {}  # id(options) -> (options, its fixing options)


def _fixing_options(options: Options) -> Options | None:
    """``options`` narrowed to the rules that propose fixes, or None when they are all that run."""
    got = _FIXING_CACHE.get(id(options))
    if got is not None and got[0] is options:
        return got[1]
    from .._records import replaced

    running = [rule.id for rule, _fn in engine.active_rules(options)]
    fixing = frozenset(r for r in running if _declares_fix(r))
    narrowed = None if len(fixing) == len(running) else replaced(options, only=fixing)
    if len(_FIXING_CACHE) >= 256:  # a long-lived process (the editor server) keeps only the recent ones
        _FIXING_CACHE.clear()
    _FIXING_CACHE[id(options)] = (options, narrowed)
    return narrowed


def _say_as_written(new_docs: list, new_text: str, accepted: list[_Planned],
                    applied: dict[int, Applied]) -> None:
    """Make each summary's "KEY: OLD -> NEW" / "KEY: added as NEW" show NEW exactly as written.

    A rule words its summary before the fixer renders the value; where the two differ (the
    number style, JSON quotes), the summary takes the text that is in the file now.
    ``new_docs``: the documents of ``new_text``, as the proof parsed them.
    """
    docs = {d.index: d for d in new_docs}
    for plan in accepted:
        a = applied.get(id(plan))
        doc = docs.get(plan.document)
        if a is None or doc is None or not plan.edits:
            continue
        summary = a.summary
        keys = [dotted(e.path) for e in plan.edits]
        for e, key in zip(plan.edits, keys):
            entry = doc.entries.get(tuple(e.path))
            if entry is None:
                continue
            written = _PROPS_LEAD.sub("", new_text[entry.value.start:entry.value.end])
            if "\n" in written or "\r" in written:
                continue  # a collection written over several lines: the rule's words stay
            m = re.search(r"(?:^|, )" + re.escape(key) + r": (?:added as |(?:[^,]*?) -> )", summary)
            if m is None:
                continue
            start = m.end()
            stops = [len(summary)]
            for other in keys:
                if other != key:
                    i = summary.find(f", {other}: ", start)
                    if i >= 0:
                        stops.append(i)
            i = summary.find(" (", start)
            if i >= 0:
                stops.append(i)
            end = min(stops)
            if summary[start:end] != written:
                summary = summary[:start] + written + summary[end:]
        if summary != a.summary:
            applied[id(plan)] = Applied(a.rule, a.key, summary, a.tier, a.paths)


_PROPS_LEAD = re.compile(r"^(?:[&!][^\s,\[\]{}]*\s+)+")


def _linked_paths(report) -> tuple[str, ...]:
    out = []
    for view in report.views:
        for link in view.links:  # the typed record of what the config links (cfgcheck.run)
            if link.path and link.problem is None:
                out.append(os.path.realpath(link.path))
    return tuple(dict.fromkeys(out))


_FLAG = re.compile(r"--(gpus|gpu|rows)\b")


def _needed_flags(report, options: Options) -> tuple[tuple[str, str], ...]:
    """(rule, flag) for each rule that proposes fixes but could not judge this file without a
    flag its "not checked" note names."""
    unjudged = [f for f in report.findings if f.data.get("judged") is False]
    if not unjudged:
        return ()
    catalogue = load_catalogue()
    out = []
    for f in unjudged:
        rule = catalogue.get(f.rule)
        if rule is None or not rule.fix:
            continue
        for flag in _FLAG.findall(str(f.data.get("reason", ""))):
            out.append((f.rule, "--" + flag))
    return tuple(dict.fromkeys(out))


def _read(path: str | Path) -> tuple[Source | None, FileFix | None]:
    name = str(path)
    try:
        return loadmod.read_source(path), None  # the guarded reader lint uses
    except LoadError as exc:
        return None, FileFix(file=name, problem=InputProblem(file=name, line=exc.line,
                                                             column=exc.column, reason=exc.reason))


def fix_file(path: str | Path, options: Options | None = None, *, training: bool = False,
             halve_batch: int = 0, write: bool = True) -> FileFix:
    return fix_files([(path, options or Options())], training=training, halve_batch=halve_batch,
                     write=write).files[0]


def fix_paths(paths: Iterable[str | Path], options: Options | None = None, *,
              training: bool = False, halve_batch: int = 0, write: bool = True) -> FixReport:
    """Fix files and folders (folders walked as lint walks them), all with the same options."""
    options = options or Options()
    return fix_files([(p, options) for p in engine.expand_paths(paths)], training=training,
                     halve_batch=halve_batch, write=write)


def fix_files(files: Iterable[tuple[str, Options]], *, training: bool = False,
              halve_batch: int = 0, write: bool = True) -> FixReport:
    """Fix each file with its own options (a project's hardware profiles differ per folder).

    A config and the files it links (its DeepSpeed or accelerate file), when both are given, are
    fixed as one group: each is proven against the others' fixed text, and they are written
    together or not at all, whatever order their names come in.
    """
    items: list[_Item] = []
    files = list(files)
    # one run, as lint's (cfgcheck.memo): what lies around a folder and the model lookups are
    # worked out once; nothing is written before the scope ends, so the disk stays as it began
    with memo.scope():
        for start in range(0, len(files), engine.BATCH_FILES):
            window = files[start:start + engine.BATCH_FILES]
            read = [_read(path) for path, _options in window]
            # the result keeps no view (as in fix_text): the window's are let go at its end
            with memo.collector_paused(), engine.views_let_go():
                firsts = _first_passes(window, read)
                for i, ((path, options), (src, problem)) in enumerate(zip(window, read)):
                    # each file's documents and report let go once it is fixed: none is left
                    # for the collector to walk when it runs again
                    first, firsts[i] = firsts[i], None
                    if problem is not None:
                        items.append(_Item(str(path), options, problem))
                        continue
                    res = _fix_text(src.text, str(path), options, fmt=None, training=training,
                                    halve_batch=halve_batch, linked_before=None, linked_after=None,
                                    check_stable=True, first=first)
                    items.append(_Item(str(path), options, res, src))  # real path: by _groups, if needed
                first = None
        for group in _groups(items):
            _fix_group(group, training=training, halve_batch=halve_batch)
    if write:
        done: set[int] = set()
        for group in _groups(items):
            _write_group(group)
            done.update(id(i) for i in group)
        for item in items:
            if id(item) not in done:
                _write_group([item])
    for item in items:
        _save_evidence(item.result)
    return FixReport(files=[i.result for i in items])


def _first_passes(window: list[tuple[str, Options]],
                  read: list[tuple[Source | None, FileFix | None]]) -> list[tuple | None]:
    """(documents, their report by the fixing rules) of each file of WINDOW as ``_lint_before``
    would make them, the files linted together (``engine.Batch``: each rule's code stays in the
    processor's caches over the files), or None for a file ``_lint_before`` lints itself: one
    it cannot load, one whose lead or line ends ``_fix_text`` rewrites first (a byte-order mark,
    a "\\r" that is not in a "\\r\\n"), one whose options run only fixing rules, and those past
    the text a batch holds (``engine.BATCH_TEXT``)."""
    batch = engine.Batch()
    out: list[tuple | None] = []
    held = 0
    for (path, options), (src, _problem) in zip(window, read):
        got = None
        text = src.text if src is not None else ""
        fixing = _fixing_options(options) if src is not None else None
        if (fixing is not None and held <= engine.BATCH_TEXT and not text.startswith("\ufeff")
                and text.count("\r") == text.count("\r\n")):  # "\r" only in "\r\n" line ends
            name = str(path)
            docs = _loaded(text, name, loadmod.guess_format(name, text))
            if docs is not None:
                try:
                    got = (docs, engine.lint_documents(docs, name, fixing, None, text, batch=batch))
                    held += len(text)
                except Exception:  # a bug in cfgcheck: _lint_before lints the file again, and says it
                    if options.debug:
                        raise
                    got = None
        out.append(got)
    batch.run()
    return out


def _groups(items: list[_Item]) -> list[list[_Item]]:
    """Files given together that link each other (union of the links, either direction)."""
    if not any(i.result.links for i in items):
        return []  # nothing links anything: every file is its own group
    for i in items:
        if i.src is not None and not i.real:
            i.real = os.path.realpath(i.path)
    by_real = {i.real: i for i in items if i.src is not None}
    parent = {id(i): id(i) for i in items}

    def root(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for i in items:
        for link in i.result.links:
            j = by_real.get(link)
            if j is not None and j is not i:
                parent[root(id(i))] = root(id(j))
    groups: dict[int, list[_Item]] = {}
    for i in items:
        groups.setdefault(root(id(i)), []).append(i)
    return [g for g in groups.values() if len(g) > 1]


_GROUP_ROUNDS = 4


def _fix_group(group: list[_Item], *, training: bool, halve_batch: int) -> None:
    """Fix linked files against each other's fixed text until nothing moves."""
    members = [i for i in group if i.src is not None]
    old = {i.real: i.src.text for i in members}
    proposed = {i.real: i.result.new_text for i in members}
    for _ in range(_GROUP_ROUNDS):
        moved = False
        for i in members:
            others = {k: v for k, v in proposed.items() if k != i.real}
            res = fix_text(i.src.text, i.path, i.options, training=training, halve_batch=halve_batch,
                           linked_before={k: v for k, v in old.items() if k != i.real},
                           linked_after=others)
            if res.new_text != proposed[i.real]:
                moved = True
            proposed[i.real] = res.new_text
            i.result = res
        if not moved:
            break
    else:
        _undo_group(members, "its fixes and those of the files it is linked with ({names}) do "
                             "not settle; fix them one at a time")
        return
    # a member left unchanged is proven against the others' fixed text here: together, the
    # group must bring no finding that none of them had
    for i in members:
        if proposed[i.real] != old[i.real]:
            continue  # its own proof ran against the others' fixed text
        others_new = {k: v for k, v in proposed.items() if k != i.real}
        if others_new == {k: v for k, v in old.items() if k != i.real}:
            continue
        with links.linked_texts({k: v for k, v in old.items() if k != i.real}):
            before = engine.lint_text(old[i.real], i.path, i.options)
        with links.linked_texts(others_new):
            after = engine.lint_text(old[i.real], i.path, i.options)
        was = _finding_keys(before)
        new = [f for k, f in _finding_keys(after).items()
               if k not in was and f.data.get("judged") is not False]
        if new:
            f = new[0]
            _undo_group(members, "together with the files it is linked with ({names}) it would "
                                 f"bring a new finding in {i.path}: {f.rule} at {f.key or 'the top level'}: "
                                 f"{f.message}")
            return


def _undo_group(members: list[_Item], why: str) -> None:
    """Fix none of the linked files, and say why in each."""
    for i in members:
        names = ", ".join(j.path for j in members if j is not i)
        i.result.notes.append("not fixed: " + why.replace("{names}", names))
        i.result.new_text = i.result.old_text
        i.result.applied = []
