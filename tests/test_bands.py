"""Tests of the base-10 fractional-octave band definitions (bandmeter.bands)."""

from __future__ import annotations

import dataclasses
import math

import pytest

from bandmeter.bands import G, band_set, exact_mid_hz, make_band
from bandmeter.errors import SettingsError

# REFERENCE_VALUES.md 5.1, one-third-octave table (x, nominal, exact fm, f1, f2); exact and edge
# columns "computed" there from IEC 61260-1:2014 eqs. (2), (4), (5) (from memory), nominal
# column "confirmed" (ISO 266 R10 via GOST 17187-2010 Table 2).
THIRD_OCTAVE_TABLE = [
    (-20, "10", 10.000, 8.913, 11.220),
    (-19, "12.5", 12.589, 11.220, 14.125),
    (-18, "16", 15.849, 14.125, 17.783),
    (-17, "20", 19.953, 17.783, 22.387),
    (-16, "25", 25.119, 22.387, 28.184),
    (-15, "31.5", 31.623, 28.184, 35.481),
    (-14, "40", 39.811, 35.481, 44.668),
    (-13, "50", 50.119, 44.668, 56.234),
    (-12, "63", 63.096, 56.234, 70.795),
    (-11, "80", 79.433, 70.795, 89.125),
    (-10, "100", 100.000, 89.125, 112.202),
    (-9, "125", 125.893, 112.202, 141.254),
    (-8, "160", 158.489, 141.254, 177.828),
    (-7, "200", 199.526, 177.828, 223.872),
    (-6, "250", 251.189, 223.872, 281.838),
    (-5, "315", 316.228, 281.838, 354.813),
    (-4, "400", 398.107, 354.813, 446.684),
    (-3, "500", 501.187, 446.684, 562.341),
    (-2, "630", 630.957, 562.341, 707.946),
    (-1, "800", 794.328, 707.946, 891.251),
    (0, "1k", 1000.000, 891.251, 1122.018),
    (1, "1.25k", 1258.925, 1122.018, 1412.538),
    (2, "1.6k", 1584.893, 1412.538, 1778.279),
    (3, "2k", 1995.262, 1778.279, 2238.721),
    (4, "2.5k", 2511.886, 2238.721, 2818.383),
    (5, "3.15k", 3162.278, 2818.383, 3548.134),
    (6, "4k", 3981.072, 3548.134, 4466.836),
    (7, "5k", 5011.872, 4466.836, 5623.413),
    (8, "6.3k", 6309.573, 5623.413, 7079.458),
    (9, "8k", 7943.282, 7079.458, 8912.509),
    (10, "10k", 10000.000, 8912.509, 11220.185),
    (11, "12.5k", 12589.254, 11220.185, 14125.375),
    (12, "16k", 15848.932, 14125.375, 17782.794),
    (13, "20k", 19952.623, 17782.794, 22387.211),
]

# REFERENCE_VALUES.md 5.1 "Octave band?" column: octave edges (two decimals), computed.
OCTAVE_EDGES = {
    "31.5": (22.39, 44.67),
    "63": (44.67, 89.13),
    "125": (89.13, 177.83),
    "250": (177.83, 354.81),
    "500": (354.81, 707.95),
    "1k": (707.95, 1412.54),
    "2k": (1412.54, 2818.38),
    "4k": (2818.38, 5623.41),
    "8k": (5623.41, 11220.18),
    "16k": (11220.18, 22387.21),
}


@pytest.mark.parametrize(("x", "label", "fm", "f1", "f2"), THIRD_OCTAVE_TABLE)
def test_third_octave_exact_and_edges_match_reference_table(x, label, fm, f1, f2):
    band = make_band(3, x)
    # table printed to 3 decimals: half a unit of the last digit
    assert band.exact_hz == pytest.approx(fm, abs=5e-4)
    assert band.lower_hz == pytest.approx(f1, abs=5e-4)
    assert band.upper_hz == pytest.approx(f2, abs=5e-4)
    assert band.label == label


