"""Recording start times and clock alignment (bandmeter.clock).

Expected clock times come from calendar arithmetic (python datetime) on the values written
into the files; the bext layout follows EBU Tech 3285; time formats follow ISO 8601.
"""

from __future__ import annotations

import random
from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pytest
import soundfile as sf
from wavinfo import WavInfoReader

from bandmeter.clock import (
    StartTime,
    aligned_first_boundary,
    contiguous_runs,
    parse_start_option,
    parse_timezone,
    resolve_start,
    start_from_bext,
    start_from_name,
)
from bandmeter.errors import AudioError, SettingsError

from bwf_writer import write_bwf

FS = 48000
PLUS1 = timezone(timedelta(hours=1))
PARIS = ZoneInfo("Europe/Paris")
UTC_WARNING = "bext time has no time zone; assumed UTC (give --timezone)"


# --------------------------------------------------------------------------- BWF writer


def _tone(n: int = 4800, fs: int = FS) -> np.ndarray:
    return 0.25 * np.sin(2 * np.pi * 1000.0 * np.arange(n) / fs)


def test_bwf_writer_keeps_audio_and_wavinfo_reads_fields(tmp_path):
    x = _tone()
    plain, bwf = tmp_path / "plain.wav", tmp_path / "survey_q7.wav"
    sf.write(plain, x, FS, subtype="PCM_24")
    ref = 2**32 + 12345  # uses TimeReferenceHigh
    write_bwf(bwf, x, date="2026-05-14", time="22:00:00", time_reference=ref)
    y, fs = sf.read(bwf)
    assert fs == FS
    np.testing.assert_array_equal(y, sf.read(plain)[0])
    bext = WavInfoReader(str(bwf)).bext
    assert bext is not None
    assert (bext.originator_date, bext.originator_time) == ("2026-05-14", "22:00:00")
    assert bext.time_reference == ref
    assert bext.originator == "Fieldbox FB-2"
    assert bext.version == 1
    assert bext.description == "invented test survey, point Q7"


# --------------------------------------------------------------------------- bext


def test_bext_time_reference_gives_sub_second_start(tmp_path):
    path = tmp_path / "q7.wav"
    ref = 22 * 3600 * FS + 12345
    write_bwf(path, _tone(), date="2026-05-14", time="22:00:00", time_reference=ref)
    got = start_from_bext(path, parse_timezone("+01:00"))
    assert isinstance(got, StartTime)
    # calendar arithmetic (python datetime): 12345 / 48000 s = 0.2571875 s -> 257188 us
    # (nearest microsecond, ties to even)
    assert got.when == datetime(2026, 5, 14, 22, 0, 0, 257188, tzinfo=PLUS1)
    assert got.when.astimezone(timezone.utc) == datetime(
        2026, 5, 14, 21, 0, 0, 257188, tzinfo=timezone.utc
    )
    assert (got.source, got.detail, got.warnings) == (
        "bext",
        "bext OriginationDate/TimeReference",
        (),
    )


def test_bext_with_iana_zone_follows_summer_time(tmp_path):
    path = tmp_path / "q7.wav"
    write_bwf(path, _tone(), time_reference=22 * 3600 * FS + 12345)
    got = start_from_bext(path, parse_timezone("Europe/Paris"))
    assert got is not None
    assert got.when.utcoffset() == timedelta(hours=2)  # CEST in May (tz database)
    # calendar arithmetic (python datetime)
    assert got.when.astimezone(timezone.utc) == datetime(
        2026, 5, 14, 20, 0, 0, 257188, tzinfo=timezone.utc
    )
    assert got.warnings == ()


def test_bext_without_zone_is_utc_with_warning(tmp_path):
    path = tmp_path / "q7.wav"
    write_bwf(path, _tone(), time="06:30:00", time_reference=0)
    got = start_from_bext(path, None)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 6, 30, 0, tzinfo=timezone.utc)
    assert got.detail == "bext OriginationDate/OriginationTime"
    assert got.warnings == (UTC_WARNING,)


def test_no_bext_gives_none(tmp_path):
    wav, flac = tmp_path / "plain.wav", tmp_path / "plain.flac"
    sf.write(wav, _tone(), FS, subtype="PCM_16")
    sf.write(flac, _tone(), FS, subtype="PCM_16")
    assert start_from_bext(wav, PLUS1) is None
    assert start_from_bext(flac, PLUS1) is None
    empty_date = tmp_path / "nodate.wav"
    write_bwf(empty_date, _tone(), date="", time="", time_reference=0)
    assert start_from_bext(empty_date, PLUS1) is None
    zero_date = tmp_path / "zerodate.wav"
    write_bwf(zero_date, _tone(), date="0000-00-00", time="00:00:00")
    assert start_from_bext(zero_date, PLUS1) is None


