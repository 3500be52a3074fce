"""Atomic file writes, shared by table files, exports, figures and spool parts.

What the target is decides how it is written:
- a regular file or a new name: a temporary file beside it, renamed over it (atomic);
- a symlink: the same, at the file it points to, so the link stays a link;
- a character device or a FIFO: streamed (opened for writing, never replaced), which is what
  `-o /dev/stdout` or a named pipe to another program means; a FIFO with no reader is refused
  rather than waited on;
- a folder, a block device or a socket: refused."""
from __future__ import annotations

import errno
import os
import stat
import tempfile

from .errors import OutputError


def write_atomic(path, data: bytes, durable: bool = True) -> None:
    """Write data to path as described above. For files: no half-written file ever appears
    under the final name, even if the process is killed; durable=True also fsyncs, so the file
    survives a power loss."""
    path = os.fspath(path)
    try:
        st = os.stat(path)  # the kernel follows links, /dev/stdout's magic one included
    except FileNotFoundError:
        st = None
    if st is not None and not stat.S_ISREG(st.st_mode):
        if stat.S_ISCHR(st.st_mode) or stat.S_ISFIFO(st.st_mode):
            _stream(path, data, fifo=stat.S_ISFIFO(st.st_mode))
            return
        kind = "a folder" if stat.S_ISDIR(st.st_mode) else "a block device" if stat.S_ISBLK(st.st_mode) \
            else "a socket" if stat.S_ISSOCK(st.st_mode) else "not a regular file"
        raise OutputError(f"cannot write {path}: it is {kind}; give a file name")
    target = os.path.realpath(path)  # through every symlink, to the file that gets the bytes
    folder = os.path.dirname(target)
    if not os.path.isdir(folder):
        raise OutputError(f"cannot write {path}: its folder {folder} does not exist; create it, or give "
                          "another path")
    try:
        fd, tmp = tempfile.mkstemp(prefix=os.path.basename(target) + ".", suffix=".tmp", dir=folder)
    except OSError as exc:  # it names the temporary file; the user gave path
        exc.filename = path
        raise
    try:
        if st is not None:
            mode = stat.S_IMODE(st.st_mode)  # replacing a file keeps its permissions
        else:
            umask = os.umask(0)
            os.umask(umask)
            mode = 0o666 & ~umask  # mkstemp makes 0600; these files are for sharing
        os.chmod(tmp, mode)
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            if durable:
                f.flush()
                os.fsync(f.fileno())
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        _name(exc, path)
        raise


def _stream(path: str, data: bytes, fifo: bool) -> None:
    """Write to a device or FIFO in place. O_NONBLOCK on the open makes a FIFO with no reader
    fail at once (ENXIO) instead of hanging; the writes themselves block as usual."""
    try:
        fd = os.open(path, os.O_WRONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        if fifo and exc.errno == errno.ENXIO:
            raise OutputError(f"cannot write {path}: it is a named pipe with no reader; start the "
                              "reading program first, or give a file name") from None
        raise
    try:
        os.set_blocking(fd, True)
        with os.fdopen(fd, "wb", closefd=False) as f:
            f.write(data)
    except OSError as exc:
        _name(exc, path)
        raise
    finally:
        os.close(fd)


def _name(exc: BaseException, path: str) -> None:
    """Errors from writes name no file; name the one the user gave, for the one-line message."""
    if isinstance(exc, OSError) and exc.filename is None:
        exc.filename = path


def same_file(a, b) -> bool:
    """Whether two paths name one file (after symlinks and hard links); False if either is missing."""
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False
