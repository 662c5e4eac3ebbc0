"""The replay report: one HTML page with PNG plots of what the detector saw and decided.

write_report(out_dir, result, params, recordings, ground_truth=None) writes out_dir/index.html
and its PNGs (matplotlib, Agg):
- score.png: the detector state as a coloured band along the time axis, and the score of every
  evaluated window (spreads of the nearest mode) against the alert, alarm and clear thresholds;
- velocity.png: the state band again and velocity r.m.s. (largest axis, mm/s) against the ISO
  zone boundaries of the parameter set (det_iso_bounds brought back to mm/s with counts_per_g);
- spectrum_NN.png: for each event that raises a concern (into alert, alarm or sensor_fault; up to
  MAX_SPECTRA), the averaged acceleration spectrum of the running windows just before the event
  against the windows at it (the persistence window that raised it), from the numpy twin of the
  device feature stage on the event's recording;
- tables of the events and of the replay summary; with ground truth, the seeded faults as shaded
  spans on the time plots and a table of detection delays.

Times are on the recordings' clock (t0_s plus the offset in the file); plots show days (hours for
spans under two days) since the start of the first recording, or with ground truth since the
scenario's start (its faults are placed in days from there). Windows of separate snapshots are
drawn as points, never joined by lines across the gaps between them. The state band holds each
window's state until the next window, up to GAP_HOLD times the usual spacing; longer gaps (no
recording) stay blank. Every segment is drawn at least MIN_SEG_FRACTION of the axis wide, worst
states on top, so a short fault in one snapshot stays visible on a six-week axis.

The page is written into a temporary folder beside out_dir and moved into place whole; an existing
out_dir is replaced only when it is empty or holds an earlier report.

This is advisory condition monitoring, not machinery protection; an all-clear is no guarantee.
"""
from __future__ import annotations

import json
import os
import secrets
import shutil
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.dsp import feature_index as fi
from firmware_py.detect import iso_zones
from firmware_py.detect.alarm import ALARM, ALERT, IDLE, NORMAL, SENSOR_FAULT, STATE_NAMES, windows_for
from host_tools.data import units
from host_tools.data.lines import HANN_ENBW_BINS, line_names
from host_tools.errors import EdgevibError
from host_tools.progress import progress_bar
from host_tools.report.style import (
    CSS, DRAW_ORDER, INK, MUTED, STATE_COLOURS, duration_text, esc, html_table, png, pyplot, state_code, state_tag,
    style_axes)
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.data.recording import Recording, RecordingFile, open_recording
from host_tools.twin.replay import check_text

MAX_SPECTRA = 16          # spectrum plots per report; the events table still lists every event
SPECTRUM_WINDOWS = 8      # running windows averaged before the event
GAP_HOLD = 1.5            # the band holds a state across gaps up to this many usual spacings
MIN_SEG_FRACTION = 1 / 700  # least drawn width of a band segment, fraction of the time axis
_UNIX_2000 = 946684800.0  # t0_s past this reads as Unix seconds, so a UTC date is shown too
_DAY_S = 86400.0

FAULT_COLOURS = {"bearing_outer_race": "#c7662f", "cavitation": "#2f86c7", "loose_cable": "#8a4fb0"}
_RAISES = (ALERT, ALARM, SENSOR_FAULT)
# Which new state counts as having seen each seeded fault of the demo scenario.
DETECTED_BY = {"bearing_outer_race": (ALERT, ALARM), "cavitation": (ALERT, ALARM),
               "loose_cable": (SENSOR_FAULT,)}


# --- what the report reads from a replay result ---------------------------------------------------

@dataclass
class Windows:
    """Per-window arrays of a replay: t_s (s, recordings' clock), state (int, alarm.STATE_NAMES
    order), score (spreads of the nearest mode; 0 when not evaluated), velocity (mm/s r.m.s.,
    largest axis), mode (nearest mode, -1 none or not given)."""

    t_s: np.ndarray
    state: np.ndarray
    score: np.ndarray
    velocity_mm_s: np.ndarray
    mode: np.ndarray            # nearest mode, -1 none


def _get(result: Any, name: str) -> Any:
    """A field of the result, whether it is an object with attributes or a plain dict."""
    if isinstance(result, dict):
        return result.get(name)
    return getattr(result, name, None)


def windows_of(result: Any, stream: int | None = None) -> Windows:
    """The per-window arrays of a replay result (attributes or a `windows` mapping of arrays),
    only those of stream number `stream` when given; 2-D velocity (windows x axes) is reduced to
    the largest axis, as the ISO guard does."""
    src = _get(result, "windows")
    src = src if isinstance(src, dict) else result

    def col(name: str, default: Any = None) -> np.ndarray:
        v = _get(src, name)
        if v is None and default is not None:
            v = np.full(len(_get(src, "t_s")), default)
        if v is None:
            raise EdgevibError(f"replay result has no per-window {name!r}")
        v = np.asarray(v)
        return v if stream is None else v[np.asarray(_get(src, "stream")) == stream]

    vel = col("velocity_rms_mm_s").astype(float)
    if vel.ndim == 2:
        vel = vel.max(axis=1)
    states = col("state")
    code = np.array([state_code(s) for s in states.tolist()], dtype=int) if states.dtype.kind in "OUS" \
        else states.astype(int)
    t = col("t_s").astype(float)
    order = np.argsort(t, kind="stable")     # time order, which the event lookups rely on
    return Windows(t[order], code[order], col("score").astype(float)[order], vel[order],
                   col("mode", -1).astype(int)[order])


