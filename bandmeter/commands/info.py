"""``bandmeter info``: what a recording's header says, and whether it reached full scale."""

from __future__ import annotations

import click

from ..audio import DEFAULT_BLOCK_FRAMES, Recording, count_full_scale, read_info
from ..cli import cli, echo_json, warn
from ..textout import key_values


def full_scale_count(path: str, channel: int) -> int:
    """Samples at or beyond full scale in one channel (reads the whole channel in blocks)."""
    with Recording(path, channel) as rec:
        threshold = rec.info.full_scale_threshold
        return sum(count_full_scale(b, threshold) for b in rec.blocks(DEFAULT_BLOCK_FRAMES))


@cli.command("info")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True, readable=False))
@click.option("--channel", "-c", default=1, show_default=True, type=int,
              help="Channel to scan for full-scale samples (1-based).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object per file list.")
def info_command(files: tuple[str, ...], channel: int, as_json: bool) -> None:
    """Show the header of recordings and count samples at full scale.

    \b
    Example:
      bandmeter info mp2_night.wav
    Sample rate (Hz), channels, duration (s), encoding and bit depth come from the header;
    the full-scale count reads the chosen channel through (possible overload).
    """
    results = []
    for path in files:
        header = read_info(path)
        record = header.to_dict()
        record["channel"] = channel
        record["full_scale_samples"] = full_scale_count(path, channel)
        record["truncated"] = header.truncated
        results.append(record)
        if header.truncated:
            warn(header.truncation_warning() or "")
    if as_json:
        echo_json({"files": results})
        return
    for record in results:
        click.echo(record["path"])
        click.echo(key_values([
            ("container", record["format"]),
            ("encoding", f"{record['subtype']} ({record['bit_depth']}-bit)"),
            ("sample rate", f"{record['sample_rate']} Hz"),
            ("channels", record["channels"]),
            ("duration", f"{record['duration_s']:.3f} s ({record['frames']} samples)"),
            (f"full scale (ch {channel})", f"{record['full_scale_samples']} sample(s)"),
            ("truncated", "YES: the header declares more audio than the file holds"
             if record["truncated"] else "no"),
        ]))