def test_bext_unreadable_file_or_date_is_audio_error(tmp_path):
    with pytest.raises(AudioError, match="no such file"):
        start_from_bext(tmp_path / "missing.wav", PLUS1)
    truncated = tmp_path / "truncated.wav"
    truncated.write_bytes(b"RIFF\xff\x00\x00\x00WAVEfmt ")
    with pytest.raises(AudioError, match="cannot read the WAV chunks"):
        start_from_bext(truncated, PLUS1)
    bad_date = tmp_path / "baddate.wav"
    write_bwf(bad_date, _tone(), date="2026-13-40")
    with pytest.raises(AudioError, match="OriginationDate '2026-13-40'"):
        start_from_bext(bad_date, PLUS1)


def test_bext_time_reference_disagreeing_with_origination_time(tmp_path):
    path = tmp_path / "q7.wav"
    # TimeReference 01:00:00 (a timecode start), OriginationTime 22:00:00
    write_bwf(path, _tone(), time="22:00:00", time_reference=3600 * FS)
    got = start_from_bext(path, PLUS1)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 22, 0, 0, tzinfo=PLUS1)
    assert got.detail == "bext OriginationDate/OriginationTime"
    assert len(got.warnings) == 1
    assert "disagrees with OriginationTime 22:00:00" in got.warnings[0]
    assert "used OriginationTime" in got.warnings[0]


def test_bext_time_reference_more_than_a_day_is_not_a_time_of_day(tmp_path):
    path = tmp_path / "q7.wav"
    write_bwf(path, _tone(), time="01:00:00", time_reference=25 * 3600 * FS)
    got = start_from_bext(path, PLUS1)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 1, tzinfo=PLUS1)
    assert "more than 24 h" in got.warnings[0] and "used OriginationTime" in got.warnings[0]


def test_bext_empty_origination_time(tmp_path):
    with_ref = tmp_path / "ref.wav"
    write_bwf(with_ref, _tone(), time="", time_reference=3600 * FS,
              description="relev\u00e9 de nuit")  # non-ASCII Description (latin-1)
    got = start_from_bext(with_ref, PLUS1)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 1, tzinfo=PLUS1)
    assert got.detail == "bext OriginationDate/TimeReference"
    assert got.warnings == ("bext OriginationTime '' is empty or unreadable; used TimeReference",)
    without = tmp_path / "noref.wav"
    write_bwf(without, _tone(), time="", time_reference=0)
    assert start_from_bext(without, PLUS1) is None
    garbled = tmp_path / "garbled.wav"
    write_bwf(garbled, _tone(), time="late", time_reference=0)
    with pytest.raises(AudioError, match="OriginationTime 'late' is unreadable"):
        start_from_bext(garbled, PLUS1)


def test_bext_time_reference_across_midnight_keeps_origination_day(tmp_path):
    path = tmp_path / "q7.wav"
    # OriginationTime 00:00:00 on 05-14, TimeReference 0.25 s before midnight
    write_bwf(path, _tone(), date="2026-05-14", time="00:00:00",
              time_reference=24 * 3600 * FS - FS // 4)
    got = start_from_bext(path, PLUS1)
    assert got is not None
    # calendar arithmetic (python datetime): 0.25 s before midnight of 05-14
    assert got.when == datetime(2026, 5, 13, 23, 59, 59, 750000, tzinfo=PLUS1)
    assert got.warnings == ()


def test_bext_time_reference_at_44k1_is_exact_to_the_microsecond(tmp_path):
    path = tmp_path / "q7.wav"
    write_bwf(path, _tone(fs=44100), 44100, time="10:00:00",
              time_reference=10 * 3600 * 44100 + 12345)
    got = start_from_bext(path, PLUS1)
    assert got is not None
    # calendar arithmetic: 12345 / 44100 s = 0.27993197... s -> 279932 us
    assert got.when == datetime(2026, 5, 14, 10, 0, 0, 279932, tzinfo=PLUS1)
    # the next whole second is 44100 - 12345 samples away, exactly
    assert aligned_first_boundary(got.when, 1.0, 44100) == 44100 - 12345


# --------------------------------------------------------------------------- names


def test_name_pattern_basic_with_and_without_extension():
    pattern = "MP2_%Y%m%d_%H%M%S"
    got = start_from_name("/data/survey/MP2_20260514_220000.wav", pattern, PLUS1)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 22, 0, 0, tzinfo=PLUS1)
    assert (got.source, got.detail, got.warnings) == ("name", "name pattern " + pattern, ())
    with_ext = start_from_name("MP2_20260514_220000.wav", pattern + ".wav", PLUS1)
    assert with_ext is not None and with_ext.when == got.when
    surrounded = start_from_name("pointQ7_MP2_20260514_220000_ch1.wav", pattern, PLUS1)
    assert surrounded is not None and surrounded.when == got.when