def one_stream(result: Any, stream: str | None = None) -> tuple[Windows, list[dict], Any]:
    """(windows, events in time order, summary) of one stream of a replay result. stream: its
    name, needed only when the result holds several streams."""
    names = list(_get(result, "streams") or [])
    summary = _get(result, "summary")
    events = list(_get(result, "events") or [])
    if stream is None and len(names) <= 1:
        stream = names[0] if names else None
        w = windows_of(result)
    else:
        if stream not in names:
            raise EdgevibError(f"report: name one stream of the replay ({', '.join(names)}), got {stream!r}")
        w = windows_of(result, names.index(stream))
        events = [e for e in events if e.get("stream", stream) == stream]
    if isinstance(summary, dict) and isinstance(summary.get("streams"), dict) and stream in summary["streams"]:
        summary = summary["streams"][stream]
    return w, sorted(events, key=lambda e: float(e["t_s"])), summary


# --- ground truth ---------------------------------------------------------------------------------

def pump_faults(ground_truth: dict | None, machine: str | None) -> list[dict]:
    """The seeded faults of one machine (all of them when the machine is unknown)."""
    if not ground_truth:
        return []
    return [f for f in ground_truth.get("faults", []) if machine is None or f["pump"] == machine]


def detections(events: Sequence[dict], faults: Sequence[dict]) -> list[dict]:
    """Per seeded fault: the first event inside its span that enters a state showing it
    (DETECTED_BY), and the delay from the fault's start (s). detected_t_s None: not seen."""
    out = []
    for f in faults:
        wanted = DETECTED_BY.get(f["kind"], (ALERT, ALARM))
        hit = next((e for e in sorted(events, key=lambda e: e["t_s"])
                    if f["start_t0_s"] <= e["t_s"] <= f["end_t0_s"] and state_code(e["to"]) in wanted), None)
        out.append({**f, "detected_t_s": None if hit is None else float(hit["t_s"]),
                    "delay_s": None if hit is None else float(hit["t_s"]) - f["start_t0_s"],
                    "detected_as": None if hit is None else f"{hit['to']} ({hit['reason']})",
                    "recording": None if hit is None else hit.get("recording"),
                    "offset_s": None if hit is None else hit.get("offset_s")})
    return out


def false_raises(events: Sequence[dict], faults: Sequence[dict], t_from: float, t_to: float) -> dict:
    """Raises outside every seeded fault span: into alert or alarm ("alerts") and into
    sensor_fault ("sensor_faults"), with the healthy time they fall in (days)."""
    def inside(t: float) -> bool:
        return any(f["start_t0_s"] <= t <= f["end_t0_s"] for f in faults)
    outside = [e for e in events if not inside(e["t_s"])]
    covered = sum(max(0.0, min(f["end_t0_s"], t_to) - max(f["start_t0_s"], t_from)) for f in faults)
    return {
        "alerts": [e for e in outside if state_code(e["to"]) in (ALERT, ALARM)
                   and state_code(e["from"]) not in (ALERT, ALARM)],
        "sensor_faults": [e for e in outside if state_code(e["to"]) == SENSOR_FAULT],
        "healthy_days": max(0.0, (t_to - t_from) - covered) / _DAY_S,
    }


# --- time axis ------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Clock:
    """Plot time: (t_s - origin_s) / scale_s, in `unit` ("days" or "hours") since `since`."""

    origin_s: float
    scale_s: float
    unit: str
    since: str = "the first recording"

    def __call__(self, t: Any) -> Any:
        return (np.asarray(t, dtype=float) - self.origin_s) / self.scale_s

    def label(self, t: float) -> str:
        """A time for the tables: relative, and the UTC date when t reads as Unix seconds."""
        rel = f"{self.unit[:-1]} {float(self(t)):.2f}"
        if t > _UNIX_2000:
            return f"{rel} ({datetime.fromtimestamp(t, timezone.utc):%Y-%m-%d %H:%M:%S} UTC)"
        return f"{rel} (t_s {t:.1f})"

    def axis_label(self) -> str:
        when = (f" ({datetime.fromtimestamp(self.origin_s, timezone.utc):%Y-%m-%d %H:%M} UTC)"
                if self.origin_s > _UNIX_2000 else "")
        return f"{self.unit} since {self.since}{when}"


def clock_for(origin: float, t_last: float, since: str = "the first recording") -> Clock:
    """Hours for spans under two days, else days."""
    if t_last - origin < 2 * _DAY_S:
        return Clock(origin, 3600.0, "hours", since)
    return Clock(origin, _DAY_S, "days", since)


