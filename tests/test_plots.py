"""Figures (bandmeter.plots) and the ``bandmeter plot`` command.

The figures are drawn from real analyses of short synthetic recordings: pink noise with a
1 kHz tone 27 dB above its one-third-octave band, ten samples at full scale at 3.0 s, and a
calibrator tone at -26 dBFS labelled 94 dB (full-scale level 120 dB). Checks read the
artists back (what is drawn where), not pixels.
"""

from __future__ import annotations

import json
import math
import os
import xml.etree.ElementTree as ET
from datetime import datetime

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner
from matplotlib import dates as mdates
from matplotlib.collections import PathCollection, PolyCollection, QuadMesh
from matplotlib.dates import ConciseDateFormatter
from matplotlib.figure import Figure

from bandmeter import plots
from bandmeter.assess.exclusions import TimeRange
from bandmeter.batch import BatchOptions, run_batch
from bandmeter.calibration import calibrate, from_full_scale_level
from bandmeter.cli import cli
from bandmeter.engine import AnalysisSettings, analyse_file
from bandmeter.errors import OutputError, SettingsError
from bandmeter.outputs import json_text
from bandmeter.signals import fade, pink_noise, sine
from bandmeter.weighting import analytic_response_db

FS = 48000
START = "2026-05-14T22:00:00+01:00"
# PNG file signature (ISO/IEC 15948:2004 / RFC 2083 section 3.1)
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _tone_file(path, dbfs: float) -> str:
    x = sine(FS, 1000.0, 6.0, 10 ** (dbfs / 20)) * fade(6 * FS, FS, 0.5, 0.5)
    sf.write(path, x, FS, subtype="PCM_24")
    return str(path)


def _site_signal(seconds: float = 6.0, clip: bool = True) -> np.ndarray:
    n = int(seconds * FS)
    x = 0.01 * pink_noise(n, FS, seed=4) + sine(FS, 1000.0, seconds, 0.05)
    if clip:
        x[3 * FS: 3 * FS + 10] = 1.0  # ten samples at full scale in the interval 3.0..3.5 s
    return x


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("plots")


@pytest.fixture(scope="module")
def cal(folder):
    pre = _tone_file(folder / "cal_pre.wav", -26.0)
    post = _tone_file(folder / "cal_post.wav", -25.4)  # 0.6 dB more sensitive after
    return calibrate(pre, 94.0, after_path=post)


@pytest.fixture(scope="module")
def site(folder, cal):
    """Calibrated, clock-timed, one-third octaves, 0.5 s intervals (as LevelResult.to_dict)."""
    path = folder / "site.wav"
    sf.write(path, _site_signal(), FS, subtype="FLOAT")
    result = analyse_file(str(path), cal, AnalysisSettings(interval_s=0.5, bands=3),
                          start_time=datetime.fromisoformat(START))
    return json.loads(json_text(result.to_dict()))  # exactly what `levels --json` prints


@pytest.fixture(scope="module")
def plain(folder):
    """Uncalibrated (dB re full scale), no start time, no bands, no overload, 1 s intervals."""
    path = folder / "plain.wav"
    sf.write(path, _site_signal(4.0, clip=False), FS, subtype="FLOAT")
    result = analyse_file(str(path), None, AnalysisSettings(interval_s=1.0),
                          allow_uncalibrated=True)
    return json.loads(json_text(result.to_dict()))


def collection(fig: Figure, prefix: str):
    found = [c for ax in fig.axes for c in ax.collections
             if str(c.get_label()).startswith(prefix)]
    return found[0] if found else None


def line(fig: Figure, label: str):
    return next(ln for ax in fig.axes for ln in ax.get_lines() if ln.get_label() == label)


def x_ranges(col: PolyCollection) -> list[tuple[float, float]]:
    return [(float(p.vertices[:, 0].min()), float(p.vertices[:, 0].max()))
            for p in col.get_paths()]


def external_references(svg: bytes) -> list[str]:
    """href/src targets and url(...) references that point outside the document."""
    bad = []
    for element in ET.fromstring(svg).iter():
        for name, value in element.attrib.items():
            targets = []
            if name.endswith("href") or name == "src":
                targets.append(value)
            if "url(" in value:
                targets += [part.split(")")[0] for part in value.split("url(")[1:]]
            bad += [t for t in targets if not (t.startswith("#") or t.startswith("data:"))]
    return bad


