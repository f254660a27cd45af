"""Reading input files and writing output files safely.

Inputs must be regular files within a size limit: a FIFO, a device or a
folder is refused with a message before anything blocks or reads without
end (the file is opened without blocking and checked on the open
descriptor, so a path swapped in between cannot slip through).

Outputs are written atomically (a temporary file in the same folder, made
durable, then renamed over the target) and only onto a regular file or a
new path: a device, a FIFO, a folder or a symbolic link is never replaced or
followed. Every refusal or write error (missing folder, full disk, no
permission) is an :class:`~troubleshoot.errors.OutputError` naming the path,
and :func:`check_output_path` lets a command check its output path before
long work.
"""

from __future__ import annotations

import os
import stat
import tempfile
from pathlib import Path

from troubleshoot.errors import InputError, OutputError

#: Default limit of an input file (bytes).
DEFAULT_MAX_INPUT_BYTES = 64 * 1024 * 1024


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISLNK(mode):
        return "a symbolic link"
    return "not a regular file"


def _a(what: str) -> str:
    return ("an " if what[:1].lower() in "aeiou" or what.startswith("XML") else "a ") + what


def _megabytes(size: int) -> str:
    return f"{size / (1024 * 1024):.1f} MB"


def open_input(path: str | os.PathLike, max_bytes: int = DEFAULT_MAX_INPUT_BYTES,
               what: str = "file", flags: int = os.O_RDONLY) -> int:
    """Open a regular input file without blocking and return its descriptor.

    Raises
    ------
    InputError
        Missing, unreadable, not a regular file, or larger than ``max_bytes``.
    """
    name = str(path)
    try:
        fd = os.open(name, flags | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise InputError(f"{name}: file not found; check the path") from None
    except IsADirectoryError:
        raise InputError(f"{name}: this is a folder, not a file; give the path of {_a(what)}") from None
    except OSError as exc:
        raise InputError(f"{name}: cannot open the {what} ({exc.strerror}); check the path and "
                         "permissions") from None
    try:
        info = os.fstat(fd)
        if not stat.S_ISREG(info.st_mode):
            raise InputError(f"{name}: this is {_kind(info.st_mode)}, not a regular file; give the path of "
                             f"{_a(what)}")
        if info.st_size > max_bytes:
            raise InputError(f"{name}: the {what} is {_megabytes(info.st_size)}, larger than the "
                             f"{_megabytes(max_bytes)} limit; check that this is the right file")
        os.set_blocking(fd, True)
    except BaseException:
        os.close(fd)
        raise
    return fd


def read_fd(fd: int, name: str, max_bytes: int, what: str = "file") -> bytes:
    """Everything in an open file from its start, refused past ``max_bytes``."""
    chunks = []
    total = 0
    offset = 0
    try:
        while True:
            block = os.pread(fd, 1 << 20, offset)
            if not block:
                break
            chunks.append(block)
            total += len(block)
            offset += len(block)
            if total > max_bytes:
                raise InputError(f"{name}: the {what} is larger than the {_megabytes(max_bytes)} limit; "
                                 "check that this is the right file")
    except OSError as exc:
        raise InputError(f"{name}: cannot read the {what} ({exc.strerror})") from None
    return b"".join(chunks)


def read_input(path: str | os.PathLike, max_bytes: int = DEFAULT_MAX_INPUT_BYTES, what: str = "file") -> bytes:
    """The bytes of a regular input file within ``max_bytes``.

    Raises
    ------
    InputError
        Missing, unreadable, a FIFO, a device, a folder, or too large.
    """
    fd = open_input(path, max_bytes, what)
    try:
        return read_fd(fd, str(path), max_bytes, what)
    finally:
        os.close(fd)


def check_output_path(path: str | os.PathLike, what: str = "output file") -> Path:
    """Refuse, before any work, an output path that :func:`write_output` would refuse.

    The path must be new or a regular file (not a symbolic link, device, FIFO
    or folder) in an existing, writable folder.

    Raises
    ------
    OutputError
    """
    target = Path(path)
    name = str(path)
    if not name or name.endswith(os.sep):
        raise OutputError(f"{name or '(empty)'}: give the name of a file to write, not a folder")
    try:
        info = os.lstat(target)
    except FileNotFoundError:
        info = None
    except OSError as exc:
        raise OutputError(f"{name}: cannot write the {what} ({exc.strerror})") from None
    if info is not None and not stat.S_ISREG(info.st_mode):
        raise OutputError(f"{name}: this is {_kind(info.st_mode)}; the {what} is only written to a new path "
                          "or over a regular file; give another path")
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{name}: the folder {folder} does not exist; create it first or give another path")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{name}: the folder {folder} is not writable; give another path")
    return target


def write_output(path: str | os.PathLike, data: bytes, what: str = "output file", mode: int = 0o644) -> Path:
    """Write ``data`` to ``path`` atomically: all of it, or the old file untouched.

    Raises
    ------
    OutputError
        The path is refused (see :func:`check_output_path`) or the write
        fails (full disk, no permission); the message names the path.
    """
    target = check_output_path(path, what)
    folder = target.parent if str(target.parent) else Path(".")
    temporary = None
    try:
        handle, temporary = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
        with os.fdopen(handle, "wb") as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, mode & ~umask)
        check_output_path(target, what)  # still a regular file or new, just before the rename
        os.replace(temporary, target)
        temporary = None
    except OSError as exc:
        raise OutputError(f"{target}: cannot write the {what} ({exc.strerror}); check the folder, the "
                          "free space and the permissions") from None
    finally:
        if temporary is not None:
            try:
                os.unlink(temporary)
            except OSError:
                pass
    return target
