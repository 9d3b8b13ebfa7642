"""The batch manifest: what was analysed, from which bytes, with which settings, and how.

``manifest.json`` in a batch output folder holds one entry per measurement (a recording, or
several joined recordings), keyed by ``id``::

    {"format": "bandmeter-batch-manifest", "schema_version": 1, "tool_version": "0.1.0",
     "updated": "...", "settings": {...}, "settings_hash": "...",
     "entries": {"<id>": {"id", "path", "size", "mtime", "sha256", "files": [...],
                          "calibration_id", "settings_hash", "tool_version", "status",
                          "error", "result_file", "start_time", "start_source", ...}}}

``status`` is ``ok`` or ``failed`` (with the one-line ``error``). The manifest is rewritten
atomically after every finished measurement, so a run killed at any moment keeps every
result it finished and a rerun continues from there.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass, field
from typing import Any

from . import __version__
from .errors import OutputError, SettingsError
from .outputs import write_text
from .provenance import now_iso

MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "bandmeter-batch-manifest"
SCHEMA_VERSION = 1


def settings_hash(settings: dict[str, Any]) -> str:
    """16 hex digits of the SHA-256 of the analysis settings (canonical JSON).

    ``block_frames`` is left out: results do not depend on the block length.
    """
    data = {k: v for k, v in settings.items() if k != "block_frames"}
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def measurement_id(path: str) -> str:
    """Stable id of a measurement from its (first) file: readable name plus a path hash."""
    absolute = os.path.normpath(os.path.abspath(path))
    stem = "".join(c if c.isalnum() or c in "._-" else "_" for c in os.path.basename(path))
    return f"{stem}-{hashlib.sha1(absolute.encode()).hexdigest()[:10]}"


@dataclass
class Manifest:
    """The manifest of one output folder (see the module docstring)."""

    path: str
    settings: dict[str, Any] = field(default_factory=dict)
    settings_hash: str = ""
    entries: dict[str, dict[str, Any]] = field(default_factory=dict)

    @classmethod
    def load(cls, out_dir: str) -> Manifest:
        """The folder's manifest, or an empty one when there is none yet.

        Raises
        ------
        OutputError
            A manifest that cannot be read or is not a bandmeter batch manifest.
        """
        path = os.path.join(out_dir, MANIFEST_NAME)
        if not os.path.exists(path):
            return cls(path)
        try:
            with open(path, encoding="utf-8") as handle:
                data = json.load(handle)
        except (OSError, ValueError) as exc:
            raise OutputError(f"{path}: cannot read the batch manifest ({exc}); move it away "
                              "or use --force to start afresh") from None
        if not isinstance(data, dict) or data.get("format") != MANIFEST_FORMAT:
            raise OutputError(f"{path}: not a bandmeter batch manifest")
        if data.get("schema_version") != SCHEMA_VERSION:
            raise OutputError(f"{path}: manifest schema {data.get('schema_version')!r} is not "
                              f"{SCHEMA_VERSION}; use another --out folder or --force")
        entries = data.get("entries")
        if not isinstance(entries, dict):
            raise OutputError(f"{path}: manifest without entries")
        return cls(path, data.get("settings") or {}, data.get("settings_hash") or "", entries)

    @classmethod
    def of_finished_batch(cls, out_dir: str, hint: str = "") -> Manifest:
        """The manifest of an existing batch output folder, for reading its results.

        Raises
        ------
        SettingsError
            The folder has no manifest (the message names the folder, then ``hint``).
        OutputError
            As :meth:`load`.
        """
        if not os.path.isfile(os.path.join(out_dir, MANIFEST_NAME)):
            raise SettingsError(f"{out_dir}: not a batch output folder (no {MANIFEST_NAME})"
                                f"{hint}")
        return cls.load(out_dir)

    @staticmethod
    def analysed(entry: dict[str, Any]) -> bool:
        """Whether a manifest entry is an analysed measurement with a result file."""
        return entry.get("status") == "ok" and bool(entry.get("result_file"))

    def to_dict(self) -> dict[str, Any]:
        return {
            "format": MANIFEST_FORMAT,
            "schema_version": SCHEMA_VERSION,
            "tool_version": __version__,
            "updated": now_iso(),
            "settings": self.settings,
            "settings_hash": self.settings_hash,
            "entries": self.entries,
        }

    def save(self) -> None:
        """Rewrite the manifest atomically."""
        write_text(self.path, json.dumps(self.to_dict(), indent=1, allow_nan=False) + "\n",
                   force=True)

    def candidate(self, entry_id: str, paths: list[str], calibration_id: str | None,
                  start_time: str | None, out_dir: str) -> dict[str, Any] | None:
        """The earlier entry whose result may be kept if the files' bytes are unchanged.

        Same files, settings, calibration and start time, status ``ok`` and its result file
        still present; the caller then compares the content hashes (:func:`same_content`).
        """
        old = self.entries.get(entry_id)
        if not old or old.get("status") != "ok":
            return None
        same = (
            [f.get("path") for f in old.get("files", [])] == list(paths)
            and old.get("settings_hash") == self.settings_hash
            and old.get("calibration_id") == calibration_id
            and old.get("start_time") == start_time
        )
        result = old.get("result_file")
        if same and result and os.path.exists(os.path.join(out_dir, result)):
            return old
        return None


def same_content(old: dict[str, Any], files: list[dict[str, Any]]) -> bool:
    """True when an earlier entry's files have the SHA-256 of ``files`` now."""
    return [f.get("sha256") for f in old.get("files", [])] == [f["sha256"] for f in files]
