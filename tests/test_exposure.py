"""Daily noise exposure LEX,8h, EU exposure values, noise dose, and `bandmeter exposure`.

Check values are those of REFERENCE_VALUES.md section 7 (status given with each).
"""

from __future__ import annotations

import json
import math

import pytest
import soundfile as sf
from click.testing import CliRunner

import bandmeter.commands.exposure  # noqa: F401  (registers the command)
from bandmeter.assess.exposure import (
    CAUTION,
    DOSE_CRITERIA,
    EU_EXPOSURE_VALUES,
    DoseCriterion,
    Task,
    assess_exposure,
    dose_criterion,
    lex_8h,
    noise_dose,
    parse_duration_h,
    partial_lex_8h,
    reference_duration_h,
    task_contributions,
    tasks_from_batch,
    twa_from_dose,
)
from bandmeter.cli import cli
from bandmeter.errors import SettingsError
from bandmeter.signals import sine

OSHA_HC = DOSE_CRITERIA["osha-hc"]
OSHA_PEL = DOSE_CRITERIA["osha-pel"]
NIOSH = DOSE_CRITERIA["niosh"]

#: OSHA Table G-16a, reference duration T in h (29 CFR 1910.95 App. A; confirmed), as printed.
TABLE_G16A = {
    80: "32", 81: "27.9", 82: "24.3", 83: "21.1", 84: "18.4", 85: "16", 86: "13.9",
    87: "12.1", 88: "10.6", 89: "9.2", 90: "8", 91: "7.0", 92: "6.1", 93: "5.3", 94: "4.6",
    95: "4", 96: "3.5", 97: "3.0", 98: "2.6", 99: "2.3", 100: "2", 101: "1.7", 102: "1.5",
    103: "1.3", 104: "1.1", 105: "1", 106: "0.87", 107: "0.76", 108: "0.66", 109: "0.57",
    110: "0.5", 111: "0.44", 112: "0.38", 113: "0.33", 114: "0.29", 115: "0.25", 116: "0.22",
    117: "0.19", 118: "0.16", 119: "0.14", 120: "0.125", 121: "0.11", 122: "0.095",
    123: "0.082", 124: "0.072", 125: "0.063", 126: "0.054", 127: "0.047", 128: "0.041",
    129: "0.036", 130: "0.031",
}


def run(*args: object):
    return CliRunner().invoke(cli, ["exposure", *(str(a) for a in args)])


# --- LEX,8h (ISO 9612) -----------------------------------------------------------------------


def test_lex_8h_single_task_4h_at_90():
    # 86.99 dB(A): ISO 9612 formula (computed)
    assert lex_8h([Task("a", 90.0, 4.0)]) == pytest.approx(86.99, abs=0.005)


def test_lex_8h_two_tasks():
    # 2 h at 95 + 6 h at 80 dB(A) -> 89.37 dB(A): ISO 9612 formula (computed)
    assert lex_8h([Task("a", 95.0, 2.0), Task("b", 80.0, 6.0)]) == pytest.approx(89.37,
                                                                                 abs=0.005)


def test_lex_8h_of_8_hours_is_the_laeq():
    assert lex_8h([Task("a", 83.4, 8.0)]) == pytest.approx(83.4, abs=1e-12)


@pytest.mark.parametrize(("level", "hours"), [(83, 4), (89, 1), (95, 0.25), (107, 1 / 60)])
def test_eu_equivalent_time_table(level, hours):
    # each equals 80 dB(A) for 8 h (SCENIHR 2008 Table 3; confirmed; the table rounds to 1 dB)
    assert lex_8h([Task("t", level, hours)]) == pytest.approx(80.0, abs=0.25)