@pytest.mark.parametrize(
    ("x", "printed", "abs_tol"),
    [
        # IEC 61260 (1995) base-10 exact frequencies quoted in a 1999 newsgroup post,
        # REFERENCE_VALUES.md 5.1 (confirmed); tolerance = half a unit of the printed digit
        (-2, 630.96, 0.005),
        (-1, 794.33, 0.005),
        (0, 1000.0, 0.005),
        (1, 1258.9, 0.05),
        (2, 1584.9, 0.05),
    ],
)
def test_base10_examples_from_iec_61260(x, printed, abs_tol):
    assert exact_mid_hz(3, x) == pytest.approx(printed, abs=abs_tol)


def test_even_b_examples_b6():
    # REFERENCE_VALUES.md 5.1: b = 6, 944.061 and 1059.254 Hz (computed from IEC 61260-1:2014
    # eq. (3), from memory): the two bands straddling 1 kHz symmetrically
    bands = band_set(6, 900.0, 1100.0)
    assert [round(b.exact_hz, 3) for b in bands] == [944.061, 1059.254]
    assert [b.index for b in bands] == [-1, 0]
    # analytic: even b has no band centred on fr; the two neighbours are fr * G**(-+1/(2b))
    assert bands[0].exact_hz * bands[1].exact_hz == pytest.approx(1000.0**2, rel=1e-12)
    assert bands[0].upper_hz == pytest.approx(1000.0, rel=1e-12)


@pytest.mark.parametrize("b", [12, 24])
def test_even_b_bands_touch_at_fr(b):
    # analytic, eq. (3): the band edge between x = -1 and x = 0 is exactly fr = 1000 Hz
    below, above = make_band(b, -1), make_band(b, 0)
    assert below.upper_hz == pytest.approx(1000.0, rel=1e-12)
    assert above.lower_hz == pytest.approx(1000.0, rel=1e-12)
    assert above.exact_hz == pytest.approx(1000.0 * 10 ** (0.3 / (2 * b)), rel=1e-12)


def test_octave_edges_match_reference_table():
    bands = band_set(1)
    for band in bands:
        lo, hi = OCTAVE_EDGES[band.label]
        assert band.lower_hz == pytest.approx(lo, abs=5e-3)  # printed to 2 decimals
        assert band.upper_hz == pytest.approx(hi, abs=5e-3)


def test_third_octave_nominal_labels_iso_266():
    # ISO 266 R10 / IEC 61260-1:2014 Annex E, REFERENCE_VALUES.md 5.1 (confirmed)
    assert [b.label for b in band_set(3)] == [row[1] for row in THIRD_OCTAVE_TABLE[3:]]
    r10 = [1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0]  # ISO 266 R10, below 10 Hz
    assert [b.nominal_hz for b in band_set(3, 1.0, 8.0)] == r10
    assert [b.label for b in band_set(3, 25000.0, 40000.0)] == ["25k", "31.5k", "40k"]


def test_octave_nominal_labels_iso_266():
    # octave nominal = every third 1/3-octave band, REFERENCE_VALUES.md 5.1 (confirmed)
    expected = [31.5, 63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0, 16000.0]
    assert [b.nominal_hz for b in band_set(1)] == expected
    assert [b.label for b in band_set(1)] == "31.5 63 125 250 500 1k 2k 4k 8k 16k".split()


def test_default_sets():
    thirds = band_set(3)
    assert len(thirds) == 31
    assert (thirds[0].nominal_hz, thirds[-1].nominal_hz) == (20.0, 20000.0)
    octaves = band_set(1)
    assert len(octaves) == 10
    assert (octaves[0].nominal_hz, octaves[-1].nominal_hz) == (31.5, 16000.0)


