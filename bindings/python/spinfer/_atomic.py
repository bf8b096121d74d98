"""Atomic file writes from Python: write to a temporary file beside the target, then rename."""
from __future__ import annotations

import contextlib
import os
import tempfile


def _umask() -> int:
    try:  # Linux exposes the umask without changing it
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_output(path, mode: str = "w", **open_kwargs):
    """Open a temporary file in the target's folder; on success it replaces ``path``.

    The rename (``os.replace``) is atomic on one file system, so readers see either the old file or
    the complete new one. If the body raises, the temporary file is removed and ``path`` is left
    untouched. A missing folder raises ``OSError`` naming the path.
    """
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise FileNotFoundError(f"{path}: folder {folder} does not exist")
    fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", suffix=".tmp", dir=folder)
    try:
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode of a new file
        with os.fdopen(fd, mode, **open_kwargs) as f:
            yield f
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
