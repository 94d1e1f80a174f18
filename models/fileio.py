"""Writing files without ever leaving a half-written or clobbered file behind, and reading JSON safely.

Every file socfuse writes (models, settings, traces, summaries, reports, plots, demo data, C
sources) goes through :func:`replacing`: the content is written to a temporary file in the same
folder and renamed over the target only once it is complete (``os.replace`` is atomic on one
file system), and the temporary file is removed if writing fails.

Commands that write a folder of outputs (bench, demo, export-c) use :func:`output_folder`:

- the folder is locked for the run (an exclusive ``flock`` on ``DIR/.socfuse.lock``): a second
  run into the same folder at the same time is refused;
- a folder holding files that no earlier run of the same command wrote is refused unless
  ``force`` (the marker ``DIR/.socfuse-run.json`` lists what each run wrote);
- the outputs are written into a staging folder ``DIR/.socfuse-staging-*`` and moved into place
  only when the run succeeds; meanwhile the marker says ``"complete": false`` (a killed run
  leaves it so, and the next run clears its staging folder); files of an earlier run that the
  new run did not write again are removed, so the folder never mixes two runs.

:func:`check_output_file` and :func:`check_output_folder` refuse a bad output path before any work.
:func:`read_json` reads a socfuse JSON file (cell model, filter settings) and refuses bytes that
are not UTF-8, nesting deeper than 64 levels and numbers that are not finite or have a magnitude
of 1e15 or more, naming the file (and the key).
"""
from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

__all__ = ["replacing", "write_text_replacing", "write_bytes_replacing", "OutputPathError", "check_output_file",
           "check_output_folder", "output_folder", "read_json", "JsonFileError", "LOCK_NAME", "MARKER_NAME"]

LOCK_NAME = ".socfuse.lock"
MARKER_NAME = ".socfuse-run.json"
_STAGING = ".socfuse-staging-"


class OutputPathError(ValueError):
    """An output path that cannot be written (missing folder, not writable, exists, locked)."""


class JsonFileError(ValueError):
    """A JSON input file that cannot be read (not UTF-8, not JSON, too deep, absurd numbers)."""


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

    Parameters
    ----------
    path : str or os.PathLike
        The file to write (its folder must exist and be writable).
    suffix : str
        Extension of the temporary file name.

    Yields
    ------
    pathlib.Path
        The temporary file to write to (created empty in the same folder as ``path``).

    Raises
    ------
    OutputPathError
        When the folder does not exist or is not writable.
    """
    path = Path(path)
    _check_parent(path)
    try:
        fd, tmp = tempfile.mkstemp(prefix="." + path.name + ".", suffix=suffix, dir=path.parent)
    except OSError as e:
        raise OutputPathError(f"{path}: cannot write in folder {path.parent} ({e.strerror})") from None
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
    """Write ``text`` (``\\n`` line ends) to ``path`` through :func:`replacing`; returns the path.

    Parameters
    ----------
    path : str or os.PathLike
        The file to write.
    text : str
        The content.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    with replacing(path) as tmp:
        with open(tmp, "w", newline="\n") as f:
            f.write(text)
    return Path(path)