@pytest.mark.parametrize("b", [6, 12, 24])
def test_default_narrow_sets_have_mid_frequencies_inside_20hz_20khz(b):
    bands = band_set(b)
    assert all(20.0 <= band.exact_hz <= 20000.0 for band in bands)
    # the neighbours just outside lie outside the span
    assert make_band(b, bands[0].index - 1).exact_hz < 20.0
    assert make_band(b, bands[-1].index + 1).exact_hz > 20000.0
    # analytic: 1000 octaves-per-decade geometry, b bands per octave
    assert len(bands) == pytest.approx(b * math.log(1000.0) / math.log(G), abs=1.0)


@pytest.mark.parametrize("b", [1, 3, 6, 12, 24])
def test_band_geometry(b):
    bands = band_set(b, 1.0, 40000.0)
    for low, high in zip(bands[:-1], bands[1:], strict=True):
        assert low.upper_hz == pytest.approx(high.lower_hz, rel=1e-12)  # contiguous
        assert high.exact_hz / low.exact_hz == pytest.approx(G ** (1 / b), rel=1e-12)
    for band in bands:
        assert math.sqrt(band.lower_hz * band.upper_hz) == pytest.approx(band.exact_hz, rel=1e-12)
        # R10 preferred numbers deviate up to 1 % (1.6 vs 1.585), 3 significant figures 0.5 %
        assert band.nominal_hz == pytest.approx(band.exact_hz, rel=0.01)
    labels = [band.label for band in bands]
    assert len(set(labels)) == len(labels)


def test_selection_by_nominal_or_exact_values():
    default = band_set(3)
    assert band_set(3, 20.0, 20000.0) == default
    assert band_set(3, 19.953, 19952.623) == default
    assert band_set(1, 31.5, 16000.0) == band_set(1, 31.623, 15848.932) == band_set(1)
    sub = band_set(3, 100.0, 1000.0)
    assert [b.label for b in sub] == "100 125 160 200 250 315 400 500 630 800 1k".split()
    assert band_set(3, 125.893, 1000.0) == sub[1:]
    assert [b.label for b in band_set(3, 1.0, 1.0)] == ["1"]
    assert [b.label for b in band_set(12, 1030.0, 1030.0)] == ["1.03k"]  # x = 0, above fr


def test_one_limit_keeps_the_other_default():
    assert band_set(3, fmin_hz=1000.0)[-1].label == "20k"
    assert band_set(3, fmax_hz=1000.0)[0].label == "20"
    assert band_set(3, fmin_hz=1.0)[0].label == "1"


def test_band_is_frozen():
    band = make_band(3, 0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        band.exact_hz = 1.0  # type: ignore[misc]


@pytest.mark.parametrize("b", [0, 2, 4, 5, 48, -3, 3.0, "3", True, None])
def test_bad_designator(b):
    with pytest.raises(SettingsError, match="bandwidth designator"):
        band_set(b)  # type: ignore[arg-type]
    with pytest.raises(SettingsError, match="bandwidth designator"):
        exact_mid_hz(b, 0)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("fmin", "fmax", "match"),
    [
        (2000.0, 1000.0, "must not exceed"),
        (0.0, 1000.0, "fmin_hz must be between"),
        (-10.0, 1000.0, "fmin_hz must be between"),
        (0.1, 1000.0, "fmin_hz must be between"),
        (float("nan"), 1000.0, "fmin_hz must be between"),
        (100.0, float("inf"), "fmax_hz must be between"),
        (100.0, 2e5, "fmax_hz must be between"),
        ("100", 1000.0, "fmin_hz must be a number"),
        (100.0, True, "fmax_hz must be a number"),
    ],
)
def test_bad_ranges(fmin, fmax, match):
    with pytest.raises(SettingsError, match=match):
        band_set(3, fmin, fmax)


def test_settings_error_is_value_error():
    with pytest.raises(ValueError):
        band_set(3, 2000.0, 1000.0)
