"""Which fixes are made: the fixes of the tiers asked for (``keeps-meaning`` always,
``changes-training`` only when asked), the batch split ``--halve-batch`` asks for, and, fix by
fix, whether its edits can be taken (``_take``): conflicting or unplaceable ones are left out with
a note."""

from __future__ import annotations

import bisect
import re
from typing import Any

from ..catalogue import load_catalogue
from ..findings import Edit
from ..load import Document, dotted
from .edits import _MISSING, _DocIndex, _TextEdit, _edits_for, _overlaps
from .proof import _diff_paths
from .results import BATCH_SPLIT, CHANGES_TRAINING, KEEPS_MEANING, Applied, _Planned
from .values import _Unplaceable


def _halving(view, document: int, times: int = 1) -> tuple[_Planned | None, str | None]:
    """Halve the per-device batch ``times`` times and multiply accumulation by as much: the
    effective batch stays the same."""
    pd, ga = view.get("batch.per_device"), view.get("batch.accumulation")
    factor = 2 ** times
    if pd is None:
        return None, "no per-device batch size is set"
    if pd.auto or not isinstance(pd.value, int) or isinstance(pd.value, bool):
        return None, f"{pd.key} is not a whole number ({pd.written!r})"
    if pd.value < factor or pd.value % factor:
        what = "halving it" if times == 1 else f"halving it {times} times (dividing by {factor})"
        return None, (f"{pd.key} {pd.value} is not divisible by {factor}: {what} would change "
                      "the effective batch")
    new_pd = pd.value // factor
    edits = [Edit(path=pd.path, old=pd.written, new=new_pd)]
    if ga is None:
        edits.append(Edit(path=pd.path[:-1] + ("gradient_accumulation_steps",), old=None,
                          new=factor, insert=True, after=pd.path))
        ga_text = f"gradient_accumulation_steps: added as {factor}"
    elif ga.auto or not isinstance(ga.value, int) or isinstance(ga.value, bool):
        return None, f"{ga.key} is {ga.written!r}, not a whole number: cannot double it"
    else:
        edits.append(Edit(path=ga.path, old=ga.written, new=ga.value * factor))
        ga_text = f"{ga.key}: {ga.value} -> {ga.value * factor}"
    summary = (f"{pd.key}: {pd.value} -> {new_pd}, {ga_text} "
               f"(per-device × accumulation stays {pd.value * (ga.value if ga else 1)})")
    return _Planned(BATCH_SPLIT, pd.key, summary, CHANGES_TRAINING, tuple(edits), document, None), None


def _declares_fix(rule_id: str) -> bool:
    rule = load_catalogue().get(rule_id)
    return rule is not None and rule.fix is not None


def _plan(report, *, training: bool,
          halve_batch: int) -> tuple[list[_Planned], list[Applied], list[str]]:
    planned: list[_Planned] = []
    withheld: list[Applied] = []
    for f in report.findings:
        if f.fix is None or not _declares_fix(f.rule):
            continue  # a rule's fixes are taken when its catalogue record says it makes them
        item = _Planned(f.rule, f.key, f.fix.summary, f.fix.tier, tuple(f.fix.edits), f.document, f)
        if f.fix.tier == KEEPS_MEANING or (f.fix.tier == CHANGES_TRAINING and training):
            planned.append(item)
        else:
            withheld.append(Applied(f.rule, f.key, f.fix.summary, f.fix.tier,
                                    tuple(dotted(e.path) for e in f.fix.edits)))
    notes = []
    if halve_batch:
        for view in report.views:
            if view.skipped:
                continue
            item, why = _halving(view, view.doc.index, int(halve_batch))
            if item is not None:
                planned.append(item)
            else:
                notes.append(why)
    # value changes first: a keeps-meaning rewrite of the same value is then already covered
    planned.sort(key=lambda p: p.tier != CHANGES_TRAINING)
    return planned, withheld, notes


def _tagged(text: str, doc: Document, plan: _Planned) -> bool:
    for e in plan.edits:
        entry = doc.entries.get(tuple(e.path))
        if entry is not None and entry.kind == "scalar" and re.match(
                r"(?:&[^\s]*\s+)*!", text[entry.value.start:entry.value.end]):
            return True
    return False


def _shared(doc: Document, plan: _Planned) -> bool:
    """An edited value that other paths reach too (a YAML alias of the same node)."""
    for e in plan.edits:
        entry = doc.entries.get(tuple(e.path))
        if entry is None:
            continue
        if any(p != tuple(e.path) and other.value == entry.value for p, other in doc.entries.items()):
            return True
    return False


