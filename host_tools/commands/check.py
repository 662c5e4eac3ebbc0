"""`edgevib check REC`: the commissioning check a technician runs after fitting the sensor.

Prints a readable report (host_tools.check.commission does the analysis); --json also writes it as
JSON, --plot draws the averaged spectrum with the named lines and the noise floor. Outputs are
rendered in memory first and each is moved into place whole, so a failed run writes nothing.
"""
from __future__ import annotations

import argparse
import io
import json
import math
from pathlib import Path

import numpy as np

from host_tools.check.commission import (
    G_M_S2, CheckResult, check_recording, iso_zone_bounds, lowest_bin, settings_from_board,
    settings_from_profile)
from host_tools.check.check_text import render_text
from host_tools.data.lines import HANN_ENBW_BINS
from host_tools.errors import EdgevibError
from host_tools.data.analysis import desk_profile, scale_of
from host_tools.data.recording import atomic_write, open_recording, read_recording, sidecar_path

HELP = "commissioning check of a recording: rate, offset, clipping, flatline, noise, lines, ISO zone"

def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recording", metavar="REC", help="recording (.wav, .csv or .npy with its sidecar .json)")
    p.add_argument("--plot", metavar="FILE.png", help="draw the averaged spectrum with the named lines")
    p.add_argument("--json", metavar="FILE", help="also write the report as JSON")
    p.add_argument("--board", metavar="PROFILE.json",
                   help="board profile of the gateway to compare with (default: settings from the recording)")
    p.add_argument("--rpm", type=float, help="shaft speed in r/min (overrides the sidecar)")
    p.add_argument("--vanes", type=int, metavar="N", help="impeller vane count (overrides the sidecar)")
    p.add_argument("--group", type=int, choices=(1, 2), default=2,
                   help="ISO 10816-3 machine group: 1 large, 2 medium, 15-300 kW (default 2)")
    p.add_argument("--foundation", choices=("rigid", "flexible"), default="rigid",
                   help="ISO 10816-3 foundation (default rigid)")
    p.add_argument("--zones", metavar="AB,BC,CD",
                   help="zone boundaries A/B,B/C,C/D in mm/s r.m.s. (the site's own limits) instead of the table")
    p.add_argument("--lines", type=int, default=8, metavar="N", help="strongest lines to list per axis (default 8)")


def run(args: argparse.Namespace) -> int:
    inputs = {Path(args.recording).resolve(), sidecar_path(args.recording).resolve()}
    if args.board:
        inputs.add(Path(args.board).resolve())
    for path, suffix in ((args.json, None), (args.plot, ".png")):
        if path is not None:
            _check_output(Path(path), suffix, inputs)
            inputs.add(Path(path).resolve())       # --json and --plot may not name one file
    if args.lines < 1:
        raise EdgevibError("--lines must be at least 1")
    if args.vanes is not None and args.vanes < 1:
        raise EdgevibError("--vanes must be a positive integer")
    if args.rpm is not None and not args.rpm >= 0:
        raise EdgevibError("--rpm must be a number >= 0")
    zones, source = _zones(args)
    if args.board:
        settings = settings_from_board(args.board, zones_mm_s=zones, zones_source=source)
        rec = read_recording(args.recording)
    else:   # no gateway named: settings from the recording itself (host_tools.data.analysis)
        prof = desk_profile([open_recording(args.recording)])
        settings = settings_from_profile(prof, compare_board=False, zones_mm_s=zones, zones_source=source)
        rec = read_recording(args.recording, m_s2_per_count=scale_of(prof))
    result = check_recording(rec, settings, rpm=args.rpm, vane_count=args.vanes, max_lines=args.lines)
    rendered = []
    if args.json:
        rendered.append((Path(args.json), (json.dumps(result.to_dict(), indent=1) + "\n").encode()))
    if args.plot:
        rendered.append((Path(args.plot), plot_png(result)))
    for path, data in rendered:
        atomic_write(path, data)
    print(render_text(result), end="")
    return 0


def _check_output(path: Path, suffix: str | None, inputs: set[Path]) -> None:
    if path.resolve() in inputs:
        raise EdgevibError(f"{path}: would overwrite an input or another output; choose another name")
    if suffix and path.suffix.lower() != suffix:
        raise EdgevibError(f"{path}: the plot is written as PNG: give a {suffix} file name")
    if not path.parent.is_dir():
        raise EdgevibError(f"{path}: folder {path.parent} does not exist")
    if path.is_dir():
        raise EdgevibError(f"{path}: is a folder, not a file name")


