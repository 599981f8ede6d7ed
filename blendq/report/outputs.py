"""Writing blendq's output files: whole folders at once, spreadsheet-safe CSV, stable JSON.

:func:`write_outputs` writes every file of a run into a hidden sibling folder first and moves
that folder into place only when all files are written, so a failure (a full disk, a chart
that will not render, an interrupt) never leaves a half-written output folder. It replaces an
existing folder only if blendq made it (a marker file inside says so), and it refuses any
layout that would overwrite or delete one of the run's input files.

:func:`to_csv_safe` writes a table as CSV with text cells that a spreadsheet would run as a
formula made inert, after a leading block of ``# `` comment lines (what the table is, the blendq
version and the cautions, :func:`csv_comments`) that ``pandas.read_csv(path, comment="#")``
skips; :func:`to_json_stable` writes results as JSON that is byte-identical for
the same inputs (sorted keys, shortest round-trip floats, NaN as ``null``).

References
----------
- OWASP, "CSV Injection": cells beginning with ``=``, ``+``, ``-``, ``@``, tab or carriage
  return are read as formulas; prefixing a single quote makes them text.
- POSIX ``rename(2)``: renaming within one file system is atomic.
- IETF RFC 4180, Common Format and MIME Type for CSV Files (CRLF line ends, quoting).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import enum
import json
import math
import os
import secrets
import shutil
import signal
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path, PurePath, PurePosixPath
from typing import Any

import numpy as np
import pandas as pd

from blendq.csvtext import CSV_CAUTIONS, csv_comments, to_csv_safe
from blendq.errors import InputError

__all__ = ["CSV_CAUTIONS", "MARKER_NAME", "check_output_folder", "csv_comments", "hold_aware",
           "to_csv_safe", "to_json_stable", "write_outputs"]

#: Name of the file that marks a folder as written by blendq (and so replaceable by it).
MARKER_NAME = ".blendq-output"
_MARKER_TEXT = (
    "This folder was written by blendq. blendq replaces it as a whole on the next run "
    "into the same folder; keep your own files elsewhere.\n"
)


def _checked_names(files: Mapping[str, bytes | str]) -> list[tuple[PurePosixPath, bytes]]:
    """Validate relative file names and encode contents as bytes (text as UTF-8)."""
    checked: list[tuple[PurePosixPath, bytes]] = []
    seen: set[PurePosixPath] = set()
    for name, content in files.items():
        path = PurePosixPath(name) if isinstance(name, str) else None
        if (
            path is None
            or not name
            or "\\" in name
            or path.is_absolute()
            or any(part in ("..", ".", "") for part in path.parts)
            or ":" in path.parts[0]
        ):
            raise InputError(
                f"output file name {name!r} is not a plain relative path "
                "(expected something like 'charts/rate.png')",
                field="output file",
            )
        if path.name == MARKER_NAME:
            raise InputError(
                f"output file name {name!r} is reserved for blendq's marker", field="output file"
            )
        if path in seen:
            raise InputError(f"output file {name!r} is given twice", field="output file")
        seen.add(path)
        if isinstance(content, str):
            data = content.encode("utf-8")
        elif isinstance(content, (bytes, bytearray, memoryview)):
            data = bytes(content)
        else:
            raise TypeError(
                f"output file {name!r}: content must be bytes or str, got {type(content).__name__}"
            )
        checked.append((path, data))
    for path, _ in checked:
        for parent in path.parents:
            if parent in seen:
                raise InputError(
                    f"output file {str(path)!r} would need {str(parent)!r} to be a folder, "
                    "but it is also a file",
                    field="output file",
                )
    return sorted(checked)


def _check_protected(folder: Path, protect: Iterable[str | os.PathLike[str]]) -> None:
    """Refuse an output folder that is, or holds, a protected input file."""
    real = folder.resolve()
    for item in sorted(str(p) for p in protect):
        protected = Path(item).resolve()
        if protected == real or real in protected.parents:
            raise InputError(
                f"writing the output folder {str(folder)!r} would overwrite or delete this "
                "input file; choose an output folder that holds no input files",
                file=Path(item).name,
            )


def _check_replaceable(folder: Path) -> None:
    """Refuse to replace anything that blendq did not make (an empty folder is fine)."""
    if folder.is_symlink():
        raise InputError(
            f"output folder {str(folder)!r} is a symbolic link; give the real folder instead",
            field="output folder",
        )
    if not folder.exists():
        return
    if not folder.is_dir():
        raise InputError(
            f"output path {str(folder)!r} exists and is a file, not a folder",
            field="output folder",
        )
    if (folder / MARKER_NAME).is_file() or not any(folder.iterdir()):
        return
    raise InputError(
        f"output folder {str(folder)!r} already exists and was not written by blendq "
        f"(no {MARKER_NAME} file in it); choose a new folder or empty this one",
        field="output folder",
    )


def check_output_folder(folder: str | os.PathLike[str],
                        protect: Iterable[str | os.PathLike[str]] = ()) -> None:
    """Raise :class:`InputError` now if :func:`write_outputs` would refuse ``folder`` later
    (so a long run does not end in a refusal)."""
    folder = Path(folder)
    _check_protected(folder, protect)
    _check_replaceable(folder)
    _check_writable(Path(os.path.abspath(folder)))


def _check_writable(folder: Path) -> None:
    """Refuse an output folder that could not be created or replaced: its nearest existing
    parent is not a folder, or a new folder cannot be made in it (read-only folder or file
    system). Tried by creating and removing an empty hidden folder, so that it holds for
    any user and any file system."""
    parent = folder.parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        raise InputError(f"cannot write the output folder {str(folder)!r}: {str(parent)!r} is "
                         "a file, not a folder", field="output folder")
    try:
        with _signals_held():
            probe = _fresh_sibling(parent / folder.name, "probe")
            os.rmdir(probe)
    except OSError as err:
        raise InputError(f"cannot write the output folder {str(folder)!r}: a folder cannot be "
                         f"created in {str(parent)!r} ({err.strerror or err}); choose a "
                         "writable place", field="output folder") from None


def _fresh_sibling(folder: Path, tag: str) -> Path:
    """Create and return a new hidden folder beside ``folder`` (umask permissions)."""
    for _ in range(100):
        candidate = folder.parent / f".{folder.name}.{tag}-{secrets.token_hex(4)}"
        try:
            os.mkdir(candidate)
        except FileExistsError:
            continue
        return candidate
    raise OSError(f"could not create a working folder beside {folder}")


def _write_file(path: Path, data: bytes) -> None:
    """Write bytes and flush them to disk."""
    with open(path, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())


def _unused_sibling_name(folder: Path, tag: str) -> Path:
    for _ in range(100):
        candidate = folder.parent / f".{folder.name}.{tag}-{secrets.token_hex(4)}"
        if not os.path.lexists(candidate):
            return candidate
    raise OSError(f"could not find a free name beside {folder}")


# Signals that arrive while output folders are created, swapped or removed wait until that is
# done: the command line installs its handlers through :func:`hold_aware` (a handler runs in
# the main thread, between two steps of Python, so a flag is enough; blocking the signal in
# the main thread is not, since the kernel may hand it to another thread).
_held = 0
_pending: list[int] = []


def hold_aware(handler):
    """``handler`` for :func:`signal.signal`, made to wait while an output folder is being
    created, swapped or removed (the signal is re-raised as soon as that is done)."""

    def wrapped(signum, frame):
        if _held:
            _pending.append(signum)
            return None
        return handler(signum, frame)

    return wrapped


@contextmanager
def _signals_held() -> Iterator[None]:
    """Hold back signals handled through :func:`hold_aware` for the duration, so that a folder
    being created, swapped or removed is never left half done."""
    global _held
    _held += 1
    try:
        yield
    finally:
        _held -= 1
        if not _held and _pending:
            signum = _pending[0]
            _pending.clear()
            signal.raise_signal(signum)


def _move_into_place(staged: Path, folder: Path) -> None:
    """Replace ``folder`` by ``staged``; on failure the old folder is put back. Signals are
    held meanwhile: a stop during the swap or the removal of the old folder takes effect
    after the old folder is gone."""
    with _signals_held():
        _swap(staged, folder)


def _swap(staged: Path, folder: Path) -> None:
    if not folder.exists():
        os.rename(staged, folder)
        return
    retired = _unused_sibling_name(folder, "old")
    os.rename(folder, retired)
    try:
        os.rename(staged, folder)
    except BaseException:
        os.rename(retired, folder)
        raise
    shutil.rmtree(retired, ignore_errors=True)


def write_outputs(
    folder: str | os.PathLike[str],
    files: Mapping[str, bytes | str],
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Write a whole output folder at once, or nothing at all.

    Parameters
    ----------
    folder : path-like
        The output folder. If it exists it must have been written by blendq (it holds the
        :data:`MARKER_NAME` file) or be empty; it is then replaced as a whole.
    files : mapping of str to bytes or str
        Relative file names (``"report.html"``, ``"charts/rate.png"``; forward slashes) and
        their contents; text is written as UTF-8 exactly as given.
    protect : iterable of path-like
        Input files of the run. Refused: an output folder that is one of them or holds one
        of them (replacing the folder would delete it).

    Returns
    -------
    pathlib.Path
        The output folder, as an absolute path.

    Raises
    ------
    InputError
        Bad file names, a protected input in the way, or an existing folder that blendq did
        not make.

    Notes
    -----
    Everything is written into a new hidden sibling folder; when all files and the marker are
    on disk, the old folder (if any) is renamed aside, the new one renamed into place, and the
    old one deleted. A rename within one folder is atomic, so an observer sees either the old
    output or the new one; if anything fails, the sibling is removed and the old folder stays
    as it was.
    """
    target = Path(os.path.abspath(folder))
    entries = _checked_names(files)
    _check_protected(target, protect)
    _check_replaceable(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    with _signals_held():  # a stop between creating the folder and the try below
        staged = _fresh_sibling(target, "partial")
    try:
        for relative, data in entries:
            path = staged.joinpath(*relative.parts)
            path.parent.mkdir(parents=True, exist_ok=True)
            _write_file(path, data)
        _write_file(staged / MARKER_NAME, _MARKER_TEXT.encode("utf-8"))
        _move_into_place(staged, target)
    except BaseException:  # an error, or a stop (SIGINT, SIGTERM, SIGHUP) while writing
        with _signals_held():
            shutil.rmtree(staged, ignore_errors=True)
        raise
    return target


# ---------------------------------------------------------------------------------------------
# CSV

# (the CSV writer, blendq.csvtext, is at the bottom of the package: the review's findings
# table uses it too; its names are kept here)

# ---------------------------------------------------------------------------------------------
# JSON


def _plain(value: Any, digits: int | None) -> Any:
    """Turn a value into JSON-ready Python objects (NaN and infinities become None)."""
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        # a narrow numpy float reads back through its own shortest text (float32 0.1 -> 0.1)
        number = float(str(value)) if isinstance(value, np.floating) else float(value)
        if not math.isfinite(number):
            return None
        if digits is not None:
            number = float(f"{number:.{digits}g}")
        return number + 0.0  # -0.0 becomes 0.0
    if isinstance(value, enum.Enum):
        return _plain(value.value, digits)
    if value is pd.NaT or value is pd.NA:
        return None
    if isinstance(value, np.datetime64):
        return None if np.isnat(value) else pd.Timestamp(value).isoformat()
    if isinstance(value, (dt.datetime, dt.date, dt.time, pd.Timestamp)):
        return value.isoformat()
    if isinstance(value, PurePath):
        return value.as_posix()
    if isinstance(value, np.ndarray):
        return _plain(value.tolist(), digits)
    if isinstance(value, pd.DataFrame):
        table: dict[str, Any] = {
            "columns": [str(label) for label in value.columns],
            "rows": [_plain(row, digits) for row in value.itertuples(index=False, name=None)],
        }
        if not isinstance(value.index, pd.RangeIndex):
            table["index"] = _plain(list(value.index), digits)
        return table
    if isinstance(value, pd.Series):
        return _plain(value.to_dict(), digits)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _plain({f.name: getattr(value, f.name) for f in dataclasses.fields(value)}, digits)
    if isinstance(value, Mapping):
        plain: dict[str, Any] = {}
        for key, item in value.items():
            text = key if isinstance(key, str) else json.dumps(_plain(key, digits))
            if text in plain:
                raise ValueError(f"two keys turn into the same JSON key {text!r}")
            plain[text] = _plain(item, digits)
        return plain
    if isinstance(value, (set, frozenset)):
        items = [_plain(item, digits) for item in value]
        return sorted(items, key=lambda item: json.dumps(item, sort_keys=True))
    if isinstance(value, (list, tuple)):
        return [_plain(item, digits) for item in value]
    raise TypeError(f"cannot write a {type(value).__name__} to JSON")


def to_json_stable(obj: Any, digits: int | None = None, indent: int = 2) -> str:
    """JSON text that is byte-identical for equal inputs.

    Parameters
    ----------
    obj : Any
        Nested dicts, lists, tuples, sets, numbers (Python or numpy), strings, numpy arrays,
        DataFrames (``{"columns", "rows"}`` plus ``"index"`` unless it is a plain range),
        Series (as a mapping), dataclasses, dates, paths, enums.
    digits : int, optional
        Round floats to this many significant digits. Default: the shortest text that reads
        back as the same float (Python's ``repr``).
    indent : int
        Spaces per nesting level.

    Returns
    -------
    str
        UTF-8-ready JSON ending with a newline: keys sorted, NaN and infinities as ``null``,
        ``-0.0`` as ``0.0``, non-string keys written as their JSON text.
    """
    plain = _plain(obj, digits)
    text = json.dumps(
        plain,
        sort_keys=True,
        indent=indent,
        ensure_ascii=False,
        allow_nan=False,
        separators=(",", ": "),
    )
    return text + "\n"
