"""Writing a fixed file: back to bytes the way it was read, replaced atomically beside itself
(mode, group, owner and extended attributes kept, or nothing written), only if it did not change
on disk meanwhile; linked files written together or not at all. See docs/robustness.md,
"Writing a fix"."""

from __future__ import annotations

import codecs
import errno
import functools
import os
import stat
import sys
from pathlib import Path
from types import MappingProxyType

from .. import load as loadmod
from ..load import Source
from .results import _Item


_BOM_BYTES = MappingProxyType({
    "utf-8": codecs.BOM_UTF8,
    "utf-16-le": codecs.BOM_UTF16_LE,
    "utf-16-be": codecs.BOM_UTF16_BE,
    "utf-32-le": codecs.BOM_UTF32_LE,
    "utf-32-be": codecs.BOM_UTF32_BE,
})


def encode(src: Source, text: str) -> bytes:
    """Text back to bytes the way the file was: same encoding, BOM kept (newlines are in the text)."""
    body = text.encode(src.encoding)
    return (_BOM_BYTES[src.encoding] if src.bom else b"") + body


class ChangedOnDisk(Exception):
    pass


class WriteRefused(Exception):
    """The file may not be replaced as it is (not writable, other hard links, owner, xattrs)."""


_AT_FDCWD, _RENAME_EXCHANGE = -100, 2


def _exchange(tmp: str, target: str) -> bool:
    """Swap ``tmp`` and ``target`` in one step (Linux renameat2 RENAME_EXCHANGE); False where the
    system or file system cannot."""
    fn = _renameat2()
    if fn is None:
        return False
    import ctypes

    if fn(_AT_FDCWD, os.fsencode(tmp), _AT_FDCWD, os.fsencode(target), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.EXDEV):
        return False
    raise OSError(err, os.strerror(err), target)


@functools.cache
def _renameat2():
    if not sys.platform.startswith("linux"):
        return None
    try:
        import ctypes

        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    return fn


def _exchange_supported(folder: str) -> bool:
    """Whether ``folder`` allows the atomic exchange (for the documentation and tests)."""
    import tempfile  # imported where used: a run that writes nothing needs none

    a = tempfile.NamedTemporaryFile(dir=folder, delete=False)
    b = tempfile.NamedTemporaryFile(dir=folder, delete=False)
    a.close()
    b.close()
    try:
        return _exchange(a.name, b.name)
    except OSError:
        return False
    finally:
        for n in (a.name, b.name):
            try:
                os.unlink(n)
            except OSError:
                pass


def _rename(tmp: str, target: str) -> bool:
    """The one step that makes the new file visible (replaced in tests to simulate a crash).

    True when the files were swapped (the old one is now at ``tmp``), False when ``tmp``
    replaced ``target``.
    """
    if _exchange(tmp, target):
        return True
    os.replace(tmp, target)
    return False


def _before_rename(target: str) -> None:
    """Called after the temp file is complete, just before the final re-check (a test hook)."""


def _read_bounded(fd: int) -> bytes:
    chunks, size = [], 0
    while size <= loadmod.MAX_FILE_BYTES:
        chunk = os.read(fd, 1 << 16)
        if not chunk:
            break
        chunks.append(chunk)
        size += len(chunk)
    return b"".join(chunks)


def _state(st: os.stat_result) -> tuple:
    return (st.st_ino, st.st_dev, st.st_size, st.st_mtime_ns)


def check_writable(path: str | Path) -> None:
    """Raise WriteRefused when replacing ``path`` would do more than change its bytes."""
    target = os.path.realpath(path)
    try:
        st = os.stat(target)
    except OSError as exc:
        raise WriteRefused(f"cannot write: {exc.strerror or exc}; the file is unchanged") from None
    if not stat.S_ISREG(st.st_mode):
        raise WriteRefused("not a regular file")
    if st.st_nlink > 1:
        raise WriteRefused(f"the file has {st.st_nlink} hard links; replacing it would split "
                           "them (fix a copy, or remove the other links)")
    if not os.access(target, os.W_OK) or not st.st_mode & 0o222:  # read-only: even for root
        raise WriteRefused(f"the file is read-only or not writable by you "
                           f"(mode {stat.S_IMODE(st.st_mode):04o})")
    if st.st_uid != os.geteuid() and os.geteuid() != 0:
        raise WriteRefused(f"the file belongs to another user (uid {st.st_uid}); replacing it "
                           "would change its owner")
    if not os.access(os.path.dirname(target) or ".", os.W_OK | os.X_OK):
        raise WriteRefused("its folder is not writable, so it cannot be replaced atomically")


def _copy_metadata(src_fd: int, st: os.stat_result, tmp: str) -> None:
    """Mode, group (and owner, as root) and extended attributes of the original onto ``tmp``."""
    os.chmod(tmp, stat.S_IMODE(st.st_mode))
    tst = os.stat(tmp)
    if (tst.st_uid, tst.st_gid) != (st.st_uid, st.st_gid):
        try:
            os.chown(tmp, st.st_uid if os.geteuid() == 0 else -1, st.st_gid)
        except OSError:
            raise WriteRefused(f"cannot keep the file's group (gid {st.st_gid})") from None
        os.chmod(tmp, stat.S_IMODE(st.st_mode))  # chown may clear set-id bits
    if hasattr(os, "listxattr"):
        try:
            names = os.listxattr(src_fd)
        except OSError:
            names = []
        for n in names:
            try:
                value = os.getxattr(src_fd, n)
                try:
                    if os.getxattr(tmp, n) == value:
                        continue  # already there (a security label the folder gives every file)
                except OSError:
                    pass
                os.setxattr(tmp, n, value)
            except OSError as exc:
                raise WriteRefused(f"cannot keep the extended attribute {n} "
                                   f"({exc.strerror or exc})") from None


