"""The safety proof of a rewrite, and what a failed one leaves behind.

The new text must parse to the old data with exactly the intended key paths changed (to the
intended values), keep the ordered comments and every line outside the edited spans byte for
byte; a re-lint must show each fixed finding gone and no new finding (``_blame`` decides which
fix brought one); fixing the fixed text again must change nothing (``_unstable``). A failed
proof is a bug in cfgcheck: ``_failed`` names the fix, ``_save_evidence`` keeps what it saw.
"""

from __future__ import annotations

import bisect
import os
from typing import Any, Callable

import yaml

from .. import engine
from .. import links
from .. import load as loadmod
from ..engine import Options
from ..findings import FileReport, Finding, InternalError
from ..load import Document, LoadError, dotted
from .edits import _MISSING, _TextEdit, _apply
from .results import CHANGES_TRAINING, FileFix, ProofFailed, _Planned
from .values import _Scanner


def yaml_comments(text: str) -> list[str]:
    """Every comment of a YAML text, in order: a ``#`` outside every token, to the line's end."""
    spans = []
    try:
        for tok in yaml.scan(text, Loader=_Scanner):
            if tok.start_mark.index != tok.end_mark.index:
                spans.append((tok.start_mark.index, tok.end_mark.index))
    except yaml.YAMLError as exc:
        raise ProofFailed(f"the text no longer scans as YAML: {exc}") from None
    spans.sort()
    out, pos = [], 0
    spans.append((len(text), len(text)))
    for start, end in spans:
        gap_from = pos
        i = text.find("#", gap_from, start)
        while i >= 0:
            if i == 0 or text[i - 1] in " \t\r\n\ufeff":
                nl = text.find("\n", i)
                stop = len(text) if nl < 0 or nl > start else nl
                out.append(text[i:stop].rstrip("\r"))
                i = text.find("#", stop, start) if stop < start else -1
            else:
                i = text.find("#", i + 1, start)
        pos = max(pos, end)
    return out


# what may stand before a "#" that starts a comment outside every token (or the text's start)
_BLANKS = " \t\r\n\ufeff"


def _may_hold_hash(text: str) -> bool:
    """Whether TEXT holds what could put a "#" inside a token: a quote, a block scalar's
    indicator, or a directive line (a "%" at a line's start)."""
    return ('"' in text or "'" in text or "|" in text or ">" in text or text.startswith("%")
            or "\n%" in text)


def _odd_break(text: str) -> bool:
    """Whether TEXT holds a line break YAML knows besides "\n" and "\r\n" (a comment ends at
    them: NEL, the Unicode line and paragraph separators, a lone "\r") or a BOM past its start."""
    if "\x85" in text or "\u2028" in text or "\u2029" in text or text.find("\ufeff", 1) >= 0:
        return True
    return "\r" in text and text.count("\r") != text.count("\r\n")  # a "\r" with no "\n" after it


def _parsed_comments(text: str) -> list[str]:
    """``yaml_comments`` of a text that has just been parsed as YAML, without a second scan where
    no token can hold a "#" after a blank.

    Only quoted and block scalars (and directive lines) hold blanks; a plain scalar ends at " #",
    and anchors, aliases, tags and indicators hold no blank. Every "#" at the text's start or
    after a blank is therefore a comment to the end of its line, unless an opening quote, a block
    indicator or a directive stands in the text outside those would-be comments: an opening
    quote or indicator of a scalar holding a "#" stands before that "#", outside every real
    comment. Then, and with line breaks other than "\n" and "\r\n" or a BOM past the start,
    the text is scanned as ``yaml_comments`` scans it. (String searches, not patterns: a fixed
    text is read twice a fix, and a pattern tried at every character cost ten times as much.)
    """
    i = text.find("#")
    if i < 0:
        return []
    out: list[str] = []
    rest: list[str] = []
    pos = 0
    while i >= 0:
        if i and text[i - 1] not in _BLANKS:
            i = text.find("#", i + 1)  # inside a token, or a plain scalar's own
            continue
        nl = text.find("\n", i)
        stop = len(text) if nl < 0 else nl
        out.append(text[i:stop].rstrip("\r"))
        rest.append(text[pos:i])
        pos = stop
        i = text.find("#", stop)  # a "#" inside the comment just read is part of it
    rest.append(text[pos:])
    if _may_hold_hash("".join(rest)) or _odd_break(text):
        return yaml_comments(text)
    return out


_PLAIN = frozenset({str, int, bool, type(None)})


