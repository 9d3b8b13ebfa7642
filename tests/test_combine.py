"""`bandmeter combine`: energy sum, average and difference of levels.

Expected values are from the formula 10 lg sum 10^(L/10) (and its average and difference).
"""

from __future__ import annotations

import json
import math

import pytest
from click.testing import CliRunner

import bandmeter.commands.combine  # noqa: F401  (registers the command)
from bandmeter.cli import cli


def run(*args: object):
    return CliRunner().invoke(cli, ["combine", *(str(a) for a in args)])


def run_json(*args: object) -> dict:
    result = run("--json", *args)
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def energy_sum(*levels: float) -> float:
    return 10 * math.log10(sum(10 ** (v / 10) for v in levels))


def test_sum_80_80_90():
    # from the formula: 10 lg(10^8 + 10^8 + 10^9) = 90.79 dB (not the 91 of the rule of thumb)
    data = run_json(80, 80, 90)
    assert data["result_dB"] == pytest.approx(energy_sum(80, 80, 90))
    assert data["result_dB"] == pytest.approx(90.79, abs=0.005)
    assert "90.79 dB" in run(80, 80, 90).stdout


def test_two_equal_levels_add_3_01_db():
    assert run_json(70, 70)["result_dB"] == pytest.approx(70 + 10 * math.log10(2))


def test_negative_levels_parse():
    # from the formula: 10 lg(2 x 10^-0.3) = 0.0103 dB
    result = run(-3, -3)
    assert result.exit_code == 0, result.output
    assert "0.01 dB" in result.stdout
    assert run_json(-3, -3)["result_dB"] == pytest.approx(10 * math.log10(2) - 3)
    assert run_json("--", "-3.5", "-10")["result_dB"] == pytest.approx(energy_sum(-3.5, -10))


def test_single_level_is_itself():
    assert run_json(42.5)["result_dB"] == pytest.approx(42.5)


def test_average():
    # from the formula: 10 lg[(10^8 + 10^9) / 2] = 87.40 dB
    data = run_json("--average", 80, 90)
    assert data["result_dB"] == pytest.approx(10 * math.log10((1e8 + 1e9) / 2))
    assert data["result_dB"] == pytest.approx(87.40, abs=0.005)


def test_time_weighted_average():
    # from the formula: 10 lg[(1 h x 10^9 + 3 h x 10^8) / 4 h] = 85.12 dB
    data = run_json("--average", 90, 80, "--durations", "1h,3h")
    assert data["result_dB"] == pytest.approx(10 * math.log10((1e9 + 3e8) / 4))
    assert data["durations_h"] == pytest.approx([1.0, 3.0])
    mixed = run_json("--average", 90, 80, "--durations", "30min,1h30min")
    assert mixed["result_dB"] == pytest.approx(data["result_dB"])


def test_subtract_background():
    # from the formula: 10 lg(10^6 - 10^5.5) = 58.35 dB
    data = run_json("--subtract", 60, 55)
    assert data["result_dB"] == pytest.approx(10 * math.log10(1e6 - 10 ** 5.5))
    assert data["result_dB"] == pytest.approx(58.35, abs=0.005)
    assert data["correction_dB"] == pytest.approx(data["result_dB"] - 60)


def test_subtract_several_levels():
    # the first minus the energy sum of the others
    data = run_json("--subtract", 70, 60, 60)
    assert data["removed_dB"] == pytest.approx(energy_sum(60, 60))
    assert data["result_dB"] == pytest.approx(10 * math.log10(1e7 - 2e6))


def test_subtract_close_levels_warns():
    result = run("--subtract", 60, 59)
    assert result.exit_code == 0
    assert "warning" in result.stderr
    assert run("--subtract", 60, 50).stderr == ""


@pytest.mark.parametrize(("args", "message"), [
    (["--subtract", 60, 60], "lower than the total"),
    (["--subtract", 55, 60], "lower than the total"),
    (["--subtract", 60, 57, 57], "lower than the total"),  # 57 (+) 57 = 60.01 dB
    (["--subtract", 60], "at least one level to remove"),
    ([], "no level given"),
    (["80", "loud"], "not a level"),
    (["80", "--avrage"], "unknown option"),
    (["80", "-inf"], "finite"),
    (["--subtract", "--average", 80, 70], "not both"),
    (["--durations", "1h,2h", 80, 70], "goes with --average"),
    (["--average", "--durations", "1h", 80, 70], "1 values for 2 levels"),
    (["--average", "--durations", "1h,-2h", 80, 70], "positive"),
])
def test_bad_input_is_one_line(args, message):
    result = run(*args)
    assert result.exit_code == 1, result.output
    assert message in result.stderr
    assert "Traceback" not in result.output + result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_help_has_an_example():
    result = run("--help")
    assert result.exit_code == 0
    assert "Example" in result.output
