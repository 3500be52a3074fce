"""Atomic file writes, shared by table files and the build spool."""
from __future__ import annotations

import os
import tempfile


def write_atomic(path, data: bytes, durable: bool = True) -> None:
    """Write to a temporary file beside the target, then rename over it: no
    half-written file ever appears under the final name, even if the process is
    killed. durable=True also fsyncs, so the file survives a power loss."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=os.path.basename(path) + ".", suffix=".tmp", dir=folder)
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; these files are for sharing
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            if durable:
                f.flush()
                os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