# --- recordings -----------------------------------------------------------------------------------

def _load(recordings: Sequence[Recording | str | os.PathLike], p: dict) -> list[Recording]:
    recs = [r if isinstance(r, (Recording, RecordingFile)) else open_recording(r, m_s2_per_count=units.STANDARD_GRAVITY_M_S2
                                                              / p["counts_per_g"]) for r in recordings]
    if not recs:
        raise EdgevibError("report: no recordings given")
    return sorted(recs, key=lambda r: r.t0_s or 0.0)


def _t0(r: Recording) -> float:
    return float(r.t0_s or 0.0)


def iso_bounds_mm_s(p: dict) -> tuple[tuple[float, float, float], str]:
    """Zone boundaries A/B, B/C, C/D in mm/s r.m.s.: the parameter set's det_iso_bounds (F_VEL
    units, counts/s Q16) brought back with counts_per_g, else the iso_zones default table."""
    if "det_iso_bounds" in p and "counts_per_g" in p:
        scale = units.STANDARD_GRAVITY_M_S2 / p["counts_per_g"]
        b = [units.velocity_mm_s(v, scale) for v in p["det_iso_bounds"]]
        return (b[0], b[1], b[2]), (f"the parameter set's boundaries (recorded as ISO 10816-3 group "
                                    f"{p.get('det_iso_group', '?')}, {p.get('det_iso_found', '?')} foundation)")
    b = [v / 100 for v in iso_zones.DEFAULT_BOUNDS_CMM[(2, "rigid")]]
    return (b[0], b[1], b[2]), "ISO 10816-3 group 2, rigid (default table, from memory)"


def _feature_text(feat: Any, p: dict, axes: Sequence[str]) -> str:
    """An event's feature: the replay gives a name; a flat index is named as the replay names it."""
    if feat is None or (not isinstance(feat, str) and int(feat) < 0):
        return "-"
    return feat if isinstance(feat, str) else units.feature_name(int(feat), p, axes)


# --- plots ----------------------------------------------------------------------------------------

def state_segments(t: np.ndarray, state: np.ndarray, window_s: float) -> list[tuple[int, float, float]]:
    """(state, start, end) runs in seconds: each window's state holds until the next window when
    the gap is at most GAP_HOLD usual spacings, else for one window only."""
    if len(t) == 0:
        return []
    gaps = np.diff(t)
    usual = float(np.median(gaps[gaps > window_s * 1.5])) if np.any(gaps > window_s * 1.5) else window_s
    ends = np.append(np.where(gaps <= GAP_HOLD * usual, t[1:], t[:-1] + window_s), t[-1] + window_s)
    segs: list[list] = []
    for s, a, b in zip(state.tolist(), t.tolist(), ends.tolist()):
        if segs and segs[-1][0] == s and abs(segs[-1][2] - a) < 1e-9:
            segs[-1][2] = b
        else:
            segs.append([s, a, b])
    return [(int(s), a, b) for s, a, b in segs]


def _state_band(ax, w: Windows, clock: Clock, window_s: float, span: float) -> None:
    least = span * MIN_SEG_FRACTION
    segs = state_segments(w.t_s, w.state, window_s)
    for st in DRAW_ORDER:
        bars = [(float(clock(a)), max(float(clock(b)) - float(clock(a)), least)) for s, a, b in segs if s == st]
        if bars:
            ax.broken_barh(bars, (0, 1), facecolors=STATE_COLOURS[st], edgecolor="none")
    ax.set_ylim(0, 1)
    ax.set_yticks([])
    ax.set_ylabel("state", rotation=0, ha="right", va="center", labelpad=4)
    for side in ("top", "right", "left"):
        ax.spines[side].set_visible(False)


def _fault_spans(axs, faults: Sequence[dict], clock: Clock, label_ax=None) -> None:
    for f in faults:
        colour = FAULT_COLOURS.get(f["kind"], MUTED)
        a, b = float(clock(f["start_t0_s"])), float(clock(f["end_t0_s"]))
        for ax in axs:
            ax.axvspan(a, b, color=colour, alpha=0.13, lw=0)
        if label_ax is not None:
            label_ax.text(a, 1.0, " " + f["kind"].replace("_", " "), transform=label_ax.get_xaxis_transform(),
                          color=colour, fontsize=8, va="top", ha="left")


def _band_legend(fig, states_seen: set[int], faults: Sequence[dict]) -> None:
    from matplotlib.patches import Patch
    handles = [Patch(color=STATE_COLOURS[s], label=STATE_NAMES[s]) for s in DRAW_ORDER if s in states_seen]
    seen = []
    for f in faults:
        if f["kind"] not in seen:
            seen.append(f["kind"])
            handles.append(Patch(color=FAULT_COLOURS.get(f["kind"], MUTED), alpha=0.3,
                                 label="seeded: " + f["kind"].replace("_", " ")))
    fig.legend(handles=handles, loc="upper left", ncol=len(handles), frameon=False,
               bbox_to_anchor=(0.075, 0.935), fontsize=8, handlelength=1.2, columnspacing=1.2)


