"""Regular expressions compiled when first used.

Compiling a pattern costs tens to hundreds of microseconds; a module-level ``re.compile`` pays it
at import, in every run, whether or not the run ever reaches the code that matches. For the
patterns only some inputs reach (waiver comments, JSON errors, interpolated values, pins files),
``later(pattern, flags)`` stands in: the first method asked for (``match``, ``search``, ``sub``,
``finditer``...) compiles it, once, and later calls go to the compiled pattern.
"""

from __future__ import annotations

import re
from typing import Any


class LazyPattern:
    """A stand-in for ``re.compile(pattern, flags)`` until one of its methods is first used."""

    __slots__ = ("_source", "_flags", "_compiled")

    def __init__(self, pattern: str, flags: int = 0):
        self._source = pattern
        self._flags = flags
        self._compiled: re.Pattern | None = None

    def compiled(self) -> re.Pattern:
        got = self._compiled
        if got is None:
            got = self._compiled = re.compile(self._source, self._flags)
        return got

    def __getattr__(self, name: str) -> Any:  # only for what the slots do not hold: the pattern's own
        return getattr(self.compiled(), name)

    def __repr__(self) -> str:
        return f"later({self._source!r}, {self._flags!r})"


def later(pattern: str, flags: int = 0) -> LazyPattern:
    """``re.compile(pattern, flags)``, compiled when first used."""
    return LazyPattern(pattern, flags)
