"""`edgevib monitor --port PORT [--once]`: a live view of a gateway's state and main features.

Features come in the device's integer scales (firmware_py/dsp/feature_index.py) and are shown in
physical units through host_tools/data/units.py, with the counts scale of the committed parameter
set. On a terminal a fixed block is redrawn in place (ANSI cursor movement, no colours);
otherwise each update is one line, for logs and pipes. --once prints one status and exits.
The view is advisory condition monitoring, not machinery protection; an all-clear is no guarantee.
"""
from __future__ import annotations

import argparse
import sys
import time
from dataclasses import dataclass
from datetime import datetime, timezone

import firmware_py  # noqa: F401
from firmware_py.dsp import feature_index as fi
from firmware_py.detect.iso_zones import ZONE_NAMES
from host_tools.data import units
from host_tools.link.device_link import add_key_argument, committed_params, connected, read_key
from host_tools.errors import EdgevibError, LinkError

HELP = "live view of a gateway: state, mode, score, ISO zone and the main features"
QUIET_S = 3.0        # with no pushed update for this long, ask for the status instead
_AXES = ("x", "y", "z")


@dataclass(frozen=True)
class View:
    """What the display needs besides a status: the gateway and the set it runs."""

    board: str
    fw: str
    port: str
    version: int
    axes: int
    scale: float          # m/s^2 per count
    alert_q8: int | None
    alarm_q8: int | None
    params: dict          # the committed parameter set (band edges, for feature names)
    crc: int | None = None   # identify's param_crc: the set this view describes


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)
    p.add_argument("--once", action="store_true", help="print one status and exit")
    p.add_argument("--updates", type=int, metavar="N", help="stop after N updates (default: until Ctrl-C)")


