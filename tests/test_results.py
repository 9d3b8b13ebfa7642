"""Result containers: the columnar interval series and its rows."""

from __future__ import annotations

import pickle
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from bandmeter.engine import AnalysisSettings, analyse_array
from bandmeter.results import IntervalSeries
from bandmeter.signals import pink_noise

FS = 48000


@pytest.fixture(scope="module")
def analysed():
    x = 0.05 * pink_noise(int(2.5 * FS), FS, seed=5)
    start = datetime(2026, 5, 14, 23, 59, 59, tzinfo=timezone(timedelta(hours=1)))
    settings = AnalysisSettings(interval_s=0.5, bands=1, band_max=True)
    return analyse_array(x, FS, settings, 100.0, start_time=start)


def test_series_rows_match_their_columns(analysed):
    overall, intervals = analysed
    assert isinstance(intervals, IntervalSeries)
    assert len(intervals) == 5
    rows = list(intervals)
    assert [iv.index for iv in rows] == [0, 1, 2, 3, 4]
    assert overall.index == -1
    np.testing.assert_array_equal(intervals.column("LAeq"), [iv.metrics["LAeq"] for iv in rows])
    assert intervals[-1].start_s == rows[4].start_s == pytest.approx(2.0)
    assert [iv.index for iv in intervals[1:3]] == [1, 2]
    with pytest.raises(IndexError):
        intervals[5]
    with pytest.raises(KeyError):
        intervals.column("LXeq")
    # clock times follow the start time across midnight (calendar arithmetic, datetime)
    assert rows[2].start_time == "2026-05-15T00:00:00+01:00"
    assert rows[0].bands[0].label == "31.5" and set(rows[0].bands[0].levels) == {
        "LZeq", "LZFmax"}


def test_energy_of_interval_rows_adds_up_to_the_whole(analysed):
    # Leq over the union of equal intervals = energy mean of their Leq (definition of Leq,
    # IEC 61672-1 3.9); checks that rows and the overall row come from the same sums
    overall, intervals = analysed
    laeq = intervals.column("LAeq")
    assert 10 * np.log10(np.mean(10 ** (laeq / 10))) == pytest.approx(
        overall.metrics["LAeq"], abs=1e-9)


def test_series_pickles(analysed):
    # batch workers send results between processes
    _, intervals = analysed
    back = pickle.loads(pickle.dumps(intervals))
    assert [iv.to_dict() for iv in back] == [iv.to_dict() for iv in intervals]


def test_clock_times_count_elapsed_time_across_a_clock_change():
    # Europe/London leaves summer time at 02:00 BST on 2026-10-25 (tz database): 00:30 BST
    # plus two hours of elapsed time is 01:30 GMT, not 02:30 (calendar arithmetic via UTC)
    from zoneinfo import ZoneInfo

    start = datetime(2026, 10, 25, 0, 30, tzinfo=ZoneInfo("Europe/London"))
    series = IntervalSeries([0.0, 7200.0], [1.0, 1.0], [False, False], [0, 0], ["LAeq"],
                            [[50.0], [51.0]], clock_origin=start)
    assert series[1].start_time == "2026-10-25T01:30:00+00:00"