def test_contributions_add_up():
    tasks = [Task("a", 95.0, 2.0), Task("b", 80.0, 6.0)]
    parts = task_contributions(tasks)
    assert [p.partial_lex_8h_db for p in parts] == pytest.approx(
        [95 + 10 * math.log10(2 / 8), 80 + 10 * math.log10(6 / 8)])
    assert sum(p.energy_share_percent for p in parts) == pytest.approx(100.0)
    assert partial_lex_8h(tasks[0]) == pytest.approx(88.98, abs=0.005)


@pytest.mark.parametrize("bad", [
    lambda: Task("a", 90.0, -1.0), lambda: Task("a", 90.0, 0.0), lambda: Task(" ", 90.0, 1.0),
    lambda: Task("a", math.nan, 1.0), lambda: Task("a", 90.0, 1.0, math.inf),
    lambda: lex_8h([]), lambda: lex_8h([Task("a", 80.0, 20.0), Task("b", 80.0, 5.0)]),
])
def test_bad_tasks_are_refused(bad):
    with pytest.raises(SettingsError):
        bad()


# --- Directive 2003/10/EC --------------------------------------------------------------------


def test_eu_values():
    # Directive 2003/10/EC Art. 3 (confirmed); dB(C) from the pascals (computed)
    assert [(v.lex_8h_db, v.lcpeak_db) for v in EU_EXPOSURE_VALUES] == [
        (80, 135), (85, 137), (87, 140)]
    for v in EU_EXPOSURE_VALUES:
        assert 20 * math.log10(v.ppeak_pa / 20e-6) == pytest.approx(v.lcpeak_db, abs=0.1)
    assert [v.includes_hearing_protection for v in EU_EXPOSURE_VALUES] == [False, False, True]


def test_assessment_between_action_values():
    result = assess_exposure([Task("a", 84.0, 8.0, 130.0)])
    assert result.exceeded_values == ["lower exposure action value"]
    assert result.max_lcpeak_db == 130.0
    assert result.caution == CAUTION
    assert any("hearing protectors" in n for n in result.notes)


def test_assessment_peak_alone_exceeds():
    result = assess_exposure([Task("a", 70.0, 8.0, 138.0), Task("b", 60.0, 1.0)])
    comparisons = {c.value.name: c for c in result.eu_comparisons}
    assert comparisons["upper exposure action value"].peak_exceeded
    assert not comparisons["upper exposure action value"].lex_exceeded
    assert not comparisons["exposure limit value"].exceeded
    assert any("no LCpeak for b" in n for n in result.notes)


def test_assessment_without_peaks_leaves_the_peak_unknown():
    result = assess_exposure([Task("a", 79.0, 8.0)])
    assert result.max_lcpeak_db is None
    assert all(c.peak_exceeded is None and not c.exceeded for c in result.eu_comparisons)


def test_caution_wording():
    text = CAUTION.lower()
    for word in ("indicative", "competent person", "local", "regulations", "hearing"):
        assert word in text


# --- noise dose (29 CFR 1910.95 App. A; NIOSH) -----------------------------------------------


def test_osha_table_g16a_from_the_formula():
    # every printed entry is reproduced to its printed precision (confirmed)
    for level, printed in TABLE_G16A.items():
        decimals = len(printed.split(".")[1]) if "." in printed else 0
        tolerance = 0.5 * 10 ** -decimals + 1e-9
        assert reference_duration_h(level, OSHA_HC) == pytest.approx(float(printed),
                                                                     abs=tolerance), level


def test_osha_table_g16_permissible_exposures():
    # Table G-16 (confirmed): 100 % dose at these hours
    for hours, level in ((8, 90), (6, 92), (4, 95), (3, 97), (2, 100), (1.5, 102), (1, 105),
                         (0.5, 110), (0.25, 115)):
        assert noise_dose([Task("t", level, hours)], OSHA_PEL).dose_percent == pytest.approx(
            100.0, rel=0.02), level