# --------------------------------------------------------------------------------------------
# every kind, both formats
# --------------------------------------------------------------------------------------------


def test_every_kind_renders_as_png_and_self_contained_svg(site):
    figures = plots.figures_for_result(site)
    assert list(figures) == list(plots.FIGURE_KINDS)
    for kind, fig in figures.items():
        png = plots.figure_bytes(fig, "png")
        assert png.startswith(PNG_SIGNATURE), kind
        svg = plots.figure_bytes(fig, "svg")
        root = ET.fromstring(svg)
        assert root.tag.endswith("svg"), kind
        assert external_references(svg) == [], kind
        # text drawn as outlines: no text elements, no fonts to find
        assert b"<text" not in svg and b"font-face" not in svg, kind


def test_only_the_kinds_the_data_allows(plain):
    assert plots.available_kinds(plain) == ["time", "distribution"]
    assert list(plots.figures_for_result(plain)) == ["time", "distribution"]


def test_bad_format_and_kind():
    fig = Figure()
    with pytest.raises(SettingsError, match="png, svg"):
        plots.figure_bytes(fig, "jpg")
    with pytest.raises(SettingsError, match="figure kind"):
        plots.make_figure("waterfall", {"intervals": [], "overall": {}})


# --------------------------------------------------------------------------------------------
# time history
# --------------------------------------------------------------------------------------------


def test_time_history_draws_the_interval_levels_on_a_clock_axis(site):
    fig = plots.time_history_figure(site, percentile_keys=("LAF90", "LAF10"))
    ax = fig.axes[0]
    assert isinstance(ax.xaxis.get_major_formatter(), ConciseDateFormatter)
    assert ax.get_xlabel() == "clock time (UTC+01:00)"
    origin = mdates.date2num(datetime.fromisoformat(START))
    assert ax.get_xlim()[0] == pytest.approx(origin, abs=1e-9)
    assert ax.get_xlim()[1] == pytest.approx(origin + 6.0 / 86400, abs=1e-9)
    assert "dB re 20 µPa" in ax.get_ylabel()
    for key in ("LAeq", "LAFmax", "LAF90", "LAF10"):
        expected = [iv[key] for iv in site["intervals"]]
        drawn = line(fig, key).get_ydata()
        np.testing.assert_allclose(drawn[:-1], expected)  # one step per interval


def test_time_history_without_clock_and_uncalibrated(plain):
    fig = plots.time_history_figure(plain)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "time from the start of the recording, s"
    assert ax.get_xlim() == pytest.approx((0.0, 4.0))
    assert "dB re full scale" in ax.get_ylabel()
    assert line(fig, "LAF90_dBFS") is not None  # the key of an uncalibrated result
    assert collection(fig, "overload") is None  # nothing reached full scale


def test_overload_events_and_exclusions_are_marked(site):
    fig = plots.time_history_figure(
        site, events=[{"start_s": 1.0, "end_s": 2.25, "LAFmax": 80.0}],
        exclusions=[TimeRange(4.0, 4.5, "speech"), {"start_s": 5.0, "end_s": 5.5}])
    origin = mdates.date2num(datetime.fromisoformat(START))

    def seconds(col):
        return [(round((a - origin) * 86400, 6), round((b - origin) * 86400, 6))
                for a, b in x_ranges(col)]

    overload = collection(fig, "overload")
    assert overload.get_label() == "overload: samples at full scale (1 interval)"
    assert seconds(overload) == [(3.0, 3.5)]  # the interval holding the clipped samples
    assert seconds(collection(fig, "events (1)")) == [(1.0, 2.25)]
    assert seconds(collection(fig, "excluded ranges (2)")) == [(4.0, 4.5), (5.0, 5.5)]
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels[:3] == ["LAeq", "LAFmax", "LAF90"]
    assert "overload: samples at full scale (1 interval)" in labels


def test_time_history_errors(site, plain):
    with pytest.raises(SettingsError, match="no 'LAF42' in the intervals.*LAF90"):
        plots.time_history_figure(site, percentile_keys=("LAF42",))
    one = {**plain, "intervals": plain["intervals"][:1]}
    with pytest.raises(SettingsError, match="needs intervals"):
        plots.time_history_figure(one)
    with pytest.raises(SettingsError, match="start_s"):
        plots.time_history_figure(site, events=[{"start": 1.0}])


