"""Day-evening-night rating (bandmeter.assess.rating) and the ``rating`` command.

Check values and their sources (REFERENCE_VALUES.md 7):
- Lden formula, default periods 07/19/23 h, +5/+10 dB: Directive 2002/49/EC Annex I
  (confirmed).
- Lday 70 / Levening 65 / Lnight 60 dB -> Lden 70.00 dB; all 60 dB -> 66.40 dB (computed from
  the formula).
- Constant level L -> Lden = L + 10 lg((12 + 4 x 10^0.5 + 8 x 10^1)/24) = L + 6.40 dB
  (computed).
- Ldn: Ld 70, Ln 50 dB -> 68.2 dB (Engineering ToolBox "Ldn" page, confirmed); US EPA
  550/9-74-004 (1974) periods day 07-22, night 22-07 (confirmed).
"""

from __future__ import annotations

import json
import math
from datetime import date, datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

import bandmeter.commands.rating  # noqa: F401  (registers the command on `cli`)
from bandmeter.assess.rating import (
    Periods,
    interval_starts,
    preset,
    rate_intervals,
    rating_level,
)
from bandmeter.cli import cli
from bandmeter.errors import SettingsError
from bandmeter.signals import sine

UTC = timezone.utc
LONDON = ZoneInfo("Europe/London")
#: 10 lg((12 + 4 x 10^0.5 + 8 x 10)/24), computed from the Directive 2002/49/EC formula.
CONSTANT_OFFSET = 10 * math.log10((12 + 4 * 10**0.5 + 8 * 10) / 24)


def hourly(first: datetime, levels: list[float]) -> tuple[list[datetime], list[float]]:
    """Elapsed-time hourly starts from ``first`` and 3600 s durations."""
    return interval_starts(first, [3600.0 * i for i in range(len(levels))]), \
        [3600.0] * len(levels)


def day_profile(day: float, evening: float, night: float) -> list[float]:
    """24 hourly levels from 07:00: 12 h day, 4 h evening, 8 h night."""
    return [day] * 12 + [evening] * 4 + [night] * 8


# --------------------------------------------------------------------------- formula


def test_formula_worked_values():
    p = Periods()
    assert rating_level({"day": 70, "evening": 65, "night": 60}, p) == pytest.approx(70.00,
                                                                                     abs=5e-3)
    assert rating_level({"day": 60, "evening": 60, "night": 60}, p) == pytest.approx(66.40,
                                                                                     abs=5e-3)
    assert CONSTANT_OFFSET == pytest.approx(6.40, abs=5e-3)
    assert rating_level({"day": 70, "night": 50}, preset("ldn")) == pytest.approx(68.2,
                                                                                  abs=0.05)
    assert math.isnan(rating_level({"day": 70, "evening": 65}, p))


def test_periods_presets_and_validation():
    assert Periods().nominal_hours() == {"day": 12.0, "evening": 4.0, "night": 8.0}
    ldn = preset("LDN")
    assert ldn.names == ("day", "night")
    assert ldn.nominal_hours() == {"day": 15.0, "night": 9.0}
    assert ldn.penalties() == {"day": 0.0, "night": 10.0}
    assert ldn.name == "Ldn"
    with pytest.raises(SettingsError, match="unknown rating preset"):
        preset("lnight")
    with pytest.raises(SettingsError, match="day < evening < night"):
        Periods(day_start_h=7, evening_start_h=23, night_start_h=19)
    with pytest.raises(SettingsError, match="< 24"):
        Periods(night_start_h=24)


# --------------------------------------------------------------------------- per day


