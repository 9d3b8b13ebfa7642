"""``bandmeter verify``: conformance self-test of the digital processing at one sample rate."""

from __future__ import annotations

import math
import textwrap

import click

from .. import __version__
from ..cli import cli, echo_json
from ..errors import SettingsError
from ..tables import write_csv
from ..textout import fmt_db, table
from ..verify import (
    GROUPS,
    SOFTWARE_ONLY_NOTE,
    SOFTWARE_ONLY_SHORT,
    TestResult,
    VerificationReport,
    run_verification,
)
from ..weighting import FS_MAX_HZ, FS_MIN_HZ
from .options import output_options

#: Filter designators accepted by ``--bands``.
BAND_CHOICES = {"third": 3, "octave": 1}

#: Heading of each test group in the text report.
GROUP_TITLES = {
    "weighting": "Frequency weightings A, C, Z: weighted level re the input level (dB)",
    "linearity": "Level linearity per sample format, steady sine (LAeq, dB re full scale)",
    "bursts": "Tone bursts: response re the steady level LA (dB)",
    "repeated": "Repeated tone bursts: LAeq re the steady level LA (dB)",
    "cpeak": "C-weighted peak: LCpeak - LC (dB)",
    "decay": "Time-weighting decay rates (dB/s)",
    "overload": "Overload indication per sample format (samples at full scale)",
    "decoding": "Generated WAV files read and analysed (dB; samples at full scale)",
    "filters": "Fractional-octave filters (dB)",
}

#: Columns of the CSV report, in order.
CSV_COLUMNS = ("rate_hz", "class", "group", "name", "expected", "measured", "lower_limit",
               "upper_limit", "margin", "passed", "follows", "scope")


def parse_options(rate: str, instrument_class: str, bands: str) -> tuple[float, int, int]:
    """``--rate``, ``--class`` and ``--bands`` as (Hz, class, b); one-line errors."""
    try:
        fs = float(rate)
    except ValueError:
        raise SettingsError(f"--rate must be a number of Hz, e.g. 48000, got {rate!r}") from None
    if not (math.isfinite(fs) and FS_MIN_HZ <= fs <= FS_MAX_HZ):
        raise SettingsError(f"--rate must be between {FS_MIN_HZ:.0f} and {FS_MAX_HZ:.0f} Hz, "
                            f"got {rate!r}")
    if instrument_class.strip() not in ("1", "2"):
        raise SettingsError(f"--class must be 1 or 2, got {instrument_class!r}")
    if bands.lower() not in BAND_CHOICES:
        raise SettingsError(f"--bands must be third or octave, got {bands!r}")
    return fs, int(instrument_class), BAND_CHOICES[bands.lower()]


def _fmt(value: float | None, decimals: int) -> str:
    """:func:`fmt_db` without a "-0.000" for values that round to zero."""
    if value is not None and math.isfinite(value) and abs(value) < 0.5 * 10.0**-decimals:
        value = 0.0
    return fmt_db(value, decimals)


def _decimals(test: TestResult) -> tuple[int, int]:
    """Decimals of the values and of the limits of a row."""
    if test.name.endswith("(samples)") or test.group == "overload":
        return 0, 0  # sample counts
    if test.group == "decoding":
        return 7, 7  # differences of 1e-6 dB and less
    return 3, 2


def _row(test: TestResult) -> list[str]:
    value, limit = _decimals(test)
    return [test.name, _fmt(test.expected, value), _fmt(test.measured, value),
            _fmt(test.lower_limit, limit), _fmt(test.upper_limit, limit),
            _fmt(test.margin, value), "pass" if test.passed else "FAIL"]


def _wrapped(label: str, text: str) -> list[str]:
    return textwrap.wrap(text, width=96, initial_indent=f"  {label}",
                         subsequent_indent=" " * (2 + len(label)))


def render_group(name: str, tests: list[TestResult]) -> str:
    """One group of the report: title, the sources its tests follow, and the table."""
    lines = [GROUP_TITLES[name]]
    for follows in dict.fromkeys(t.follows for t in tests):
        lines += _wrapped("follows: ", follows)
    head = ("test", "expected", "measured", "lower", "upper", "margin", "result")
    lines.append(table(head, [_row(t) for t in tests], indent="  "))
    return "\n".join(lines)


