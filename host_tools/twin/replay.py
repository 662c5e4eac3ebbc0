"""Replay: recordings through the exact device detector (firmware_py.detect.detector, run by CPython).

Features come from the numpy twin of the feature core (bit-identical to the device); every window
is then stepped through the device's own Detector, one window at a time, exactly as the gateway
does. Nothing here re-implements a detector rule: states, scores, modes and events are the
device's.

Streams. The recordings of one gateway form one stream, in t0_s order, with one Detector whose
state carries from one recording to the next (a latched alarm stays latched, an alert stays
raised until it clears, the persistence evidence and any start-up hold-off carry over).
- Recordings that follow each other with no gap (the next starts within half a sample of where
  the previous ends) are joined sample by sample, so windows straddle the file boundary as the
  device's ring would deliver them.
- Across a real gap (snapshots hours apart) the detector sees nothing of the time between: the
  first window after the gap follows the last one before it. The gap is not shown to it as a stop
  (that would log stop and start events that never happened) nor as a fresh start. The device
  itself ran through the gap, so what it did there is unknown; the replay shows how the detector
  judges the windows it is given. Each window keeps its own time on the recordings' clock.
- t_s of a window is its end: t0_s of its segment + (index + 1) * n / fs_hz, seconds. The detector
  itself is given the window's index in the stream as its clock (an int well under 2**30, which a
  Unix time is not); events are mapped back to t_s here.
- A recording without t0_s starts at 0 s. Samples left over after the last whole window of a
  segment are not seen (the device would wait for more).

Physical units (per window, for reports and CSV) go through host_tools.data.units with the
recordings' counts scale. This is advisory condition monitoring: a replay that shows no alert is
no guarantee that the machine is healthy.
"""
from __future__ import annotations

import csv
import io
import math
import os
import sys
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from firmware_py.detect.detector import Detector, WHY_NAMES
from firmware_py.detect.iso_zones import ZONE_NAMES, zone_of
from host_tools.data.units import band_hz, feature_name, m_s2_per_count
from host_tools.errors import EdgevibError
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.data.recording import Recording, read_stream

_CHUNK_WINDOWS = 512   # windows per call of the feature twin: keeps its temporaries in cache (measured fastest)

# --- set-up from a parameter set ----------------------------------------------------------------

def twin_for(params: dict, profile: dict) -> FeatureTwin:
    """The numpy twin of the feature core that parameter set `params` builds on board `profile`."""
    s = profile["sensor"]
    o = pm.feature_options(params)
    cfg = TwinConfig(params["n"], params["fs_hz"], s["adc_min"], s["adc_max"],
                     tuple((b[0], b[1]) for b in params["fc_bands"]),
                     params["fc_vel_hz"][0], params["fc_vel_hz"][1], o["speed_lo_q8"],
                     o["speed_hi_q8"], o["vane"], o["env_band"], o["bear_q12"])
    return FeatureTwin(cfg, params["axes"])


def check_recordings(recs: Sequence[Recording], params: dict) -> None:
    """Refuse recordings the set cannot judge: another sample rate, axis count or counts scale."""
    want_scale = m_s2_per_count(params)
    for r in recs:
        if not math.isclose(r.sample_rate_hz, params["fs_hz"], rel_tol=1e-6):
            raise EdgevibError(f"{r.path}: sample rate {r.sample_rate_hz:g} Hz does not match the parameter set's {params['fs_hz']} Hz")
        if r.counts.shape[1] != params["axes"]:
            raise EdgevibError(f"{r.path}: {r.counts.shape[1]} axes, the parameter set is for {params['axes']}")
        if not math.isclose(r.m_s2_per_count, want_scale, rel_tol=1e-9):
            raise EdgevibError(f"{r.path}: counts scale {r.m_s2_per_count:g} m/s^2 differs from the set's {want_scale:g} (read it at the set's scale)")


# --- features of a stream -----------------------------------------------------------------------

