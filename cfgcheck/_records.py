"""Shared pieces of the record classes written out by hand (findings, positions, views...).

Those classes spell out their ``__init__``/``__repr__``/``__eq__``/``__hash__`` in the source
instead of using ``@dataclass``: the decorator writes and compiles those methods again at every
import, which was a large part of the start-up time of a lint of one file; written here they
are compiled once into the ``.pyc``. A frozen record refuses attribute changes like a frozen
dataclass (an ``AttributeError``), and pickles by its fields in order.
"""

from __future__ import annotations

_setattr = object.__setattr__


class FrozenRecordError(AttributeError):
    """An attempt to change a field of a frozen record."""


def _frozen_setattr(self, name, value):
    raise FrozenRecordError(f"cannot assign to field {name!r}")


def _frozen_delattr(self, name):
    raise FrozenRecordError(f"cannot delete field {name!r}")


def _frozen_setstate(self, state):
    for name, value in zip(type(self).__slots__, state):
        _setattr(self, name, value)


def replaced(record, **changes):
    """A copy of a record with some fields changed (``dataclasses.replace`` for these classes):
    every field is passed to the constructor by name."""
    cls = type(record)
    names = getattr(cls, "_record_fields", None) or getattr(cls, "__slots__", None) or tuple(vars(record))
    return cls(**{name: changes.pop(name) if name in changes else getattr(record, name) for name in names},
               **changes)


def guarded_repr(method):
    """A ``__repr__`` that shows ``...`` for a record met again inside its own repr (a view and
    the run that holds it), as a dataclass's repr does, instead of recursing without end."""
    active: set = set()

    def __repr__(self):
        key = id(self)
        if key in active:
            return "..."
        active.add(key)
        try:
            return method(self)
        finally:
            active.discard(key)

    __repr__.__doc__ = method.__doc__
    __repr__.__qualname__ = method.__qualname__
    return __repr__