def test_osha_constant_levels():
    assert noise_dose([Task("t", 90.0, 8.0)], "osha-hc").dose_percent == pytest.approx(100.0)
    # 95 dBA for 4 h: 100 % under 5 dB exchange (computed; T(95) = 4 h confirmed)
    assert noise_dose([Task("t", 95.0, 4.0)], "osha-hc").dose_percent == pytest.approx(100.0)
    # 92 dBA for 8 h: 131 % (confirmed), formula 131.95 % (computed)
    dose = noise_dose([Task("t", 92.0, 8.0)], "osha-hc").dose_percent
    assert dose == pytest.approx(131.95, abs=0.005)
    assert math.floor(dose) == 131


def test_osha_mixed_example():
    # 4 h at 90 + 2 h at 95 + 2 h at 85 dBA: D = 112.5 %, TWA = 90.85 dBA (computed)
    tasks = [Task("a", 90.0, 4.0), Task("b", 95.0, 2.0), Task("c", 85.0, 2.0)]
    result = noise_dose(tasks, OSHA_HC)
    assert result.dose_percent == pytest.approx(112.5)
    assert result.task_doses_percent == pytest.approx((50.0, 50.0, 12.5))
    assert result.twa_db == pytest.approx(90.85, abs=0.005)
    assert result.projected_8h_dose_percent == pytest.approx(112.5)


def test_twa_from_dose():
    # D = 50 / 100 / 200 % -> 85 / 90 / 95 dBA (computed); 16.61 lg(D/100) + 90 (confirmed)
    assert [twa_from_dose(d, OSHA_HC) for d in (50, 100, 200)] == pytest.approx([85, 90, 95])
    assert twa_from_dose(112.5, OSHA_HC) == pytest.approx(16.61 * math.log10(1.125) + 90,
                                                          abs=0.001)
    assert twa_from_dose(0.0, OSHA_HC) == -math.inf


def test_thresholds():
    assert noise_dose([Task("t", 85.0, 8.0)], OSHA_PEL).dose_percent == 0.0
    assert noise_dose([Task("t", 85.0, 8.0)], OSHA_HC).dose_percent == pytest.approx(50.0)
    assert noise_dose([Task("t", 79.9, 8.0)], OSHA_HC).dose_percent == 0.0
    assert reference_duration_h(80.0, OSHA_HC) == pytest.approx(32.0)


def test_niosh():
    # 100 dBA for 15 min is 100 % (confirmed); the REL table 85/88/91/94/97 dBA (confirmed)
    assert noise_dose([Task("t", 100.0, 0.25)], NIOSH).dose_percent == pytest.approx(100.0)
    for level, hours in ((85, 8), (88, 4), (91, 2), (94, 1), (97, 0.5)):
        assert reference_duration_h(level, NIOSH) == pytest.approx(hours)
    assert NIOSH.threshold_db is None


def test_projected_dose_scales_to_8_hours():
    result = noise_dose([Task("t", 90.0, 4.0)], OSHA_HC)
    assert result.dose_percent == pytest.approx(50.0)
    assert result.projected_8h_dose_percent == pytest.approx(100.0)


def test_custom_and_unknown_criteria():
    custom = DoseCriterion("site", 85.0, 3.0, 80.0, 8.0)
    assert noise_dose([Task("t", 85.0, 8.0)], custom).dose_percent == pytest.approx(100.0)
    assert dose_criterion(custom) is custom
    with pytest.raises(SettingsError, match="unknown dose criterion"):
        dose_criterion("iso")
    with pytest.raises(SettingsError):
        DoseCriterion("x", 85.0, 0.0)


def test_assessment_to_dict_carries_the_caution_and_doses():
    data = assess_exposure([Task("a", 90.0, 8.0)], ["osha-hc", "niosh"]).to_dict()
    assert data["caution"] == CAUTION
    assert [d["criterion"] for d in data["doses"]] == ["osha-hc", "niosh"]
    assert data["doses"][0]["dose_percent"] == pytest.approx(100.0)
    json.dumps(data, allow_nan=False)


# --- durations -------------------------------------------------------------------------------