@dataclass
class StreamFeatures:
    """Twin features of one stream: feats (windows, axes * per_axis) int32, t_s (windows,) window
    end times, s, and rec (windows,) index of the recording each window ends in."""

    feats: np.ndarray
    t_s: np.ndarray
    rec: np.ndarray


def stream_features(recs: Sequence[Recording], twin: FeatureTwin, every: int = 1) -> StreamFeatures:
    """Features of the windows the device analyses over a stream, joining gap-free recordings.

    every: the board's analyse_every. The gateway analyses the first window of every cycle of
    `every` windows and discards the others (firmware_py/run/gateway.py, feed), counting cycles
    from the first frame it is fed; a recording segment (gap-free recordings joined) is fed from
    its first frame, so its windows 0, every, 2 every, ... are the ones analysed, each keeping
    its own end time. The selected windows are stacked and run through the twin in chunks of
    _CHUNK_WINDOWS (each window depends only on its own samples, so this is the same as one call
    per segment, with less overhead per call)."""
    n, fs = twin.n, float(twin.cfg.fs_hz)
    blocks, times, owner = [], [], []
    i = 0
    while i < len(recs):
        t0 = recs[i].t0_s or 0.0
        parts, ends = [recs[i].counts], [recs[i].n_frames]
        j = i + 1
        while j < len(recs) and abs((recs[j].t0_s or 0.0) - (t0 + ends[-1] / fs)) < 0.5 / fs:
            parts.append(recs[j].counts)
            ends.append(ends[-1] + recs[j].n_frames)
            j += 1
        w = ends[-1] // n
        if w:
            counts = parts[0] if len(parts) == 1 else np.concatenate(parts)
            keep = np.arange(0, w, every)
            wins = counts[:w * n].reshape(w, n, counts.shape[1])[keep]
            blocks.append(wins.reshape(-1, counts.shape[1]))
            w_end = (keep + 1) * n
            times.append(t0 + w_end / fs)
            owner.append(i + np.searchsorted(np.asarray(ends), w_end, side="left"))
        i = j
    if not recs:
        raise EdgevibError("no recordings to replay")
    if not blocks:
        raise EdgevibError(f"{recs[0].path}: the stream is shorter than one window of {n} samples")
    stacked = np.concatenate(blocks) if len(blocks) > 1 else blocks[0]
    step = _CHUNK_WINDOWS * n
    feats = np.concatenate([twin.features(stacked[k:k + step]) for k in range(0, len(stacked), step)])
    return StreamFeatures(feats, np.concatenate(times), np.concatenate(owner))


# --- stepping the device detector ---------------------------------------------------------------

@dataclass
class Steps:
    """What the detector did per window (index w = its clock), and its events as raw ints:
    (w, old, new, reason, mode, feat, score_q8). why: firmware_py.detect.detector W_* (0 scored);
    pushed: 1 where the window added to the persistence evidence; resets: the detector's count of
    evidence resets after the window (a change marks a new evidence sequence); speed_q8: the
    operating-point speed (Hz Q8, 0 none)."""

    state: np.ndarray
    score_q8: np.ndarray
    mode: np.ndarray
    feat: np.ndarray
    events: list[tuple[int, int, int, int, int, int, int]]
    lost: int
    why: np.ndarray
    pushed: np.ndarray
    resets: np.ndarray
    speed_q8: np.ndarray