def _diff_paths(a: Any, b: Any, path: tuple = ()) -> list[tuple]:
    if type(a) is not type(b):
        return [path]
    if isinstance(a, dict):
        out = []
        for k, x in a.items():
            if k not in b:
                out.append(path + (k,))
                continue
            y = b[k]
            if type(x) in _PLAIN and type(x) is type(y):  # a str, int, bool or None: compared here
                if x != y:
                    out.append(path + (k,))
            else:
                out.extend(_diff_paths(x, y, path + (k,)))
        out.extend(path + (k,) for k in b if k not in a)
        return out
    if isinstance(a, list):
        if len(a) != len(b):
            return [path]
        out = []
        for i, (x, y) in enumerate(zip(a, b)):
            out.extend(_diff_paths(x, y, path + (i,)))
        return out
    if isinstance(a, float) and a != a and b != b:  # .nan is unchanged though nan != nan
        return []
    return [] if a == b else [path]


def _outside_lines_identical(old: str, new: str, edits: list[_TextEdit]) -> str | None:
    """None when every line the edits do not touch is byte-identical in ``new``; else why not.

    Linear in the text: each stretch of untouched lines of ``old`` must sit in ``new`` at its
    offset shifted by the length change of the edits before it (compared as one slice, line by
    line only to name the first line that changed), and ``new`` must be exactly as long as the
    edits make it.
    """
    ordered = sorted(edits, key=lambda e: (e.start, e.end))
    if len(new) != len(old) + sum(len(e.text) - (e.end - e.start) for e in ordered):
        return "the fixed text is not as long as its edits make it"
    # lines end at "\n" only (str.splitlines also breaks at \x85, \u2028, \x0c..., which would
    # shift every line number after one inside a quoted value)
    touched: list[tuple[int, int]] = []  # (start, end) offsets of the lines each edit touches
    for e in ordered:
        first = old.rfind("\n", 0, e.start) + 1  # the start of the line the edit begins in
        if e.start == e.end and first:  # an insertion at a line start sits after the line before
            first = old.rfind("\n", 0, first - 1) + 1
        nl = old.find("\n", max(e.start, e.end - 1))
        touched.append((first, len(old) if nl < 0 else nl + 1))
    shifts = [0]  # cumulative length change after each edit, in start order
    for e in ordered:
        shifts.append(shifts[-1] + len(e.text) - (e.end - e.start))
    begins = [e.start for e in ordered]
    pos = 0
    touched.sort()
    touched.append((len(old), len(old)))
    for t_start, t_end in touched:
        if pos < t_start:  # untouched lines from pos up to the next touched line
            shift = shifts[bisect.bisect_right(begins, pos)] if begins else 0
            if new[pos + shift:t_start + shift] != old[pos:t_start]:
                line = pos
                while line < t_start:
                    stop = old.find("\n", line, t_start)
                    stop = t_start if stop < 0 else stop + 1
                    if new[line + shift:stop + shift] != old[line:stop]:
                        return f"line {old.count(chr(10), 0, line) + 1} changed but no edit touches it"
                    line = stop
        pos = max(pos, t_end)
    return None


def _finding_key(f: Finding) -> tuple:
    return (f.rule, f.document, tuple(f.path), f.data.get("variant"), f.data.get("reason"))


class _Remains(ProofFailed):
    """A fixed finding is still there after the fixes of its file: PLAN's."""

    def __init__(self, reason: str, plan: Any):
        super().__init__(reason, [plan.rule])
        self.plan = plan


class _Shared(Exception):
    """A training-changing edit reaches other settings through an alias or a merge key (<<)."""

    def __init__(self, plans: list, where: str):
        super().__init__(where)
        self.plans = plans
        self.where = where