def atomic_write(path: str | Path, data: bytes, expected: bytes) -> None:
    """Replace ``path`` by ``data`` through a temp file in the same folder.

    What is guaranteed (docs/robustness.md, "Writing"): the file is replaced only if its bytes
    are still ``expected`` when the temp file is complete, re-read just before the rename; mode,
    group, owner and extended attributes stay (or nothing is written: WriteRefused); a write into
    the old file between that re-read and the rename is detected after the rename and the other
    writer's bytes are put back (ChangedOnDisk). On any failure the original stays and the temp
    file is removed.
    """
    target = os.path.realpath(path)  # a symbolic link keeps pointing at the rewritten file
    check_writable(target)
    fd0 = os.open(target, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    try:
        st = os.fstat(fd0)
        if not stat.S_ISREG(st.st_mode) or _read_bounded(fd0) != expected:
            raise ChangedOnDisk("the file changed on disk since it was read; not writing")
        tmp = _temp_beside(target, data)
        try:
            _copy_metadata(fd0, st, tmp)
            _before_rename(target)
            # the final re-check: same file (inode), same bytes, right before the rename
            fd1 = os.open(target, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
            try:
                st1 = os.fstat(fd1)
                if (st1.st_ino, st1.st_dev) != (st.st_ino, st.st_dev) or _read_bounded(fd1) != expected:
                    raise ChangedOnDisk("the file changed on disk while the fix was written; "
                                        "not writing")
                swapped = _rename(tmp, target) is True
                if swapped:  # the file we displaced is now at tmp: was it still the one we checked?
                    shown = os.lstat(tmp)
                    if (shown.st_ino, shown.st_dev) != (st1.st_ino, st1.st_dev):
                        _exchange(tmp, target)  # another program replaced it meanwhile: theirs back
                        raise ChangedOnDisk("another program replaced the file while the fix was "
                                            "written; its version stays and nothing was fixed")
                after = os.fstat(fd1)  # the old file, now displaced: written to in the window?
                if (after.st_size, after.st_mtime_ns) != (st1.st_size, st1.st_mtime_ns):
                    os.lseek(fd1, 0, os.SEEK_SET)
                    theirs = _read_bounded(fd1)
                    _put_back(target, theirs, st)
                    raise ChangedOnDisk("another program wrote to the file while it was being "
                                        "replaced; its version was put back and nothing was fixed")
                if swapped:
                    os.unlink(tmp)
            finally:
                os.close(fd1)
        except BaseException:
            _discard(tmp)
            raise
    finally:
        os.close(fd0)
    _sync_folder(os.path.dirname(target))


def _discard(tmp: str) -> None:
    """Remove a temporary file of ours if it is still there."""
    try:
        os.unlink(tmp)
    except FileNotFoundError:
        pass


def _temp_beside(target: str, data: bytes) -> str:
    """A new file in the target's folder holding ``data``, flushed to disk (removed on failure)."""
    folder, base = os.path.split(target)
    import tempfile  # imported where used: a run that writes nothing needs none

    fd, tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=".cfgcheck-tmp", dir=folder or ".")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        _discard(tmp)
        raise
    return tmp


def _put_back(target: str, data: bytes, st: os.stat_result) -> None:
    tmp = _temp_beside(target, data)
    try:
        os.chmod(tmp, stat.S_IMODE(st.st_mode))
        os.replace(tmp, target)
    except BaseException:
        _discard(tmp)
        raise


def _sync_folder(folder: str) -> None:
    try:  # make the rename itself durable; not every system lets a folder be opened
        dfd = os.open(folder or ".", os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass


def _write_group(group: list[_Item]) -> None:
    """Write every changed member, or none: checked first, rolled back if a later one fails."""
    todo = [i for i in group if i.src is not None and i.result.changed]
    if not todo:
        return
    broken = [i for i in group if i.result.error is not None or i.result.problem is not None]
    if broken and len(group) > 1:
        for i in todo:
            i.result.refused = (f"the linked file {broken[0].path} could not be fixed, and "
                                "linked files are fixed together or not at all")
        return
    data = {}
    for i in todo:
        data[id(i)] = encode(i.src, i.result.new_text)
        try:
            check_writable(i.path)
        except WriteRefused as exc:
            i.result.refused = str(exc)
    refused = [i for i in todo if i.result.refused]
    if refused:
        for i in todo:
            if not i.result.refused:
                i.result.refused = (f"the linked file {refused[0].path} cannot be written, and "
                                    "linked files are fixed together or not at all")
        return
    written: list[_Item] = []
    for i in todo:
        expected = encode(i.src, i.src.text)
        if data[id(i)] == expected:
            continue
        try:
            atomic_write(i.path, data[id(i)], expected)
        except (ChangedOnDisk, WriteRefused) as exc:
            i.result.refused = str(exc)
        except OSError as exc:
            i.result.refused = f"cannot write: {exc.strerror or exc}; the file is unchanged"
        if i.result.refused:
            for j in written:  # put the linked files written so far back as they were
                try:
                    atomic_write(j.path, encode(j.src, j.src.text), data[id(j)])
                    j.result.written = False
                    j.result.refused = (f"written, then put back: the linked file {i.path} could "
                                        "not be written")
                except (ChangedOnDisk, WriteRefused, OSError):
                    j.result.notes.append(f"the linked file {i.path} could not be written; this "
                                          "one was, and could not be put back")
            for j in todo:
                if j is not i and not j.result.written and not j.result.refused:
                    j.result.refused = f"the linked file {i.path} could not be written"
            return
        i.result.written = True
        written.append(i)