def test_name_pattern_without_zone_is_utc_with_warning():
    got = start_from_name("MP2_20260514_220000.wav", "MP2_%Y%m%d_%H%M%S", None)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 22, tzinfo=timezone.utc)
    assert got.warnings == ("name time has no time zone; assumed UTC (give --timezone)",)


def test_name_pattern_with_zone_in_name():
    got = start_from_name("FB_20260514T220000+0100.wav", "FB_%Y%m%dT%H%M%S%z", None)
    assert got is not None
    assert got.when == datetime(2026, 5, 14, 22, tzinfo=PLUS1)
    assert got.warnings == ()
    # a different --timezone does not override the name's offset, but is noted
    other = start_from_name("FB_20260514T220000+0100.wav", "FB_%Y%m%dT%H%M%S%z", PARIS)
    assert other is not None and other.when == got.when
    assert "from the file name used instead of Europe/Paris" in other.warnings[0]


def test_name_pattern_other_codes():
    # calendar arithmetic: day 134 of 2026 is May 14 (31 + 28 + 31 + 30 + 14)
    got = start_from_name("REC_26134_2200.wav", "REC_%y%j_%H%M", PLUS1)
    assert got is not None and got.when == datetime(2026, 5, 14, 22, tzinfo=PLUS1)
    got = start_from_name("14May2026_1000PM.wav", "%d%b%Y_%I%M%p", PLUS1)
    assert got is not None and got.when == datetime(2026, 5, 14, 22, tzinfo=PLUS1)
    got = start_from_name("t_20260514_220000.250.wav", "t_%Y%m%d_%H%M%S.%f", PLUS1)
    assert got is not None and got.when == datetime(2026, 5, 14, 22, 0, 0, 250000, tzinfo=PLUS1)


def test_name_not_matching_gives_none():
    pattern = "MP2_%Y%m%d_%H%M%S"
    assert start_from_name("MP3_20260514_220000.wav", pattern, PLUS1) is None
    assert start_from_name("MP2_2026-05-14_220000.wav", pattern, PLUS1) is None
    assert start_from_name("notes.txt", pattern, PLUS1) is None
    # the pattern is searched in the name only, not in folders
    assert start_from_name("MP2_20260514_220000/take.wav", pattern, PLUS1) is None


def test_name_pattern_metacharacters_are_literal():
    pattern = "rec(1)_%Y-%m-%d"
    got = start_from_name("rec(1)_2026-05-14.wav", pattern, PLUS1)
    assert got is not None and got.when == datetime(2026, 5, 14, tzinfo=PLUS1)
    assert got.warnings == ("name pattern 'rec(1)_%Y-%m-%d' gives no time of day; "
                            "assumed 00:00:00",)
    assert start_from_name("rec1_2026-05-14.wav", pattern, PLUS1) is None
    assert start_from_name("a.b_20260514_2200", "a.b_%Y%m%d_%H%M", PLUS1) is not None
    assert start_from_name("aXb_20260514_2200", "a.b_%Y%m%d_%H%M", PLUS1) is None


def test_name_pattern_errors():
    with pytest.raises(SettingsError, match="unsupported code '%Q'"):
        start_from_name("x.wav", "x_%Q", PLUS1)
    with pytest.raises(SettingsError, match="must give a year"):
        start_from_name("x.wav", "x_%H%M%S", PLUS1)
    with pytest.raises(SettingsError, match="repeats %Y"):
        start_from_name("x.wav", "%Y%m%d_%Y", PLUS1)
    with pytest.raises(AudioError, match="not a valid date"):
        start_from_name("MP2_20261340_220000.wav", "MP2_%Y%m%d_%H%M%S", PLUS1)


def test_name_time_in_clock_change_is_flagged():
    pattern = "MP2_%Y%m%d_%H%M%S"
    # tz database: Europe/Paris leaves summer time on 2026-10-25 at 03:00 CEST
    folded = start_from_name("MP2_20261025_023000.wav", pattern, PARIS)
    assert folded is not None and folded.when.utcoffset() == timedelta(hours=2)
    assert "occurs twice" in folded.warnings[0]
    # tz database: Europe/Paris enters summer time on 2026-03-29 at 02:00 CET
    gap = start_from_name("MP2_20260329_023000.wav", pattern, PARIS)
    assert gap is not None and "does not exist" in gap.warnings[0]