def step_detector(det: Detector, feats: np.ndarray, first_w: int = 0) -> Steps:
    """Step `det` over the rows of feats (windows, features), window w given the clock first_w + w.

    The loop is the detector's own code; it only reads the results and drains the event ring.
    Reading det.score_q8 when det.mode is -1 gives 0, as the device reports it.
    """
    rows = feats.tolist()
    n = len(rows)
    st = np.empty(n, np.int8)
    sc = np.empty(n, np.int32)
    md = np.empty(n, np.int8)
    ft = np.empty(n, np.int16)
    wy = np.empty(n, np.int8)
    pu = np.empty(n, np.int8)
    rs = np.empty(n, np.int32)
    sp = np.empty(n, np.int32)
    ev: list[tuple[int, int, int, int, int, int, int]] = []
    step, ring = det.step, det.events
    for i, row in enumerate(rows):
        st[i] = step(row, first_w + i, 0)
        sc[i] = det.score_q8
        md[i] = det.mode
        ft[i] = det.feat
        wy[i] = det.why
        pu[i] = det.pushed
        rs[i] = det.resets
        sp[i] = det.speed_q8
        while ring.count:
            k = ring.pop()
            ev.append((ring.t[k], ring.old[k], ring.new[k], ring.reason[k], ring.mode[k],
                       ring.feat[k], ring.score_q8[k]))
    return Steps(st, sc, md, ft, ev, ring.lost, wy, pu, rs, sp)


def evidence_sequences(steps: Steps, select: np.ndarray | None = None) -> list[np.ndarray]:
    """The combined scores (Q8) of the windows that entered the persistence evidence, cut where
    the detector forgot it (a stop, a sensor fault): each piece is what the device's span saw in
    one go. select: a boolean mask of windows to keep (others cut the sequence too)."""
    keep = steps.pushed.astype(bool)
    if select is not None:
        keep &= select
    idx = np.flatnonzero(keep)
    if len(idx) == 0:
        return []
    cut = np.flatnonzero((np.diff(idx) > 1) | (np.diff(steps.resets[idx]) != 0)) + 1
    return [steps.score_q8[g].astype(np.float64) for g in np.split(idx, cut)]


# --- physical features --------------------------------------------------------------------------

def physical_columns(feats: np.ndarray, params: dict, scale: float, axis_names: Sequence[str]) -> dict[str, np.ndarray]:
    """Per-window features in physical units, one column per name (per axis with the suffix
    `_<axis>`; accel_rms_m_s2 and velocity_rms_mm_s without suffix are the largest over the axes,
    the velocity being the quantity of both the idle floor and the ISO guard; zone is the ISO
    zone letter of that velocity against the set's boundaries)."""
    pa = fi.per_axis(len(params["fc_bands"]))
    f = feats.astype(np.float64)
    cols: dict[str, np.ndarray] = {}
    rms = f[:, fi.F_RMS::pa] / (1 << fi.Q_RMS) * scale
    vel = f[:, fi.F_VEL::pa] / (1 << fi.Q_VEL) * scale * 1000.0
    cols["accel_rms_m_s2"] = rms.max(1)
    cols["velocity_rms_mm_s"] = vel.max(1)
    bounds = params["det_iso_bounds"]
    cols["zone"] = np.array([ZONE_NAMES[zone_of(v, bounds)] for v in feats[:, fi.F_VEL::pa].max(1).tolist()])
    c_db = 20.0 * math.log10(scale)
    for a, name in enumerate(axis_names):
        b = a * pa
        cols[f"accel_rms_m_s2_{name}"] = rms[:, a]
        cols[f"velocity_rms_mm_s_{name}"] = vel[:, a]
        cols[f"peak_m_s2_{name}"] = f[:, b + fi.F_PEAK] / (1 << fi.Q_PEAK) * scale
        cols[f"crest_{name}"] = f[:, b + fi.F_CREST] / (1 << fi.Q_CREST)
        cols[f"kurtosis_{name}"] = f[:, b + fi.F_KURT] / (1 << fi.Q_KURT)
        cols[f"mean_m_s2_{name}"] = f[:, b + fi.F_MEAN] / (1 << fi.Q_MEAN) * scale
        cols[f"clipped_{name}"] = feats[:, b + fi.F_CLIP].astype(np.int64)
        for k in range(len(params["fc_bands"])):
            lo, hi = band_hz(params, k)
            v = f[:, b + fi.F_BAND0 + k]
            # units.band_power_db, vectorised: dB re 1 (m/s^2)^2
            db = 10.0 * math.log10(2.0) * v / (1 << fi.Q_LOG2) + c_db
            cols[f"band_{lo:g}_{hi:g}_hz_db_{name}"] = np.where(v <= fi.LOG2_ZERO_Q8, -np.inf, db)
    return cols