def _prove_text(old_text: str, new_text: str, name: str, fmt: str, old_docs: list[Document],
                plans: list[_Planned], edits: list[_TextEdit]) -> tuple[list[Document], list[str]]:
    """Raise ProofFailed unless the new text is exactly what the plans intend (without linting).

    Returns the new documents and notes (values that follow an alias of an edited value).
    """
    rules = [p.rule for p in plans]
    notes: list[str] = []
    try:
        new_docs = loadmod.load_text(new_text, name, fmt)
    except LoadError as exc:
        raise ProofFailed(f"the fixed text does not parse: {exc.reason} at {exc.line}:{exc.column}",
                          rules) from None
    if len(new_docs) != len(old_docs):
        raise ProofFailed(f"{len(old_docs)} documents became {len(new_docs)}", rules)
    by_doc: dict[int, list[_Planned]] = {}
    for p in plans:
        by_doc.setdefault(p.document, []).append(p)
    for old_doc, new_doc in zip(old_docs, new_docs):
        mine = by_doc.get(old_doc.index, [])
        if not mine:
            if old_doc.data != new_doc.data and _diff_paths(old_doc.data, new_doc.data):
                raise ProofFailed(f"document {old_doc.index + 1} changed but no fix meant to change it",
                                  rules)
            continue
        intended: dict[tuple, tuple[Any, _Planned]] = {}
        for p in mine:
            for e in p.edits:
                intended[tuple(e.path)] = (e.new, p)
        for path, (value, plan) in intended.items():
            got = new_doc.get(path, _MISSING)
            if _diff_paths(value, got):
                raise ProofFailed(f"{dotted(path)} reads back as {got!r}, not {value!r}", [plan.rule])
        shared: list[_Planned] = []
        for path in _diff_paths(old_doc.data, new_doc.data):
            if any(path[:len(ip)] == ip for ip in intended):
                continue
            # a value with no text of its own (an alias, or merged with <<) that follows an edit
            copy = next((ip for ip in intended if _follows(old_doc, new_doc, path, ip,
                                                           intended[ip][0])), None)
            if copy is None:
                raise ProofFailed(f"{dotted(path) or 'the document'} changed but no fix meant to change it",
                                  rules)
            plan = intended[copy][1]
            if plan.tier == CHANGES_TRAINING:
                if plan not in shared:
                    shared.append(plan)
                continue
            notes.append(f"{dotted(path)} follows {dotted(copy)} (a YAML alias or merge), "
                         "so it changed too")
        if shared:
            raise _Shared(shared, "the value is shared through a YAML anchor or merge key (<<) "
                                  "with another section; change it where the anchor is written")
    if fmt == "yaml":  # both texts parse as YAML here (the old one was linted)
        if _parsed_comments(old_text) != _parsed_comments(new_text):
            raise ProofFailed("the comments are not the same, in the same order", rules)
    why = _outside_lines_identical(old_text, new_text, edits)
    if why:
        raise ProofFailed(why, rules)
    return new_docs, notes


def _finding_keys(report) -> dict[tuple, Finding]:
    return {_finding_key(f): f for f in report.findings}


def _lint_after(new_text: str, name: str, options: Options, fmt: str, linked: dict, rules,
                new_docs: list[Document] | None = None):
    """The re-lint of the fixed text. ``new_docs``: that text as the proof already parsed it
    (``load_text(new_text, name, fmt)``), linted as ``engine.lint_text`` would lint the text."""
    with links.linked_texts(linked):
        if new_docs is None:
            after = engine.lint_text(new_text, name, options, fmt)
        else:
            after = _lint_parsed(new_docs, new_text, name, options)
    if after.problem is not None or after.internal:
        raise ProofFailed("the fixed text does not lint cleanly: "
                          + (after.problem.reason if after.problem else after.internal[0].error), rules)
    return after


def _lint_parsed(docs: list[Document], text: str, name: str, options: Options):
    """``engine.lint_text`` of TEXT whose documents DOCS are already loaded (its crash boundary
    included): the proof parses the fixed text once, for its own checks and for the re-lint."""
    try:
        return engine.lint_documents(docs, name, options, None, text)
    except Exception as exc:  # a bug in cfgcheck, as lint_text reports it
        if options.debug:
            raise
        return FileReport(file=name, internal=[engine.internal_error(name, None, exc)])


def _prove(old_text: str, new_text: str, name: str, fmt: str, old_docs: list[Document],
           plans: list[_Planned], edits: list[_TextEdit], before, options: Options,
           linked: dict | None = None) -> tuple[list[str], dict[tuple, Finding], Any, list[Document]]:
    """The whole proof: the text (see _prove_text), then a re-lint. Returns notes, the
    findings the fixed text has that the old one had not (any severity): the caller decides,
    per finding, which fix brought it; the re-lint's report, and the fixed text's documents."""
    rules = [p.rule for p in plans]
    new_docs, notes = _prove_text(old_text, new_text, name, fmt, old_docs, plans, edits)
    after = _lint_after(new_text, name, options, fmt, linked or {}, rules, new_docs)
    after_keys = _finding_keys(after)
    for p in plans:
        if p.finding is not None and _finding_key(p.finding) in after_keys:
            raise _Remains(f"the finding at {p.key or 'the top level'} is still there after the fix", p)
    before_keys = _finding_keys(before)
    new = {}
    for k, f in after_keys.items():
        if k in before_keys:
            continue
        if f.data.get("judged") is False:  # a "not checked" note flags no value
            continue
        new[k] = f  # any severity, info included: no fix may write a value a rule flags
    return notes, new, after, new_docs


def _follows(old_doc: Document, new_doc: Document, path: tuple, edited: tuple, value: Any) -> bool:
    """``path`` holds no text of its own (alias or merge) and changed exactly as ``edited`` did."""
    if _diff_paths(new_doc.get(path, _MISSING), value):
        return False
    if _diff_paths(old_doc.get(path, _MISSING), old_doc.get(edited, _MISSING)):
        return False
    own, source = old_doc.entries.get(path), old_doc.entries.get(edited)
    return own is None or (source is not None and own.value == source.value)


