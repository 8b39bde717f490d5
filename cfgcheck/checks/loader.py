"""Checks on how the file was written: duplicate keys, YAML-version-dependent scalars, value types."""

from __future__ import annotations

import functools
import re
from types import MappingProxyType

from ..findings import Edit, Fix
from ..load import dotted
from . import check
from .unknown_keys import repo_keys_of


@check("duplicate-key")
def duplicate_key(ctx) -> None:
    for dup in ctx.doc.duplicates:
        ctx.report(
            dup.path,
            on="key",
            key=dotted(dup.path),
            first_line=dup.first.line,
            second_line=dup.second.line,
            first_value=_short(dup.first_value),
            second_value=_short(dup.second_value),
        )


def _short(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


_EXP = re.compile(r"^([-+]?)([0-9][0-9_]*)(\.[0-9_]*)?([eE])([-+]?)([0-9]+)$")


def dotted_exponent(raw: str) -> str:
    """``1e-4`` -> ``1.0e-4``, ``1E4`` -> ``1.0E+4``: read as a float by YAML 1.1 and 1.2 alike.

    Only a dot and a sign are added: the author's digits and letter case stay, so what the
    summary says is what the fixer writes.
    """
    m = _EXP.match(raw)
    sign, whole, frac, letter, esign, digits = m.groups()
    frac = frac if frac and frac != "." else ".0"
    return f"{sign}{whole}{frac}{letter}{esign or '+'}{digits}"


# what the view's field types mean for the value's type
_FIELD_KIND = MappingProxyType({"int": "number", "number": "number", "bool": "bool", "str": "text", "names": "text"})


def _setting_type(ctx, path: tuple) -> str | None:
    """"number", "bool", "text", "mixed" or None (unknown): what the setting at ``path`` takes."""
    path = tuple(path)
    up = path[:-1] if path and isinstance(path[-1], int) else None  # the list holding it
    kinds = _kind_of_field()
    for f in ctx.view.fields.values():
        at = f.path if f.path.__class__ is tuple else tuple(f.path)
        if at == path or (up is not None and at == up):
            kind = kinds.get(f.name)
            if kind is not None:
                return kind
    table = ctx.view.layout.key_table if ctx.view.layout is not None else None
    return _setting_type_of()(table, path)


@functools.cache
def _kind_of_field() -> dict[str, str]:
    """View field -> what its type says the value takes (fields of a known kind only)."""
    from ..layouts import FIELD_TYPES

    return {name: kind for name, ftype in FIELD_TYPES.items() if (kind := _FIELD_KIND.get(ftype)) is not None}


@functools.cache
def _setting_type_of():
    from ..knowledge.setting_types import setting_type  # read on the first ambiguous value

    return setting_type


def _quoted(raw: str) -> str:
    return '"' + raw + '"'  # the raw texts concerned are digits, signs, dots, letters: no escapes


def _repository_reader(ctx) -> str:
    """How the scripts of the config's repository (and the scripts named as its readers) read
    numbers, when they show it (ast only)."""
    found = repo_keys_of(ctx)  # looked up once per view, whichever rules ask
    return found.number_reader if found is not None else ""


@check("yaml-version-dependent-value")
def yaml_version_dependent(ctx) -> None:
    if ctx.doc.format != "yaml":
        return
    for amb in ctx.doc.ambiguities:
        key = dotted(amb.path)
        if amb.kind == "exponent-without-dot":
            kind = _setting_type(ctx, amb.path)
            new = dotted_exponent(amb.raw)
            if kind == "text":
                q = _quoted(amb.raw)
                fix = Fix(tier="keeps-meaning", summary=f"{key}: {amb.raw} -> {q}",
                          edits=(Edit(path=amb.path, old=amb.yaml11, new=amb.raw),))
                ctx.report(amb.path, "exponent-in-text-setting", fix=fix, key=key, raw=amb.raw,
                           number=amb.yaml12, replacement=q)
                continue
            layout = ctx.view.layout
            reader = layout.number_reader if layout is not None and layout.coerces_numbers \
                else ctx.doc.number_reader or _repository_reader(ctx)
            if kind != "number":
                # a loader that reads every value (OmegaConf takes the text as a float; a value
                # turned into command-line text is converted by the script's own parser) makes
                # it harmless whatever the setting's type
                whole = ctx.doc.number_reader or _repository_reader(ctx) or (
                    layout.number_reader if layout is not None and layout.coerces_numbers
                    and layout.loader_reads_numbers else "")
                if layout is not None and whole:
                    ctx.report(amb.path, "exponent-read-as-number", key=key, raw=amb.raw,
                               number=amb.yaml12, replacement=new, layout=layout.name, reader=whole)
                else:
                    ctx.report(amb.path, "exponent-type-unknown", key=key, raw=amb.raw,
                               number=amb.yaml12, number_text=new)
                continue
            fix = Fix(tier="keeps-meaning", summary=f"{key}: {amb.raw} -> {new}",
                      edits=(Edit(path=amb.path, old=amb.yaml11, new=float(amb.yaml12)),))
            if layout is not None and reader:
                # the layout's own loader or settings model (or the loader that composes the
                # file) reads the text as a number
                ctx.report(amb.path, "exponent-read-as-number", fix=fix, key=key, raw=amb.raw,
                           number=amb.yaml12, replacement=new, layout=layout.name, reader=reader)
                continue
            ctx.report(amb.path, "exponent-without-dot", fix=fix, key=key, raw=amb.raw,
                       number=amb.yaml12, replacement=new)
        elif amb.kind == "word-boolean":
            kind = _setting_type(ctx, amb.path)
            new = "true" if amb.yaml11 else "false"
            if kind == "bool":
                fix = Fix(tier="keeps-meaning", summary=f"{key}: {amb.raw} -> {new}",
                          edits=(Edit(path=amb.path, old=amb.yaml11, new=amb.yaml11),))
                ctx.report(amb.path, "word-boolean", fix=fix, key=key, raw=amb.raw,
                           replacement=new)
            elif kind == "text":
                # a text setting: PyYAML readers get the boolean, YAML 1.2 readers the text; no
                # rewrite keeps both readings, so no fix: the hint says to quote it
                ctx.report(amb.path, "word-boolean-text", key=key, raw=amb.raw, boolean=new)
            else:  # a setting cfgcheck does not type (or of mixed type): say both, change nothing
                ctx.report(amb.path, "word-boolean-unknown", key=key, raw=amb.raw,
                           replacement=new)
        elif amb.kind == "leading-zero-octal":
            ctx.report(amb.path, "leading-zero-octal", key=key, raw=amb.raw,
                       yaml11=amb.yaml11, yaml12=amb.yaml12)
        else:
            ctx.report(amb.path, "base-60", key=key, raw=amb.raw, yaml11=amb.yaml11)


_EXPECTED = MappingProxyType({
    "int": "a whole number",
    "number": "a number",
    "bool": "true or false",
    "str": "a single text value",
    "names": "a module name or a list of names",
})
_EXAMPLE = MappingProxyType({
    "optim.lr": "2.0e-5",
    "adapter.rank": "16",
    "adapter.alpha": "32",
    "batch.per_device": "4",
    "batch.accumulation": "8",
})


def _kind(value) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float)):
        return "a number"
    if isinstance(value, str):
        return "text"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a mapping"
    return type(value).__name__


@check("value-type-mismatch")
def value_type_mismatch(ctx) -> None:
    for problem in ctx.view.type_problems:
        f = problem.field
        expected = _EXPECTED.get(problem.expected, problem.expected)
        example = _EXAMPLE.get(f.name)
        ctx.report(
            f,
            key=f.key,
            written=_short(f.written),
            got=_kind(f.written),
            expected=expected,
            example=f" (for example {f.leaf}: {example})" if example else "",
        )