# --- results ------------------------------------------------------------------------------------

@dataclass
class ReplayResult:
    """Replay of one or more streams.

    sample_rate_hz: the set's rate. streams: stream names (folder or file names), in input order.
    events: dicts {stream, t_s, from, to, reason, mode, feature, score}, per stream in time order
    (score in spreads, score_q8 / 256; mode and feature None when none).
    windows: one column per key, one row per window of every stream: stream (index into streams),
    recording (path), t_s, state (name), score (spreads), mode (-1 none), feature (name or ""),
    then physical_columns(). summary: {"streams": {name: summary}, "total": summary}.
    recordings: per stream, the recording paths in the order replayed.
    """

    sample_rate_hz: float
    streams: list[str]
    events: list[dict[str, Any]]
    windows: dict[str, np.ndarray]
    summary: dict[str, Any]
    recordings: list[list[str]] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        """What OUT.json holds: sample_rate_hz, streams, events and summary."""
        return {"sample_rate_hz": self.sample_rate_hz, "streams": self.streams, "events": self.events,
                "summary": self.summary}


def promise_check(raises: int, running_h: float, params: dict) -> dict[str, Any] | None:
    """The training's promise (fit_promise_milli: expected false raises per 30 days of running,
    and its 95 % range, in thousandths) beside what a replay observed, with a verdict: "agrees"
    when the count lies within the Poisson 2.5-97.5 % quantiles of the range's ends over the
    running hours replayed (scipy.stats.poisson), "more than promised" or "fewer than promised"
    otherwise. None when the set holds no promise. Raises on a replay of healthy running are
    false by definition; on a faulty machine they are what the detector is for."""
    pm_ = params.get("fit_promise_milli")
    if not pm_ or running_h <= 0:
        return None
    from scipy.stats import poisson
    rate, lo, hi = (v / 1000.0 for v in pm_)
    lo_n = poisson.ppf(0.025, lo * running_h / 720.0)
    hi_n = poisson.ppf(0.975, hi * running_h / 720.0)
    verdict = "agrees" if lo_n <= raises <= hi_n else ("more than promised" if raises > hi_n else "fewer than promised")
    return {"promised_per_30_days": rate, "range_95_per_30_days": [lo, hi],
            "observed_raises": raises, "running_h": running_h,
            "observed_per_30_days": raises * 720.0 / running_h,
            "expected_raises": rate * running_h / 720.0, "verdict": verdict}


def _stream_summary(t_s: np.ndarray, steps: Steps, events: list[dict], n_recs: int, window_s: float,
                    params: dict) -> dict:
    counts = np.bincount(steps.state.astype(np.int64), minlength=len(al.STATE_NAMES))
    why = np.bincount(steps.why.astype(np.int64), minlength=len(WHY_NAMES))
    first = {to: next((e["t_s"] for e in events if e["to"] == to), None) for to in ("alert", "alarm", "sensor_fault")}
    raises = sum(e["to"] in ("alert", "alarm") and e["from"] not in ("alert", "alarm") for e in events)
    running_h = float(steps.pushed.sum()) * window_s / 3600.0
    return {
        "recordings": n_recs,
        "windows": int(len(t_s)),
        "observed_s": float(len(t_s) * window_s),
        "running_h": running_h,
        "t_first_s": float(t_s[0]) if len(t_s) else None,
        "t_last_s": float(t_s[-1]) if len(t_s) else None,
        "windows_per_state": {name: int(counts[i]) for i, name in enumerate(al.STATE_NAMES)},
        "windows_by_scoring": {name: int(why[i]) for i, name in enumerate(WHY_NAMES)},
        "alerts": sum(e["to"] == "alert" for e in events),
        "alarms": sum(e["to"] == "alarm" for e in events),
        "raises": raises,
        "sensor_faults": sum(e["to"] == "sensor_fault" for e in events),
        "first_alert_t_s": first["alert"],
        "first_alarm_t_s": first["alarm"],
        "first_sensor_fault_t_s": first["sensor_fault"],
        "events_lost": int(steps.lost),
        "promise": promise_check(raises, running_h, params),
    }


