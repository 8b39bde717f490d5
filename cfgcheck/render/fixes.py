"""The text ``cfgcheck fix`` prints: per file and rule, what was (or would be) fixed, left as is
or refused, the flags that would let more rules judge, and one closing line."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..findings import printable as P  # a key or file name never starts a line of its own

if TYPE_CHECKING:
    from ..fix.results import FixReport


TRAINING_OPTION = "--allow-training-changes"
_FLAG_ARG = {"--gpu": "--gpu NAME (see: cfgcheck gpus)", "--gpus": "--gpus N", "--rows": "--rows N"}


def summary_text(report: FixReport, *, dry: bool) -> str:
    """Per file and rule: what was (or, when ``dry``, would be) fixed, withheld or refused."""
    verb = "would fix" if dry else "fixed"
    lines: list[str] = []
    fixes = withheld = 0
    for f in report.files:
        if f.problem is not None:
            p = f.problem
            lines.append(f"{P(p.file)}:{p.line}:{p.column}: input error: {P(p.reason)} (not fixing)")
            continue
        if f.error is not None:
            lines.append(f"{P(f.file)}: internal error in the fix for {f.error.rule}: {P(f.error.error)}"
                         " (a bug in cfgcheck)")
            continue
        body = []
        if f.changed:
            for a in f.applied:
                body.append(f"    {verb}: {P(a.summary)} [{a.rule}]")
            fixes += len(f.applied)
        for a in f.withheld:
            body.append(f"    left as is (changes training, {TRAINING_OPTION}): {P(a.summary)} [{a.rule}]")
        withheld += len(f.withheld)
        for n in f.notes:
            body.append(f"    note: {P(n)}")
        if f.refused:
            body.append(f"    not written: {P(f.refused)}")
        if not body:
            continue
        if f.changed:
            head = f"{P(f.file)}: {len(f.applied)} fix{'es' if len(f.applied) != 1 else ''}"
        elif f.refused:
            head = f"{P(f.file)}: {len(f.applied)} fix{'es' if len(f.applied) != 1 else ''} not written"
        elif f.withheld:
            head = (f"{P(f.file)}: no fix applied; {len(f.withheld)} left that change training "
                    f"({TRAINING_OPTION})")
        elif any(a.rule for a in f.applied) or f.notes:
            head = f"{P(f.file)}: no fix applied"
        else:
            head = f"{P(f.file)}: nothing to fix"
        if f.written:
            head += ", written"
        lines.append(head)
        lines.extend(body)
    needs: dict[tuple[str, str], int] = {}
    for f in report.files:
        for k in f.needs:
            needs[k] = needs.get(k, 0) + 1
    for (rule, flag), n in needs.items():
        lines.append(f"note: {rule} could not judge {n} file{'s' if n != 1 else ''} without "
                     f"{flag}, so it proposed no fix there; pass {_FLAG_ARG.get(flag, flag)}")
    changed = len(report.changed)
    tail = (f"cfgcheck fix: {len(report.files)} file{'s' if len(report.files) != 1 else ''} read; "
            f"{changed} {'would change' if dry else 'changed'} ({fixes} fix{'es' if fixes != 1 else ''})")
    if withheld:
        tail += f"; {withheld} left that change training (apply with {TRAINING_OPTION})"
    if report.problems:
        tail += f"; {len(report.problems)} unreadable"
    if report.errors:
        tail += f"; {len(report.errors)} refused by the safety proof"
    if report.refused:
        tail += f"; {len(report.refused)} not written"
    lines.append(tail)
    return "\n".join(lines) + "\n"