@pytest.mark.parametrize("level", [45.0, 60.0])
def test_constant_level_gives_level_plus_6_4(level):
    starts, durations = hourly(datetime(2026, 5, 14, 7, tzinfo=UTC), [level] * 24)
    r = rate_intervals(starts, durations, [level] * 24)
    assert [d.date for d in r.days] == [date(2026, 5, 14)]
    day = r.days[0]
    assert day.rating_db == pytest.approx(level + CONSTANT_OFFSET, abs=1e-9)
    assert {n: p.coverage for n, p in day.periods.items()} == {"day": 1.0, "evening": 1.0,
                                                               "night": 1.0}
    assert r.rating_db == pytest.approx(level + 6.40, abs=5e-3)
    assert r.warnings == []


def test_70_65_60_example_per_day_and_survey():
    levels = day_profile(70, 65, 60)
    starts, durations = hourly(datetime(2026, 5, 14, 7, tzinfo=UTC), levels)
    r = rate_intervals(starts, durations, levels)
    day = r.days[0]
    assert (day.level("day"), day.level("evening"), day.level("night")) == \
        pytest.approx((70, 65, 60))
    assert day.rating_db == pytest.approx(70.00, abs=5e-3)
    assert r.overall["Lday"] == pytest.approx(70) and r.rating_db == pytest.approx(70.0)
    data = r.to_dict()
    assert data["days"][0]["Lden"] == pytest.approx(70.0)
    assert data["days"][0]["coverage"] == {"day": 1.0, "evening": 1.0, "night": 1.0}


def test_night_crossing_midnight_belongs_to_its_start_date():
    # 23:00 on the 14th to 07:00 on the 15th: the night of the 14th. The after-midnight hours
    # are louder, and must raise the 14th's Lnight, not create a night for the 15th.
    levels = [50.0] + [60.0] * 7
    starts, durations = hourly(datetime(2026, 5, 14, 23, tzinfo=UTC), levels)
    r = rate_intervals(starts, durations, levels)
    assert [d.date for d in r.days] == [date(2026, 5, 14)]
    night = r.days[0].periods["night"]
    assert night.start == datetime(2026, 5, 14, 23, tzinfo=UTC)
    assert night.end == datetime(2026, 5, 15, 7, tzinfo=UTC)
    expected = 10 * math.log10((10**5 + 7 * 10**6) / 8)
    assert night.leq_db == pytest.approx(expected)
    assert math.isnan(r.days[0].rating_db)
    assert any("2026-05-14: Lden not computed: no measured day, evening" in w
               for w in r.warnings)


def test_early_hours_of_a_date_are_the_previous_night():
    starts, durations = hourly(datetime(2026, 5, 15, 2, tzinfo=UTC), [55.0])
    r = rate_intervals(starts, durations, [55.0])
    assert [d.date for d in r.days] == [date(2026, 5, 14)]
    assert list(r.days[0].periods) == ["night"]


def test_interval_straddling_19h_is_split_by_time():
    # 18:00-18:30 at 60 dB, then 18:30-19:30 at 70 dB: half of the second interval is day,
    # half evening (uniform energy within the interval).
    t = datetime(2026, 5, 14, 18, tzinfo=UTC)
    r = rate_intervals([t, t + timedelta(minutes=30)], [1800.0, 3600.0], [60.0, 70.0],
                       min_coverage=0.0)
    day = r.days[0]
    assert day.periods["day"].measured_s == pytest.approx(3600.0)
    assert day.periods["evening"].measured_s == pytest.approx(1800.0)
    assert day.level("day") == pytest.approx(10 * math.log10((10**6 + 10**7) / 2))
    assert day.level("day") == pytest.approx(67.40, abs=5e-3)
    assert day.level("evening") == pytest.approx(70.0)


def test_interval_straddling_three_periods():
    # one 24-hour interval from 07:00 at 63 dB fills the three periods of one day
    r = rate_intervals([datetime(2026, 5, 14, 7, tzinfo=UTC)], [86400.0], [63.0])
    assert r.days[0].rating_db == pytest.approx(63 + CONSTANT_OFFSET)


