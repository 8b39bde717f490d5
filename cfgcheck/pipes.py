"""Whole reads and writes on a file descriptor (a pipe between this process and one it forked:
the cache's writer, a lint worker). Nothing here but ``os``: both sides import it cheaply."""

from __future__ import annotations

import os

_READ_AT_MOST = 1 << 20  # bytes asked of one read


def write_all(fd: int, data: bytes) -> None:
    """All of DATA written to FD (a pipe may take it a part at a time)."""
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def read_exactly(fd: int, n: int) -> bytes | None:
    """N bytes from FD, or None when it ends before them."""
    parts = []
    while n > 0:
        got = os.read(fd, min(n, _READ_AT_MOST))
        if not got:
            return None
        parts.append(got)
        n -= len(got)
    return parts[0] if len(parts) == 1 else b"".join(parts)