@pytest.mark.parametrize(("text", "hours"), [("2.5h", 2.5), ("90min", 1.5), ("1h30min", 1.5),
                                             ("1h 15min", 1.25), ("45m", 0.75), ("3600s", 1)])
def test_parse_duration_h(text, hours):
    assert parse_duration_h(text) == pytest.approx(hours)


@pytest.mark.parametrize("text", ["", "2", "-2h", "h", "2hours", "1h30", "2.5x", "0h"])
def test_parse_duration_h_refuses(text):
    with pytest.raises(SettingsError):
        parse_duration_h(text)


def test_parse_duration_h_bare_seconds_when_allowed():
    assert parse_duration_h("1800", require_unit=False) == pytest.approx(0.5)


# --- CLI -------------------------------------------------------------------------------------


def test_cli_text_output():
    result = run("--task", "grinding:92.5:2.5h:131", "--task", "assembly:84:5h",
                 "--criterion", "osha-hc")
    assert result.exit_code == 0, result.output
    expected_lex = 10 * math.log10(2.5 / 8 * 10 ** 9.25 + 5 / 8 * 10 ** 8.4)
    assert f"{expected_lex:.1f} dB(A)" in result.stdout
    assert "grinding" in result.stdout and "assembly" in result.stdout
    assert "EXCEEDED (LEX,8h)" in result.stdout
    assert "osha-hc" in result.stdout
    assert "Indicative only" in result.stdout


