"""Reading the files a user names: regular files only, never more than a cap.

Every file dotseq reads on a user's word (the sequence, its includes, the
device file, a file named by ``--device``) goes through :func:`read_capped`:

* only a regular file is opened: a folder, a named pipe (FIFO), a device such
  as ``/dev/zero``, a socket, a symbolic-link loop or a file of the kernel's
  own file systems (``/proc``, ``/sys``, ``/dev``) is refused by name;
* the file is opened without blocking (``O_NONBLOCK``) and checked again on
  the open descriptor, so a pipe swapped in after the first look cannot block;
* at most ``limit + 1`` bytes are read, whatever size the file reports, so a
  file that grows or lies about its size cannot take more memory than that.

The caller turns :class:`Unreadable` and :class:`Oversize` into its own
positioned :class:`~compiler.errors.DotseqError`.
"""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

CHUNK = 1 << 20  # bytes per read() call
SYSTEM_ROOTS = ("/proc", "/sys", "/dev")  # the kernel's own files, never user input


class Unreadable(Exception):
    """The path names no regular file dotseq may read; ``reason`` says what it is."""

    def __init__(self, reason: str, hint: str = ""):
        super().__init__(reason)
        self.reason, self.hint = reason, hint


class Oversize(Exception):
    """The file holds more than the cap; ``size`` is at least the bytes seen."""

    def __init__(self, size: int, limit: int):
        super().__init__(f"more than {limit:,} bytes")
        self.size, self.limit = size, limit


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a directory"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _os_reason(e: OSError) -> Unreadable:
    if isinstance(e, FileNotFoundError):
        return Unreadable("no such file", "check the path")
    if e.errno == errno.ELOOP:
        return Unreadable("it is a loop of symbolic links", "point the link at a real file")
    if isinstance(e, PermissionError):
        return Unreadable(e.strerror or "Permission denied", "check the file's permissions")
    if isinstance(e, NotADirectoryError):
        return Unreadable("a part of the path is not a folder", "check the path")
    return Unreadable(e.strerror or str(e), "check the path and its permissions")


def _system_root(path: str) -> str | None:
    real = os.path.realpath(path)
    for root in SYSTEM_ROOTS:
        if real == root or real.startswith(root + "/"):
            return root
    return None


def check_regular(path: str | Path) -> os.stat_result:
    """The stat of ``path`` if it is a regular file of the user's; raises
    :class:`Unreadable` otherwise (without opening it)."""
    p = os.fspath(path)
    try:
        st = os.stat(p)
    except OSError as e:
        raise _os_reason(e) from None
    except ValueError:  # a NUL byte in the path
        raise Unreadable("the path holds a NUL character", "check the path") from None
    if not stat.S_ISREG(st.st_mode):
        what = _kind(st.st_mode)
        hint = ("give a file, not a folder" if what == "a directory"
                else "dotseq reads only regular files (not pipes, devices or sockets)")
        raise Unreadable(f"it is {what}, not a regular file", hint)
    root = _system_root(p)
    if root is not None:
        raise Unreadable(f"it is a system file under {root}, not a file of yours",
                         "dotseq reads only your own regular files")
    return st


def read_capped(path: str | Path, limit: int) -> bytes:
    """The bytes of the regular file ``path``, at most ``limit`` of them.

    Raises
    ------
    Unreadable
        Not a regular file (folder, FIFO, device, socket, link loop, a
        system file), missing, or not permitted.
    Oversize
        It holds more than ``limit`` bytes (found from its size or while
        reading, whichever comes first; never more than ``limit + 1`` bytes
        are read).
    """
    p = os.fspath(path)
    st = check_regular(p)
    if st.st_size > limit:
        raise Oversize(st.st_size, limit)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0) \
        | getattr(os, "O_CLOEXEC", 0)
    try:
        fd = os.open(p, flags)
    except OSError as e:
        raise _os_reason(e) from None
    try:
        st2 = os.fstat(fd)
        if not stat.S_ISREG(st2.st_mode) or (st2.st_dev, st2.st_ino) != (st.st_dev, st.st_ino):
            raise Unreadable("it changed into something else while being opened "
                             f"({_kind(st2.st_mode) if not stat.S_ISREG(st2.st_mode) else 'another file'})",
                             "try again once nothing else writes to it")
        parts: list[bytes] = []
        got = 0
        while got <= limit:
            try:
                b = os.read(fd, min(CHUNK, limit + 1 - got))
            except OSError as e:
                raise _os_reason(e) from None
            if not b:
                break
            parts.append(b)
            got += len(b)
        if got > limit:
            raise Oversize(got, limit)
    finally:
        os.close(fd)
    data = b"".join(parts)
    if st.st_size == 0 and data:
        # regular files of a pseudo file system report no size but hold text
        raise Unreadable("it reports a size of 0 bytes but holds data: a special file of "
                         "the system, not a file of yours", "dotseq reads only your own "
                         "regular files")
    return data


def read_text_capped(path: str | Path, limit: int) -> str:
    """:func:`read_capped`, decoded as UTF-8 (``UnicodeDecodeError`` passes)."""
    return read_capped(path, limit).decode("utf-8")


def inside(path: str | Path, root: str | Path) -> bool:
    """Whether ``path`` (links resolved) lies in the folder tree of ``root``."""
    try:
        real = Path(os.path.realpath(path))
        base = Path(os.path.realpath(root))
    except (OSError, ValueError):
        return False
    return real == base or base in real.parents
