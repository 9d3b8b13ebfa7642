"""Atomic output files: written to a temporary file in the same folder, then renamed.

A reader never sees a half-written file under the final name, an interrupted write leaves the
previous file intact, and an existing file is only replaced when ``force`` is given.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import tempfile
from collections.abc import Iterator
from typing import IO, Any

from .errors import OutputError, SettingsError


def check_writable(path: str | os.PathLike[str], force: bool) -> None:
    """Refuse an output path that exists (unless ``force``) or whose folder is missing.

    Raises
    ------
    OutputError
        With a one-line message naming the path and the fix.
    """
    spath = os.fspath(path)
    if os.path.isdir(spath):
        raise OutputError(f"{spath}: is a folder, expected a file name for the output")
    if os.path.exists(spath) and not force:
        raise OutputError(f"{spath}: already exists; use --force to replace it")
    folder = os.path.dirname(os.path.abspath(spath))
    if not os.path.isdir(folder):
        raise OutputError(f"{spath}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OutputError(f"{spath}: folder {folder} is not writable; choose an output folder "
                          "you can write to")


@contextlib.contextmanager
def atomic_open(
    path: str | os.PathLike[str], mode: str = "w", force: bool = False, encoding: str = "utf-8"
) -> Iterator[IO]:
    """Open a temporary file next to ``path``; rename it to ``path`` when the block succeeds.

    Parameters
    ----------
    path : str or path-like
        Final file name.
    mode : {"w", "wb"}
        Text or binary.
    force : bool
        Replace an existing file.
    encoding : str
        Text encoding for ``mode="w"``.

    Raises
    ------
    OutputError
        The path exists without ``force``, the folder is missing or not writable, or the
        write failed (e.g. disk full); the temporary file is removed and any previous file
        at ``path`` is left as it was.
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', got {mode!r}")
    spath = os.fspath(path)
    check_writable(spath, force)
    folder = os.path.dirname(os.path.abspath(spath))
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{os.path.basename(spath)}.", suffix=".part",
                                   dir=folder)
    except OSError as exc:
        raise OutputError(_failure(spath, exc, f"cannot create a file in {folder}")) from exc
    try:
        kwargs = {} if "b" in mode else {"encoding": encoding, "newline": ""}
        with os.fdopen(fd, mode, **kwargs) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        if os.path.exists(spath) and not force:
            raise OutputError(f"{spath}: appeared while writing; use --force to replace it")
        os.replace(tmp, spath)
    except OSError as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(exc, OutputError):
            raise
        raise OutputError(_failure(spath, exc, "write failed")) from exc
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def _failure(path: str, exc: OSError, what: str) -> str:
    """One line for a failed output: the path, the reason and what to do."""
    if exc.errno == errno.ENOSPC:
        return (f"{path}: no space left on device ({what}); free some space or write "
                "elsewhere, then run again (no earlier file was changed)")
    if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return (f"{path}: {what} ({exc.strerror}); choose an output folder you can write to "
                "(no earlier file was changed)")
    return f"{path}: {what} ({exc.strerror or exc})"


def write_text(path: str | os.PathLike[str], text: str, force: bool = False) -> None:
    """Write a text file atomically (see :func:`atomic_open`)."""
    with atomic_open(path, "w", force=force) as handle:
        handle.write(text)


def write_bytes(path: str | os.PathLike[str], data: bytes, force: bool = False) -> None:
    """Write a binary file atomically (see :func:`atomic_open`)."""
    with atomic_open(path, "wb", force=force) as handle:
        handle.write(data)


def json_safe(obj: object) -> object:
    """Plain data for strict JSON: NaN and infinities become null, numpy scalars Python."""
    if isinstance(obj, float):
        return obj if obj == obj and abs(obj) != float("inf") else None
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalar
        return json_safe(obj.item())
    return obj


def json_text(obj: object, indent: int | None = 2) -> str:
    """Strict JSON text of ``obj`` (see :func:`json_safe`)."""
    return json.dumps(json_safe(obj), indent=indent, allow_nan=False)


def read_json(path: str) -> Any:
    """Read a JSON file that bandmeter (or the user) wrote: one-line errors.

    Raises
    ------
    SettingsError
        Missing, unreadable (a folder, no permission, not UTF-8) or not valid JSON.
    """
    try:
        with open(path, encoding="utf-8") as handle:
            return json.load(handle)
    except FileNotFoundError:
        raise SettingsError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SettingsError(f"{path}: cannot read the file ({exc})") from None
    except json.JSONDecodeError as exc:
        raise SettingsError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") \
            from None
