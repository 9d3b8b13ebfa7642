"""Which recordings a batch analyses: files, folders (recursive) and glob patterns."""

from __future__ import annotations

import glob
import os
from collections.abc import Iterable

from .errors import SettingsError

#: File name extensions taken from folders and globs (case-insensitive). A file named
#: explicitly is taken whatever its extension (and fails cleanly if it is not audio).
AUDIO_EXTENSIONS = (".wav", ".wave", ".bwf", ".rf64", ".w64", ".flac")


def _is_audio_name(path: str) -> bool:
    return os.path.splitext(path)[1].lower() in AUDIO_EXTENSIONS


def _walk(folder: str) -> list[str]:
    found = []
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        found.extend(os.path.join(root, f) for f in sorted(files)
                     if not f.startswith(".") and _is_audio_name(f))
    return found


def expand_inputs(inputs: Iterable[str], exclude: Iterable[str] = ()) -> list[str]:
    """Recording paths named by ``inputs``, in a stable order, each once.

    Parameters
    ----------
    inputs : iterable of str
        Files (taken as given), folders (searched recursively for audio files by extension,
        hidden files and folders skipped) and glob patterns (``*``, ``?``, ``[...]``, ``**``).
    exclude : iterable of str
        Folders whose contents are never taken (e.g. the batch's own output folder).

    Returns
    -------
    list of str
        Normalised paths, sorted within each input, duplicates removed (first kept).

    Raises
    ------
    SettingsError
        An input that names nothing (missing file, empty folder, glob without a match).
    """
    skip = [os.path.abspath(e) + os.sep for e in exclude]
    seen: dict[str, None] = {}
    for item in inputs:
        if os.path.isdir(item):
            found = _walk(item)
            what = f"folder {item} holds no audio file ({', '.join(AUDIO_EXTENSIONS)})"
        elif glob.has_magic(item):
            found = sorted(p for p in glob.glob(item, recursive=True)
                           if os.path.isfile(p) and _is_audio_name(p))
            what = f"pattern {item!r} matches no audio file"
        elif os.path.isfile(item):
            found = [item]
            what = ""
        else:
            raise SettingsError(f"{item}: no such file or folder")
        found = [p for p in found if not any(os.path.abspath(p).startswith(s) for s in skip)]
        if not found:
            raise SettingsError(what or f"{item}: excluded")
        for path in found:
            seen.setdefault(os.path.normpath(path), None)
    if not seen:
        raise SettingsError("no recording given")
    return list(seen)
