"""Types are checked by value-type-mismatch; this checks ranges and accepted words from the schema."""

from __future__ import annotations

from ..schema import violations
from . import check

_WORDS = {"below": "below the minimum", "not-above": "not above", "at-or-above": "at or above the limit"}


@check("value-outside-schema")
def value_outside_schema(ctx) -> None:
    view = ctx.view
    layout = view.layout  # its word lists decide which accepted-word checks apply
    ambiguous = {a.path for a in ctx.doc.ambiguities}  # yaml-version-dependent-value says it
    for name, f in view.fields.items():
        if f.value is None or f.auto or f.path in ambiguous:
            continue
        for v in violations(name, f.value, layout):
            if v.problem == "not-one-of":
                import difflib

                words = [str(w) for w in v.bound]
                near = difflib.get_close_matches(str(f.value), words, n=1, cutoff=0.6)
                ctx.report(f, "not-one-of", key=f.key, value=f.value, count=len(words),
                           suggestion=f"did you mean {near[0]}? " if near else "",
                           choices=", ".join(words[:12]) + (", ..." if len(words) > 12 else ""),
                           source=v.source)
            else:
                ctx.report(f, "range", key=f.key, value=f.value, relation=_WORDS[v.problem],
                           bound=v.bound, source=v.source)