def _take(planned: list[_Planned], docs: list[Document], text: str, fmt: str,
          notes: list[str]) -> tuple[list[_Planned], list[_TextEdit], dict[int, Applied]]:
    """The span edits of each planned fix, in plan order.

    A fix is left out, with a note in ``notes``, when another fix already changes one of its
    paths, when it edits a key written twice, a value that no longer holds what the rule saw, a
    tagged value (keeps-meaning) or one shared through an anchor (changes-training), when it
    cannot be placed as a span edit, or when its text would overlap another fix's. A
    keeps-meaning fix whose every path another fix already sets is taken as covered (no edits).
    Returns the fixes taken, their edits (each marked with ``id`` of its fix) and what each
    taken fix reports, by ``id``.
    """
    indexes = {d.index: _DocIndex(d) for d in docs}
    by_index = {d.index: d for d in docs}
    accepted: list[_Planned] = []
    edits: list[_TextEdit] = []
    spans: set[tuple] = set()  # (start, end, text) of every edit made, for the alias dedup
    starts: list[tuple[int, int]] = []  # sorted (start, end) of the edits made, for overlaps
    taken: dict[tuple, tuple[Any, str]] = {}  # (document, path) -> (new value, rule)
    applied: dict[int, Applied] = {}
    for plan in planned:
        doc = by_index[plan.document]
        keys = [(plan.document, tuple(e.path)) for e in plan.edits]
        clash = [k for k in keys if k in taken]
        if clash:
            if plan.tier == KEEPS_MEANING and all(k in taken for k in keys):
                owner = taken[clash[0]][1]
                covered = _Planned(plan.rule, plan.key, plan.summary, plan.tier, (),
                                   plan.document, plan.finding)
                accepted.append(covered)
                applied[id(covered)] = Applied(plan.rule, plan.key,
                                               f"{plan.summary} (covered by the {owner} fix)",
                                               plan.tier, ())
                continue
            notes.append(f"{plan.rule} at {plan.key}: not applied, another fix already "
                         f"changes {dotted(clash[0][1])}")
            continue
        twice = {tuple(d.path) for d in doc.duplicates}
        dup = next((e for e in plan.edits if any(tuple(e.path)[:len(t)] == t for t in twice)), None)
        if dup is not None:
            notes.append(f"{plan.rule} at {plan.key}: not applied, {dotted(dup.path)} is "
                         "written twice (duplicate-key); keep one, then fix again")
            continue
        stale = [e for e in plan.edits if not e.insert and
                 _diff_paths(doc.get(tuple(e.path), _MISSING), e.old)]
        if stale:
            notes.append(f"{plan.rule} at {plan.key}: not applied, {dotted(stale[0].path)} "
                         "no longer holds the value the rule saw")
            continue
        if plan.tier == KEEPS_MEANING and _tagged(text, doc, plan):
            notes.append(f"{plan.rule} at {plan.key}: not applied, the value carries an "
                         "explicit tag (!!...); its author chose the type")
            continue
        if plan.tier == CHANGES_TRAINING and _shared(doc, plan):
            notes.append(f"{plan.rule} at {plan.key}: not applied, the value is shared "
                         "through a YAML anchor; change it where the anchor is written")
            continue
        try:
            mine = _edits_for(text, doc, indexes[plan.document], plan, fmt)
        except _Unplaceable as exc:
            notes.append(f"{plan.rule} at {plan.key}: not applied, {exc}")
            continue
        # the same rewrite reached twice (an alias and its anchor) is made once
        mine = [m for m in mine if (m.start, m.end, m.text) not in spans]
        if any(_overlaps(starts, m) for m in mine):
            notes.append(f"{plan.rule} at {plan.key}: not applied, it would rewrite text "
                         "another fix already rewrites")
            continue
        mine = [_TextEdit(m.start, m.end, m.text, m.rule, id(plan)) for m in mine]
        accepted.append(plan)
        edits.extend(mine)
        for m in mine:
            spans.add((m.start, m.end, m.text))
            bisect.insort(starts, (m.start, m.end))
        for k, e in zip(keys, plan.edits):
            taken[k] = (e.new, plan.rule)
        applied[id(plan)] = Applied(plan.rule, plan.key, plan.summary, plan.tier,
                                    tuple(dotted(e.path) for e in plan.edits))
    return accepted, edits, applied