def _total(summaries: list[dict], params: dict) -> dict:
    out: dict[str, Any] = {"streams": len(summaries)}
    for key in ("recordings", "windows", "alerts", "alarms", "raises", "sensor_faults", "events_lost"):
        out[key] = sum(s[key] for s in summaries)
    out["observed_s"] = sum(s["observed_s"] for s in summaries)
    out["running_h"] = sum(s["running_h"] for s in summaries)
    out["windows_per_state"] = {name: sum(s["windows_per_state"][name] for s in summaries) for name in al.STATE_NAMES}
    out["windows_by_scoring"] = {name: sum(s["windows_by_scoring"][name] for s in summaries) for name in WHY_NAMES}
    for key in ("first_alert_t_s", "first_alarm_t_s", "first_sensor_fault_t_s"):
        vals = [s[key] for s in summaries if s[key] is not None]
        out[key] = min(vals) if vals else None
    out["promise"] = promise_check(out["raises"], out["running_h"], params)
    return out


def replay_stream(recs: Sequence[Recording], params: dict, profile: dict, name: str = "stream") -> dict[str, Any]:
    """Replay one stream (recordings of one gateway in t0_s order) with a fresh Detector.

    Returns {"name", "events", "windows", "summary", "recordings"} (the parts of a ReplayResult)."""
    check_recordings(recs, params)
    every = profile["analyse_every"]
    sf = stream_features(recs, twin_for(params, profile), every)
    det = Detector(params, every)
    steps = step_detector(det, sf.feats)
    axis_names = recs[0].axes
    events = [{
        "stream": name, "t_s": float(sf.t_s[w]), "from": al.STATE_NAMES[old], "to": al.STATE_NAMES[new],
        "reason": al.REASON_NAMES[reason], "mode": mode if mode >= 0 else None,
        "feature": feature_name(feat, params, axis_names) if feat >= 0 else None, "score": score / 256.0,
    } for w, old, new, reason, mode, feat, score in steps.events]
    names = [feature_name(j, params, axis_names) for j in range(params["axes"] * fi.per_axis(len(params["fc_bands"])))]
    paths = [str(r.path) for r in recs]
    windows = {
        "recording": np.array(paths, dtype=object)[sf.rec],
        "t_s": sf.t_s,
        "state": np.array(al.STATE_NAMES, dtype=object)[steps.state],
        "score": steps.score_q8 / 256.0,
        "mode": steps.mode.astype(np.int64),
        "feature": np.array(names + [""], dtype=object)[steps.feat],
    }
    windows.update(physical_columns(sf.feats, params, recs[0].m_s2_per_count, axis_names))
    window_s = params["n"] * every / params["fs_hz"]
    windows["not_scored"] = np.array(WHY_NAMES, dtype=object)[steps.why]
    windows["speed_hz"] = steps.speed_q8 / 256.0
    return {"name": name, "events": events, "windows": windows, "recordings": paths,
            "summary": _stream_summary(sf.t_s, steps, events, len(recs), window_s, params)}


def _replay_worker(source: Any, params: dict, profile: dict, name: str) -> dict[str, Any]:
    """Read (if given paths) and replay one stream; runs in a worker process."""
    if not (isinstance(source, (list, tuple)) and source and all(isinstance(r, Recording) for r in source)):
        source = read_stream(source, expected_rate_hz=params["fs_hz"], m_s2_per_count=m_s2_per_count(params))
    return replay_stream(source, params, profile, name)


def stream_name(source: Any) -> str:
    """A stream's name: its folder, or its first file's stem (with its folder) for files."""
    first = source[0] if isinstance(source, (list, tuple)) else source
    p = Path(first.path if isinstance(first, Recording) else first)
    base = p.name if p.is_dir() else p.stem
    return f"{p.parent.name}/{base}" if p.parent.name else base


