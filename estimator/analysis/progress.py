"""Progress bars (tqdm) that stay quiet when nobody is watching.

A bar is shown only when ``quiet`` is false **and** stderr is a terminal, so logs, pipes, CI
and the test suite get no bar characters.  ``SOCFUSE_PROGRESS=1`` forces bars on (``0`` off).
"""
from __future__ import annotations

import os
import sys

__all__ = ["show_progress", "progress", "ProgressBar"]


def show_progress(quiet: bool = False) -> bool:
    """Whether a bar should be drawn: not ``quiet`` and stderr (and stdout) is a terminal.

    Parameters
    ----------
    quiet : bool
        Never draw.

    Returns
    -------
    bool
        ``SOCFUSE_PROGRESS=1`` or ``0`` overrides the terminal check.
    """
    if quiet:
        return False
    env = os.environ.get("SOCFUSE_PROGRESS", "").strip()
    if env in ("0", "1"):
        return env == "1"
    try:
        return bool(sys.stderr.isatty() and sys.stdout.isatty())
    except (AttributeError, ValueError):
        return False


class ProgressBar:
    """A tqdm bar (or a silent stand-in) used as a context manager with ``update(n)``.

    Parameters
    ----------
    total : int
        Number of steps.
    desc : str
        Label shown before the bar.
    quiet : bool
        Never draw.
    """

    def __init__(self, total: int, desc: str = "", quiet: bool = False, unit: str = "run"):
        self._bar = None
        if show_progress(quiet):
            from tqdm.auto import tqdm

            self._bar = tqdm(total=total, desc=desc, unit=unit, file=sys.stderr, leave=False,
                             dynamic_ncols=True)

    def update(self, n: int = 1) -> None:
        if self._bar is not None:
            self._bar.update(n)

    def set_postfix_str(self, s: str) -> None:
        if self._bar is not None:
            self._bar.set_postfix_str(s, refresh=False)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self) -> "ProgressBar":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def progress(iterable, total: int | None = None, desc: str = "", quiet: bool = False, unit: str = "run"):
    """Iterate ``iterable`` with a bar when :func:`show_progress` says so.

    Parameters
    ----------
    iterable : iterable
    total : int, optional
        Number of items (for the bar).
    desc : str
        Label of the bar.
    quiet : bool
        Never draw.
    unit : str
        Name of one item.

    Returns
    -------
    iterable
        ``iterable`` itself, or a ``tqdm`` wrapper writing to stderr.
    """
    if not show_progress(quiet):
        return iterable
    from tqdm.auto import tqdm

    return tqdm(iterable, total=total, desc=desc, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True)