def test_coverage_warnings_and_threshold():
    # a full day and night but only one hour of the evening
    levels = [60.0] * 12 + [60.0] + [60.0] * 8
    offsets = [3600.0 * i for i in range(13)] + [3600.0 * i for i in range(16, 24)]
    starts = interval_starts(datetime(2026, 5, 14, 7, tzinfo=UTC), offsets)
    r = rate_intervals(starts, [3600.0] * 21, levels)
    evening = r.days[0].periods["evening"]
    assert evening.coverage == pytest.approx(0.25)
    assert r.days[0].rating_db == pytest.approx(60 + CONSTANT_OFFSET)  # still rated
    assert len(r.warnings) == 1
    assert "evening 19:00-23:00: 1.00 h of 4.00 h measured (25 %)" in r.warnings[0]
    assert "below the minimum coverage 50 %" in r.warnings[0]
    assert rate_intervals(starts, [3600.0] * 21, levels, min_coverage=0.2).warnings == []
    with pytest.raises(SettingsError, match="coverage"):
        rate_intervals(starts, [3600.0] * 21, levels, min_coverage=1.5)


def test_survey_is_an_energy_average_over_days():
    two_days = day_profile(70, 60, 50) + day_profile(60, 60, 50)
    starts, durations = hourly(datetime(2026, 5, 14, 7, tzinfo=UTC), two_days)
    r = rate_intervals(starts, durations, two_days)
    assert [d.date for d in r.days] == [date(2026, 5, 14), date(2026, 5, 15)]
    lday = 10 * math.log10((10**7 + 10**6) / 2)  # energy, not (70 + 60) / 2
    assert r.overall["Lday"] == pytest.approx(lday)
    assert r.rating_db == pytest.approx(rating_level(
        {"day": lday, "evening": 60.0, "night": 50.0}, Periods()))
    assert r.overall["days"] == {"day": 2, "evening": 2, "night": 2}


def test_ldn_preset_day_07_22_night_22_07():
    levels = [70.0] * 15 + [50.0] * 9
    starts, durations = hourly(datetime(2026, 5, 14, 7, tzinfo=UTC), levels)
    r = rate_intervals(starts, durations, levels, periods=preset("ldn"))
    d = r.days[0]
    assert list(d.periods) == ["day", "night"]
    assert d.periods["night"].start.hour == 22
    assert d.rating_db == pytest.approx(68.2, abs=0.05)
    assert r.overall["Ldn"] == pytest.approx(68.21, abs=5e-3)
    assert "Levening" not in r.overall


def test_spring_forward_night_is_7_hours_long():
    # Europe/London: clocks go from 01:00 GMT to 02:00 BST on 2026-03-29, so the night of
    # the 28th (23:00 GMT to 07:00 BST) lasts 7 h and the calendar day of the 29th 23 h.
    first = datetime(2026, 3, 28, 7, tzinfo=LONDON)
    starts, durations = hourly(first, [58.0] * 23)
    assert starts[-1].isoformat() == "2026-03-29T06:00:00+01:00"
    r = rate_intervals(starts, durations, [58.0] * 23)
    assert [d.date for d in r.days] == [date(2026, 3, 28)]
    night = r.days[0].periods["night"]
    assert night.length_s == 7 * 3600 and night.coverage == pytest.approx(1.0)
    assert r.days[0].rating_db == pytest.approx(58 + CONSTANT_OFFSET)
    assert r.warnings == []


def test_fall_back_night_is_9_hours_long():
    first = datetime(2026, 10, 24, 7, tzinfo=LONDON)
    starts, durations = hourly(first, [58.0] * 25)
    r = rate_intervals(starts, durations, [58.0] * 25)
    night = r.days[0].periods["night"]
    assert night.length_s == 9 * 3600 and night.coverage == pytest.approx(1.0)


def test_fixed_offset_wall_clock():
    # the same instants read on a +02:00 wall clock shift the periods by two hours
    starts, durations = hourly(datetime(2026, 5, 14, 5, tzinfo=UTC), [60.0] * 24)
    local = [s.astimezone(timezone(timedelta(hours=2))) for s in starts]
    r = rate_intervals(local, durations, [60.0] * 24)
    assert [d.date for d in r.days] == [date(2026, 5, 14)]
    assert r.days[0].periods["day"].coverage == 1.0


