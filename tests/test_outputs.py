"""Atomic output writing (bandmeter.outputs) and interval plans (bandmeter.intervals)."""

from __future__ import annotations

import os

import numpy as np
import pytest

from bandmeter.errors import OutputError, SettingsError
from bandmeter.intervals import IntervalPlan
from bandmeter.outputs import atomic_open, write_text


def test_write_refuses_existing_without_force(tmp_path):
    path = tmp_path / "result.csv"
    write_text(path, "first\n")
    with pytest.raises(OutputError, match="already exists; use --force"):
        write_text(path, "second\n")
    assert path.read_text() == "first\n"
    write_text(path, "second\n", force=True)
    assert path.read_text() == "second\n"


def test_failed_write_keeps_previous_file_and_leaves_no_partial(tmp_path):
    path = tmp_path / "result.csv"
    write_text(path, "good\n")
    with pytest.raises(RuntimeError), atomic_open(path, force=True) as handle:
        handle.write("half")
        raise RuntimeError("simulated crash while writing")
    assert path.read_text() == "good\n"
    assert os.listdir(tmp_path) == ["result.csv"]


def test_disk_full_is_an_output_error(tmp_path):
    path = tmp_path / "result.csv"
    with pytest.raises(OutputError, match="write failed"), atomic_open(path) as handle:
        handle.write("x")
        raise OSError(28, "No space left on device")
    assert os.listdir(tmp_path) == []


def test_missing_folder(tmp_path):
    with pytest.raises(OutputError, match="does not exist"):
        write_text(tmp_path / "no" / "such.csv", "x")
    with pytest.raises(OutputError, match="is a folder"):
        write_text(tmp_path, "x")


def test_interval_plan_plain():
    plan = IntervalPlan(10)
    np.testing.assert_array_equal(plan.interval_index([0, 9, 10, 25]), [0, 0, 1, 2])
    np.testing.assert_array_equal(plan.boundaries_between(0, 30), [10, 20])
    np.testing.assert_array_equal(plan.boundaries_between(10, 11), [])
    assert plan.interval_stop(2, total_samples=25) == 25


def test_interval_plan_aligned_leading_partial():
    plan = IntervalPlan(10, first_boundary=3)
    np.testing.assert_array_equal(plan.interval_index([0, 2, 3, 12, 13]), [0, 0, 1, 1, 2])
    np.testing.assert_array_equal(plan.boundaries_between(0, 30), [3, 13, 23])
    assert [plan.interval_start(k) for k in range(3)] == [0, 3, 13]


def test_interval_plan_whole_stream_and_errors():
    plan = IntervalPlan(None)
    np.testing.assert_array_equal(plan.interval_index([0, 10**9]), [0, 0])
    assert plan.boundaries_between(0, 10**9).size == 0
    with pytest.raises(SettingsError):
        IntervalPlan(0)
    with pytest.raises(SettingsError):
        IntervalPlan(10, first_boundary=10)