def _timeline(plt, w: Windows, clock: Clock, window_s: float, faults: Sequence[dict], title: str):
    fig, (band, ax) = plt.subplots(2, 1, figsize=(11, 4.8), sharex=True,
                                   gridspec_kw={"height_ratios": [1, 9], "hspace": 0.06})
    t0, t1 = float(clock(w.t_s.min())), float(clock(w.t_s.max() + window_s))
    span = max(t1 - t0, 1e-9)
    _state_band(band, w, clock, window_s, span)
    _fault_spans([ax], faults, clock, label_ax=ax)
    fig.text(0.08, 0.975, title, fontsize=10.5, color=INK, ha="left", va="top")
    _band_legend(fig, set(w.state.tolist()), faults)
    ax.set_xlim(t0 - 0.01 * span, t1 + 0.025 * span)
    ax.set_xlabel(clock.axis_label())
    style_axes(ax)
    return fig, ax


def plot_score(w: Windows, p: dict, clock: Clock, window_s: float, faults: Sequence[dict],
               events: Sequence[dict], title: str) -> bytes:
    """Score of each evaluated window (points, coloured by state) against the thresholds."""
    plt = pyplot()
    fig, ax = _timeline(plt, w, clock, window_s, faults, title)
    alert, alarm = p["det_thr_alert_q8"] / 256, p["det_thr_alarm_q8"] / 256
    clear = alert * p["det_hyst_q8"] / 256
    ev = w.score > 0
    for st in DRAW_ORDER:
        m = ev & (w.state == st)
        if m.any():
            ax.scatter(clock(w.t_s[m]), w.score[m], s=4 if st == NORMAL else 7, color=STATE_COLOURS[st],
                       edgecolors="none", rasterized=True, zorder=3)
    top = max(float(w.score[ev].max()) if ev.any() else alarm, alarm) * 2.0
    bottom = min(float(np.percentile(w.score[ev], 0.5)) if ev.any() else clear, clear) / 1.6
    ax.set_yscale("log")
    ax.set_ylim(bottom, top)
    for v, name, colour, ls in ((clear, "clear", MUTED, ":"), (alert, "alert", STATE_COLOURS[ALERT], "--"),
                                (alarm, "alarm", STATE_COLOURS[ALARM], "--")):
        ax.axhline(v, color=colour, lw=1.1, ls=ls, zorder=4)
        ax.text(1.002, v, f"{name} {v:.2f}", transform=ax.get_yaxis_transform(), color=colour, fontsize=8,
                va="center", ha="left")
    raised = [clock(e["t_s"]) for e in events if state_code(e["to"]) in (ALERT, ALARM)
              and state_code(e["from"]) not in (ALERT, ALARM)]
    if raised:
        ax.plot(raised, [top / 1.25] * len(raised), "v", ms=5, color=STATE_COLOURS[ALERT], mec=INK, mew=0.4,
                zorder=5, label="alert or alarm raised")
        ax.legend(loc="upper left", frameon=False, fontsize=8)
    ax.set_ylabel("score, spreads of the nearest mode")
    style_axes(ax)
    fig.subplots_adjust(left=0.08, right=0.9, top=0.84, bottom=0.12)
    out = png(fig)
    plt.close(fig)
    return out


def plot_velocity(w: Windows, p: dict, clock: Clock, window_s: float, faults: Sequence[dict],
                  title: str) -> bytes:
    """Velocity r.m.s. (largest axis) of each running window against the ISO zone boundaries."""
    plt = pyplot()
    fig, ax = _timeline(plt, w, clock, window_s, faults, title)
    (ab, bc, cd), source = iso_bounds_mm_s(p)
    run = (w.velocity_mm_s > 0) & (w.state != IDLE)
    for st in DRAW_ORDER:
        m = run & (w.state == st)
        if m.any():
            ax.scatter(clock(w.t_s[m]), w.velocity_mm_s[m], s=4 if st == NORMAL else 7,
                       color=STATE_COLOURS[st], edgecolors="none", rasterized=True, zorder=3)
    vals = w.velocity_mm_s[run]
    lo = min(float(np.percentile(vals, 0.5)) if run.any() else ab, ab) / 2.0
    hi = max(float(vals.max()) if run.any() else cd, cd) * 1.6
    ax.set_yscale("log")
    ax.set_ylim(lo, hi)
    # Zone colours in a strip at the right edge, so they do not mix with the fault spans.
    for (a, b), colour in (((lo, ab), STATE_COLOURS[NORMAL]), ((ab, bc), "#cfe3d4"), ((bc, cd), STATE_COLOURS[ALERT]),
                           ((cd, hi), STATE_COLOURS[ALARM])):
        ax.axhspan(a, b, xmin=0.988, xmax=1.0, color=colour, lw=0, zorder=2)
    for v in (ab, bc, cd):
        ax.axhline(v, color=MUTED, lw=0.9, zorder=1)
    for zone, (a, b) in zip("ABCD", ((lo, ab), (ab, bc), (bc, cd), (cd, hi))):
        ax.text(1.004, float(np.sqrt(a * b)), f"zone {zone}", transform=ax.get_yaxis_transform(), color=INK,
                fontsize=8, va="center", ha="left")
    ax.set_ylabel("velocity r.m.s., mm/s (largest axis)")
    style_axes(ax)
    ax.text(0.0, -0.2, f"zone boundaries {ab:.2f} / {bc:.2f} / {cd:.2f} mm/s: {source}",
            transform=ax.transAxes, fontsize=7.5, color=MUTED)
    fig.subplots_adjust(left=0.08, right=0.9, top=0.84, bottom=0.17)
    out = png(fig)
    plt.close(fig)
    return out