def test_input_checks_nan_and_overlap():
    t = datetime(2026, 5, 14, 8, tzinfo=UTC)
    with pytest.raises(SettingsError, match="timezone-aware"):
        rate_intervals([t.replace(tzinfo=None)], [60.0], [50.0])
    with pytest.raises(SettingsError, match="differ in length"):
        rate_intervals([t], [60.0, 60.0], [50.0])
    with pytest.raises(SettingsError, match="no interval"):
        rate_intervals([], [], [])
    r = rate_intervals([t, t + timedelta(hours=1)], [3600.0, 3600.0], [50.0, math.nan],
                       min_coverage=0)
    assert r.days[0].periods["day"].measured_s == 3600.0
    assert "1 interval(s) without an LAeq (NaN) skipped" in r.warnings
    r = rate_intervals([t, t + timedelta(minutes=30)], [3600.0, 3600.0], [50.0, 50.0],
                       min_coverage=0)
    assert any("overlap in time by 1800 s" in w for w in r.warnings)


def test_interval_starts_use_elapsed_time():
    origin = datetime(2026, 3, 29, 0, 30, tzinfo=LONDON)
    later = interval_starts(origin, np.array([0.0, 3600.0]))
    assert later[1].isoformat() == "2026-03-29T02:30:00+01:00"  # 01:30 GMT does not exist


# --------------------------------------------------------------------------- command

FS = 16000


def run(*args: object):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture()
def evening_file(tmp_path):
    # 4 s of 1 kHz: 2 s at -40 dBFS (80 dB with --full-scale-level 120) then 2 s at
    # -50 dBFS (70 dB); started at 18:59:58 the first half is day, the second evening.
    x = np.concatenate([sine(FS, 1000.0, 2.0, 10 ** (-40 / 20)),
                        sine(FS, 1000.0, 2.0, 10 ** (-50 / 20))])
    path = tmp_path / "mp1.wav"
    sf.write(path, x, FS, subtype="PCM_24")
    return path


