"""Writing files without ever leaving a half-written or clobbered file behind.

Every file socfuse writes (models, settings, traces, summaries, reports, plots, demo data, C
sources) goes through :func:`replacing`: the content is written to a temporary file in the same
folder and renamed over the target only once it is complete (``os.replace`` is atomic on one
file system), and the temporary file is removed if writing fails.
"""
from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path

__all__ = ["replacing", "write_text_replacing", "write_bytes_replacing"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _umask()  # read once at import: permissions of new files follow the user's umask


@contextmanager
def replacing(path, suffix: str = ".tmp"):
    """Context manager yielding a temporary path next to ``path``.

    On a clean exit the temporary file is renamed over ``path`` (mode 0644 less the umask); on an
    exception it is removed and ``path`` is left as it was.  ``suffix`` lets writers that infer a
    format from the file name (matplotlib) see the right extension.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix="." + path.name + ".", suffix=suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o644 & ~_UMASK)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_text_replacing(path, text: str) -> Path:
    """Write ``text`` (``\\n`` line ends) to ``path`` through :func:`replacing`; returns the path."""
    with replacing(path) as tmp:
        with open(tmp, "w", newline="\n") as f:
            f.write(text)
    return Path(path)


def write_bytes_replacing(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through :func:`replacing`; returns the path."""
    with replacing(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)
