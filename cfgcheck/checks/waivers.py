"""Checks on the waiver comments themselves: stale, unexplained, misnamed or unreadable."""

from __future__ import annotations


from ..catalogue import load_catalogue
from ..waivers import covers
from . import check


@check("waiver-comment-problem")
def waiver_comment_problem(ctx) -> None:
    """Runs after the other rules (``stage: last``) and sees their findings in ``ctx.earlier``."""
    known = load_catalogue()
    for w in ctx.waivers:
        if w.problem:
            ctx.report(w, "malformed", problem=w.problem)
            continue
        label = ", ".join(w.rules)
        if not w.reason:
            ctx.report(w, "no-reason", rules=label)
        if w.target is None:
            ctx.report(w, "no-target", rules=label)
            continue
        paths = ctx.waiver_paths.get(w.target, [])
        for rule in w.rules:
            if rule not in known:
                import difflib  # only a waiver naming an unknown rule pays for it

                near = difflib.get_close_matches(rule, list(known), n=1, cutoff=0.6)
                ctx.report(w, "unknown-rule", rule=rule,
                           suggestion=f" (did you mean {near[0]}?)" if near else "")
                continue
            if rule not in ctx.active or rule == ctx.rule.id:
                continue  # a rule that did not run cannot be judged stale
            one = type(w)(**{**w.__dict__, "rules": (rule,)})
            if not any(covers(one, f, paths) for f in ctx.earlier):
                ctx.report(w, rule=rule)
