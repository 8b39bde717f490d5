"""The commands of the command line and their parameters, declared as plain data.

A command is a function whose parameters default to ``Option(...)`` / ``Argument(...)``: the
default value, the spellings and typer's own settings (``help``, ``min``, ``metavar``, ...), kept
as written. ``Program`` records the commands in order. Nothing here imports typer: typer's app
is made from these declarations when it is needed (``typer_app``: every setting is passed to
typer as declared), and ``fastcli`` reads the same declarations for the plain ``lint`` command
lines, so the two readers of a command line cannot drift apart.

Part of the command-line layer: only ``cli`` declares commands, ``fastcli`` reads them.
"""

from __future__ import annotations

from typing import Any, Callable

from ._records import guarded_repr


class Param:
    """One option or argument of a command: what typer's ``Option`` / ``Argument`` is given."""

    __slots__ = ("default", "param_decls", "argument", "settings")

    def __init__(self, default: Any, param_decls: tuple[str, ...], argument: bool, settings: dict) -> None:
        self.default = default
        self.param_decls = param_decls
        self.argument = argument
        self.settings = settings

    @guarded_repr
    def __repr__(self) -> str:
        kind = "Argument" if self.argument else "Option"
        return f"{kind}({self.default!r}, {', '.join(map(repr, self.param_decls))})"


def Option(default: Any, *param_decls: str, **settings: Any) -> Any:  # noqa: N802 (as typer spells it)
    """An option: its default, its spellings (``"--gpu"``, ``"--frame/--no-frame"``, ``"-q"``) and
    typer's settings for it."""
    return Param(default, param_decls, False, settings)


def Argument(default: Any, **settings: Any) -> Any:  # noqa: N802
    """The positional argument (``...``: required)."""
    return Param(default, (), True, settings)


class Program:
    """A program's settings and its commands in order, recorded by the decorators."""

    def __init__(self, **settings: Any) -> None:
        self.settings = settings
        self.entries: list[tuple[str, str | None, Callable]] = []  # (kind, name, function)

    def command(self, name: str | None = None) -> Callable[[Callable], Callable]:
        def record(fn: Callable) -> Callable:
            self.entries.append(("command", name, fn))
            return fn

        return record

    def callback(self) -> Callable[[Callable], Callable]:
        def record(fn: Callable) -> Callable:
            self.entries.append(("callback", None, fn))
            return fn

        return record


def declared(fn: Callable) -> Callable:
    """The function that carries the declarations (under any ``functools.wraps`` wrappers)."""
    while hasattr(fn, "__wrapped__"):
        fn = fn.__wrapped__
    return fn


def parameters(fn: Callable) -> list[tuple[str, Any]]:
    """(name, default) of each parameter of ``fn`` in order (default ``...`` when it has none),
    read from the function object itself (no ``inspect``: it costs more than a small lint)."""
    fn = declared(fn)
    code = fn.__code__
    names = code.co_varnames[:code.co_argcount + code.co_kwonlyargcount]
    positional = names[:code.co_argcount]
    defaults = fn.__defaults__ or ()
    kwdefaults = fn.__kwdefaults__ or {}
    out = []
    for i, name in enumerate(positional):
        j = i - (len(positional) - len(defaults))
        out.append((name, defaults[j] if j >= 0 else ...))
    for name in names[code.co_argcount:]:
        out.append((name, kwdefaults.get(name, ...)))
    return out


def _typer_callable(fn: Callable) -> Callable:
    """``fn`` as typer reads a command: the same function, its parameters defaulting to typer's
    ``Option`` / ``Argument`` made from the declarations."""
    import functools
    import inspect

    import typer

    sig = inspect.signature(fn)  # follows functools.wraps to the declaring function
    params = []
    for p in sig.parameters.values():
        d = p.default
        if isinstance(d, Param):
            made = (typer.Argument(d.default, **d.settings) if d.argument
                    else typer.Option(d.default, *d.param_decls, **d.settings))
            p = p.replace(default=made)
        params.append(p)

    @functools.wraps(fn)
    def command(*args: Any, **kwargs: Any) -> Any:
        return fn(*args, **kwargs)

    command.__signature__ = sig.replace(parameters=params)  # type: ignore[attr-defined]
    return command


def typer_app(program: Program) -> Any:
    """typer's app for ``program``: its settings, its callback and commands, in order."""
    import typer

    app = typer.Typer(**program.settings)
    for kind, name, fn in program.entries:
        if kind == "callback":
            app.callback()(_typer_callable(fn))
        else:
            app.command(name)(_typer_callable(fn))
    return app
