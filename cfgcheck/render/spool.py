"""Output written file by file: each section of a format in a ``Spool``, joined at the end.

Every format puts its sections in an order that is not the files' order (text and GitHub print
all input errors before the first finding; JSON lists the files after the findings; SARIF
describes the invocation, which says whether a rule failed, before its results), so a run that
must not hold its reports writes each report's pieces into the section they belong to as the
report arrives, and the output is those sections in order once the last file is done. A spool
keeps its first ``MEMORY_LIMIT`` characters in memory and the rest in an anonymous temporary
file (where none can be made, in memory): the memory of a run stays flat however many files it
lints, and nothing reaches the output before the run is complete (a run that fails half way
prints no half document).

JSON documents are written the same way (render/jsonitems.py).
"""

from __future__ import annotations

import os
from typing import Any, Iterator


MEMORY_LIMIT = 64 * 1024  # characters a spool keeps in memory before it moves to a file
READ_SIZE = 64 * 1024  # characters read back at a time
_UNNAMED = getattr(os, "O_TMPFILE", 0)  # the open flag of a file with no name (Linux), else 0


def _folders() -> list[str]:
    """Where ``tempfile`` looks for its folder, in its order (TMPDIR, TEMP, TMP, then the
    platform's folders)."""
    named = [os.environ.get(name) for name in ("TMPDIR", "TEMP", "TMP")]
    return [f for f in named if f] + ["/tmp", "/var/tmp", "/usr/tmp"]


def _anonymous_file() -> Any:
    """A text file with no name, removed when closed. Where the system makes unnamed files
    (Linux: O_TMPFILE), one is opened in the first temporary folder that takes it, without
    importing ``tempfile`` (which imports shutil, random and the compression modules: more than
    a small run's output costs to write); else ``tempfile.TemporaryFile``. Text with lone
    surrogates (file names that are not UTF-8) reads back unchanged. OSError when none can be
    made."""
    flag = _UNNAMED
    if flag:
        for folder in _folders():
            try:
                fd = os.open(folder, flag | os.O_RDWR | getattr(os, "O_CLOEXEC", 0), 0o600)
            except OSError:  # no such folder, not writable, or a file system without unnamed files
                continue
            try:
                return open(fd, "w+", encoding="utf-8", errors="surrogatepass", newline="")
            except BaseException:
                os.close(fd)
                raise
    import tempfile

    return tempfile.TemporaryFile("w+", encoding="utf-8", errors="surrogatepass", newline="")


class Spool:
    """Text appended in pieces and read back once, in order."""

    __slots__ = ("_parts", "_size", "_file", "pieces_written")

    def __init__(self) -> None:
        self._parts: list[str] = []
        self._size = 0
        self._file: Any = None
        self.pieces_written = 0

    def write(self, text: str) -> None:
        self.pieces_written += 1
        self._parts.append(text)
        self._size += len(text)
        if self._size > MEMORY_LIMIT:
            self._spill()

    def _spill(self) -> None:
        """The text held in memory to the file (made on the first call), in one write."""
        f = self._file
        if f is None:
            try:
                f = _anonymous_file()
            except OSError:  # no temporary folder to write in: the spool stays in memory
                self._size = -(1 << 62)
                return
            try:
                f.write("".join(self._parts))
            except OSError:  # the folder is full: the spool stays in memory
                f.close()
                self._size = -(1 << 62)
                return
            self._file = f
        else:
            f.write("".join(self._parts))
        self._parts, self._size = [], 0

    def __bool__(self) -> bool:
        return self.pieces_written > 0

    def read(self) -> Iterator[str]:
        """The text written, in pieces of at most about READ_SIZE characters."""
        if self._file is None:
            if self._parts:
                yield "".join(self._parts)
            return
        if self._parts:
            self._spill()
        self._file.flush()
        self._file.seek(0)
        while True:
            piece = self._file.read(READ_SIZE)
            if not piece:
                return
            yield piece

    def close(self) -> None:
        self._parts = []
        if self._file is not None:
            self._file.close()
            self._file = None