def write_bytes_replacing(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through :func:`replacing`; returns the path.

    Parameters
    ----------
    path : str or os.PathLike
        The file to write.
    data : bytes
        The content.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    with replacing(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def _check_parent(path: Path) -> None:
    parent = path.parent
    if not parent.exists():
        raise OutputPathError(f"{path}: folder {parent} does not exist")
    if not parent.is_dir():
        raise OutputPathError(f"{path}: {parent} is not a folder")


def check_output_file(path, force: bool = False, what: str = "output file") -> Path:
    """Refuse an output file path before any work is done.

    Parameters
    ----------
    path : str or Path
    force : bool
        Allow replacing an existing file.
    what : str
        Name used in messages (e.g. ``"--output"``).

    Returns
    -------
    Path

    Raises
    ------
    OutputPathError
        The folder is missing or not writable, the path is a folder, or the file exists (without ``force``).
    """
    p = Path(path)
    _check_parent(p)
    if p.is_dir():
        raise OutputPathError(f"{what} {p} is a folder, not a file")
    if p.exists() and not force:
        raise OutputPathError(f"{what} {p} exists; not overwritten (use --force or another name)")
    if not os.access(p.parent, os.W_OK | os.X_OK):
        raise OutputPathError(f"{what} {p}: folder {p.parent} is not writable")
    return p


def check_output_folder(path, what: str = "--out") -> Path:
    """Refuse an output folder that cannot be created or written, before any work is done.

    Returns the path; raises :class:`OutputPathError`.

    Parameters
    ----------
    path : str or os.PathLike
        The output folder (may not exist yet; its nearest existing ancestor must be a writable folder).
    what : str
        How the folder is named in the error message (e.g. the CLI option).

    Returns
    -------
    pathlib.Path
        ``path`` (nothing is created).
    """
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise OutputPathError(f"{what} {p} exists and is not a folder")
    probe = p
    while not probe.exists():
        if probe.parent == probe:
            break
        probe = probe.parent
    if not probe.is_dir():
        raise OutputPathError(f"{what} {p}: {probe} is not a folder")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise OutputPathError(f"{what} {p}: folder {probe} is not writable")
    return p


def _read_marker(out: Path) -> dict | None:
    try:
        d = json.loads((out / MARKER_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(d, dict) or not isinstance(d.get("files"), list):
        return None
    return d


def _lock(out: Path):
    fd = os.open(out / LOCK_NAME, os.O_CREAT | os.O_RDWR, 0o644)
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: no lock
        return fd
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        raise OutputPathError(f"{out}: another socfuse run is writing into this folder; wait for it or choose "
                              "another folder") from None
    return fd


def _move_tree(src: Path, dst: Path) -> None:
    """Move the contents of ``src`` into ``dst`` file by file (``os.replace``), merging folders."""
    for entry in sorted(src.iterdir()):
        target = dst / entry.name
        if entry.is_dir() and not entry.is_symlink():
            if target.exists() and not target.is_dir():
                target.unlink()
            target.mkdir(exist_ok=True)
            _move_tree(entry, target)
        else:
            if target.is_dir() and not target.is_symlink():
                shutil.rmtree(target)
            os.replace(entry, target)


def _remove(p: Path) -> None:
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    elif p.exists() or p.is_symlink():
        p.unlink()


@contextmanager
def output_folder(path, tool: str, *, force: bool = False, rerun: bool = True, legacy_marker: str | None = None):
    """Context manager for a run that writes a folder of outputs (module docstring).

    Parameters
    ----------
    path : str or Path
        The output folder (created with its parents when missing).
    tool : str
        Name of the command (``"bench"``, ``"demo"``, ``"export-c"``), kept in the marker.
    force : bool
        Write into a folder holding files no earlier run of ``tool`` wrote (files of the same
        name are replaced; others are left alone).
    rerun : bool
        Allow replacing the outputs of an earlier run of ``tool`` (demo, export-c); False
        refuses such a folder unless ``force`` (bench: reports are never replaced silently).
    legacy_marker : str, optional
        File name by which an older version of ``tool`` marked its folders (without
        ``.socfuse-run.json``); a folder holding it counts as written by ``tool``.

    Yields
    ------
    Path
        An empty staging folder inside ``path``: write every output there.  When the block ends
        without an exception its contents are moved into ``path``; otherwise they are removed
        and ``path`` is left as it was.

    Raises
    ------
    OutputPathError
        The folder is locked by another run, holds foreign files, or cannot be written.
    """
    out = check_output_folder(path)
    created = not out.exists()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise OutputPathError(f"--out {out}: cannot create the folder ({e.strerror})") from None
    lock_existed = (out / LOCK_NAME).exists()
    fd = _lock(out)
    stage = None
    prev_raw = None
    try:
        for old in out.glob(_STAGING + "*"):  # left by a killed run; we hold the lock
            _remove(old)
        prev = _read_marker(out)
        if (out / MARKER_NAME).is_file():
            prev_raw = (out / MARKER_NAME).read_bytes()
        ours = set(prev["files"]) if prev and prev.get("tool") == tool else set()
        present = {e.name for e in out.iterdir()} - {LOCK_NAME, MARKER_NAME}
        if prev is None and legacy_marker and (out / legacy_marker).is_file():
            ours = set(present)
        if ours and not rerun and not force and present & ours:
            raise OutputPathError(f"{out} holds the outputs of an earlier {tool} run; choose a new --out folder "
                                  "or use --force (files are never replaced silently)")
        foreign = sorted(present - ours)
        if foreign and not force:
            shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3 else "")
            raise OutputPathError(f"{out} holds files socfuse {tool} did not write ({shown}); choose a new or empty "
                                  "--out folder, or use --force")
        write_text_replacing(out / MARKER_NAME, json.dumps(
            {"tool": tool, "complete": False, "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
             "files": sorted(ours & present)}, indent=1) + "\n")
        stage = Path(tempfile.mkdtemp(prefix=_STAGING, dir=out))
        yield stage
        new = sorted(e.name for e in stage.iterdir())
        _move_tree(stage, out)
        for name in sorted((ours & present) - set(new)):
            _remove(out / name)  # an earlier run's file this run did not write again
        write_text_replacing(out / MARKER_NAME, json.dumps(
            {"tool": tool, "complete": True, "finished": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "files": new},
            indent=1) + "\n")
    except BaseException:
        if stage is not None:
            _remove(stage)
            if prev_raw is not None:
                write_bytes_replacing(out / MARKER_NAME, prev_raw)
            else:
                _remove(out / MARKER_NAME)
        if not lock_existed:
            _remove(out / LOCK_NAME)
        if created:
            try:
                out.rmdir()
            except OSError:
                pass
        raise
    finally:
        if stage is not None:
            _remove(stage)
        os.close(fd)


# ----------------------------------------------------------------------------- JSON input
_MAX_DEPTH = 64
_MAX_ABS = 1e15


class _Refused(Exception):
    pass


def _constant(name: str):
    raise _Refused(f"{name} is not a number a socfuse file may hold")


def _float(text: str) -> float:
    x = float(text)
    if x != x or x in (float("inf"), float("-inf")):
        raise _Refused(f"the number {text[:40]} is beyond the floating-point range")
    return x


def _walk(d, where: str) -> None:
    stack = [(d, "", 1)]
    while stack:
        x, key, depth = stack.pop()
        if depth > _MAX_DEPTH:
            raise JsonFileError(f"{where}: nested deeper than {_MAX_DEPTH} levels (at {key or 'the top'})")
        if isinstance(x, dict):
            stack.extend((v, f"{key}.{k}" if key else str(k), depth + 1) for k, v in x.items())
        elif isinstance(x, list):
            stack.extend((v, f"{key}[{j}]", depth + 1) for j, v in enumerate(x))
        elif isinstance(x, bool) or x is None or isinstance(x, str):
            continue
        elif abs(x) >= _MAX_ABS:
            shown = f"{x:.6g}" if isinstance(x, float) else f"an integer of {len(str(abs(x)))} digits"
            raise JsonFileError(f"{where}: {key or 'value'} is {shown}; numbers in socfuse files stay below "
                                f"{_MAX_ABS:g} in magnitude")


def read_json(path, what: str = "JSON"):
    """Read a socfuse JSON file, refusing what would crash or mislead later code.

    Parameters
    ----------
    path : str or Path
    what : str
        Kind of file for messages (``"cell-model"``, ``"filter-settings"``).

    Returns
    -------
    object
        The parsed JSON value.

    Raises
    ------
    FileNotFoundError
        No such file (the message names it).
    JsonFileError
        Not UTF-8, not valid JSON, nested deeper than 64 levels, ``NaN``/``Infinity``, or a number
        of magnitude 1e15 or more; the message names the file (and the key).
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise FileNotFoundError(f"{p}: no such file") from None
    except IsADirectoryError:
        raise JsonFileError(f"{p}: is a folder, not a {what} file") from None
    except OSError as e:
        raise JsonFileError(f"{p}: cannot read ({e.strerror})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        raise JsonFileError(f"{p}: not UTF-8 text (byte 0x{raw[e.start]:02x} at offset {e.start}); a {what} file "
                            "is UTF-8 JSON") from None
    try:
        d = json.loads(text, parse_constant=_constant, parse_float=_float)
    except _Refused as e:
        raise JsonFileError(f"{p}: {e}") from None
    except json.JSONDecodeError as e:
        raise JsonFileError(f"{p}: not valid JSON (line {e.lineno}, column {e.colno}: {e.msg})") from None
    except RecursionError:
        raise JsonFileError(f"{p}: nested deeper than {_MAX_DEPTH} levels") from None
    except ValueError as e:  # e.g. an integer over Python's 4300-digit conversion limit
        raise JsonFileError(f"{p}: not readable JSON ({str(e).splitlines()[0]})") from None
    _walk(d, str(p))
    return d
