"""``countmill check`` and ``countmill describe``: look at a channel map before trusting it."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np

from countmill.chanmap import ChannelMap, load_map


@click.command("check")
@click.argument("map_path", metavar="MAP", type=click.Path(dir_okay=False, path_type=str))
@click.argument("raw", required=False, type=click.Path(dir_okay=False, path_type=Path))
def check_command(map_path, raw):
    """Validate a channel map; with RAW, also list the channels and gain codes it meets.

    \b
    Example:
      countmill check channel_maps/brewhouse.toml demo_logs/brewhouse-2026-11-03.csv
    """
    cmap = load_map(map_path)
    n_rev = sum(len(r) for r in cmap.channels.values())
    click.echo(f"{map_path}: ok — map '{cmap.name}', {len(cmap.channels)} channels ({n_rev} revisions), {len(cmap.derived)} derived, time zone {cmap.timezone}")
    if raw is None:
        return
    from countmill.pipeline.binary_reader import open_log

    seen: dict[tuple[int, int], int] = {}
    rejects = 0
    with open_log(raw, cmap.input, cmap.timezone) as reader:
        for block in reader.blocks():
            rejects += len(block.rejects)
            if len(block):
                pairs, counts = np.unique(np.stack([block.channel, block.gain]), axis=1, return_counts=True)
                for (cid, gain), count in zip(pairs.T.tolist(), counts.tolist()):
                    seen[(cid, gain)] = seen.get((cid, gain), 0) + count
    click.echo(f"{raw}: {reader.data_lines} data lines, {rejects} unreadable")
    click.echo(f"{'id':>5}  {'channel':<22} {'gain code':>9} {'gain':>8} {'records':>9}  note")
    for (cid, gain), count in sorted(seen.items()):
        revs = cmap.channels.get(cid)
        if revs is None:
            click.echo(f"{cid:>5}  {'-':<22} {gain:>9} {'-':>8} {count:>9}  not in the map (unmapped)")
            continue
        gains = revs[-1].gains
        factor = gains.get(gain)
        note = "" if factor is not None else "unknown gain code"
        click.echo(f"{cid:>5}  {_names(revs):<22} {gain:>9} {factor if factor is not None else '-':>8} {count:>9}  {note}")
    missing = sorted(set(cmap.channels) - {cid for cid, _ in seen})
    for cid in missing:
        click.echo(f"{cid:>5}  {_names(cmap.channels[cid]):<22} {'':>9} {'':>8} {0:>9}  in the map, not in the file")


def _names(revisions) -> str:
    """A channel's name, or its names in revision order when a revision renamed it."""
    return " / ".join(dict.fromkeys(rev.name for rev in revisions))


def describe_map(cmap: ChannelMap) -> list[str]:
    lines = [f"map '{cmap.name}' ({Path(cmap.path).name}, sha256 {cmap.sha256[:12]}…), time zone {cmap.timezone}", ""]
    for cid in sorted(cmap.channels):
        revisions = cmap.channels[cid]
        for rev in revisions:
            since = f"  [revision {rev.revision + 1} of {len(revisions)}, from {rev.valid_from_text}]" if rev.valid_from_text else (
                f"  [revision 1 of {len(revisions)}]" if len(revisions) > 1 else "")
            lines.append(f"channel {cid} '{rev.name}' [{rev.unit}]{since}")
            if rev.description:
                lines.append(f"    {rev.description}")
            adc = rev.adc
            lines.append(
                f"    1. ADC: {adc.bits}-bit {adc.coding}, {adc.span[0]:g} … {adc.span[1]:g} V, "
                f"LSB {adc.lsb * 1e6:.4g} µV → V at the ADC"
            )
            gains = ", ".join(f"{k}→×{v:g}" for k, v in sorted(rev.gains.items()))
            lines.append(f"    2. divide by the PGA gain of the record's gain code ({gains}) → V at the amplifier input")
            step_no = 3
            for step in rev.chain:
                lines.append(f"    {step_no}. {step.words()} → {step.output_unit}")
                step_no += 1
            if rev.chain_unit != rev.unit:
                lines.append(f"    {step_no}. convert {rev.chain_unit} → {rev.unit}")
                step_no += 1
            if rev.calibration is not None:
                cal = rev.calibration
                coeffs = ", ".join(f"{c:.6g}" for c in cal.coefficients)
                due = f", due {cal.due.isoformat()}" if cal.due else ""
                date = f", calibrated {cal.date.isoformat()}" if cal.date else ""
                cert = f", certificate {cal.certificate}" if cal.certificate else ""
                lines.append(f"    {step_no}. calibration: degree-{cal.degree} fit of {len(cal.points)} points (coefficients, ascending: {coeffs}){date}{due}{cert} → {rev.unit}")
            for need in rev.inputs:
                lines.append(f"    reads channel '{need.name}' (latest usable value, at most {need.max_age_s:g} s old)")
            limits = []
            if rev.range:
                limits.append(f"range {rev.range[0]:g} … {rev.range[1]:g} (outside: bad)")
            if rev.expect:
                limits.append(f"expect {rev.expect[0]:g} … {rev.expect[1]:g} (outside: suspect)")
            qc = rev.qc
            if qc.spike is not None:
                limits.append(f"spike > {qc.spike:g}")
            if qc.rate is not None:
                limits.append(f"rate > {qc.rate:g} {rev.unit}/s")
            if qc.flat_seconds is not None:
                limits.append(f"flat within ±{qc.flat_tolerance:g} for {qc.flat_seconds:g} s")
            if qc.max_gap is not None:
                limits.append(f"gap > {qc.max_gap:g} s")
            if limits:
                lines.append("    tests: " + "; ".join(limits))
            lines.append("")
    for d in cmap.derived:
        lines.append(f"derived '{d.name}' [{d.unit}] = {d.expression.text}")
        lines.append(f"    computed at each record of '{d.expression.trigger}'; other inputs at most {d.max_age_s:g} s old")
        if d.range:
            lines.append(f"    tests: range {d.range[0]:g} … {d.range[1]:g}")
        lines.append("")
    return lines


@click.command("describe")
@click.argument("map_path", metavar="MAP", type=click.Path(dir_okay=False, path_type=str))
def describe_command(map_path):
    """Each channel's chain in words, with the unit after every step.

    \b
    Example:
      countmill describe channel_maps/brewhouse.toml
    """
    for line in describe_map(load_map(map_path)):
        click.echo(line)