def test_cli_recording_crosses_into_the_evening(evening_file):
    res = run("rating", evening_file, "--full-scale-level", 120, "--interval", "1s",
              "--start", "2026-05-14T18:59:58+01:00", "--min-coverage", 0, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert set(data) >= {"days", "overall", "periods", "tonality", "warnings", "caution"}
    day = data["days"][0]
    assert day["date"] == "2026-05-14"
    assert day["Lday"] == pytest.approx(80.0, abs=0.2)
    assert day["Levening"] == pytest.approx(70.0, abs=0.2)
    assert day["Lnight"] is None and day["Lden"] is None
    assert data["overall"]["Lday"] == pytest.approx(80.0, abs=0.2)
    assert any("Lden not computed" in w for w in data["warnings"])
    assert [t["nominal_hz"] for t in data["tonality"]] == [1000.0]  # a pure tone is tonal
    assert data["tonality"][0]["margin_db"] > 0
    assert "indicative" in data["caution"]
    assert data["start"]["source"] == "option"


def test_cli_text_csv_and_no_tonality(tmp_path, evening_file):
    out = tmp_path / "lden.csv"
    res = run("rating", evening_file, "--full-scale-level", 120, "--interval", "1s",
              "--start", "2026-05-14T18:59:58Z", "--no-tonality", "-o", out)
    assert res.exit_code == 0, res.output
    assert "Lden: day 07:00-19:00, evening 19:00-23:00 (+5 dB)" in res.stdout
    assert "2026-05-14" in res.stdout and "Caution:" in res.stdout
    assert "Tonality" not in res.stdout
    assert "below the minimum coverage" in res.stderr
    lines = out.read_text().splitlines()
    assert lines[0] == ("date,Lday,Levening,Lnight,coverage_day,coverage_evening,"
                        "coverage_night,Lden")
    assert lines[-1].startswith("survey,")
    again = run("rating", evening_file, "--full-scale-level", 120, "--start",
                "2026-05-14T18:59:58Z", "-o", out)
    assert again.exit_code == 1


def test_cli_errors_are_one_line(evening_file, tmp_path):
    res = run("rating", evening_file, "--full-scale-level", 120)
    assert res.exit_code == 1
    assert "no start time" in res.output and len(res.output.strip().splitlines()) == 1
    res = run("rating", evening_file, "--full-scale-level", 120, "--start",
              "2026-05-14T18:59:58Z", "--preset", "lnight")
    assert res.exit_code == 1 and "unknown rating preset 'lnight'" in res.output
    res = run("rating", evening_file, "--full-scale-level", 120, "--start",
              "2026-05-14T18:59:58Z", "--start-from-name", "mp%Y")
    assert res.exit_code == 1 and "not both" in res.output
    res = run("rating", evening_file, "--start", "2026-05-14T18:59:58Z")
    assert res.exit_code == 1 and "no calibration" in res.output
    res = run("rating", tmp_path, "--full-scale-level", 120)
    assert res.exit_code == 1 and "--full-scale-level apply to a recording" in res.output
    res = run("rating", evening_file, "--full-scale-level", 120, "--start",
              "2026-05-14T18:59:58Z", "--interval", "7min")
    assert res.exit_code == 1 and "divide 24 h" in res.output


def test_cli_help_has_an_example():
    res = run("rating", "--help")
    assert res.exit_code == 0 and "Example" in res.output
    assert "unconfirmed" in res.output


# batch folder ------------------------------------------------------------------------


def _batch_rows(mid: str, first: datetime, levels: list[float]) -> list[dict]:
    starts = interval_starts(first, [3600.0 * i for i in range(len(levels))])
    return [{"id": mid, "file": f"{mid}.wav", "channel": 1, "interval": i,
             "start_s": 3600.0 * i, "start_time": s.isoformat(), "duration_s": 3600.0,
             "partial": False, "overload": False, "full_scale_samples": 0, "LAeq": lv,
             "LCeq": lv + 3}
            for i, (s, lv) in enumerate(zip(starts, levels, strict=True))]


def _band_rows(mid: str, intervals: list[int | None], tone_at: float, rise: float) -> list:
    from bandmeter.bands import band_set

    rows = []
    for iv in intervals:
        for b in band_set(3, 100, 5000):
            rows.append({"id": mid, "file": f"{mid}.wav", "channel": 1,
                         "interval": "" if iv is None else iv, "start_s": 0.0,
                         "start_time": "", "duration_s": 3600.0, "band": b.label,
                         "nominal_hz": b.nominal_hz, "exact_hz": b.exact_hz,
                         "LZeq": 50.0 + (rise if b.nominal_hz == tone_at else 0.0)})
    return rows


def _write_csv(path, rows):
    from bandmeter.tables import write_csv

    write_csv(path, rows, force=True)


@pytest.fixture()
def batch_dir(tmp_path):
    out = tmp_path / "survey_out"
    out.mkdir()
    first = datetime(2026, 5, 14, 7, tzinfo=UTC)
    rows = _batch_rows("mp1", first, day_profile(70, 65, 60))
    rows += _batch_rows("mp2", first, day_profile(60, 60, 60))
    _write_csv(out / "intervals.csv", rows)
    bands = _band_rows("mp1", [None, 0, 1], 2000.0, 6.0) + _band_rows("mp2", [None], 2000.0, 4)
    _write_csv(out / "bands.csv", bands)
    return out


def test_cli_batch_folder_by_file(batch_dir):
    res = run("rating", batch_dir, "--by-file", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    overall = {o["id"]: o for o in data["overall"]}
    assert overall["mp1"]["Lden"] == pytest.approx(70.00, abs=5e-3)
    assert overall["mp2"]["Lden"] == pytest.approx(66.40, abs=5e-3)
    assert [d["id"] for d in data["days"]] == ["mp1", "mp2"]
    assert data["tonality"] == [{"id": "mp1", "nominal_hz": 2000.0, "level_db": 56.0,
                                 "lower_difference_db": 6.0, "upper_difference_db": 6.0,
                                 "required_db": 5.0, "margin_db": 1.0,
                                 "intervals_with_tone": 2}]
    summary = {s["id"]: s for s in data["tonality_intervals"]}
    assert summary["mp1"]["assessed"] == 2 and summary["mp1"]["with_tones"] == 2
    assert data["warnings"] == []


def test_cli_batch_folder_together_warns_on_overlap(batch_dir):
    res = run("rating", batch_dir)
    assert res.exit_code == 0, res.output
    assert "overlap in time" in res.stderr and "--by-file" in res.stderr
    assert "whole recording: 2000 Hz (margin 1.0 dB)" in res.stdout
    assert "Caution:" in res.stdout


def test_cli_batch_parquet_and_timezone(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    out = tmp_path / "b"
    out.mkdir()
    # starts written in UTC; rated on the Europe/London wall clock (BST, +01:00 in May)
    rows = _batch_rows("mp1", datetime(2026, 5, 14, 6, tzinfo=UTC), day_profile(70, 65, 60))
    pq.write_table(pa.Table.from_pylist(rows), out / "intervals.parquet")
    _write_csv(out / "intervals.csv", [{**r, "LAeq": 0.0} for r in rows])  # parquet wins
    res = run("rating", out, "--timezone", "Europe/London", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["days"][0]["date"] == "2026-05-14"
    assert data["overall"]["Lden"] == pytest.approx(70.0, abs=5e-3)
    assert data["days"][0]["periods"][0]["start"] == "2026-05-14T07:00:00+01:00"
    assert any("no one-third-octave LZeq band table" in w for w in data["warnings"])
    utc = json.loads(run("rating", out, "--json").stdout)
    assert utc["overall"]["Lden"] != pytest.approx(70.0, abs=0.01)  # periods shifted 1 h


def test_cli_batch_ldn_and_custom_periods(batch_dir):
    res = run("rating", batch_dir, "--by-file", "--preset", "ldn", "--json")
    data = json.loads(res.stdout)
    assert res.exit_code == 0 and data["periods"]["name"] == "Ldn"
    assert {o["id"]: o["Ldn"] for o in data["overall"]}["mp2"] == pytest.approx(
        60 + 10 * math.log10((15 + 9 * 10) / 24))
    res = run("rating", batch_dir, "--by-file", "--evening", "18", "--night", "22",
              "--evening-penalty", "3", "--json")
    periods = json.loads(res.stdout)["periods"]["periods"]
    assert [(p["start_h"], p["hours"], p["penalty_db"]) for p in periods] == \
        [(7.0, 11.0, 0.0), (18.0, 4.0, 3.0), (22.0, 9.0, 10.0)]


def test_cli_batch_without_times_or_laeq(tmp_path):
    out = tmp_path / "b"
    out.mkdir()
    rows = _batch_rows("mp1", datetime(2026, 5, 14, 7, tzinfo=UTC), [60.0] * 3)
    _write_csv(out / "intervals.csv", [{**r, "start_time": ""} for r in rows])
    res = run("rating", out)
    assert res.exit_code == 1 and "no interval has a start time" in res.output
    _write_csv(out / "intervals.csv", [{k: v for k, v in r.items() if k != "LAeq"}
                                       for r in rows])
    res = run("rating", out)
    assert res.exit_code == 1 and "no 'LAeq' column (an uncalibrated batch?" in res.output
    empty = tmp_path / "empty"
    empty.mkdir()
    res = run("rating", empty)
    assert res.exit_code == 1 and "no intervals.parquet or intervals.csv" in res.output