# --------------------------------------------------------------------------- precedence


def test_resolve_start_precedence(tmp_path):
    pattern = "MP2_%Y%m%d_%H%M%S"
    bwf = tmp_path / "MP2_20260514_210000.wav"
    write_bwf(bwf, _tone(), time="22:00:00", time_reference=22 * 3600 * FS)
    plain = tmp_path / "MP2_20260514_230000.wav"
    sf.write(plain, _tone(), FS, subtype="PCM_16")
    option = "2026-05-14T23:30:00+01:00"
    kw = {"name_pattern": pattern, "option": option, "tz": PLUS1}

    assert resolve_start(bwf, **kw).source == "bext"
    explicit = resolve_start(bwf, prefer=("option", "bext", "name"), **kw)
    assert explicit.source == "option"
    assert explicit.when == datetime(2026, 5, 14, 23, 30, tzinfo=PLUS1)
    assert resolve_start(bwf, prefer=("name", "bext"), **kw).when == datetime(
        2026, 5, 14, 21, tzinfo=PLUS1
    )
    assert resolve_start(plain, **kw).source == "name"
    assert resolve_start(plain, option=option, tz=PLUS1).source == "option"
    assert resolve_start(plain, tz=PLUS1) is None
    assert resolve_start(plain, option=datetime(2026, 5, 14, tzinfo=PLUS1)).source == "option"
    with pytest.raises(SettingsError, match="no UTC offset"):
        resolve_start(plain, option=datetime(2026, 5, 14))
    with pytest.raises(SettingsError, match="unknown start-time source 'gps'"):
        resolve_start(plain, prefer=("gps",))


# --------------------------------------------------------------------------- alignment


def test_aligned_first_boundary_quarter_hours():
    start = datetime(2026, 5, 14, 22, 7, 30, tzinfo=PLUS1)
    # calendar arithmetic: 22:07:30 -> 22:15:00 is 7.5 min
    assert aligned_first_boundary(start, 900, FS) == 7 * 60 * FS + 30 * FS  # 7.5 min
    assert aligned_first_boundary(start.replace(minute=15, second=0), 900, FS) == 0
    assert aligned_first_boundary(start, 3600, FS) == (52 * 60 + 30) * FS  # to 23:00
    assert aligned_first_boundary(start, 1.0, FS) == 0


def test_aligned_first_boundary_44k1_half_second():
    start = datetime(2026, 5, 14, 10, 0, 0, 500000, tzinfo=PLUS1)
    assert aligned_first_boundary(start, 1.0, 44100) == 22050  # 0.5 s x 44100 Hz
    assert aligned_first_boundary(start.replace(microsecond=50000), 0.1, 44100) == 2205


def test_aligned_first_boundary_microseconds():
    base = datetime(2026, 5, 14, 22, 14, 59, tzinfo=PLUS1)
    assert aligned_first_boundary(base.replace(microsecond=999000), 900, FS) == 48  # 1 ms
    # within half a sample (10.4 us at 48 kHz) of a boundary counts as on it
    assert aligned_first_boundary(base.replace(microsecond=999990), 900, FS) == 0
    after = datetime(2026, 5, 14, 22, 15, 0, 5, tzinfo=PLUS1)
    assert aligned_first_boundary(after, 900, FS) == 0
    after = datetime(2026, 5, 14, 22, 15, 0, 20, tzinfo=PLUS1)
    # 900 s - 20 us = 43199999.04 samples -> 43199999
    assert aligned_first_boundary(after, 900, FS) == 900 * FS - 1


def test_aligned_first_boundary_uses_local_wall_clock():
    start = datetime(2026, 5, 14, 22, 7, 30, tzinfo=PARIS)
    assert aligned_first_boundary(start, 900, FS) == 450 * FS
    # the same instant seen in a +05:30 zone is 01:37:30 local: next :45 is 7.5 min away too
    shifted = start.astimezone(timezone(timedelta(hours=5, minutes=30)))
    assert aligned_first_boundary(shifted, 3600, FS) == (22 * 60 + 30) * FS