def render_report(report: VerificationReport) -> str:
    """Readable terminal report: header, one table per group, notes, summary and the
    software-only note."""
    scope = "quick (reduced) test set" if report.quick else "full test set"
    bands = "1/3-octave" if report.bands == 3 else "octave"
    lines = [
        f"bandmeter {__version__} verify: conformance self-test of the digital processing",
        f"  sample rate {report.rate_hz:g} Hz, class {report.instrument_class} limits, "
        f"{bands} filters, {scope}",
        "  SOFTWARE ONLY: the microphone, preamplifier and recorder are not verified.",
        "  Signals are generated in the digital domain (float64, or quantised to a sample",
        "  format where stated; levels in dB re full scale) and analysed by the same reader,",
        "  level engine and filter bank that analyse recordings.",
        f"  processing: {report.kernels}, as for recordings in this installation",
        "  margin: distance to the nearer limit (positive = inside); limits marked 'from",
        "  memory' are recalled values, not yet checked against the standards",
    ]
    for name in GROUPS:
        tests = [t for t in report.tests if t.group == name]
        if tests:
            lines += ["", render_group(name, tests)]
    if report.notes:
        lines += ["", "Coverage at this sample rate"]
        for note in report.notes:
            lines += _wrapped("- ", note)
    failed = report.failed
    lines += ["", f"Result: {len(report.tests) - len(failed)} of {len(report.tests)} tests "
                  f"passed{'' if failed else ' (all)'} in {report.elapsed_s:.1f} s"
                  + (" (see the coverage notes above for what this rate changes or leaves out)"
                     if report.notes else "")]
    lines += [f"  FAILED: {t.name}" for t in failed]
    worst = report.worst()
    if worst:
        lines.append("  smallest margin per group (exact counts left out):")
        width = max(len(name) for name in worst)
        lines += [f"    {name.ljust(width)}  {_fmt(t.margin, _decimals(t)[0])}  {t.name}"
                  for name, t in worst.items()]
    lines += [""] + textwrap.wrap("Note: " + SOFTWARE_ONLY_NOTE, width=96)
    return "\n".join(lines)


def csv_rows(report: VerificationReport) -> list[dict[str, object]]:
    """One CSV row per test, with the sample rate and class on every row."""
    return [{"rate_hz": report.rate_hz, "class": report.instrument_class, **t.to_dict(),
             "scope": SOFTWARE_ONLY_SHORT} for t in report.tests]


@cli.command("verify")
@click.option("--rate", "rate", default="48000", show_default=True, metavar="HZ",
              help="Sample rate to verify, Hz (8000 to 192000): the rate of your recordings.")
@click.option("--class", "instrument_class", default="1", show_default=True, metavar="1|2",
              help="Acceptance limits of class 1 or 2 (IEC 61672-1, IEC 61260-1).")
@click.option("--bands", default="third", show_default=True, metavar="third|octave",
              help="Fractional-octave filters to verify.")
@output_options
@click.option("--quick", is_flag=True,
              help="Fewer frequencies, levels, formats, bursts and bands (a few seconds).")
@click.option("--group", "groups", multiple=True, metavar="NAME",
              help=f"Run only this test group (repeatable): {', '.join(GROUPS)}.")
def verify_command(rate: str, instrument_class: str, bands: str, as_json: bool,
                   output: str | None, force: bool, quick: bool, groups: tuple[str, ...]) -> None:
    """Conformance self-test of the software at your sample rate, for a client or auditor.

    \b
    Example (invented audit): before the night survey at the Larkspur Lane depot the
    consultant shows the client that bandmeter's processing at the recorder's 48 kHz
    passes the class 1 software tests, and files the table with the survey report:
      bandmeter verify --rate 48000 --class 1 -o larkspur_verify_48k.csv
    Generates electrical test signals in the digital domain and runs them through the same
    level engine, reader and filter bank that analyse recordings: frequency weightings A,
    C, Z at the one-third-octave frequencies 10 Hz..20 kHz below fs/2 and at 1 kHz, level
    linearity of 16-bit, 24-bit and float samples over their dynamic range (120 dB for
    24-bit), 4 kHz tone bursts (LAFmax, LASmax, LAE), repeated bursts (LAeq), C-weighted
    peak, F and S decay rates, overload indication, the decoding of generated WAV files,
    and the fractional-octave filters (relative attenuation of every band at the IEC
    61260-1 breakpoints, band level linearity, band summation). Prints expected and
    measured values (dB re full scale, or as stated), the class limits, the margin and
    pass/fail per test, what each test follows and which limits are from memory. Tests
    the rate cannot carry (at or above fs/2) are listed, not run. Exit status 1 when a
    test fails. This tests the software only, not the microphone, preamplifier, recorder
    or their calibration (IEC 61672-3 periodic tests need the whole chain).
    """
    fs, cls, b = parse_options(rate, instrument_class, bands)
    if output is not None:
        from ..outputs import check_writable

        check_writable(output, force)  # fail before the tests, not after
    report = run_verification(fs, cls, b, quick, groups or None)
    if output is not None:
        write_csv(output, csv_rows(report), force=force, columns=CSV_COLUMNS)
    if as_json:
        echo_json(report.to_dict())
    else:
        click.echo(render_report(report))
        if output is not None:
            click.echo(f"\nwritten: {output}")
    if not report.passed:
        raise click.exceptions.Exit(1)