def test_long_results_stay_single_artists(site):
    """3000 intervals: still three lines and one collection per kind of shading."""
    base = site["intervals"][0]
    rows = [{**base, "index": i, "start_s": 0.5 * i, "overload": i % 100 == 0,
             "full_scale_samples": int(i % 100 == 0)} for i in range(3000)]
    for row in rows:
        row.pop("start_time", None)
    fig = plots.time_history_figure({**site, "intervals": rows})
    ax = fig.axes[0]
    assert len(ax.get_lines()) == 2 + 1
    assert len(ax.collections) == 1 and len(ax.collections[0].get_paths()) == 30
    assert ax.get_xlabel() == "time from the start of the recording, min"


# --------------------------------------------------------------------------------------------
# band spectrum and band map
# --------------------------------------------------------------------------------------------


def test_spectrum_bars_on_nominal_axis_with_computed_a_weighting(site):
    fig = plots.band_spectrum_figure(site)
    ax = fig.axes[0]
    bands = site["overall"]["bands"]
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels[:4] == ["20", "25", "31.5", "40"] and "1k" in labels and "1.25k" in labels
    z_bars, a_bars = ax.containers
    z_tops = np.array([r.get_y() + r.get_height() for r in z_bars])
    a_tops = np.array([r.get_y() + r.get_height() for r in a_bars])
    np.testing.assert_allclose(z_tops, [b["LZeq"] for b in bands], atol=1e-9)
    exact = np.array([b["exact_hz"] for b in bands])
    np.testing.assert_allclose(a_tops, z_tops + analytic_response_db("A", exact), atol=1e-9)
    i100 = labels.index("100")
    # A weighting at 100 Hz: -19.1 dB (IEC 61672-1:2013 Table 3; the exact mid-band
    # frequency 99.5 Hz lies 0.05 dB lower on the curve)
    assert a_tops[i100] - z_tops[i100] == pytest.approx(-19.1, abs=0.1)
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any(t.startswith("LAeq, computed: LZeq + A weighting") for t in legend)
    assert "Hz" in ax.get_xlabel() and "dB re 20 µPa" in ax.get_ylabel()


def test_tonal_band_is_marked(site):
    fig = plots.band_spectrum_figure(site)
    labels = [b["label"] for b in site["overall"]["bands"]]
    marks = collection(fig, "tonal band (one-third-octave screen")
    assert isinstance(marks, PathCollection)
    assert [labels[int(round(x))] for x in marks.get_offsets()[:, 0]] == ["1k"]
    given = collection(plots.band_spectrum_figure(site, tonal_labels=["500", "2000"]),
                       "tonal band (given)")
    assert sorted(labels[int(round(x))] for x in given.get_offsets()[:, 0]) == ["2k", "500"]
    with pytest.raises(SettingsError, match="no band '7'"):
        plots.band_spectrum_figure(site, tonal_labels=["7"])


def test_band_map_holds_every_interval_and_band(site):
    fig = plots.band_time_figure(site)
    mesh = next(c for c in fig.axes[0].collections if isinstance(c, QuadMesh))
    expected = np.array([[b["LZeq"] for b in iv["bands"]] for iv in site["intervals"]]).T
    np.testing.assert_allclose(np.asarray(mesh.get_array()).reshape(expected.shape), expected)
    assert mesh.get_rasterized()  # one image in SVG, not a path per cell
    assert fig.axes[1].get_ylabel() == "LZeq, dB re 20 µPa"  # the colour bar


def test_band_figures_need_bands(plain):
    with pytest.raises(SettingsError, match="no band levels"):
        plots.band_spectrum_figure(plain)
    with pytest.raises(SettingsError, match="no band levels"):
        plots.band_time_figure(plain)


# --------------------------------------------------------------------------------------------
# level distribution
# --------------------------------------------------------------------------------------------


def test_exceedance_of_a_hand_made_distribution():
    dist = {"metric": "LAF", "bin_width_db": 1.0, "first_bin_db": 40.0, "counts": [1, 2, 1],
            "below": 0, "above": 0}
    edges, percent = plots.exceedance_percent(dist)
    np.testing.assert_allclose(edges, [40, 41, 42, 43])
    np.testing.assert_allclose(percent, [100, 75, 25, 0])  # analytic: 4, 3, 1, 0 of 4
    dist.update(below=4)
    np.testing.assert_allclose(plots.exceedance_percent(dist)[1], [50, 37.5, 12.5, 0])