def _blame(text: str, name: str, fmt: str, options: Options, accepted: list[_Planned],
           edits: list[_TextEdit], new: dict[tuple, Finding],
           linked: dict) -> dict[int, tuple[list[Finding], str]]:
    """Which fix brought each new finding: id(plan) -> (findings, how it was told).

    A document's findings depend on that document (and its linked files) only, so a finding of
    document d is blamed on d's fixes: the only one, or the one that brings it when applied
    alone. The "alone" tries run for every document at once (try k applies the k-th candidate of
    every document), so the cost is one lint per candidate of the busiest document, not per fix.
    """
    out: dict[int, tuple[list[Finding], str]] = {}

    def blame(plan, f, how):
        out.setdefault(id(plan), ([], how))[0].append(f)

    per_doc: dict[int, list[_Planned]] = {}
    for p in accepted:
        if p.edits:
            per_doc.setdefault(p.document, []).append(p)
    open_: dict[int, list[Finding]] = {}
    for f in new.values():
        cands = per_doc.get(f.document, [])
        if len(cands) == 1:
            blame(cands[0], f, "alone")
        elif cands:
            open_.setdefault(f.document, []).append(f)
    if not open_:
        return out
    rounds = max(len(per_doc[d]) for d in open_)
    found: set[int] = set()
    for k in range(rounds):
        trial = [per_doc[d][k] for d in open_ if k < len(per_doc[d])]
        ids = {id(p) for p in trial}
        mine = [e for e in edits if e.plan in ids]
        try:
            after = _lint_after(_apply(text, mine), name, options, fmt, linked, ())
        except ProofFailed:
            continue
        keys = _finding_keys(after)
        for p in trial:
            for f in open_[p.document]:
                if _finding_key(f) in keys:
                    blame(p, f, "alone")
                    found.add(id(f))
    for d, fs in open_.items():
        for f in fs:
            if id(f) not in found:  # only the fixes together bring it: all of them go
                for p in per_doc[d]:
                    blame(p, f, "together")
    return out


def _failed(result: FileFix, exc: ProofFailed, text: str, new_text: str, accepted, edits, docs,
            name: str, fmt: str, check: str = "proof") -> FileFix:
    rules = exc.rules or tuple(p.rule for p in accepted)
    if len({p.rule for p in accepted}) > 1:
        rules = _culprits(text, name, fmt, docs, accepted, edits) or rules
    result.error = InternalError(
        file=name, rule=", ".join(dict.fromkeys(rules)),
        error=f"the fix did not pass the safety proof ({exc.reason}); nothing saved")
    result.evidence = {"file": name, "check": check, "reason": exc.reason,
                       "rules": list(dict.fromkeys(rules)), "before": text, "after": new_text}
    result.applied = []
    return result


def _culprits(text, name, fmt, docs, accepted, edits) -> tuple[str, ...]:
    """Prove each fix's text alone to name the one(s) that fail (only after a failed proof)."""
    bad = []
    for plan in accepted:
        mine = [e for e in edits if e.plan == id(plan)]
        if not mine:
            continue
        try:
            _prove_text(text, _apply(text, mine), name, fmt, docs, [plan], mine)
        except (ProofFailed, _Shared):
            bad.append(plan.rule)
    return tuple(dict.fromkeys(bad))


def _unstable(new_text: str, refix: Callable[[str], FileFix]) -> str | None:
    """Why fixing the fixed text again would change it, or None: a formatter's safe mode.

    ``refix`` is the whole fixer without this pass (it reuses the proof's re-lint of ``new_text``).
    """
    again = refix(new_text)
    if again.error is None and again.new_text == new_text:
        return None
    return again.error.error if again.error is not None else \
        "fixing the fixed text changes it again: " + "; ".join(a.summary for a in again.applied)


def _save_evidence(result: FileFix) -> None:
    """A failed proof is a bug in cfgcheck: keep what it saw for the bug report."""
    ev = result.evidence
    if ev is None or result.evidence_file is not None:
        return
    body = (f"cfgcheck fix: a rewrite failed its safety proof; nothing was written.\n"
            f"file: {ev['file']}\ncheck: {ev['check']}\nreason: {ev['reason']}\n"
            f"rules: {', '.join(ev['rules'])}\n\n"
            f"===== before =====\n{ev['before']}\n===== after (not written) =====\n{ev['after']}\n")
    try:
        import tempfile  # only for a failed proof's evidence

        fd, where = tempfile.mkstemp(prefix="cfgcheck-proof-", suffix=".txt")
        with os.fdopen(fd, "w", encoding="utf-8", errors="backslashreplace") as fh:
            fh.write(body)
    except OSError:
        return
    result.evidence_file = where
    if result.error is not None:
        result.error = InternalError(file=result.error.file, rule=result.error.rule,
                                     error=f"{result.error.error}; evidence for a bug report "
                                           f"saved in {where}")