def _clock(t_s) -> str:
    if not isinstance(t_s, int):
        return "-"
    return datetime.fromtimestamp(t_s, timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")


def _axis_rows(st: dict, v: View) -> list[dict]:
    f = st["features"]
    per = len(f) // v.axes
    rows = []
    for a in range(v.axes):
        b = a * per
        rows.append({
            "axis": _AXES[a] if a < len(_AXES) else f"a{a}",
            "vel": units.velocity_mm_s(f[b + fi.F_VEL], v.scale),
            "rms": units.accel_m_s2(f[b + fi.F_RMS], v.scale),
            "peak": units.accel_m_s2(f[b + fi.F_PEAK], v.scale),
            "crest": units.ratio(f[b + fi.F_CREST]),
            "kurt": units.ratio(f[b + fi.F_KURT]),
            "mean": units.accel_m_s2(f[b + fi.F_MEAN], v.scale),
            "clip": f[b + fi.F_CLIP],
        })
    return rows


def _head(st: dict, v: View) -> tuple[str, str, str, str, str]:
    """state, mode, score, zone and driving feature as display strings."""
    mode = "-" if st["mode"] < 0 else str(st["mode"])
    zone = ZONE_NAMES[st["zone"]] if 0 <= st["zone"] < len(ZONE_NAMES) else "?"
    return st["state"], mode, f"{st['score_q8'] / 256:.2f}", zone, _feature(st["feature"], v)


def _feature(flat: int, v: View) -> str:
    """The driving feature as units.feature_name names it everywhere; '-' for none."""
    return "-" if flat < 0 else units.feature_name(flat, v.params, _AXES)


def render_block(st: dict, v: View) -> list[str]:
    """The terminal view of one status: a fixed number of lines for a given gateway."""
    state, mode, score, zone, driver = _head(st, v)
    limits = ""
    if v.alert_q8 is not None and v.alarm_q8 is not None:
        limits = f" (alert at {v.alert_q8 / 256:.2f}, alarm at {v.alarm_q8 / 256:.2f})"
    lines = [
        f"gateway {v.board} on {v.port}  firmware {v.fw}  parameter set v{v.version}",
        f"clock {_clock(st.get('t_s'))}  windows {st['windows']}  dropped samples {st['dropped']}"
        f"  events {st['events']}",
        f"state {state.upper():<12} mode {mode:<3} score {score}{limits}",
        f"ISO zone {zone}  score driven by {driver}",
        f"{'axis':<5}{'vel mm/s':>10}{'rms m/s2':>10}{'peak m/s2':>11}{'crest':>7}{'kurt':>7}"
        f"{'mean m/s2':>11}{'clip':>6}",
    ]
    for r in _axis_rows(st, v):
        lines.append(f"{r['axis']:<5}{r['vel']:>10.2f}{r['rms']:>10.3f}{r['peak']:>11.3f}{r['crest']:>7.2f}"
                     f"{r['kurt']:>7.2f}{r['mean']:>+11.3f}{r['clip']:>6d}")
    return lines


def render_line(st: dict, v: View) -> str:
    """One status as one line of key=value fields (for pipes and logs)."""
    state, mode, score, zone, driver = _head(st, v)
    rows = _axis_rows(st, v)

    def per_axis(key: str, fmt: str) -> str:
        return ",".join(format(r[key], fmt) for r in rows)

    t = st.get("t_s")
    stamp = datetime.fromtimestamp(t, timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ") if isinstance(t, int) else "-"
    return (f"{stamp} set=v{v.version} state={state} mode={mode} score={score} zone={zone} "
            f"driver={driver.replace(' ', '.')} "
            f"vel_mm_s={per_axis('vel', '.2f')} rms_m_s2={per_axis('rms', '.3f')} "
            f"peak_m_s2={per_axis('peak', '.3f')} crest={per_axis('crest', '.2f')} "
            f"kurt={per_axis('kurt', '.2f')} windows={st['windows']} dropped={st['dropped']} "
            f"events={st['events']}")


class _Screen:
    """Draws blocks on a terminal, each over the one before."""

    def __init__(self, out):
        self.out = out
        self.height = 0

    def draw(self, lines: list[str]) -> None:
        up = f"\x1b[{self.height}F" if self.height else ""
        self.out.write(up + "".join(f"\x1b[2K{ln}\n" for ln in lines))
        self.out.flush()
        self.height = len(lines)


def view_of(c, port: str) -> View:
    info = c.identify()
    p = committed_params(c)
    return View(board=info["board"], fw=info["fw"], port=port, version=info["param_version"],
                crc=info["param_crc"], axes=info["axes"], scale=units.m_s2_per_count(p), alert_q8=p.get("det_thr_alert_q8"),
                alarm_q8=p.get("det_thr_alarm_q8"), params=p)


def run(args: argparse.Namespace) -> int:
    if args.updates is not None and args.updates < 1:
        raise EdgevibError("--updates must be at least 1")
    out = sys.stdout
    with connected(args.port, key=read_key(args.key_file)) as c:
        v = view_of(c, args.port)
        if args.once:
            st = c.status()
            print("\n".join(render_block(st, v)) if out.isatty() else render_line(st, v))
            return 0
        screen = _Screen(out) if out.isatty() else None
        c.stream(True)
        shown = 0
        try:
            while args.updates is None or shown < args.updates:
                st = _next_status(c)
                if v.crc is not None and st.get("param_crc", v.crc) != v.crc:   # a new set
                    v = view_of(c, args.port)
                if screen is not None:
                    screen.draw(render_block(st, v))
                else:
                    print(render_line(st, v), flush=True)
                shown += 1
        except KeyboardInterrupt:
            pass
        finally:
            try:
                c.stream(False)
            except LinkError:
                pass
    return 0


def _next_status(c) -> dict:
    """The next pushed features message, or the status asked for if none comes in QUIET_S."""
    deadline = time.monotonic() + QUIET_S
    while True:
        msg = c.link.next_push(max(0.0, deadline - time.monotonic()))
        if msg is None:
            return c.status()
        if msg.get("push") == "features":
            return msg