def test_percentile_levels_lie_on_the_exceedance_curve(site):
    dist = site["distribution"]
    edges, percent = plots.exceedance_percent(dist)
    for n in (10, 50, 90):
        level = site["overall"][f"LAF{n}"]
        i = int(np.searchsorted(edges, level, side="right")) - 1  # bin holding LAFN
        # by definition LAFN is exceeded N % of the time: the curve crosses N in that bin
        assert percent[i] >= n - 1e-9 and percent[i + 1] <= n + 1e-9
    fig = plots.level_distribution_figure(site)
    marks = collection(fig, "percentile level LAFN")
    got = {round(y, 6): x for x, y in marks.get_offsets()}
    assert got[90.0] == pytest.approx(site["overall"]["LAF90"])
    assert got[10.0] == pytest.approx(site["overall"]["LAF10"])
    assert "LAF (F time-weighted A level), dB re 20 µPa" == fig.axes[0].get_xlabel()


def test_distribution_uncalibrated_and_missing(plain):
    fig = plots.level_distribution_figure(plain)
    assert "LAF_dBFS" in fig.axes[0].get_xlabel()
    assert "dB re full scale" in fig.axes[0].get_xlabel()
    old = {k: v for k, v in plain.items() if k != "distribution"}
    with pytest.raises(SettingsError, match="no level distribution"):
        plots.level_distribution_figure(old)


# --------------------------------------------------------------------------------------------
# calibration
# --------------------------------------------------------------------------------------------


def test_calibration_figure_pre_and_post(cal, site):
    fig = plots.calibration_figure(cal.to_dict())
    pre, post = fig.axes
    assert fig.get_suptitle().endswith("drift (post - pre) +0.60 dB, more than ±0.5 dB")
    history = cal.level_history
    drawn = pre.get_lines()[0].get_ydata()[:-1]
    np.testing.assert_allclose(drawn, [math.nan if v is None else v
                                       for v in history.levels_dbfs])
    span = next(p for p in pre.patches if str(p.get_label()).startswith("span measured"))
    xs = span.get_path().transformed(span.get_patch_transform()).vertices[:, 0]
    assert (xs.min(), xs.max()) == pytest.approx(cal.span_s)
    assert "post tone: cal_post.wav" in post.get_title(loc="left")
    # the result's own calibration gives the same figure
    again = plots.make_figure("calibration", site)
    assert again.get_suptitle() == fig.get_suptitle()


def test_calibration_without_history_is_an_error(cal):
    old = cal.to_dict()
    old.pop("level_history")
    old["post"].pop("level_history")
    with pytest.raises(SettingsError, match="no tone level history"):
        plots.calibration_figure(old)
    with pytest.raises(SettingsError, match="no tone level history"):
        plots.calibration_figure(from_full_scale_level(120.0).to_dict())


# --------------------------------------------------------------------------------------------
# saving
# --------------------------------------------------------------------------------------------


def test_save_figures_atomic_and_never_overwrites(tmp_path, plain):
    figures = plots.figures_for_result(plain)
    out = tmp_path / "new" / "figs"
    written = plots.save_figures(figures, out, "plain")
    assert [p.name for p in written] == ["plain_time.png", "plain_time.svg",
                                         "plain_distribution.png", "plain_distribution.svg"]
    assert sorted(os.listdir(out)) == sorted(p.name for p in written)  # no temporary files
    before = (out / "plain_time.png").read_bytes()
    with pytest.raises(OutputError, match="already exists; use --force"):
        plots.save_figures(figures, out, "plain", formats=("svg",))
    assert (out / "plain_time.png").read_bytes() == before
    assert plots.save_figures(figures, out, "plain", formats=("png",), force=True)
    with pytest.raises(SettingsError, match="plain file name"):
        plots.save_figures(figures, out, "a/b")