def replay(streams: Sequence[Any], params: dict, profile: dict, jobs: int = 1, progress: bool = False,
           names: Sequence[str] | None = None) -> ReplayResult:
    """Replay every stream with the device detector; see the module docstring.

    streams: each a sequence of Recording (one gateway, any order: sorted by t0_s here when all
    have one), or a path or list of paths read with host_tools.data.recording.read_stream at the
    set's rate and scale. jobs > 1 replays streams in that many processes (1: in this process).
    progress: a tqdm bar over finished streams (the caller decides, e.g. only on a terminal).
    """
    if not streams:
        raise EdgevibError("no recordings to replay")
    pm.build(params, profile)  # refuse a set that the device could not build, before any work
    names = list(names) if names is not None else _unique([stream_name(s) for s in streams])
    srcs = [_ordered(s) for s in streams]
    jobs = max(1, min(jobs, len(srcs)))
    parts: list[dict | None] = [None] * len(srcs)
    bar = _bar(len(srcs)) if progress else None
    if jobs == 1:
        for i, s in enumerate(srcs):
            parts[i] = _replay_worker(s, params, profile, names[i])
            if bar is not None:
                bar.update(1)
    else:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            futs = {pool.submit(_replay_worker, s, params, profile, names[i]): i for i, s in enumerate(srcs)}
            for fut in as_completed(futs):
                parts[futs[fut]] = fut.result()
                if bar is not None:
                    bar.update(1)
    if bar is not None:
        bar.close()
    done = [p for p in parts if p is not None]
    keys = list(done[0]["windows"])
    for p in done[1:]:
        if list(p["windows"]) != keys:
            raise EdgevibError(f"stream {p['name']}: axis names differ from stream {done[0]['name']}; replay them separately")
    windows = {"stream": np.concatenate([np.full(len(p["windows"]["t_s"]), i) for i, p in enumerate(done)])}
    for k in keys:
        windows[k] = np.concatenate([p["windows"][k] for p in done])
    summaries = [p["summary"] for p in done]
    return ReplayResult(
        sample_rate_hz=float(params["fs_hz"]), streams=names,
        events=[e for p in done for e in p["events"]], windows=windows,
        summary={"streams": {p["name"]: p["summary"] for p in done}, "total": _total(summaries, params)},
        recordings=[p["recordings"] for p in done])


def group_sources(paths: Sequence[str | os.PathLike]) -> list[list[Path]]:
    """Command-line inputs as streams: each folder is one stream; the files named directly form
    one more stream together (one gateway's recordings, ordered by t0_s when read)."""
    folders = [[Path(p)] for p in paths if Path(p).is_dir()]
    files = [Path(p) for p in paths if not Path(p).is_dir()]
    return folders + ([files] if files else [])


def _ordered(source: Any) -> Any:
    if isinstance(source, (list, tuple)) and source and all(isinstance(r, Recording) for r in source):
        if len(source) > 1 and all(r.t0_s is not None for r in source):
            return sorted(source, key=lambda r: r.t0_s)
        return list(source)
    return source


def _unique(names: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n}#{seen[n]}")
    return out


def _bar(total: int):
    from tqdm import tqdm
    return tqdm(total=total, unit="stream", file=sys.stderr)


def default_jobs() -> int:
    """Worker processes by default: the cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def windows_csv(result: ReplayResult) -> str:
    """One row per window: stream (name), then every per-window column of the result."""
    cols = {k: v for k, v in result.windows.items() if k != "stream"}
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\n")
    out.writerow(["stream", *cols])
    names = np.array(result.streams, dtype=object)[result.windows["stream"]]
    data = [names.tolist()] + [v.tolist() for v in cols.values()]
    fmt = ["{}"] + ["{:.3f}" if k == "t_s" else "{:.6g}" for k in cols]   # t_s: ms on a Unix clock
    for row in zip(*data):
        out.writerow([f.format(v) if isinstance(v, float) else v for f, v in zip(fmt, row)])
    return buf.getvalue()
