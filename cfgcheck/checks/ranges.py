"""Types are checked by value-type-mismatch; this checks ranges and accepted words from the schema."""

from __future__ import annotations

from types import MappingProxyType


from ..findings import MAX_MAGNITUDE, number_text
from ..schema import applicable, value_violations
from . import check

_WORDS = MappingProxyType({"below": "below the minimum", "not-above": "not above", "at-or-above": "at or above the limit"})


# plain words that YAML 1.1 (PyYAML) reads as a boolean or null (yaml.org/type/bool.html, null.html)
_NOT_TEXT = frozenset({"y", "n", "yes", "no", "on", "off", "true", "false", "null", "~", ""})


def yaml_word(word) -> str:
    """An accepted word as it must be written: quoted when a bare one would not be text."""
    text = str(word)
    return f'"{text}"' if isinstance(word, str) and text.lower() in _NOT_TEXT else text


# (id of the constraints, type of the value, value) -> (the constraints, the violations: frozen
# records, only read): a cache, since the constraints are fixed tables and a corpus writes the
# same values again and again
_VIOLATIONS_CACHE: dict[tuple, tuple] = {}
_VIOLATIONS_ENTRIES = 8192  # emptied when full: a bound on the memory a run of varied values takes


def _violations(name: str, value, constraints: tuple) -> tuple:
    """``value_violations``, kept in the cache for the next time the value is met."""
    found = tuple(value_violations(name, value, constraints))
    try:
        key = (id(constraints), value.__class__, value)
        hash(key)
    except TypeError:  # an unhashable value (a list of names): worked out each time
        return found
    if len(_VIOLATIONS_CACHE) >= _VIOLATIONS_ENTRIES:
        _VIOLATIONS_CACHE.clear()
    _VIOLATIONS_CACHE[key] = (constraints, found)
    return found


@check("value-outside-schema")
def value_outside_schema(ctx) -> None:
    view = ctx.view
    layout = view.layout  # its word lists decide which accepted-word checks apply
    ambiguities = ctx.doc.ambiguities
    ambiguous = {a.path for a in ambiguities} if ambiguities else ()  # yaml-version-dependent-value says it
    for f in view.out_of_range:  # set aside by the view: no other rule uses these
        ctx.report(f, "too-large", key=f.key, value=number_text(f.written), limit=f"{MAX_MAGNITUDE:,}")
    bounded = applicable(layout)  # field -> the constraints that hold in this layout
    seen = _VIOLATIONS_CACHE
    fields = view.fields
    # only the settings the schema bounds have anything to violate: picked out (in the view's
    # order) by C code, as most of a view's fields have no bounds
    for name in filter(bounded.__contains__, fields):
        f = fields[name]
        constraints = bounded[name]
        value = f.value
        if value is None or f.auto or f.path in ambiguous:
            continue
        try:  # the verdict on the same value met before (the cache below), else worked out
            got = seen.get((id(constraints), value.__class__, value))
        except TypeError:  # an unhashable value (a list of names)
            got = None
        found = got[1] if got is not None and got[0] is constraints else _violations(name, value, constraints)
        for v in found:
            if v.problem == "not-one-of":
                import difflib

                words = [yaml_word(w) for w in v.bound]
                near = difflib.get_close_matches(str(f.value), [str(w) for w in v.bound], n=1, cutoff=0.6)
                near = [yaml_word(w) for w in near]
                ctx.report(f, "not-one-of", key=f.key, value=f.value, count=len(words),
                           suggestion=f"did you mean {near[0]}? " if near else "",
                           choices=", ".join(words[:12]) + (", ..." if len(words) > 12 else ""),
                           source=v.source)
            else:
                ctx.report(f, "range", key=f.key, value=f.value, relation=_WORDS[v.problem],
                           bound=v.bound, source=v.source)