# --- spectra around events ------------------------------------------------------------------------

class _WindowSamples:
    """Finds the samples of replayed windows in the recordings and runs the twin on them.

    A window is known by its end time t_s (s, recordings' clock, as the replay gives it); its
    samples are the n frames before that time in the recording that holds them. A window that
    straddles two joined recordings has no single home and is left out of the averages."""

    def __init__(self, recs: list[Recording], p: dict):
        self.recs, self.n, self.fs = recs, int(p["n"]), float(p["fs_hz"])
        self.t0 = np.array([_t0(r) for r in recs])
        cfg = TwinConfig(self.n, int(p["fs_hz"]), -32768, 32767, tuple((b[0], b[1]) for b in p["fc_bands"]),
                         *p["fc_vel_hz"])
        self.twin = FeatureTwin(cfg, len(recs[0].axes))

    def _index(self, t_end_s: float) -> int:
        """Index of the recording that holds (the middle of) the window ending at t_end_s, -1 none."""
        return int(np.searchsorted(self.t0, t_end_s - self.n / self.fs / 2)) - 1

    def recording(self, t_end_s: float) -> Recording | None:
        i = self._index(t_end_s)
        return self.recs[i] if i >= 0 else None

    def counts(self, t_end_s: float) -> tuple[np.ndarray, float] | None:
        """(counts of the window ending at t_end_s, its counts scale), or None if not found."""
        i = self._index(t_end_s)
        if i < 0:
            return None
        r = self.recs[i]
        start = int(round((t_end_s - self.t0[i]) * self.fs)) - self.n
        if start < 0 or start + self.n > r.n_frames:
            return None
        return r.read_counts(start, start + self.n), r.m_s2_per_count

    def mean_square(self, t_ends: Sequence[float]) -> np.ndarray | None:
        """Mean square per bin, (m/s^2)^2, per axis (axes, m+1), averaged over the live windows
        (a flat window has no spectrum); None when none is found."""
        found = [c for c in (self.counts(t) for t in t_ends) if c is not None]
        if not found:
            return None
        feats, power = self.twin.features(np.concatenate([c for c, _ in found]), keep_power=True)
        ms = self.twin.mean_square_per_bin(feats, power) * found[0][1] ** 2      # (m/s^2)^2
        out = []
        for a in range(self.twin.axes):
            live = feats[:, a * self.twin.per + fi.F_PEAK] > 0                  # flat: no spectrum
            out.append(ms[live, a].mean(axis=0) if live.any() else np.full(power.shape[2], np.nan))
        return np.array(out)


def at_windows(p: dict) -> int:
    """Windows shown at an event: the persistence span in windows (one window analysed in each),
    at most SPECTRUM_WINDOWS."""
    return min(windows_for(int(p["det_persist_ms"]), int(p["n"]), int(p["fs_hz"]), 1), SPECTRUM_WINDOWS)


def event_windows(ev: dict, w: Windows, p: dict) -> tuple[list[float], list[float]]:
    """End times of the windows at the event (the persistence span, at most SPECTRUM_WINDOWS of
    its windows ending at the event's, within one snapshot) and before it: the SPECTRUM_WINDOWS latest healthy windows
    (state normal) of the event's operating mode, from any earlier recording. Windows of the
    event's own run of recordings come only when no earlier one has any (a snapshot taken as the
    fault grows looks like the event itself); windows of another mode only when its own has none."""
    i = min(int(np.searchsorted(w.t_s, float(ev["t_s"]) - 1e-6)), len(w.t_s) - 1)
    window_s = p["n"] / float(p["fs_hz"])
    joined = np.flatnonzero(np.diff(w.t_s[:i + 1]) >= 1.5 * window_s)
    run_start = int(joined[-1]) + 1 if len(joined) else 0          # first window of the event's run
    at = [i]
    while len(at) < at_windows(p) and at[0] > run_start:
        at.insert(0, at[0] - 1)
    healthy = np.flatnonzero(w.state[:at[0]] == NORMAL)
    mode = ev.get("mode")
    same = healthy[w.mode[healthy] == mode] if mode is not None and mode >= 0 else healthy
    for pick in (same[same < run_start], same, healthy[healthy < run_start], healthy):
        if len(pick):
            break
    before = pick[-SPECTRUM_WINDOWS:]
    return [float(w.t_s[j]) for j in before], [float(w.t_s[j]) for j in at]


