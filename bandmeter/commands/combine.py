"""``bandmeter combine``: energy sum, average or difference of levels given as numbers."""

from __future__ import annotations

import math
from typing import Any

import click

from ..assess.exposure import parse_duration_h
from ..cli import cli, echo_json, warn
from ..errors import SettingsError
from ..levels import average_levels, combine_levels, subtract_level
from ..textout import key_values

#: Below this difference between total and background, the correction exceeds 3 dB
#: (10 lg(1 - 10^(-0.3)) = -3.02 dB, from the formula).
LARGE_CORRECTION_DIFFERENCE_DB = 3.0


def parse_level(text: str) -> float:
    """A level in dB from a command-line word; negative numbers are fine."""
    if text.startswith("--"):
        raise SettingsError(f"unknown option {text!r} (levels are numbers, e.g. 80 or -3)")
    try:
        value = float(text)
    except ValueError:
        raise SettingsError(f"{text!r} is not a level in dB") from None
    if not math.isfinite(value):
        raise SettingsError(f"levels must be finite numbers, got {text!r}")
    return value


def parse_durations(text: str, count: int) -> list[float]:
    """``"1h,2h,30min"`` -> durations in h (a bare number is taken as seconds)."""
    durations = [parse_duration_h(part, require_unit=False) for part in text.split(",")]
    if len(durations) != count:
        raise SettingsError(f"--durations has {len(durations)} values for {count} levels")
    return durations


def sum_result(levels: list[float]) -> dict[str, Any]:
    """Energy sum 10 lg sum 10^(Li/10)."""
    return {"operation": "sum", "levels_dB": levels, "result_dB": combine_levels(levels),
            "formula": "10 lg sum 10^(Li/10)"}


def average_result(levels: list[float], durations_h: list[float] | None) -> dict[str, Any]:
    """Energy average, time-weighted when durations are given."""
    out: dict[str, Any] = {"operation": "average", "levels_dB": levels,
                           "result_dB": average_levels(levels, durations_h)}
    if durations_h is None:
        out["formula"] = "10 lg[(1/n) sum 10^(Li/10)]"
    else:
        out["durations_h"] = durations_h
        out["formula"] = "10 lg[sum Ti 10^(Li/10) / sum Ti]"
    return out


def subtract_result(levels: list[float]) -> dict[str, Any]:
    """First level minus the energy sum of the others (background correction)."""
    if len(levels) < 2:
        raise SettingsError("--subtract needs a total level and at least one level to remove")
    total, background = levels[0], combine_levels(levels[1:])
    if not background < total:
        raise SettingsError(
            f"cannot remove {background:.2f} dB from {total:g} dB: what is removed must be "
            "lower than the total (the difference would not be a positive energy)"
        )
    result = subtract_level(total, background)
    return {"operation": "subtract", "levels_dB": levels, "total_dB": total,
            "removed_dB": background, "result_dB": result, "correction_dB": result - total,
            "formula": "10 lg(10^(Lt/10) - sum 10^(Li/10))"}


def render_combination(out: dict[str, Any]) -> str:
    """Readable terminal rendering of a combination result."""
    names = {"sum": "energy sum", "average": "energy average", "subtract": "difference"}
    pairs: list[tuple[str, object]] = [
        ("levels", "  ".join(f"{v:g}" for v in out["levels_dB"]) + " dB"),
    ]
    if "durations_h" in out:
        pairs.append(("durations", "  ".join(f"{h:g}" for h in out["durations_h"]) + " h"))
    if out["operation"] == "subtract":
        pairs.append(("removed (sum)", f"{out['removed_dB']:.2f} dB"))
        pairs.append(("correction", f"{out['correction_dB']:.2f} dB"))
    pairs.append((names[out["operation"]], f"{out['result_dB']:.2f} dB"))
    pairs.append(("formula", out["formula"]))
    return key_values(pairs, indent="")


@cli.command("combine", context_settings={"ignore_unknown_options": True})
@click.argument("levels", nargs=-1, metavar="LEVEL...")
@click.option("--subtract", is_flag=True,
              help="First level minus the others (e.g. total minus background).")
@click.option("--average", is_flag=True, help="Energy average instead of the sum.")
@click.option("--durations", metavar="T1,T2,...",
              help="With --average: durations of the levels, e.g. 1h,2h,30min (time-weighted).")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
def combine_command(levels: tuple[str, ...], subtract: bool, average: bool,
                    durations: str | None, as_json: bool) -> None:
    """Energy sum, average or difference of levels in dB (10 lg sum 10^(L/10)).

    \b
    Example (invented plant room):
      bandmeter combine 80 80 90                          -> 90.79 dB
      bandmeter combine --subtract 60 55                  -> 58.35 dB (background removed)
      bandmeter combine --average 72 65 --durations 2h,6h -> time-weighted Leq
    Levels add as energies, not as numbers: 80 + 80 + 90 dB is 10 lg(10^8 + 10^8 + 10^9)
    = 90.79 dB (the integer rule of thumb gives 91: common practice, no source). Negative
    levels work as they are (`bandmeter combine -3 -3`); `--` before the levels also stops
    option parsing.
    """
    values = [parse_level(text) for text in levels]
    if not values:
        raise SettingsError("no level given, e.g. bandmeter combine 80 80 90")
    if subtract and average:
        raise SettingsError("give --subtract or --average, not both")
    if durations is not None and not average:
        raise SettingsError("--durations goes with --average")
    if subtract:
        out = subtract_result(values)
    elif average:
        weights = None if durations is None else parse_durations(durations, len(values))
        out = average_result(values, weights)
    else:
        out = sum_result(values)
    if as_json:
        echo_json(out)
    else:
        click.echo(render_combination(out))
    if subtract and values[0] - out["removed_dB"] < LARGE_CORRECTION_DIFFERENCE_DB:
        warn(f"total and removed levels differ by {values[0] - out['removed_dB']:.2f} dB: the "
             "correction exceeds 3 dB and small errors in either level change it a lot")
