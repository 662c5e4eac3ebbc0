"""Replay: recordings through the exact device detector (firmware_py.detect.detector, run by CPython).

Features come from the numpy twin of the feature core (bit-identical to the device); every window
is then stepped through the device's own Detector, one window at a time, exactly as the gateway
does. Nothing here re-implements a detector rule: states, scores, modes and events are the
device's.

Entry points. replay(streams, params, profile, jobs, ...) -> ReplayResult for one or more streams;
StreamReplay(source, params, profile, name).chunks(jobs) for one stream, a ReplayChunk at a time
(its events, its per-window columns), with sr.events and sr.summary() at the end: the form for
callers that must not hold a recording's windows (memory stays one chunk per job, whatever the
length). Chunks are CHUNK_WINDOWS whole windows of one gap-free segment, read from the files as
they are needed (host_tools.data.recording.RecordingFile.read_counts); jobs > 1 computes the
features of that many chunks at once in worker processes while this process steps the detector
in order, so the result is the same as one pass for any jobs and chunk size (tests prove it).
replay_stream(recs, ...) keeps every column of one stream; windows_csv / csv_rows write them.

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
from collections import deque
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from firmware_py.detect.detector import Detector, WHY_NAMES
from firmware_py.detect.iso_zones import ZONE_NAMES, zone_of
from host_tools.data.units import band_hz, feature_name, m_s2_per_count
from host_tools.errors import EdgevibError
from host_tools.twin.feature_twin import LEAD_WINDOWS, FeatureTwin, TwinConfig
from host_tools.data.recording import Recording, RecordingFile, open_stream
from host_tools.progress import progress_bar

CHUNK_WINDOWS = 512   # windows per chunk: the feature twin's temporaries stay in cache (measured fastest)


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
        if len(r.axes) != params["axes"]:
            raise EdgevibError(f"{r.path}: {len(r.axes)} axes, the parameter set is for {params['axes']}")
        if not math.isclose(r.m_s2_per_count, want_scale, rel_tol=1e-9):
            raise EdgevibError(f"{r.path}: counts scale {r.m_s2_per_count:g} m/s^2 differs from the set's {want_scale:g} (read it at the set's scale)")


# --- features of a stream, chunk by chunk --------------------------------------------------------

@dataclass
class StreamFeatures:
    """Twin features of one stream (or of one chunk of it): feats (windows, axes * per_axis)
    int32, t_s (windows,) window end times, s, and rec (windows,) index of the recording each
    window ends in (into the stream's recordings, in time order)."""

    feats: np.ndarray
    t_s: np.ndarray
    rec: np.ndarray


@dataclass
class ChunkPlan:
    """One chunk of a stream: windows first_w.. (index in the stream), their end times t_s and
    owning recordings rec, and the samples to read as (recording index, start, stop) pieces,
    whose frames joined in order are the chunk's windows; lead: the pieces of the windows just
    before the first (up to LEAD_WINDOWS of the segment), where the chunk continues the one before
    it (the half-order taps read them: FeatureTwin.features), else empty; follows: whether the
    windows follow each other (every 1)."""

    first_w: int
    t_s: np.ndarray
    rec: np.ndarray
    pieces: list[tuple[int, int, int]]
    lead: list[tuple[int, int, int]] = field(default_factory=list)
    follows: bool = True


def plan_chunks(recs: Sequence[Any], n: int, fs: float, chunk_windows: int = CHUNK_WINDOWS,
                every: int = 1) -> list[ChunkPlan]:
    """Cut a stream (Recording or RecordingFile, in time order) into chunks of analysed windows.

    Gap-free recordings form one segment, read as one run of samples; a chunk never spans two
    segments, and every chunk holds chunk_windows windows except the last of each segment.
    every: the board's analyse_every. The gateway analyses the first window of every cycle of
    `every` windows and discards the others (firmware_py/run/gateway.py, feed), counting cycles
    from the first frame it is fed; a segment is fed from its first frame, so its windows 0,
    every, 2 every, ... are the ones analysed, each keeping its own end time. The plan holds no
    samples: its size is a few numbers per window."""
    if not recs:
        raise EdgevibError("no recordings to replay")
    plans: list[ChunkPlan] = []
    w0 = 0
    i = 0
    while i < len(recs):
        t0 = recs[i].t0_s or 0.0
        ends = [recs[i].n_frames]
        j = i + 1
        while j < len(recs) and abs((recs[j].t0_s or 0.0) - (t0 + ends[-1] / fs)) < 0.5 / fs:
            ends.append(ends[-1] + recs[j].n_frames)
            j += 1
        starts = [0] + ends[:-1]
        kept = np.arange(0, ends[-1] // n, every)
        for c in range(0, len(kept), chunk_windows):
            wins = kept[c:c + chunk_windows]
            w_end = (wins + 1) * n
            spans = [(wins[0] * n, w_end[-1])] if every == 1 else [(a * n, (a + 1) * n) for a in wins.tolist()]
            lead = [(max(0, wins[0] - LEAD_WINDOWS) * n, wins[0] * n)] if every == 1 and c > 0 else []
            pieces, lead = ([(i + r, max(lo, starts[r]) - starts[r], min(hi, ends[r]) - starts[r])
                             for lo, hi in sp for r in range(len(ends)) if starts[r] < hi and ends[r] > lo]
                            for sp in (spans, lead))
            plans.append(ChunkPlan(w0, t0 + w_end / fs, i + np.searchsorted(np.asarray(ends), w_end, side="left"),
                                   pieces, lead, every == 1))
            w0 += len(wins)
        i = j
    if not plans:
        raise EdgevibError(f"{recs[0].path}: the stream is shorter than one window of {n} samples")
    return plans


def read_chunk(recs: Sequence[Any], plan: ChunkPlan) -> np.ndarray:
    """The int16 counts (frames x axes) of one chunk, read from its recordings."""
    return _read(recs, plan.pieces)


def read_lead(recs: Sequence[Any], plan: ChunkPlan) -> np.ndarray | None:
    """The counts of the window before a chunk that continues the one before it, else None."""
    return _read(recs, plan.lead) if plan.lead else None


def _read(recs: Sequence[Any], pieces: list[tuple[int, int, int]]) -> np.ndarray:
    parts = [recs[r].read_counts(a, b) for r, a, b in pieces]
    return parts[0] if len(parts) == 1 else np.concatenate(parts)


def chunk_features(twin: FeatureTwin, recs: Sequence[Any], plan: ChunkPlan) -> np.ndarray:
    """The twin's features of one chunk, as the device computes them in the stream."""
    return twin.features(read_chunk(recs, plan), lead=read_lead(recs, plan), follows=plan.follows)


def feature_chunks(recs: Sequence[Any], twin: FeatureTwin, jobs: int = 1,
                   chunk_windows: int = CHUNK_WINDOWS, every: int = 1) -> Iterator[StreamFeatures]:
    """Features of a stream chunk by chunk, in stream order.

    jobs > 1: the chunks' features are computed in that many worker processes, at most 2 * jobs
    chunks in flight (memory stays bounded), and handed back in order. Each window depends only
    on its own samples and the LEAD_WINDOWS before (which a chunk reads as its lead), so the
    result is the same for every jobs and chunk_windows."""
    plans = plan_chunks(recs, twin.n, float(twin.cfg.fs_hz), chunk_windows, every)
    if jobs <= 1:
        for pl in plans:
            yield StreamFeatures(chunk_features(twin, recs, pl), pl.t_s, pl.rec)
        return
    with ProcessPoolExecutor(max_workers=jobs, initializer=_worker_twin, initargs=(twin.cfg, twin.axes)) as pool:
        pending: deque = deque()
        for pl in plans:
            pending.append((pool.submit(_worker_features, read_chunk(recs, pl), read_lead(recs, pl),
                                        pl.follows), pl))
            if len(pending) >= 2 * jobs:
                fut, done = pending.popleft()
                yield StreamFeatures(fut.result(), done.t_s, done.rec)
        while pending:
            fut, done = pending.popleft()
            yield StreamFeatures(fut.result(), done.t_s, done.rec)


_TWIN: FeatureTwin | None = None


def _worker_twin(cfg: TwinConfig, axes: int) -> None:
    global _TWIN
    _TWIN = FeatureTwin(cfg, axes)


def _worker_features(counts: np.ndarray, lead: np.ndarray | None, follows: bool) -> np.ndarray:
    assert _TWIN is not None
    return _TWIN.features(counts, lead=lead, follows=follows)


def stream_features(recs: Sequence[Any], twin: FeatureTwin, every: int = 1) -> StreamFeatures:
    """Features of every analysed window of a stream at once (feature_chunks, joined): for
    training and tests, which need them all. every: the board's analyse_every (plan_chunks)."""
    parts = list(feature_chunks(recs, twin, every=every))
    return StreamFeatures(np.concatenate([p.feats for p in parts]), np.concatenate([p.t_s for p in parts]),
                          np.concatenate([p.rec for p in parts]))


# --- stepping the device detector ---------------------------------------------------------------

@dataclass
class Steps:
    """What the detector did per window (index w = its clock), and its events as raw ints:
    (w, old, new, reason, mode, feat, score_q8). why: firmware_py.detect.detector W_* (0 scored);
    pushed: 1 where the window added to the persistence evidence; resets: the detector's count of
    evidence resets after the window (a change marks a new evidence sequence); speed_q8: the
    operating-point speed (Hz Q8, 0 none); half_q8: per axis the detector's half-order
    prominence after the window (log2 Q8, half_lines.UNSET while it has none), what it scores
    as F_HALF (windows, axes)."""

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
    half_q8: np.ndarray


def is_raise(old: int, new: int) -> bool:
    """Whether a detector event (old and new state) raises: an entry into alert or alarm from any
    other state (an alert escalating to alarm is the same raise)."""
    return new in (al.ALERT, al.ALARM) and old not in (al.ALERT, al.ALARM)


def window_gaps(t_s: np.ndarray, hop_s: float, prev_t_s: float | None = None) -> np.ndarray:
    """Per window (end times t_s, s): -1 where it follows the window before it (the one at
    prev_t_s for the first) by one analysed hop hop_s; else a gap between recordings, given as
    the whole seconds of signal missing (0 for the first window without prev_t_s, or a window
    that starts over), int64."""
    t = np.asarray(t_s, dtype=np.float64)
    before = np.concatenate([[np.nan if prev_t_s is None else prev_t_s], t[:-1]])
    miss = t - before - hop_s
    gap = np.where(np.abs(miss) < 0.5 * hop_s, -1.0, np.floor(np.maximum(miss, 0.0)))
    return np.where(np.isnan(miss), 0.0, gap).astype(np.int64)


def step_detector(det: Detector, feats: np.ndarray, first_w: int = 0, gaps: np.ndarray | None = None) -> Steps:
    """Step `det` over the rows of feats (windows, features), window w given the clock first_w + w.
    gaps: per window, -1 where it follows the one before, else the whole seconds missing before it
    (window_gaps); the detector is told (det.gap(s)), as a gateway tells it of lost samples, so
    that nothing it follows over consecutive windows spans the gap and its clock counts the time.
    None: the windows are consecutive.

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
    hv = np.empty((n, det.axes), np.int32)
    half = det.half.value
    ev: list[tuple[int, int, int, int, int, int, int]] = []
    step, ring = det.step, det.events
    gap = [-1] * n if gaps is None else gaps.tolist()
    for i, row in enumerate(rows):
        if gap[i] >= 0:
            det.gap(gap[i])
        st[i] = step(row, first_w + i, 0)
        sc[i] = det.score_q8
        md[i] = det.mode
        ft[i] = det.feat
        wy[i] = det.why
        pu[i] = det.pushed
        rs[i] = det.resets
        sp[i] = det.speed_q8
        hv[i] = half
        while ring.count:
            k = ring.pop()
            ev.append((ring.t[k], ring.old[k], ring.new[k], ring.reason[k], ring.mode[k],
                       ring.feat[k], ring.score_q8[k]))
    return Steps(st, sc, md, ft, ev, ring.lost, wy, pu, rs, sp, hv)


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

TRACK_COLUMNS = ("recording", "t_s", "state", "score", "mode", "velocity_rms_mm_s")
TRACK_CAP = 1 << 18     # track rows kept per stream (about 12 MB): 11.6 h of 0.16 s windows in full


class WindowKeeper:
    """The per-window columns of one stream as chunks deliver them. With a cap (plot tracks), memory
    stays bounded whatever the stream's length: every stride-th window of the stream is kept,
    stride the least power of two that keeps at most cap rows, doubled (every other kept row
    dropped) as the stream grows. Which rows are kept depends on the stream's length only, never on
    its chunks. Without a cap every window is kept (stride 1)."""

    def __init__(self, cap: int | None = None):
        self.cap, self.stride, self.seen, self.kept = cap, 1, 0, 0
        self.parts: dict[str, list[np.ndarray]] = {}

    def add(self, cols: dict[str, np.ndarray]) -> None:
        n = len(next(iter(cols.values()))) if cols else 0
        first = -self.seen % self.stride                 # this chunk's first window on the stride
        for k, v in cols.items():
            self.parts.setdefault(k, []).append(v if self.stride == 1 else v[first::self.stride])
        self.seen += n
        self.kept += len(range(first, n, self.stride))
        while self.cap is not None and self.kept > self.cap:
            self.stride *= 2          # kept rows are windows 0, s, 2s, ...: every other is a multiple of 2s
            self.parts = {k: [np.concatenate(v)[::2]] for k, v in self.parts.items()}
            self.kept = (self.kept + 1) // 2


@dataclass
class ReplayResult:
    """Replay of one or more streams.

    sample_rate_hz: the set's rate. streams: stream names (folder or file names), in input order.
    events: dicts {stream, t_s, recording, offset_s, from, to, reason, mode, feature, score}, per
    stream in time order (recording: the path of the file the window ends in, offset_s: the window's
    end in it, s; score in spreads, score_q8 / 256; mode and feature None when none).
    windows: one column per key, one row per window of every stream: stream (index into streams),
    recording (path), t_s, state (name), score (spreads), mode (-1 none), feature (name or ""),
    then physical_columns(); with keep_windows=False only stream and TRACK_COLUMNS, of every
    window of a stream up to TRACK_CAP windows and evenly thinned beyond (WindowKeeper), so a
    report's memory does not grow with the recording's length (summary and events are exact).
    summary: {"streams": {name: summary}, "total": summary}.
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


@dataclass
class ReplayChunk:
    """What the detector did over one chunk of a stream: the chunk's features (StreamFeatures),
    the detector's per-window results (Steps; window w of the stream is steps row w - first_w) and
    the events raised in it (dicts as in ReplayResult.events)."""

    stream: "StreamReplay"
    features: StreamFeatures
    steps: Steps
    events: list[dict[str, Any]]

    def columns(self, names: Sequence[str] | None = None) -> dict[str, np.ndarray]:
        """The chunk's per-window columns (ReplayResult.windows without stream), or only `names`."""
        sr, sf, st = self.stream, self.features, self.steps
        cols: dict[str, Callable[[], np.ndarray]] = {
            "recording": lambda: np.array(sr.paths, dtype=object)[sf.rec],
            "t_s": lambda: sf.t_s,
            "state": lambda: np.array(al.STATE_NAMES, dtype=object)[st.state],
            "score": lambda: st.score_q8 / 256.0,
            "mode": lambda: st.mode.astype(np.int64),
            "feature": lambda: np.array(sr.feature_names + [""], dtype=object)[st.feat],
        }
        out = {k: f() for k, f in cols.items() if names is None or k in names}
        phys = physical_columns(sf.feats, sr.params, sr.m_s2_per_count, sr.axis_names)
        out.update((k, v) for k, v in phys.items() if names is None or k in names)
        if names is None or "not_scored" in names:
            out["not_scored"] = np.array(WHY_NAMES, dtype=object)[st.why]
        if names is None or "speed_hz" in names:
            out["speed_hz"] = st.speed_q8 / 256.0
        return out


class StreamReplay:
    """One stream (one gateway's recordings) through one device Detector, chunk by chunk.

        sr = StreamReplay(source, params, profile, name)
        for chunk in sr.chunks(jobs=2):      # ReplayChunk, in time order; state carried across
            chunk.events, chunk.columns()    # use and drop: nothing per window is kept here
        sr.events, sr.summary()              # every event, and the stream's summary so far

    source: Recording or RecordingFile objects of one gateway (sorted by t0_s here when all have
    one), or a path or list of paths opened with host_tools.data.recording.open_stream at the
    set's rate and scale. Memory: one chunk (CHUNK_WINDOWS windows) per job, whatever the length.
    The results are the same for any jobs and chunk_windows as for one pass over the stream.
    """

    def __init__(self, source: Any, params: dict, profile: dict, name: str | None = None):
        if _is_recordings(source):
            recs = _ordered(source)
        else:
            recs = open_stream(source, expected_rate_hz=params["fs_hz"], m_s2_per_count=m_s2_per_count(params))
        check_recordings(recs, params)
        self.recs = recs
        self.params = params
        self.name = name if name is not None else stream_name(source)
        self.twin = twin_for(params, profile)
        self.every = int(profile["analyse_every"])
        self.window_s = params["n"] * self.every / params["fs_hz"]     # time each analysed window stands for
        self.n_windows = sum(len(p.t_s) for p in plan_chunks(recs, params["n"], float(params["fs_hz"]),
                                                             every=self.every))
        self.detector = Detector(params, self.every)
        self.events: list[dict[str, Any]] = []
        self.paths = [str(r.path) for r in recs]
        self.axis_names = recs[0].axes
        self.m_s2_per_count = recs[0].m_s2_per_count
        self.feature_names = [feature_name(j, params, self.axis_names)
                              for j in range(params["axes"] * fi.per_axis(len(params["fc_bands"])))]
        self._state_windows = np.zeros(len(al.STATE_NAMES), np.int64)
        self._why_windows = np.zeros(len(WHY_NAMES), np.int64)
        self._pushed = 0
        self._done = 0
        self._t_first: float | None = None
        self._t_last: float | None = None
        self._lost = 0

    def chunks(self, jobs: int = 1, chunk_windows: int = CHUNK_WINDOWS) -> Iterator[ReplayChunk]:
        """Replay the stream, one ReplayChunk at a time (features of jobs chunks at once)."""
        for sf in feature_chunks(self.recs, self.twin, jobs, chunk_windows, self.every):
            yield self.step(sf)

    def step(self, sf: StreamFeatures) -> ReplayChunk:
        """Step the detector over the next windows of the stream (features in stream order)."""
        first = self._done
        steps = step_detector(self.detector, sf.feats, first, window_gaps(sf.t_s, self.window_s, self._t_last))
        p = self.params
        events = []
        for w, old, new, reason, mode, feat, score in steps.events:
            t, r = float(sf.t_s[w - first]), self.recs[int(sf.rec[w - first])]
            events.append({
                "stream": self.name, "t_s": t, "recording": str(r.path), "offset_s": t - (r.t0_s or 0.0),
                "from": al.STATE_NAMES[old], "to": al.STATE_NAMES[new], "reason": al.REASON_NAMES[reason],
                "mode": mode if mode >= 0 else None,
                "feature": feature_name(feat, p, self.axis_names) if feat >= 0 else None, "score": score / 256.0})
        self.events.extend(events)
        self._state_windows += np.bincount(steps.state.astype(np.int64), minlength=len(al.STATE_NAMES))
        self._why_windows += np.bincount(steps.why.astype(np.int64), minlength=len(WHY_NAMES))
        self._pushed += int(steps.pushed.sum())
        self._done += len(sf.t_s)
        if len(sf.t_s):
            self._t_first = float(sf.t_s[0]) if self._t_first is None else self._t_first
            self._t_last = float(sf.t_s[-1])
        self._lost = int(steps.lost)
        return ReplayChunk(self, sf, steps, events)

    def summary(self) -> dict[str, Any]:
        """The stream's summary (keys in the module docstring of host_tools.commands.replay)."""
        ev = self.events
        first = {to: next((e["t_s"] for e in ev if e["to"] == to), None) for to in ("alert", "alarm", "sensor_fault")}
        raises = sum(e["to"] in ("alert", "alarm") and e["from"] not in ("alert", "alarm") for e in ev)
        running_h = self._pushed * self.window_s / 3600.0
        return {
            "recordings": len(self.recs),
            "windows": self._done,
            "observed_s": float(self._done * self.window_s),
            "running_h": running_h,
            "t_first_s": self._t_first,
            "t_last_s": self._t_last,
            "windows_per_state": {name: int(self._state_windows[i]) for i, name in enumerate(al.STATE_NAMES)},
            "windows_by_scoring": {name: int(self._why_windows[i]) for i, name in enumerate(WHY_NAMES)},
            "alerts": sum(e["to"] == "alert" for e in ev),
            "alarms": sum(e["to"] == "alarm" for e in ev),
            "raises": raises,
            "sensor_faults": sum(e["to"] == "sensor_fault" for e in ev),
            "first_alert_t_s": first["alert"],
            "first_alarm_t_s": first["alarm"],
            "first_sensor_fault_t_s": first["sensor_fault"],
            "events_lost": self._lost,
            "promise": promise_check(raises, running_h, self.params),
        }


def promise_check(raises: int, running_h: float, params: dict) -> dict[str, Any] | None:
    """The training's promise (fit_promise_milli: false raises per 30 days of running and its
    95 % range, in thousandths; fit_promise_upper 1: the rate is an upper bound, "at most"; absent
    in sets made before it: 0) beside what a replay observed, with a verdict. For a rate: "agrees"
    when the count lies within the Poisson 2.5-97.5 % quantiles of the range's ends over the
    running hours replayed (scipy.stats.poisson), "more than promised" or "fewer than promised"
    otherwise. For an upper bound fewer is no disagreement: "agrees" up to the 97.5 % quantile of
    the range's upper end, "more than promised" above. None when the set holds no promise. Raises
    on a replay of healthy running are false by definition; on a faulty machine they are what the
    detector is for."""
    pm_ = params.get("fit_promise_milli")
    if not pm_ or running_h <= 0:
        return None
    from scipy.stats import poisson
    rate, lo, hi = (v / 1000.0 for v in pm_)
    upper = bool(params.get("fit_promise_upper", 0))
    lo_n = 0 if upper else poisson.ppf(0.025, lo * running_h / 720.0)
    hi_n = poisson.ppf(0.975, hi * running_h / 720.0)
    verdict = "agrees" if lo_n <= raises <= hi_n else ("more than promised" if raises > hi_n else "fewer than promised")
    return {"promised_per_30_days": rate, "range_95_per_30_days": [lo, hi], "upper_bound": upper,
            "stated": promise_text(rate, (lo, hi), upper),
            "observed_raises": raises, "running_h": running_h,
            "observed_per_30_days": raises * 720.0 / running_h,
            "expected_raises": rate * running_h / 720.0, "verdict": verdict}


def promise_text(rate: float, range_95: Sequence[float], upper: bool,
                 unit: str = " false alerts per 30 days of running") -> str:
    """A stated rate as a person reads it: "at most 3.2 false alerts per 30 days of running (95 %
    range 1.1 to 9.6)" for an upper bound, without "at most" for the fit's estimate."""
    lo, hi = (_rate_text(v) for v in range_95)
    return f"{stated_rate(rate, upper)}{unit} (95 % range {lo} to {hi})"


def stated_rate(rate: float, upper: bool) -> str:
    """A stated false-alert rate as every page and summary writes it: "at most 1207" for an upper
    bound (thin training data only bound it), the figure alone for the fit's estimate."""
    return f"{'at most ' if upper else ''}{_rate_text(rate)}"


def _rate_text(v: float) -> str:
    """A rate in three significant figures, whole numbers from 100 up (no exponent)."""
    return f"{v:.0f}" if v >= 100 else f"{v:.3g}"


def check_text(check: dict) -> str:
    """promise_check's result in one line: the promise, what was observed, the verdict."""
    return (f"stated {check['stated']}; observed {check['observed_raises']} in {check['running_h']:.2f} h of running "
            f"({_rate_text(check['observed_per_30_days'])} per 30 days): {check['verdict']}")


def _total(summaries: list[dict], params: dict) -> dict:
    out: dict[str, Any] = {"streams": len(summaries)}
    for key in ("recordings", "windows", "alerts", "alarms", "raises", "sensor_faults", "events_lost"):
        out[key] = sum(s[key] for s in summaries)
    out["observed_s"] = sum(s["observed_s"] for s in summaries)
    out["running_h"] = sum(s["running_h"] for s in summaries)
    out["windows_per_state"] = {name: sum(s["windows_per_state"][name] for s in summaries) for name in al.STATE_NAMES}
    out["windows_by_scoring"] = {name: sum(s["windows_by_scoring"][name] for s in summaries) for name in WHY_NAMES}
    for key in ("t_first_s", "first_alert_t_s", "first_alarm_t_s", "first_sensor_fault_t_s"):
        vals = [s[key] for s in summaries if s[key] is not None]
        out[key] = min(vals) if vals else None
    vals = [s["t_last_s"] for s in summaries if s["t_last_s"] is not None]
    out["t_last_s"] = max(vals) if vals else None
    out["promise"] = promise_check(out["raises"], out["running_h"], params)
    return out


def stream_name(source: Any) -> str:
    """A stream's name: its folder, or its first file's stem (with its folder) for files."""
    first = source[0] if isinstance(source, (list, tuple)) else source
    p = Path(first.path if hasattr(first, "path") else first)
    base = p.name if p.is_dir() else p.stem
    return f"{p.parent.name}/{base}" if p.parent.name else base


def replay_stream(recs: Sequence[Any], params: dict, profile: dict, name: str = "stream") -> dict[str, Any]:
    """Replay one stream with a fresh Detector, keeping every per-window column.

    Returns {"name", "events", "windows", "summary", "recordings"} (the parts of a ReplayResult)."""
    sr = StreamReplay(recs, params, profile, name)
    parts = [ch.columns() for ch in sr.chunks()]
    windows = {k: np.concatenate([c[k] for c in parts]) for k in parts[0]}
    return {"name": name, "events": sr.events, "windows": windows, "recordings": sr.paths,
            "summary": sr.summary()}


def stream_names(streams: Sequence[Any]) -> list[str]:
    """Distinct names of streams (stream_name, with #2, #3, ... for repeats)."""
    return _unique([stream_name(s) for s in streams])


def replay(streams: Sequence[Any], params: dict, profile: dict, jobs: int = 1, progress: bool = False,
           names: Sequence[str] | None = None, keep_windows: bool = True,
           on_chunk: Callable[[int, ReplayChunk], None] | None = None,
           chunk_windows: int = CHUNK_WINDOWS) -> ReplayResult:
    """Replay every stream with the device detector; see the module docstring.

    streams: each a source as StreamReplay takes it. The streams replay one after another; jobs > 1
    computes the features of that many chunks of a stream at once in worker processes, so one long
    stream uses every core. progress: a bar or progress lines by windows (host_tools.progress).
    keep_windows: keep every per-window column (False: only TRACK_COLUMNS, at most TRACK_CAP rows per
    stream, for plots). on_chunk(stream index, chunk) is called with every chunk in order, e.g. to write
    rows out as they come. chunk_windows: windows per chunk (the results do not depend on it).
    """
    if not streams:
        raise EdgevibError("no recordings to replay")
    try:
        pm.build(params, profile)  # refuse a set that the device could not build, before any work
    except ValueError as e:
        raise EdgevibError(f"the parameter set cannot be built for board {profile['name']}: {e}") from None
    names = list(names) if names is not None else stream_names(streams)
    runs = [StreamReplay(s, params, profile, names[i]) for i, s in enumerate(streams)]
    for r in runs[1:]:
        if r.axis_names != runs[0].axis_names:
            raise EdgevibError(f"stream {r.name}: axis names differ from stream {runs[0].name}; replay them separately")
    parts: list[WindowKeeper] = []
    with progress_bar(sum(r.n_windows for r in runs), "windows", "replay", enabled=progress) as bar:
        for i, r in enumerate(runs):
            keep = WindowKeeper(None if keep_windows else TRACK_CAP)
            for ch in r.chunks(jobs=jobs, chunk_windows=chunk_windows):
                keep.add(ch.columns(None if keep_windows else TRACK_COLUMNS))
                if on_chunk is not None:
                    on_chunk(i, ch)
                bar.update(len(ch.features.t_s))
            parts.append(keep)
    return assemble(runs, parts)


def assemble(runs: Sequence[StreamReplay], parts: Sequence[WindowKeeper]) -> ReplayResult:
    """The ReplayResult of streams replayed to the end: runs, and per run the columns it kept."""
    keys = list(parts[0].parts) if parts else []
    windows = {"stream": np.concatenate([np.full(p.kept, i) for i, p in enumerate(parts)])}
    for k in keys:
        windows[k] = np.concatenate([v for p in parts for v in p.parts[k]])
    summaries = [r.summary() for r in runs]
    return ReplayResult(
        sample_rate_hz=float(runs[0].params["fs_hz"]), streams=[r.name for r in runs],
        events=[e for r in runs for e in r.events], windows=windows,
        summary={"streams": {r.name: sm for r, sm in zip(runs, summaries)}, "total": _total(summaries, runs[0].params)},
        recordings=[r.paths for r in runs])


def group_sources(paths: Sequence[str | os.PathLike]) -> list[list[Path]]:
    """Command-line inputs as streams: each folder is one stream; the files named directly form
    one more stream together (one gateway's recordings, ordered by t0_s when read)."""
    folders = [[Path(p)] for p in paths if Path(p).is_dir()]
    files = [Path(p) for p in paths if not Path(p).is_dir()]
    return folders + ([files] if files else [])


def _is_recordings(source: Any) -> bool:
    return isinstance(source, (list, tuple)) and bool(source) and all(isinstance(r, (Recording, RecordingFile))
                                                                      for r in source)


def _ordered(recs: Sequence[Any]) -> list[Any]:
    if len(recs) > 1 and all(r.t0_s is not None for r in recs):
        return sorted(recs, key=lambda r: r.t0_s)
    return list(recs)


def _unique(names: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n}#{seen[n]}")
    return out


def default_jobs() -> int:
    """Worker processes by default: the cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def csv_header(cols: dict[str, np.ndarray]) -> str:
    """The header row of a windows CSV: stream, then the columns' names."""
    return ",".join(["stream", *cols]) + "\n"


def csv_rows(stream: str, cols: dict[str, np.ndarray]) -> str:
    """CSV rows (no header) of per-window columns of one stream, stream name first."""
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\n")
    fmt = ["{}"] + ["{:.3f}" if k == "t_s" else "{:.6g}" for k in cols]   # t_s: ms on a Unix clock
    data = [[stream] * len(cols["t_s"])] + [v.tolist() for v in cols.values()]
    for row in zip(*data):
        out.writerow([f.format(v) if isinstance(v, float) else v for f, v in zip(fmt, row)])
    return buf.getvalue()


def windows_csv(result: ReplayResult) -> str:
    """One row per window: stream (name), then every per-window column of the result."""
    cols = {k: v for k, v in result.windows.items() if k != "stream"}
    parts = [csv_header(cols)]
    for i, name in enumerate(result.streams):
        mine = result.windows["stream"] == i
        parts.append(csv_rows(name, {k: v[mine] for k, v in cols.items()}))
    return "".join(parts)