def test_aligned_first_boundary_rejects_interval_not_dividing_a_day():
    start = datetime(2026, 5, 14, 22, 7, 30, tzinfo=PLUS1)
    with pytest.raises(SettingsError, match="does not divide 24 h evenly"):
        aligned_first_boundary(start, 7 * 60, FS)
    with pytest.raises(SettingsError, match="does not divide 24 h evenly"):
        aligned_first_boundary(start, 2 * 86400, FS)
    with pytest.raises(SettingsError, match="positive"):
        aligned_first_boundary(start, 0.0, FS)


# --------------------------------------------------------------------------- runs


def _hour_files(n: int = 3, fs: float = FS) -> list[tuple[datetime, float, float]]:
    t0 = datetime(2026, 5, 14, 22, tzinfo=PLUS1)
    return [(t0 + timedelta(hours=k), 3600.0, fs) for k in range(n)]


def test_contiguous_runs_back_to_back_shuffled():
    items = _hour_files()
    order = [2, 0, 1]
    shuffled = [items[k] for k in order]
    assert contiguous_runs(shuffled) == [[1, 2, 0]]
    # a recorder's 1 ms jitter is within the default 2 ms tolerance
    jitter = [(s + timedelta(milliseconds=k), d, r) for k, (s, d, r) in enumerate(items)]
    assert contiguous_runs(jitter) == [[0, 1, 2]]
    # the same instants in another zone still join
    mixed = [items[0], (items[1][0].astimezone(timezone.utc), 3600.0, FS), items[2]]
    assert contiguous_runs(mixed) == [[0, 1, 2]]


def test_contiguous_runs_breaks_on_gap_overlap_and_rate():
    items = _hour_files()
    gap = [items[0], (items[1][0] + timedelta(seconds=5), 3600.0, FS), items[2]]
    assert contiguous_runs(gap) == [[0], [1], [2]]
    late = [items[0], items[1], (items[2][0] + timedelta(seconds=5), 3600.0, FS)]
    assert contiguous_runs(late) == [[0, 1], [2]]
    overlap = [items[0], (items[1][0] - timedelta(seconds=1), 3600.0, FS)]
    assert contiguous_runs(overlap) == [[0], [1]]
    rate = [items[0], (items[1][0], 3600.0, 44100.0), items[2]]
    assert contiguous_runs(rate) == [[0], [1], [2]]
    assert contiguous_runs([]) == []


def test_contiguous_runs_parallel_channel_files():
    a, b = _hour_files(2), _hour_files(2)
    items = a + b  # two recorders (or one file per channel) with the same timing
    random.Random(7).shuffle(items)
    runs = contiguous_runs(items)
    assert len(runs) == 2 and all(len(run) == 2 for run in runs)
    for run in runs:
        assert items[run[0]][0] < items[run[1]][0]


# --------------------------------------------------------------------------- parsing


def test_parse_timezone_forms():
    assert parse_timezone("+01:00") == PLUS1
    assert parse_timezone("-0530") == timezone(-timedelta(hours=5, minutes=30))
    assert parse_timezone("+02") == timezone(timedelta(hours=2))
    assert parse_timezone("Z") == timezone.utc
    assert parse_timezone("utc") == timezone.utc
    assert parse_timezone("Europe/Paris") == PARIS


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("Mars/Olympus_Base", "unknown time zone 'Mars/Olympus_Base'; use an offset"),
        ("Europe", "unknown time zone 'Europe'"),
        ("+25:00", "out of range"),
        ("+01:75", "out of range"),
        ("", "cannot read time zone ''"),
        ("1h", "cannot read time zone '1h'"),
    ],
)
def test_parse_timezone_errors(text, message):
    with pytest.raises(SettingsError, match=message):
        parse_timezone(text)


def test_parse_start_option():
    # ISO 8601 extended format with offset
    assert parse_start_option("2026-05-14T22:00:00+01:00") == datetime(
        2026, 5, 14, 22, tzinfo=PLUS1
    )
    assert parse_start_option("2026-05-14T21:00:00.250Z") == datetime(
        2026, 5, 14, 21, 0, 0, 250000, tzinfo=timezone.utc
    )
    with pytest.raises(SettingsError, match="has no UTC offset; add one, e.g."):
        parse_start_option("2026-05-14T22:00:00")
    with pytest.raises(SettingsError, match="cannot read start time 'tonight'; use ISO 8601"):
        parse_start_option("tonight")


def test_start_time_to_dict_is_json_ready():
    st = StartTime(datetime(2026, 5, 14, 22, tzinfo=PLUS1), "option", "start option", ("w",))
    assert st.to_dict() == {
        "when": "2026-05-14T22:00:00+01:00",
        "source": "option",
        "detail": "start option",
        "warnings": ["w"],
    }