def _zones(args: argparse.Namespace) -> tuple[tuple[float, float, float], str]:
    if args.zones is None:
        return iso_zone_bounds(args.group, args.foundation)
    try:
        b = tuple(float(v) for v in args.zones.split(","))
    except ValueError:
        b = ()
    if len(b) != 3 or not 0 < b[0] < b[1] < b[2]:
        raise EdgevibError(f"--zones {args.zones!r}: give three rising numbers in mm/s, as 1.4,2.8,4.5")
    return (b[0], b[1], b[2]), "site limits given with --zones"


# --- plot ----------------------------------------------------------------------------------------

_INK, _MUTED, _GRID = "#22313f", "#7a8793", "#e3e7eb"
_AXIS_COLOURS = ("#1f6f8b", "#b5562b", "#4f7d3a")
_LABEL_DECADES = 0.17   # about the width of a label on the log frequency axis


def plot_png(r: CheckResult) -> bytes:
    """The averaged spectrum of every axis as PNG bytes: amplitude per bin scaled so a steady
    tone's peak reads its r.m.s. (mean square x the Hann noise bandwidth, 1.5 bins), log axes,
    the named lines marked and labelled, the noise floor as a dashed line."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib import pyplot as plt

    f = r.freq_hz
    k0 = lowest_bin(f[1])
    fig, axs = plt.subplots(len(r.spectra), 1, figsize=(10, 2.9 * len(r.spectra) + 0.9), sharex=True,
                            squeeze=False)
    title = Path(r.recording).name
    who = ", ".join(x for x in (r.plant, r.machine) if x)
    speed = f"{r.rpm:g} r/min" if r.rpm else "rpm unknown"
    fig.suptitle(f"{title}\n{who + ' - ' if who else ''}{speed}; {r.windows} windows of {r.n} at "
                 f"{r.sample_rate_hz:g} Hz; overall: {r.overall}", fontsize=11, color=_INK)
    for ax, sp, colour in zip(axs[:, 0], r.spectra, _AXIS_COLOURS * 2):
        _panel(ax, f, k0, sp, colour)
    axs[-1, 0].set_xlabel("frequency, Hz", color=_INK)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, facecolor="white")
    plt.close(fig)
    return buf.getvalue()


def _panel(ax, f: np.ndarray, k0: int, sp, colour: str) -> None:
    """One axis' spectrum from bin k0 up, its noise floor and lines, on log-log axes."""
    amp = np.sqrt(sp.ms_per_bin[k0:] * HANN_ENBW_BINS)
    floor = math.sqrt(sp.floor_ms_per_bin * HANN_ENBW_BINS)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlim(f[k0], f[-1])
    if amp.max() > 0:
        ax.plot(f[k0:], amp, color=colour, lw=1.1)
        top = float(amp.max())
        ax.set_ylim(max(floor / 4, top * 1e-4), top * 40)   # headroom for the labels
    else:
        ax.set_ylim(1e-3, 1.0)
        ax.text(0.5, 0.5, "flat output: no spectrum", transform=ax.transAxes, ha="center", color=_MUTED)
    if floor > 0:
        ax.axhline(floor, color=_MUTED, lw=0.9, ls="--")
        ax.text(f[k0] * 1.04, floor / 1.15, f"noise floor {sp.floor_density / G_M_S2 * 1e6:.0f} ug/sqrt(Hz)",
                color=_MUTED, fontsize=8, ha="left", va="top")
    _mark_lines(ax, sp.lines)
    ax.set_ylabel(f"{sp.axis}: m/s^2 r.m.s.", color=_INK)
    ax.grid(True, which="major", color=_GRID, lw=0.8)
    ax.grid(True, which="minor", color=_GRID, lw=0.4)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(_MUTED)
    ax.tick_params(colors=_INK, labelsize=8)


def _mark_lines(ax, lines) -> None:
    """A dot on each line, its name in a band along the top of the panel with a thin leader down
    to the dot; labels of neighbours closer than a label's width go on lower rows of the band."""
    placed: list[tuple[float, int]] = []
    for ln in sorted(lines, key=lambda x: x.freq_hz):
        row = 0
        while any(abs(np.log10(ln.freq_hz / f0)) < _LABEL_DECADES and r == row for f0, r in placed):
            row += 1
        placed.append((ln.freq_hz, row))
        named = ln.name not in ("unidentified", "rpm unknown")
        colour = _INK if named else _MUTED
        ax.plot([ln.freq_hz], [ln.level_m_s2], "o", ms=4, color=colour)
        label = f"{ln.name}\n{ln.freq_hz:.1f} Hz" if named else f"{ln.freq_hz:.1f} Hz"
        ax.annotate(label, (ln.freq_hz, ln.level_m_s2), xytext=(ln.freq_hz, 0.97 - 0.14 * row),
                    textcoords=("data", "axes fraction"), ha="center", va="top", fontsize=7, color=colour,
                    arrowprops={"arrowstyle": "-", "color": _MUTED, "lw": 0.5, "shrinkA": 1, "shrinkB": 3})
