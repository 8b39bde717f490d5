"""A direct path from argv to the ``lint``, ``derive`` and ``fix`` commands for the common
invocations.

Typer costs more to import and set up than the whole lint of a small file (and its parameter
coercion imports pydantic). For ``cfgcheck lint`` (``derive``, ``fix``) with options this module
understands, we read argv ourselves, from the same declarations typer's
command is made from (``cliparams``: names, spellings, defaults, ``min``/``max``, enum choices),
and call the same command function. Anything else (``--help``, another command, an option or a
value we do not read exactly as typer would, a setting or a parameter kind we do not know)
returns ``None`` and typer handles the whole command line, so the errors and help texts stay
typer's own. This module imports neither typer nor ``inspect``.

Part of the command-line layer: only ``cli.main`` calls it, and runs the command.
"""

from __future__ import annotations

import builtins
import enum
import os
from pathlib import Path
from typing import Any, Callable

from .cliparams import Param, declared, parameters

# settings of a declaration that change nothing about which values are accepted or what they
# mean; any other (a callback, an envvar, case_sensitive, ...) leaves the line to typer ("count",
# an int flag counted as click counts it, is read too: fix's --halve-batch)
_READ = frozenset({"help", "metavar", "min", "max", "autocompletion"})


class _Decline(Exception):
    """This command line is typer's to read."""


def _base(annotation: Any, names: dict[str, Any]) -> tuple[Any, bool]:
    """(type, is_list) for the annotations we read, as written: ``T``, ``Optional[T]``,
    ``List[T]``, ``Optional[List[T]]`` with T a plain name (evaluating them with typing would
    compile each one). Anything else is typer's to read."""
    if not isinstance(annotation, str):
        raise _Decline
    text, is_list = annotation.replace(" ", ""), False
    if text.startswith("Optional[") and text.endswith("]"):
        text = text[len("Optional["):-1]
    if (text.startswith("List[") or text.startswith("list[")) and text.endswith("]"):
        text, is_list = text[len("List["):-1], True
    if not text.isidentifier():
        raise _Decline
    kind = names[text] if text in names else getattr(builtins, text, None)
    if kind is None:
        raise _Decline
    return kind, is_list


def _spec(fn: Callable) -> tuple[dict[str, tuple[str, Any, Param, str]], tuple[str, Any, Param] | None]:
    """Option spellings -> (parameter, type, declaration, how: "value" | "list" | "flag" | "on" |
    "off"), and the positional argument (parameter, type, declaration)."""
    target = declared(fn)
    hints = target.__annotations__
    options: dict[str, tuple[str, Any, Param, str]] = {}
    argument = None
    for name, info in parameters(target):
        counted = info.settings.get("count") is True if isinstance(info, Param) else False
        if not isinstance(info, Param) or not set(info.settings) - ({"count"} if counted else set()) <= _READ:
            raise _Decline
        kind, is_list = _base(hints.get(name), target.__globals__)
        if counted and (kind is not int or is_list or info.argument or info.default != 0):
            raise _Decline
        if kind not in (bool, int, str, Path) and not (isinstance(kind, type) and issubclass(kind, enum.Enum)):
            raise _Decline
        if info.argument:
            if argument is not None or not is_list:
                raise _Decline
            argument = (name, kind, info)
            continue
        if not info.param_decls:
            raise _Decline  # spelled after the parameter's name: typer's rule, not ours
        for decl in info.param_decls:
            if "/" in decl:  # --x/--no-x
                on, off = (d.strip() for d in decl.split("/", 1))
                if kind is not bool or is_list or not on.startswith("-") or not off.startswith("-"):
                    raise _Decline
                options[on] = (name, kind, info, "on")
                options[off] = (name, kind, info, "off")
            elif not decl.startswith("-"):
                raise _Decline
            else:
                how = "count" if counted else "list" if is_list else ("flag" if kind is bool else "value")
                options[decl] = (name, kind, info, how)
    return options, argument


def _convert(kind: Any, info: Param, text: str) -> Any:
    if kind is int:
        if not text.lstrip("-").isdigit():
            raise _Decline
        value = int(text)
        low, high = info.settings.get("min"), info.settings.get("max")
        if (low is not None and value < low) or (high is not None and value > high):
            raise _Decline
        return value
    if kind is Path:
        return Path(text)
    if kind is str:
        return text
    try:  # an Enum of choices, matched exactly as typer does by default
        return kind(text)
    except ValueError:
        raise _Decline from None


def parse(argv: list[str], fn: Callable) -> dict[str, Any]:
    """Keyword arguments for ``fn`` from argv (without the command word); raises _Decline."""
    options, argument = _spec(fn)
    values: dict[str, Any] = {}
    positional: list[str] = []
    i = 0
    while i < len(argv):
        tok = argv[i]
        i += 1
        if tok == "--":
            positional.extend(argv[i:])
            break
        if tok.startswith("-") and tok != "-":
            name_part, eq, inline = tok.partition("=")
            if name_part not in options:
                raise _Decline
            name, kind, info, how = options[name_part]
            if how == "count":  # a counted flag (-v -v): how many times it is given
                if eq:
                    raise _Decline
                values[name] = values.get(name, 0) + 1
                continue
            if how != "list" and name in values:
                raise _Decline  # repeated options: let typer decide
            if how in ("flag", "on", "off"):
                if eq:
                    raise _Decline
                values[name] = how != "off"
                continue
            if not eq:
                if i >= len(argv):
                    raise _Decline
                inline = argv[i]
                i += 1
            value = _convert(kind, info, inline)
            if how == "list":
                values.setdefault(name, []).append(value)
            else:
                values[name] = value
        else:
            positional.append(tok)
    if argument is None:
        if positional:
            raise _Decline
    else:
        name, kind, info = argument
        if positional:
            values[name] = [_convert(kind, info, p) for p in positional]
        elif info.default is None:
            values[name] = None  # typer passes None for an optional list left out
        else:
            raise _Decline  # a required argument is missing: typer prints the usage error
    for decl, (name, kind, info, how) in options.items():
        if name not in values:
            default = info.default
            if default is ... or (default is not None and kind is not bool
                                  and not isinstance(default, (int, str, enum.Enum))):
                raise _Decline
            values[name] = default
    return values


def direct_arguments(argv: list[str], command: str, fn: Callable) -> dict[str, Any] | None:
    """Keyword arguments for ``fn`` when argv is ``command`` plus options read exactly as typer
    would read them; None when typer must read the command line."""
    if not argv or argv[0] != command:
        return None
    if any(k.startswith("_") and k.endswith("_COMPLETE") for k in os.environ):
        return None  # shell completion is typer's

    try:
        return parse(argv[1:], fn)
    except _Decline:
        return None