def _event_axis(ev: dict, axes: Sequence[str], before: np.ndarray | None, at: np.ndarray | None) -> int:
    """The axis the event's feature names ("... axis z"), else the one whose level changed most."""
    feat = ev.get("feature")
    if isinstance(feat, str) and " axis " in feat and feat.rsplit(" axis ", 1)[1] in axes:
        return list(axes).index(feat.rsplit(" axis ", 1)[1])
    if before is None or at is None:
        return 0
    change = np.abs(np.log((np.nansum(at, axis=1) + 1e-30) / (np.nansum(before, axis=1) + 1e-30)))
    return int(np.argmax(change))


def _mark_orders(ax, rpm: float | None, vanes: int | None, f_max: float) -> None:
    """Thin dotted lines at 1x and, with a vane count, at the vane pass and its second harmonic
    (names as the commissioning check gives them), when the recording says the shaft speed."""
    names = line_names(rpm, vanes)
    for order in sorted({1, vanes or 1, 2 * (vanes or 0)} & set(names)):
        f = order * float(rpm) / 60.0
        if f < f_max:
            ax.axvline(f, color=MUTED, lw=0.7, ls=":", zorder=1)
            ax.text(f, 1.0, " " + names[order].split(" / ")[0], transform=ax.get_xaxis_transform(), fontsize=7,
                    color=MUTED, rotation=90, va="top", ha="left")


def plot_event_spectrum(ev: dict, number: int, w: Windows, p: dict, src: _WindowSamples, clock: Clock,
                        axes: Sequence[str]) -> bytes:
    """Averaged acceleration spectrum (r.m.s. per line) before and at one event, on one axis."""
    t_before, t_at = event_windows(ev, w, p)
    before, at = src.mean_square(t_before), src.mean_square(t_at)
    axis = _event_axis(ev, axes, before, at)
    fs, n = float(p["fs_hz"]), int(p["n"])
    f = np.arange(n // 2 + 1) * fs / n
    k0 = 2                                         # above the Hann window's DC leakage
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(8.5, 3.3))
    to = state_code(ev["to"])
    drawn = False
    for ms, count, colour, label, lw in ((before, len(t_before), MUTED, "before: {} running windows", 1.0),
                                         (at, len(t_at), STATE_COLOURS.get(to, INK), "at the event: {} windows", 1.2)):
        label = label.format(count)
        if ms is not None and np.isfinite(ms[axis]).all():
            ax.plot(f[k0:], np.sqrt(ms[axis, k0:] * HANN_ENBW_BINS), color=colour, lw=lw, label=label)
            drawn = True
        else:
            ax.plot([], [], color=colour, label=label + " (none live)")
    if drawn:
        ax.set_yscale("log")
    ax.set_xlim(0, fs / 2)
    rec = src.recording(t_at[-1])
    if rec is not None:
        _mark_orders(ax, rec.rpm, rec.vane_count, fs / 2)
    style_axes(ax)
    ax.set_xlabel("frequency, Hz")
    ax.set_ylabel(f"axis {axes[axis] if axis < len(axes) else axis}: m/s² r.m.s.")
    ax.set_title(f"event {number}: {ev['from']} → {ev['to']} ({ev['reason']}) at {clock.label(float(ev['t_s']))}",
                 loc="left", fontsize=9.5)
    ax.legend(loc="upper right", frameon=False, fontsize=8)
    fig.subplots_adjust(left=0.1, right=0.97, top=0.9, bottom=0.15)
    out = png(fig)
    plt.close(fig)
    return out


# --- the page -------------------------------------------------------------------------------------

SUMMARY_LABELS = {
    "recordings": "recordings", "windows": "windows analysed", "observed_s": "time analysed",
    "t_first_s": "first window ends", "t_last_s": "last window ends", "windows_per_state": "time per state",
    "alerts": "alerts raised", "alarms": "alarms raised", "sensor_faults": "sensor faults raised",
    "first_alert_t_s": "first alert", "first_alarm_t_s": "first alarm",
    "first_sensor_fault_t_s": "first sensor fault", "events_lost": "events lost (event ring overflowed)",
    "streams": "streams", "raises": "raises (into alert or alarm)", "running_h": "running hours",
    "promise": "training's promise and this replay",
}


