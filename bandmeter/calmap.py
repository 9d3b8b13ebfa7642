"""Which calibration applies to which recording in a batch.

A survey of several field days carries several calibrations. A calibration map is a CSV
file, one row per rule, first matching rule wins::

    recording,calibration,tone,level,span
    day1/*.wav,day1.cal.json,,,
    day2/mp2_*.wav,,day2/cal_pre.wav,94.0,
    day2/mp3_*.wav,,day2/cal_mp3.wav,114.0,2:12

``recording`` is a path or a glob pattern (``*``, ``?``, ``[...]``, ``**``), relative to the
map file's folder unless absolute, matched against the recording's path. Each rule gives
either ``calibration`` (a file made by ``bandmeter calibrate --save``) or ``tone`` with
``level`` (dB re 20 uPa; ``span`` START:END in seconds optional): a calibration made on the
fly from that calibrator recording. A recording that matches no rule has no calibration: an
error for that recording, never a guess.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import re
from collections.abc import Callable
from dataclasses import dataclass

from .calibration import Calibration, from_tone
from .errors import BandmeterError, CalibrationError, SettingsError

_COLUMNS = ("recording", "calibration", "tone", "level", "span")


def calibration_id(cal: Calibration) -> str:
    """Stable identity of a calibration: 16 hex digits of the SHA-256 of its content.

    The creation time and tool version are left out, so the same calibrator tone analysed
    twice gives the same id (a batch rerun then recognises its earlier results).
    """
    data = cal.to_dict()
    for key in ("created", "tool_version"):
        data.pop(key, None)
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def _glob_regex(pattern: str) -> re.Pattern[str]:
    """Regex of a path glob: ``**`` spans folders, ``*`` and ``?`` stay within one name,
    ``[...]`` is a character class; everything else matches literally."""
    text = pattern.replace(os.sep, "/")
    out, i = [], 0
    while i < len(text):
        c = text[i]
        if text.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
        elif text.startswith("**", i):
            out.append(".*")
            i += 2
        elif c == "*":
            out.append("[^/]*")
            i += 1
        elif c == "?":
            out.append("[^/]")
            i += 1
        elif c == "[" and text.find("]", i + 2) != -1:  # "[]x]" holds "]" (as fnmatch)
            end = text.index("]", i + 2)
            body = text[i + 1 : end]
            negate = body.startswith("!")
            body = re.sub(r"([\\\]^])", r"\\\1", body[1:] if negate else body)
            out.append("[" + ("^" if negate else "") + body + "]")
            i = end + 1
        else:
            out.append(re.escape(c))
            i += 1
    return re.compile("".join(out) + r"\Z", re.DOTALL)


@dataclass
class _Rule:
    pattern: str
    regex: re.Pattern[str]
    calibration: str | None
    tone: str | None
    level: float | None
    span: tuple[float, float] | None
    line: int


class CalibrationMap:
    """Calibration rules read from a CSV map (see the module docstring).

    Parameters
    ----------
    path : str
        The map file.
    loader : callable, optional
        Turns a rule into a Calibration (tests replace it); default loads the file or
        calibrates from the tone.
    """

    def __init__(self, path: str, loader: Callable[[_Rule, int], Calibration] | None = None):
        from .commands.options import parse_span  # the same START:END syntax as the CLI

        self.path = path
        self.base = os.path.dirname(os.path.abspath(path))
        self._loader = loader or self._load
        self._cache: dict[tuple[int, int], Calibration | BandmeterError] = {}
        try:
            with open(path, newline="", encoding="utf-8") as handle:
                rows = list(csv.DictReader(handle))
                header = rows[0].keys() if rows else []
        except (OSError, UnicodeDecodeError, csv.Error) as exc:
            raise SettingsError(f"{path}: cannot read the calibration map ({exc})") from None
        unknown = [c for c in header if c not in _COLUMNS]
        if "recording" not in header or unknown:
            raise SettingsError(f"{path}: a calibration map has the columns "
                                f"{', '.join(_COLUMNS)}; got {', '.join(header) or 'none'}")
        self.rules: list[_Rule] = []
        for line, row in enumerate(rows, start=2):
            self.rules.append(self._rule(row, line, parse_span))
        if not self.rules:
            raise SettingsError(f"{path}: the calibration map has no rule")

    def _rule(self, row: dict[str, str | None], line: int, parse_span) -> _Rule:
        def cell(key: str) -> str | None:
            value = (row.get(key) or "").strip()
            return value or None

        where = f"{self.path}, line {line}"
        pattern = cell("recording")
        if pattern is None:
            raise SettingsError(f"{where}: empty recording pattern")
        cal, tone, level = cell("calibration"), cell("tone"), cell("level")
        if (cal is None) == (tone is None):
            raise SettingsError(f"{where}: give either a calibration file or a tone with level")
        value = None
        if tone is not None:
            try:
                value = float(level) if level is not None else None
            except ValueError:
                value = None
            if value is None:
                raise SettingsError(f"{where}: the tone needs a level in dB, got {level!r}")
        try:
            span = parse_span(cell("span"))
        except SettingsError as exc:
            raise SettingsError(f"{where}: {exc}") from None
        absolute = pattern if os.path.isabs(pattern) else os.path.join(self.base, pattern)
        return _Rule(pattern, _glob_regex(os.path.normpath(absolute)),
                     self._resolve(cal), self._resolve(tone), value, span, line)

    def _resolve(self, name: str | None) -> str | None:
        if name is None:
            return None
        return name if os.path.isabs(name) else os.path.join(self.base, name)

    @staticmethod
    def _load(rule: _Rule, channel: int) -> Calibration:
        if rule.calibration is not None:
            return Calibration.load(rule.calibration)
        assert rule.tone is not None and rule.level is not None
        return from_tone(rule.tone, rule.level, channel=channel, span_s=rule.span)

    def rule_for(self, recording: str) -> _Rule | None:
        """The first rule whose pattern matches the recording's path, or None."""
        target = os.path.normpath(os.path.abspath(recording)).replace(os.sep, "/")
        for rule in self.rules:
            if rule.regex.match(target):
                return rule
        return None

    def calibration_for(self, recording: str, channel: int = 1) -> Calibration:
        """The calibration of a recording (loaded once per rule and channel).

        Raises
        ------
        CalibrationError
            No rule matches, or the rule's calibration cannot be loaded or made.
        """
        rule = self.rule_for(recording)
        if rule is None:
            raise CalibrationError(f"{recording}: no rule of the calibration map {self.path} "
                                   "matches; add one (recordings are never guessed)")
        key = (rule.line, channel)
        if key not in self._cache:
            try:
                self._cache[key] = self._loader(rule, channel)
            except BandmeterError as exc:
                self._cache[key] = exc
        found = self._cache[key]
        if isinstance(found, BandmeterError):
            raise CalibrationError(f"calibration map line {rule.line}: {found}") from None
        return found