# --------------------------------------------------------------------------------------------
# command line
# --------------------------------------------------------------------------------------------


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_cli_writes_png_and_svg_and_refuses_overwrite(tmp_path, site):
    result_file = tmp_path / "r.json"
    result_file.write_text(json_text(site))
    png, svg = tmp_path / "png", tmp_path / "svg"
    out = run("plot", result_file, "--png-dir", png, "--svg-dir", svg, "--kind", "time",
              "--kind", "spectrum")
    assert out.exit_code == 0, out.output
    expected = [png / "site_time.png", png / "site_spectrum.png", svg / "site_time.svg",
                svg / "site_spectrum.svg"]
    assert out.output.splitlines() == [f"written: {p}" for p in expected]
    assert all(p.exists() for p in expected)
    assert (png / "site_time.png").read_bytes().startswith(PNG_SIGNATURE)
    again = run("plot", result_file, "--png-dir", png, "--kind", "time")
    assert again.exit_code == 1
    assert again.output == f"Error: {png / 'site_time.png'}: already exists; use --force to " \
                           "replace it\n"
    forced = run("plot", result_file, "--png-dir", png, "--kind", "time", "--force")
    assert forced.exit_code == 0 and forced.output == f"written: {png / 'site_time.png'}\n"


def test_cli_one_line_errors(tmp_path, plain):
    result_file = tmp_path / "plain.json"
    result_file.write_text(json_text(plain))
    out = run("plot", result_file, "--png-dir", tmp_path / "f", "--kind", "spectrum")
    assert out.exit_code == 1
    assert out.output.startswith("Error: plain.wav: no band levels") and \
        out.output.count("\n") == 1
    assert not (tmp_path / "f").exists()
    other = tmp_path / "other.json"
    other.write_text('{"rule": "x", "events": []}')
    out = run("plot", other, "--png-dir", tmp_path / "f")
    assert out.exit_code == 1 and "neither a level result" in out.output
    out = run("plot", result_file)
    assert out.exit_code == 1 and "--png-dir and/or --svg-dir" in out.output
    broken = tmp_path / "broken.json"
    broken.write_text("{")
    out = run("plot", broken, "--svg-dir", tmp_path / "f")
    assert out.exit_code == 1 and "not valid JSON" in out.output and out.output.count("\n") == 1


def test_cli_events_exclusions_and_tones(tmp_path, site):
    result_file = tmp_path / "r.json"
    result_file.write_text(json_text(site))
    events = tmp_path / "events.json"
    events.write_text(json.dumps({"rule": "x", "events": [{"start_s": 1.0, "end_s": 2.0}]}))
    ranges = tmp_path / "ranges.csv"
    ranges.write_text("start,end,label\n2026-05-14T22:00:04+01:00,2026-05-14T22:00:05+01:00,"
                      "speech\n")
    out = run("plot", result_file, "--svg-dir", tmp_path / "f", "--kind", "time",
              "--kind", "spectrum", "--events", events, "--exclude", ranges,
              "--percentiles", "10,90", "--tones", "2k")
    assert out.exit_code == 0, out.output
    svg = (tmp_path / "f" / "site_time.svg").read_bytes()
    assert external_references(svg) == []


def test_cli_calibration_file(tmp_path, cal):
    path = tmp_path / "day1.cal.json"
    cal.save(path)
    out = run("plot", path, "--png-dir", tmp_path)
    assert out.exit_code == 0, out.output
    assert out.output == f"written: {tmp_path / 'day1.cal_calibration.png'}\n"
    out = run("plot", path, "--png-dir", tmp_path, "--kind", "time")
    assert out.exit_code == 1 and "needs a level result" in out.output


def test_cli_batch_folder(tmp_path):
    for name in ("mp1.wav", "mp2.wav"):
        sf.write(tmp_path / name, _site_signal(3.0, clip=False), FS, subtype="FLOAT")
    batch = tmp_path / "batch"
    options = BatchOptions(settings=AnalysisSettings(interval_s=1.0),
                           calibration=from_full_scale_level(120.0))
    report = run_batch([str(tmp_path / "mp1.wav"), str(tmp_path / "mp2.wav")], str(batch),
                       options, progress=False)
    assert report.ok
    figs = tmp_path / "figs"
    out = run("plot", batch, "--png-dir", figs)
    assert out.exit_code == 0, out.output
    assert sorted(os.listdir(figs)) == ["mp1_distribution.png", "mp1_time.png",
                                        "mp2_distribution.png", "mp2_time.png"]
    out = run("plot", batch, "--png-dir", figs, "--kind", "time")
    assert out.exit_code == 1 and "already exists" in out.output
    out = run("plot", batch, "--png-dir", figs, "--stem", "x")
    assert out.exit_code == 1 and "is a batch folder" in out.output