def _summary_rows(summary: Any, clock: Clock, window_s: float) -> list[list[str]]:
    """One row per item with a readable label; times as the tables show them, durations in
    minutes, hours or days, time per state from the windows per state."""
    if not isinstance(summary, dict):
        return [["summary", esc(summary)]] if summary else []
    rows = []
    for k, v in summary.items():
        if v is None:
            text = "none"
        elif k.endswith("t_s") and isinstance(v, (int, float)) and not isinstance(v, bool):
            text = clock.label(float(v))
        elif k == "observed_s":
            text = duration_text(float(v))
        elif k == "windows_per_state" and isinstance(v, dict):
            text = ", ".join(f"{name.replace('_', ' ')} {duration_text(n * window_s)}" for name, n in v.items() if n) or "none"
        elif k == "promise" and isinstance(v, dict) and "stated" in v:
            text = check_text(v)
        else:
            text = json.dumps(v, sort_keys=True) if isinstance(v, (dict, list)) else str(v)
        label = SUMMARY_LABELS.get(k, k.replace("_", " "))
        rows.append([esc(label), esc(text if len(text) < 400 else text[:400] + " ...")])
    return rows


def write_report(out_dir: str | os.PathLike, result: Any, params: dict,
                 recordings: Sequence[Recording | str | os.PathLike], ground_truth: dict | None = None,
                 stream: str | None = None) -> Path:
    """Write the report page and its plots into out_dir; returns out_dir/index.html.

    result: a replay result (sample_rate_hz, events, per-window arrays, summary; attributes or a
    dict). params: the parameter set replayed. recordings: the replayed recordings (Recording or
    paths) of one gateway. ground_truth: the demo scenario's ground_truth.json, if any.
    stream: which stream of the result the recordings are (needed only when it holds several).
    """
    out = Path(out_dir)
    check_report_folder(out)
    recs = _load(recordings, params)
    files, page = render(result, params, recs, ground_truth, stream)
    return write_page(out, files, page)