def test_cli_json():
    result = run("--task", "a:90:4h", "--task", "b:95:2h", "--task", "c:85:2h",
                 "--criterion", "osha-hc", "--criterion", "eu", "--json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["caution"] == CAUTION
    assert data["doses"][0]["dose_percent"] == pytest.approx(112.5)
    assert data["doses"][0]["TWA_dBA"] == pytest.approx(90.85, abs=0.005)
    assert data["LEX_8h_dBA"] == pytest.approx(10 * math.log10(0.5e9 + 0.25 * 10 ** 9.5
                                                               + 0.25 * 10 ** 8.5))
    assert len(data["tasks"]) == 3


def test_cli_csv_refuses_to_overwrite(tmp_path):
    out = tmp_path / "day.csv"
    assert run("--task", "a:90:4h:120", "--criterion", "niosh", "-o", out).exit_code == 0
    text = out.read_text()
    assert "partial_LEX_8h_dBA" in text and "niosh_dose_percent" in text
    assert text.count("\n") == 3  # header, one task, total
    again = run("--task", "a:90:4h", "-o", out)
    assert again.exit_code == 1 and "already exists" in again.stderr
    assert run("--task", "a:90:4h", "-o", out, "--force").exit_code == 0


@pytest.mark.parametrize(("args", "message"), [
    (["--task", "grinding:92.5"], "NAME:LAEQ:DURATION"),
    (["--task", "grinding:loud:2h"], "LAeq must be a number"),
    (["--task", "grinding:92:-2h"], "positive"),
    (["--task", "grinding:92:2"], "cannot read duration"),
    (["--task", "grinding:92:2h:high"], "LCpeak must be a number"),
    (["--task", ":92:2h"], "needs a name"),
    (["--task", "a:90:20h", "--task", "b:90:5h"], "24 h"),
    ([], "no task given"),
    (["--task", "a:90:2h", "--hours", "3"], "go with --from"),
    (["--task", "a:90:2h", "--full-scale-level", "120"], "go with --from"),
    (["--from", "x.wav"], "--from needs --hours"),
])
def test_cli_bad_input_is_one_line(args, message):
    result = run(*args)
    assert result.exit_code == 1, result.output
    assert message in result.stderr
    assert "Traceback" not in result.output + result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_cli_from_recording(tmp_path):
    # 1 kHz sine at -40 dBFS with a 120 dB full-scale level: LAeq 80 dB(A) (A-weighting is
    # 0 dB at 1 kHz), peak 3.01 dB above the RMS level
    path = tmp_path / "press_line.wav"
    sf.write(path, sine(48000, 1000.0, 1.0, 10 ** (-40 / 20)), 48000, subtype="PCM_24")
    result = run("--from", path, "--full-scale-level", "120", "--hours", "4",
                 "--task", "break:70:1h", "--json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    recorded = data["tasks"][-1]
    assert recorded["name"] == "press_line"
    assert recorded["duration_h"] == 4.0
    assert recorded["LAeq_dBA"] == pytest.approx(80.0, abs=0.1)
    assert recorded["LCpeak_dBC"] == pytest.approx(83.0, abs=0.2)
    assert data["recording"]["duration_s"] == pytest.approx(1.0)


def test_cli_from_recording_needs_a_calibration(tmp_path):
    path = tmp_path / "bay.wav"
    sf.write(path, sine(48000, 1000.0, 0.2, 0.01), 48000, subtype="PCM_24")
    result = run("--from", path, "--hours", "2")
    assert result.exit_code == 1
    assert "no calibration" in result.stderr


def _batch_of_tasks(tmp_path, calibrated=True):
    """An invented fitter's day in two recordings: 1 s at 90 dB and 3 s at 80 dB (1 kHz sines:
    A weighting is 0 dB at 1 kHz, IEC 61672-1 Table 3; full-scale level 120 dB)."""
    from bandmeter.batch import BatchOptions, run_batch
    from bandmeter.calibration import from_full_scale_level

    src = tmp_path / "day"
    src.mkdir()
    sf.write(src / "a_grinding.wav", sine(16000, 1000.0, 1.0, 10 ** (-30 / 20)), 16000,
             subtype="PCM_24")
    sf.write(src / "b_bench.wav", sine(16000, 1000.0, 3.0, 10 ** (-40 / 20)), 16000,
             subtype="PCM_24")
    out = tmp_path / "results"
    options = (BatchOptions(calibration=from_full_scale_level(120.0)) if calibrated
               else BatchOptions(allow_uncalibrated=True))
    assert run_batch([str(src)], str(out), options, progress=False).ok
    return str(out)


def test_tasks_from_a_batch_folder(tmp_path):
    folder = _batch_of_tasks(tmp_path)
    tasks = sorted(tasks_from_batch(folder), key=lambda t: t.name)
    assert [t.name for t in tasks] == ["a_grinding", "b_bench"]
    assert tasks[0].laeq_db == pytest.approx(90.0, abs=0.05)
    assert tasks[1].laeq_db == pytest.approx(80.0, abs=0.05)
    assert [t.duration_h for t in tasks] == pytest.approx([1 / 3600, 3 / 3600])
    # as samples of an 8 h day: the duration-weighted energy average
    # 10 lg[(1 10^9 + 3 10^8) / 4] = 85.11 dB (ISO 9612 energy average, by hand) for 8 h,
    # so LEX,8h = 85.11 dB(A)
    (day,) = tasks_from_batch(folder, day_hours=8.0)
    expected = 10 * math.log10((1e9 + 3e8) / 4)
    assert day.laeq_db == pytest.approx(expected, abs=0.05) and day.duration_h == 8.0
    assert assess_exposure([day]).lex_8h_db == pytest.approx(expected, abs=0.05)
    result = run("--from-batch", folder, "--hours", "8", "--json")
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["LEX_8h_dBA"] == pytest.approx(expected, abs=0.05)


def test_tasks_from_batch_refuse_uncalibrated_results(tmp_path):
    folder = _batch_of_tasks(tmp_path, calibrated=False)
    with pytest.raises(SettingsError, match="not calibrated"):
        tasks_from_batch(folder)
    result = run("--from-batch", folder)
    assert result.exit_code == 1 and "not calibrated" in result.stderr
    assert run("--from-batch", str(tmp_path)).exit_code != 0  # no manifest there