def check_report_folder(out: Path) -> None:
    """Refuse a report folder that is a file, holds other files, or has no parent folder."""
    if out.exists() and not out.is_dir():
        raise EdgevibError(f"{out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not (out / "index.html").is_file():
        raise EdgevibError(f"{out}: folder holds other files and no earlier report; choose an empty or new folder")
    if not out.parent.is_dir():
        raise EdgevibError(f"{out}: folder {out.parent} does not exist")


def write_page(out: Path, files: dict[str, bytes], page: str) -> Path:
    """Write files and index.html into a staging folder beside out, then swap it in whole."""
    tmp = staging_folder(out)
    try:
        for name, data in files.items():
            (tmp / name).write_bytes(data)
        (tmp / "index.html").write_text(page, encoding="utf-8")
        swap_in(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out / "index.html"


def _sibling(out: Path, suffix: str) -> Path:
    return out.parent / f".{out.name}.{os.getpid()}.{secrets.token_hex(4)}{suffix}"


def staging_folder(out: Path) -> Path:
    """A new hidden folder beside out to build into (same file system, so the move is a rename).
    Made with mkdir, not mkdtemp, so the finished folder gets the usual permissions."""
    tmp = _sibling(out, ".tmp")
    tmp.mkdir()
    return tmp


def swap_in(tmp: Path, out: Path) -> None:
    """Move the finished folder tmp to out; an earlier out is renamed aside first, then removed."""
    old = None
    if out.exists():
        old = _sibling(out, ".old")
        os.replace(out, old)
    os.replace(tmp, out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def render(result: Any, p: dict, recs: list[Recording], ground_truth: dict | None,
           stream: str | None = None) -> tuple[dict[str, bytes], str]:
    """The PNGs (name -> bytes) and the HTML text of the report."""
    w, events, summary = one_stream(result, stream)
    if len(w.t_s) == 0:
        raise EdgevibError("report: the replay holds no windows")
    machine = next((r.machine for r in recs if r.machine), None)
    plant = next((r.plant for r in recs if r.plant), None)
    window_s = p["n"] / float(p["fs_hz"])
    t_first = _t0(recs[0])
    t_last = max(_t0(r) + r.duration_s for r in recs)
    # The scenario's faults are told in days from its start, so with ground truth the clock starts there.
    origin = float(ground_truth["start_t0_s"]) if ground_truth and "start_t0_s" in ground_truth else t_first
    clock = clock_for(origin, t_last, "the scenario start" if origin != t_first else "the first recording")
    faults = pump_faults(ground_truth, machine)
    axes = recs[0].axes
    who = " - ".join(x for x in (plant, machine) if x) or str(recs[0].path.parent)

    raising = [i for i, e in enumerate(events) if state_code(e["to"]) in _RAISES]
    # machine raises before sensor faults when there are more than the plots allowed
    chosen = sorted(sorted(raising, key=lambda i: state_code(events[i]["to"]) == SENSOR_FAULT)[:MAX_SPECTRA])
    with progress_bar(2 + len(chosen), "plots", "report") as bar:
        files = {"score.png": plot_score(w, p, clock, window_s, faults, events, f"{who}: detector score")}
        bar.update(1)
        files["velocity.png"] = plot_velocity(w, p, clock, window_s, faults, f"{who}: velocity r.m.s. and ISO zones")
        bar.update(1)
        src = _WindowSamples(recs, p)
        spectra: dict[int, str] = {}
        for i in chosen:
            name = f"spectrum_{len(spectra) + 1:02d}.png"
            files[name] = plot_event_spectrum(events[i], i + 1, w, p, src, clock, axes)
            spectra[i] = name
            bar.update(1)

    parts = [f"<!doctype html><html lang=en><head><meta charset=utf-8><title>{esc(who)}: replay report</title>"
             f"<style>{CSS}</style></head><body>",
             f"<h1>{esc(who)}: replay report</h1>",
             f'<p class=sub>{len(recs)} recording(s), {len(w.t_s)} windows of {p["n"]} samples at '
             f'{float(p["fs_hz"]):g} Hz, from {esc(clock.label(t_first))} to {esc(clock.label(t_last))}; '
             f'parameter set version {esc(p.get("version", "?"))} for board {esc(p.get("board", "?"))}. '
             f'Time origin of every plot and table: {esc(clock.axis_label())}.</p>',
             '<p class=caution>Advisory condition monitoring only: not a machinery-protection or safety '
             'shutdown system. A window in <b>normal</b> resembles what was learned as normal; it is no '
             'guarantee that the machine is healthy.</p>']
    if ground_truth:
        parts.append(_truth_section(events, faults, clock, t_first, t_last, ground_truth))
    parts += ["<h2>Score</h2>",
              "<p>Each point is one evaluated window (idle, held-off and sensor-fault windows are not scored). "
              "The band above shows the state; an alert needs the score over its threshold on "
              f'{int(p["det_persist_q8"]) * 100 // 256} % of the windows of the last '
              f'{int(p["det_persist_ms"]) / 1000:g} s of running.</p>',
              '<img src="score.png" alt="score over time with thresholds">',
              "<p>An alarm stays latched until it is acknowledged on the gateway; a replay acknowledges nothing, "
              "so once raised it stays to the end.</p>",
              "<h2>Velocity r.m.s. and ISO zones</h2>",
              '<img src="velocity.png" alt="velocity r.m.s. against ISO zone boundaries">',
              f"<h2>Events ({len(events)})</h2>", _events_table(events, spectra, p, axes, clock)]
    if spectra:
        parts.append("<h2>Spectra around events</h2>")
        left = len(raising) - len(spectra)
        parts.append("<p>Averaged acceleration spectrum of the running windows just before the event (grey) "
                     "and of the persistence window that raised it, on the axis of the driving feature."
                     + (f" {left} more raising event(s) have no plot here (alerts and alarms go first, then "
                        f"sensor faults, up to {MAX_SPECTRA} plots)." if left else "") + "</p>")
        parts += [f'<img id="spectrum-{i + 1}" src="{name}" alt="spectrum around event {i + 1}">'
                  for i, name in spectra.items()]
    rows = _summary_rows(summary, clock, window_s)
    if rows:
        parts += ["<h2>Replay summary</h2>", html_table(("item", "value"), rows)]
    parts.append("</body></html>\n")
    return files, "\n".join(parts)


def _events_table(events: Sequence[dict], spectra: dict[int, str], p: dict, axes: Sequence[str], clock: Clock) -> str:
    rows = []
    for i, e in enumerate(events):
        mode = e.get("mode")
        spec = f'<a href="#spectrum-{i + 1}">plot</a>' if i in spectra else ""
        score = e.get("score")
        rows.append([str(i + 1), esc(clock.label(float(e["t_s"]))), state_tag(e["from"]) + " → " + state_tag(e["to"]),
                     esc(e["reason"]), "-" if mode is None or mode < 0 else str(mode),
                     esc(_feature_text(e.get("feature"), p, axes)),
                     "-" if score is None else f"{float(score):.2f}", spec])
    if not rows:
        return "<p>No events: the detector stayed in one state.</p>"
    return html_table(("#", "time", "transition", "reason", "mode", "feature", "score", "spectrum"), rows, num=(0, 6))


def _truth_section(events: Sequence[dict], faults: Sequence[dict], clock: Clock, t_from: float, t_to: float,
                   truth: dict) -> str:
    rows = []
    for d in detections(events, faults):
        seen = (f"{esc(clock.label(d['detected_t_s']))}: {esc(d['detected_as'])}" if d["detected_t_s"] is not None
                else "not detected")
        delay = duration_text(d["delay_s"]) if d["delay_s"] is not None else "-"
        rows.append([esc(d["kind"].replace("_", " ")), esc(clock.label(d["start_t0_s"])),
                     esc(clock.label(d["end_t0_s"])), seen, delay])
    fr = false_raises(events, faults, t_from, t_to)
    text = (f"<p>Outside the seeded faults ({fr['healthy_days']:.1f} days of healthy running and stops): "
            f"{len(fr['alerts'])} alert(s) or alarm(s) raised, {len(fr['sensor_faults'])} sensor fault(s).</p>")
    note = esc(truth.get("note", "ground truth of the scenario"))
    table = html_table(("seeded fault", "starts", "ends", "first detection", "delay"), rows) if rows else \
        "<p>No seeded fault on this machine in this span.</p>"
    return f"<h2>Against the ground truth</h2><p class=sub>{note}</p>{table}{text}"

