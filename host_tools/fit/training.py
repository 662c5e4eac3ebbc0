"""Training: a parameter set for one gateway from recordings of its pump in healthy duty.

What is learned, and how (every step that the device also does runs the device's own code):

1. Features: the numpy twin of the feature core (bit-identical to the device), windows and bands
   of params.factory(profile).
2. Sensor health, from the sensor and the training data: the healthy DC range per axis is the
   observed range of the window means widened by its own width on each side and by at least
   DC_MARGIN_G about its centre, never wider than the factory's +-7/8 of full scale; clipping
   (det_clip_max) stays 0, any sample at the converter's full scale is suspect; the flatline
   floor stays the factory's.
3. Idle floor (det_idle_vel_q16, on the broadband level = largest axis velocity r.m.s. F_VEL,
   counts/s Q16; velocity weights the machine's low-frequency lines by 1/f and so stands further
   above a MEMS sensor's flat noise than acceleration does): where recordings say the shaft
   speed (sidecar rpm 0 = stopped, > 0 = running), the floor is the geometric mean of the 99th
   percentile of stopped windows and the 1st percentile of running ones. Without both, the
   device's own rule: a quarter of the quietest window.
4. Which windows the device would score (running, past the start-up hold-off, sensor healthy,
   ISO zone A or B): found by stepping the device Detector over each stream in time order.
5. Baseline and operating modes: host_tools.fit.modes_fit.fit (device Welford baseline and
   standardisation; modes by the device's speed estimate, never by the health features).
6. Thresholds: scores of healthy windows come from the device Detector itself (exact device
   scoring). Because scores of a model's own training windows are optimistic, and neighbouring
   windows are correlated, the scores used are held out by recording: the streams' recordings in
   time order are cut into FOLDS contiguous blocks; each block is scored by a model fitted on the
   other blocks. The alert threshold is tail_fit.choose_threshold on those held-out scores for the
   target false alerts per 30 days, with the set's k-of-n persistence and windows of n / fs_hz
   seconds, counted as if the pump ran all 30 days (the cautious count). The alarm threshold is
   the same fit's point for a target ALARM_RATE_RATIO times lower, and at least the alert
   threshold times det_learn_alarm_q8 / 256 (1.5). Fewer held-out scores than a tail fit needs:
   the device's own chi-square rule (modes_fit), with a warning.
7. A check: the fold models, with the chosen thresholds, replay their held-out blocks through the
   detector, and the alerts raised there are counted (the independence assumption of the tail
   rate does not hold exactly; this count is the empirical side of it).

The expected false-alert rate is a statistical estimate from the training data, not a guarantee.
edgevib is advisory condition monitoring, not machinery protection or a safety shutdown system.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from concurrent.futures import ProcessPoolExecutor
from typing import Any, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.detect import alarm as al, modes as dm
from firmware_py.dsp import feature_index as fi, orders, speed
from firmware_py.run import params as pm
from firmware_py.detect.detector import W_IDLE, W_SCORED, Detector, default_feature_list, op_axis
from firmware_py.detect.iso_zones import ZONE_C
from host_tools.data.bearing import BearingGeometry, defect_orders, geometry_from_record
from host_tools.fit import modes_fit, raise_rate, sensor_fit
from host_tools.data import units
from host_tools.errors import EdgevibError
from host_tools.progress import start
from host_tools.data.recording import Recording
from host_tools.data.times import moment
from host_tools.twin.replay import (
    StreamFeatures, check_recordings, evidence_sequences, m_s2_per_count, physical_columns, promise_check,
    is_raise, promise_text, stated_rate,
    step_detector, stream_features, window_gaps,
    twin_for)

FOLDS = 3                 # held-out blocks of recordings (each model is fitted on the others)
ALARM_RATE_RATIO = 10.0   # false alarms aimed 10 times rarer than false alerts
OCTAVE_SAFE = 1.95        # widest speed search, top over bottom: under an octave (dsp/speed.py)
MIN_MARGIN = 0.03         # least speed margin each side: slip and a set-point trim
COARSE_READ_TOL = 0.10    # a duty under 2.5 bins keeps the search there if its estimate is within
COARSE_READ_SHARE = 0.90  # 10 % of its sidecar speed in 9 windows of 10 (duties usually lie 15-25 % apart)
DC_MARGIN_G = 0.25        # least half-width of the healthy DC range (g): tilt or a loose mount, not drift
MIN_MODE_WINDOWS = 30     # a mode with fewer training windows is thinly supported
MIN_WINDOWS = 50          # fewer running healthy windows cannot support a baseline and modes
MIN_HOURS = 1.0           # less scored running time than this is thin training data
# Slow channel time constant (docs/detector.md, Score): 10.24 s is 64 windows of 0.16 s (2**6, so
# the device's shift is exact on the default board), long enough that the EWMA's s.d. on
# independent departures is sqrt(1/127) = 0.089 of a window's and that it averages a level's
# wander of 15-45 s more than 5 s did, about the persistence span (10 s) that it feeds. Within
# one 10 s snapshot it settles to 1 - (1 - 1/64)**44 = 50 % of a step; it carries on to the next
# snapshot of the same operating mode (measured against 5 s and 20 s: docs/evaluation.md). In
# unbroken running it stands for an average over 2**12 windows (11 min) once WANDER_MS is set.
SLOW_MS = 10240
# A wandering feature's EWMA (docs/detector.md, Score): 2**8 windows of 0.16 s while its window
# stands for unwatched time, so a half-hourly snapshot of ~50 scored windows weighs 1 - (1 -
# 1/256)**50 = 18 % and the average spans some five snapshots (2.5 h); in unbroken running 2**14
# windows (44 min, the nearest to SLOW_HALF_S). WANDER_RATIO: the EWMA spread, against that of
# independent departures, from which a feature counts as wandering (3/4 of its variance shared
# across a snapshot).
WANDER_MS = 40960
WANDER_RATIO = 2.0
_THR_MAX = 1 << 16        # the detector's limit on thresholds (Q8 spreads)
_STEADY_MAX = 32          # the detector's most windows in the steadiness span
HOLD_FLOOR_S = 1.0        # least hold-off once steady: the run-up itself is already unsteady and unscored
HOLD_DEFAULT_S = 3.0      # hold-off when the data hold no start: settling after the speed is steady
_DAYS_30_S = 30 * 86400.0
MODE_CRITERION = ("operating points by the shaft speed the device estimates (never by the health features): "
                  "sorted speeds cut at gaps wider than the steady tolerance, groups under 30 windows joined "
                  "to a neighbour, at most 8")


def _streams(recordings: Sequence[Any]) -> list[list[Recording]]:
    """A flat list of Recording is one stream; a list of lists is several."""
    if recordings and all(isinstance(r, Recording) for r in recordings):
        streams = [list(recordings)]
    else:
        streams = [list(s) for s in recordings]
    streams = [s for s in streams if s]
    if not streams:
        raise EdgevibError("no training recordings")
    for s in streams:
        if all(r.t0_s is not None for r in s):
            s.sort(key=lambda r: r.t0_s)
    return streams


def _with(params: dict, **keys: Any) -> dict:
    q = dict(params)
    q.update(keys)
    return q


def _mute(params: dict) -> dict:
    """The set with thresholds out of reach: the detector scores but never raises on the score."""
    return _with(params, det_thr_alert_q8=_THR_MAX, det_thr_alarm_q8=_THR_MAX)


def _probe_model(params: dict) -> dict:
    """A one-mode stand-in model over every speed: only so that scored windows show (which windows
    the device scores depends on steadiness and the hold-off, not on the model)."""
    d = len(params["det_feat"])
    op = [0, (1 << 30) - 1] if params.get("fc_speed_hi_q8") else []
    return _mute(_with(params, det_modes=1, det_mode_c_q8=[0] * d, det_mode_s_q8=[256] * d,
                       det_op_speed_q8=op, det_op_load_q8=[], det_op_seen_q8=[], det_mfollow_q8=[], det_mslam_q8=[]))


def _fill_half(feats: list[StreamFeatures], steps: list, p: dict) -> None:
    """Write each window's half-order prominence (F_HALF, which the feature core leaves unset) as
    the device's detector holds it after that window (Steps.half_q8), so that the model is fitted
    on what the device scores. It depends on the steadiness keys and the hold-off only, which are
    final by the probe run, so any later Detector on these windows holds the same values."""
    pa = fi.per_axis(len(p["fc_bands"]))
    for sf, st in zip(feats, steps):
        for a in range(p["axes"]):
            sf.feats[:, a * pa + fi.F_HALF] = st.half_q8[:, a]


def _gaps(sf: StreamFeatures, params: dict, every: int) -> np.ndarray:
    """window_gaps of a stream on the board's time base (one analysed hop: n x every samples)."""
    return window_gaps(sf.t_s, params["n"] * every / params["fs_hz"])


def _run(params: dict, feats: list[StreamFeatures], every: int):
    """Step a fresh device Detector (on the board's time base) over each stream; the Steps."""
    return [step_detector(Detector(params, every), sf.feats, 0, _gaps(sf, params, every)) for sf in feats]


class _Channels:
    """A Detector that also keeps, per window, its per-feature and slow channels (unweighted,
    Q8: the per-feature channel over the features the slow channel holds, those of non-zero
    det_sgain_q8, so that the two are matched on the same features; and smax_q8) for
    step_detector to step like the device, and, over the windows that enter the evidence with a
    mode (and lie in `select`, a mask by window index, when given), each feature's sum of squared
    EWMAs (spreads squared, floats)."""

    def __init__(self, det: Detector, select: np.ndarray | None = None):
        self.det, self.zmax, self.smax = det, [], []
        self.select = select
        self.ew_ss = np.zeros(det.d)
        self.ew_n = 0
        self.slow_j = [j for j in range(det.d) if det.sgain_q8[j]]
        self.all_slow = len(self.slow_j) == det.d

    def __getattr__(self, name: str) -> Any:
        return getattr(self.det, name)

    def step(self, f: Any, t_s: int, dropped: int) -> int:
        det = self.det
        state = det.step(f, t_s, dropped)
        if self.all_slow or det.mode < 0:
            self.zmax.append(det.zmax_q8)
        else:
            t = det.model.t_q8
            self.zmax.append(max(0, max(t[j] for j in self.slow_j)))
        self.smax.append(det.smax_q8)
        if det.pushed and det.mode >= 0 and (self.select is None or self.select[t_s]):
            e = np.asarray(det.ew_acc[det.mode * det.d:(det.mode + 1) * det.d], dtype=np.float64) / (256 << det.ew_long)
            self.ew_ss += e * e
            self.ew_n += 1
        return state


@dataclass
class _Held:
    """Held-out evidence of one fold: sequences of the combined score, of the per-feature channel
    (over the slow channel's features, _Channels) weighted by det_zlam_q8 and of the slow channel
    before det_slam_q8 (Q8 spreads); the last two again per mode of the full model (by_mode[m]:
    its windows only); and per scored feature the sum of squared EWMAs and their count
    (_Channels)."""

    combined: list[np.ndarray]
    per_feature: list[np.ndarray]
    slow: list[np.ndarray]
    by_mode: list[tuple[list[np.ndarray], list[np.ndarray]]]
    ew_ss: np.ndarray
    ew_n: int


def _held_out(params: dict, feats: list[StreamFeatures], every: int, select: list[np.ndarray] | None,
              sequences: bool = True, full: Detector | None = None) -> _Held:
    """Evidence of the muted set over the streams (windows in `select` only): see _Held.
    sequences=False: only the EWMA sums (the evidence sequences stay empty). full: the full
    model's detector, whose mode each scored window's operating point falls in (Detector.mode_at)
    sorts by_mode; a fold's model learned its own modes, so its numbers do not name them."""
    k = full.model.k if full is not None and full.op_on else 0
    out = _Held([], [], [], [([], []) for _ in range(k)], np.zeros(len(params["det_feat"])), 0)
    zlam = params["det_zlam_q8"] / 256.0
    for i, sf in enumerate(feats):
        sel = None if select is None else select[i]
        ch = _Channels(Detector(_mute(params), every), sel)
        st = step_detector(ch, sf.feats, 0, _gaps(sf, params, every))
        if sequences:
            zst, sst = replace(st, score_q8=np.array(ch.zmax)), replace(st, score_q8=np.array(ch.smax))
            out.combined.extend(evidence_sequences(st, sel))
            out.per_feature.extend(c * zlam for c in evidence_sequences(zst, sel))
            out.slow.extend(evidence_sequences(sst, sel))
            if k:
                # the full model's mode of each scored window (its load proxy is open: 0 serves)
                fm = np.array([full.mode_at(int(v), 0) if m >= 0 else -1 for v, m in zip(st.speed_q8, st.mode)])
                for m, (zs, ss) in enumerate(out.by_mode):
                    keep = fm == m if sel is None else sel & (fm == m)
                    zs.extend(c * zlam for c in evidence_sequences(zst, keep))
                    ss.extend(evidence_sequences(sst, keep))
        out.ew_ss += ch.ew_ss
        out.ew_n += ch.ew_n
    return out


def slow_wander(ew_ss: np.ndarray, ew_n: int, shift: int, averaged: Sequence[bool] = (),
                long_min: float = 0.0) -> tuple[list[int], str]:
    """det_slow_wander: 1 for each feature whose held-out EWMA (over scored windows, 2**-shift
    each) wanders: its r.m.s. at least WANDER_RATIO times sqrt(lam / (2 - lam)), the spread of
    an EWMA of independent departures of unit spread (Montgomery, EWMA chart; common practice).
    Then at least (WANDER_RATIO**2 - 1) / WANDER_RATIO**2 = 3/4 of its variance moves together
    over the windows of a snapshot, which no average over those windows removes and an average
    over several snapshots does (the detector's running-time EWMA). 0 for a feature that is an
    average over minutes already (averaged, the half-order prominence) and for all when no
    window was scored. long_min: the span such a feature then averages over in unbroken running
    (minutes, for the report)."""
    d = len(ew_ss)
    if ew_n == 0:
        return [0] * d, "none: no held-out scored window to measure the features' slow spreads"
    lam = 2.0 ** -shift
    ratio = np.sqrt(ew_ss / ew_n) / math.sqrt(lam / (2.0 - lam))
    out = [int(r >= WANDER_RATIO and not (j < len(averaged) and averaged[j])) for j, r in enumerate(ratio)]
    return out, (f"{sum(out)} of {d} features wander with the process (their {SLOW_MS / 1000:g}-s averages "
                 f"spread {WANDER_RATIO:g} times or more what window-to-window noise leaves): they average over "
                 f"several snapshots, or about {long_min:.0f} min of unbroken running, instead")


def sgain_q8(ew_ss: np.ndarray, ew_n: int, shift: int | Sequence[int], averaged: Sequence[bool] = ()) -> tuple[list[int], str]:
    """Per-feature weights of the slow channel, Q8: each feature's EWMA against its own healthy
    spread, so that one feature's small lasting rise is judged by how far its own EWMA wanders.

    sigma_j = the r.m.s. of feature j's EWMA over held-out scored windows (ew_ss / ew_n, spreads
    squared), at least sqrt(lam / (2 - lam)) with lam = 2**-shift (shift: one, or each feature's,
    the weight of its window after unwatched time for a wandering one): the EWMA spread of
    independent departures of unit spread (Montgomery, EWMA chart; common practice), so that thin
    data cannot make a feature look quieter than its per-window noise allows. A line whose
    departures are per-window noise (an envelope line) averages down to that floor; one that
    wanders with the process (the 1x line with the load) keeps most of its spread. Weight
    g_j = median_k(sigma_k) / sigma_j (the median makes the weights relative; the channel's
    overall weight det_slam_q8 is matched after), Q8 within [1, 4096]. All 256 (the unweighted
    channel) when no window was scored. averaged: per feature, True for one that is an average
    over minutes already (the half-order prominence): weight 0, as a second average adds nothing
    to it, and its held-out spread on a short recording is no measure of how it wanders."""
    d = len(ew_ss)
    off = np.zeros(d, bool)
    off[:len(averaged)] = averaged
    if ew_n == 0:
        return [0 if o else 256 for o in off], "all 1: no held-out scored window to measure the features' slow spreads"
    lam = 2.0 ** -np.broadcast_to(np.asarray(shift, dtype=np.float64), (d,))
    floor = np.sqrt(lam / (2.0 - lam))
    sigma = np.maximum(np.sqrt(ew_ss / ew_n), floor)
    g = np.median(sigma[~off]) / sigma
    q8 = [0 if o else int(v) for o, v in zip(off, np.clip(np.round(256 * g), 1, 4096))]
    on = [v for o, v in zip(off, q8) if not o]
    return q8, (f"each feature's average against its own held-out spread ({floor.min():.2f} to "
                f"{sigma[~off].max():.2f} spreads; weights {min(on) / 256:.2f} to {max(on) / 256:.2f}): lines that "
                "wander with the process count less, lines that only flicker count more"
                + ("; the half-order prominences, averages already, stay out" if off.any() else ""))


def slam_q8(zseqs: list[np.ndarray], sseqs: list[np.ndarray], p: dict, every: int) -> tuple[int, str]:
    """Weight of the slow channel, Q8: the largest at which its raise statistic on held-out healthy
    running stays at or under the weighted per-feature channel's (over the same features) at the
    matched upper quantiles (raise_rate.matched_weight; docs/detector.md, Score), so that alone it
    crosses the alert threshold no more often than that channel does. 0 (off) when there is
    nothing to match."""
    det = Detector(p, every)
    w = raise_rate.matched_weight(zseqs, sseqs, det.alarm.ev.span, det.alarm.k)
    q8 = min(int(math.floor(256 * w)), 1 << 12)
    if q8 <= 0:
        return 0, "off: no held-out span long enough to match it against the per-feature channel"
    return q8, (f"weight {q8 / 256:.2f}: the slow channel's persistence statistic stays at or under the "
                f"per-feature channel's at its {', '.join(f'{100 * q:g} %' for q in raise_rate.MATCH_LEVELS)} "
                "points on held-out healthy running")


def mslam_q8(by_mode: list[tuple[list[np.ndarray], list[np.ndarray]]], slam: int, p: dict,
             every: int) -> tuple[list[int], str]:
    """Each mode's own weight of the slow channel, Q8 (det_mslam_q8): slam_q8's match made on
    that mode's held-out windows alone (by_mode[m]: their per-feature and slow sequences), so that
    in each mode the slow channel alone crosses the alert threshold no more often than the
    per-feature channel does there, and over all modes no more often than it does overall. A mode
    with nothing to match keeps slam. [] and no text for a set of one mode or none (det_slam_q8
    serves)."""
    if len(by_mode) < 2 or not slam:
        return [], ""
    out = [slam_q8(zs, ss, p, every)[0] or slam for zs, ss in by_mode]
    return out, ("each mode its own weight, matched on its own held-out running, so that a duty whose "
                 "averages wander more does not lower the others': "
                 + ", ".join(f"mode {m} {v / 256:.2f}" for m, v in enumerate(out)))


def _fold_mslam(pf: dict, full: Detector, mslam: list[int], slam: int) -> list[int]:
    """det_mslam_q8 for a fold's model, whose modes are its own: each takes the weight of the
    full model's mode its range centre falls in (Detector.mode_at), the pooled slam where none
    does; [] when the full model has one weight."""
    if not mslam:
        return []
    op = pf.get("det_op_speed_q8") or []
    at = [full.mode_at((op[2 * m] >> 1) + (op[2 * m + 1] >> 1), 0) for m in range(len(op) // 2)]
    return [mslam[a] if a >= 0 else slam for a in at] if len(at) == pf["det_modes"] else []


def _dc_range(feats: np.ndarray, params: dict, profile: dict) -> tuple[list[int], list[int]]:
    """Healthy F_MEAN range per axis (Q8 counts); see the module docstring, step 2."""
    pa = fi.per_axis(len(params["fc_bands"]))
    s = profile["sensor"]
    full = (s["adc_max"] * 7 // 8) << 8
    least = int(DC_MARGIN_G * s["counts_per_g"]) << 8
    lo_out, hi_out = [], []
    for a in range(params["axes"]):
        m = feats[:, a * pa + fi.F_MEAN].astype(np.int64)
        lo, hi = int(m.min()), int(m.max())
        mid, half = (lo + hi) // 2, max((hi - lo) * 3 // 2, least)
        lo_out.append(max(mid - half, -full))
        hi_out.append(min(mid + half, full))
    return lo_out, hi_out


def _knocks(feats: np.ndarray, params: dict) -> int:
    """Windows (rows of features) the device's sensor check calls a knock with params' limits."""
    det = Detector(params)
    return sum(1 for row in feats.tolist() if det._sensor_bad(row, 0) and det.fault_reason == al.R_COUPLING)


def _idle_floor(bb: np.ndarray, rpm: np.ndarray, scale: float) -> tuple[int, str, list[str]]:
    """det_idle_vel_q16 from the broadband velocities bb (largest axis F_VEL, counts/s Q16) and
    each window's recorded rpm (nan unknown); scale: m/s^2 per count, for the warning's mm/s.
    Returns (floor, rule used, warnings)."""
    stopped, running = bb[rpm == 0], bb[rpm > 0]
    if len(stopped) >= 5 and len(running) >= 5:
        q_stop, q_run = np.percentile(stopped, 99), np.percentile(running, 1)
        if q_stop < q_run:
            return (int(math.sqrt(q_stop * q_run)),
                    "geometric mean of the 99th percentile of stopped and the 1st percentile of running windows (sidecar rpm)",
                    [])
        floor = int(math.sqrt(np.median(stopped) * np.median(running)))
        return (floor, "geometric mean of the median stopped and running levels (sidecar rpm)",
                [f"stopped and running broadband velocities overlap (stopped up to {units.velocity_mm_s(q_stop, scale):.3f}, "
                 f"running from {units.velocity_mm_s(q_run, scale):.3f} mm/s r.m.s.): some windows near the idle floor "
                 "will be misjudged"])
    if len(running) >= 5 and len(stopped) < 5:
        # No recording is wholly stopped, but stops can lie inside recordings that hold a run-down or
        # a restart (sidecar rpm unknown). A window more than an octave under the quietest steady
        # running (its 1st percentile) is no steady running; enough of them, clearly apart from
        # running, are the stopped pump: the floor is placed between them as above.
        q_run = float(np.percentile(running, 1))
        low = bb[~(rpm > 0) & (bb < q_run / 2)]
        if len(low) >= 5:
            q_stop = float(np.percentile(low, 99))
            return (int(math.sqrt(q_stop * q_run)),
                    "geometric mean of the 99th percentile of windows more than an octave under steady running "
                    "(stops inside recordings of unknown rpm) and the 1st percentile of running windows (sidecar rpm)",
                    [])
    return (max(int(bb.min()) >> 2, 1), "a quarter of the quietest window (the device's rule; no sidecar rpm marks stopped and running recordings)",
            ["no recordings marked stopped (sidecar rpm 0) and running: the idle floor is a quarter of the quietest "
             "window, so a stopped pump in the training data is learned as an operating mode"])


def _blocks(streams: list[list[Recording]], folds: int) -> list[np.ndarray]:
    """Fold number of each recording, per stream: contiguous blocks of the recordings in time order."""
    total = sum(len(s) for s in streams)
    order = sorted(((r.t0_s or 0.0, i, j) for i, s in enumerate(streams) for j, r in enumerate(s)))
    out = [np.zeros(len(s), int) for s in streams]
    for rank, (_, i, j) in enumerate(order):
        out[i][j] = rank * folds // total
    return out


def _mode_table(feats: np.ndarray, modes: np.ndarray, k: int, params: dict, scale: float,
                axis_names: Sequence[str]) -> list[dict[str, Any]]:
    """Per mode: windows, share, and the median of the physical features of its windows."""
    cols = physical_columns(feats, params, scale, axis_names)
    keep = [c for c in cols if c.startswith(("accel_rms_m_s2", "velocity_rms_mm_s", "crest_", "kurtosis_"))]
    total = max(int((modes >= 0).sum()), 1)
    out = []
    for m in range(k):
        sel = modes == m
        row: dict[str, Any] = {"mode": m, "windows": int(sel.sum()), "share": round(float(sel.sum()) / total, 4)}
        row["median"] = {c: round(float(np.median(cols[c][sel])), 4) if sel.any() else None for c in keep}
        out.append(row)
    return out


def _fine_hz(fs: float, n: int) -> float:
    """The lowest speed searched when no duty turns slower: 2.5 bins (speed.FINE_Q2) rounded up to
    the next whole Hz plus 0.5, Hz."""
    return math.ceil(speed.FINE_Q2 / 4 * fs / n) + 0.5


def _feature_options(streams: list[list[Recording]], base: dict, bearing: BearingGeometry | None,
                     warnings: list[str], coarse: bool = True) -> tuple[dict, dict]:
    """fc_ keys of the speed, order and envelope features, and why each was chosen.

    Speed range: the running recordings' sidecar rpm, 15 % below the slowest and above the
    fastest (slip and trims stay inside; half and double speed, which a harmonic sum could take for
    the shaft, stay outside); without rpm, 10-60 Hz (2- to 12-pole motors at 50/60 Hz; common
    practice). Vane count: the sidecars'. Bearing orders: host_tools.data.bearing from the
    geometry given or the sidecars' "bearing". Envelope band: see _envelope_band."""
    rpm = [r.rpm for s in streams for r in s if r.rpm]
    fs, n = base["fs_hz"], base["n"]
    if rpm:
        lo_hz, hi_hz = min(rpm) / 60.0 * 0.85, max(rpm) / 60.0 * 1.15
        why_speed = f"sidecar speeds {min(rpm):g}-{max(rpm):g} r/min, 15 % margin each side"
    else:
        lo_hz, hi_hz = 10.0, 60.0
        why_speed = "no sidecar rpm: 10-60 Hz, the shaft speeds of 2- to 12-pole motors at 50/60 Hz"
        warnings.append("no recording states its rpm: the speed search runs over 10-60 Hz; give the rpm in the sidecars")
    # The estimator reads a 1x from 2 bins up, finely from 2.5 (dsp/speed.py: there the 1x and 2x
    # lobes share one bin at most). The margin stops at 2.5 bins unless a duty turns slower.
    fine_hz = _fine_hz(fs, n)
    floor_hz = math.ceil(speed.MIN_Q2 * fs / n) / 4.0
    slowest_hz = min(rpm) / 60.0 if rpm else lo_hz
    if lo_hz < fine_hz and (fine_hz <= slowest_hz or not coarse):
        why_speed += (f"; the margin cut at {fine_hz:g} Hz, where the window still tells the 1x from the 2x line"
                      if coarse else f"; raised to {fine_hz:g} Hz: the slower duties read their speed too coarsely under it")
        lo_hz = fine_hz
        hi_hz = max(hi_hz, fine_hz * 1.2)
    elif lo_hz < floor_hz:
        # a slower shaft reads at the floor (or a harmonic) window after window: still a steady
        # label for its operating point, though no longer its speed
        warnings.append(f"speeds under {floor_hz:g} Hz ({floor_hz * 60:.0f} r/min) lie below what a window of {n} samples "
                        f"resolves: those operating points are told apart less well; a longer window would resolve them")
        why_speed += f"; raised to the estimator's floor of {floor_hz:g} Hz"
        lo_hz = floor_hz
        hi_hz = max(hi_hz, floor_hz * 1.2)
    elif lo_hz < fine_hz:
        warnings.append(f"speeds under {fine_hz:g} Hz ({fine_hz * 60:.0f} r/min) lie within 2.5 bins of a {n}-sample "
                        "window, where the 1x and 2x lines overlap: the speed estimate there is coarser and the "
                        "steady tolerance wider; a longer window would resolve them")
    if rpm and hi_hz >= OCTAVE_SAFE * lo_hz:
        # a search wider than an octave can take a strong line for the 2x of a shaft at half its
        # speed (dsp/speed.py): the margins shrink, evenly, until it is 1.95 x at most, unless
        # that leaves a duty within MIN_MARGIN of an end, where its windows would read the range
        f_hz = max(rpm) / 60.0
        m = (OCTAVE_SAFE * slowest_hz - f_hz) / (OCTAVE_SAFE * slowest_hz + f_hz)
        if m >= MIN_MARGIN:
            lo_hz, hi_hz = max(slowest_hz * (1 - m), lo_hz), f_hz * (1 + m)
            why_speed += f"; margins cut to {100 * m:.0f} % to keep the search within an octave"
        else:
            warnings.append("the duty speeds span nearly an octave or more: the speed search does too, and a strong "
                            "line may be taken for the 2x of a shaft at half its speed")
    hi_hz = min(hi_hz, fs / 8.0)   # 3x must stay well inside the spectrum
    vanes = sorted({int(r.vane_count) for s in streams for r in s if r.vane_count})
    vane = vanes[0] if len(vanes) == 1 else 0
    if len(vanes) > 1:
        warnings.append(f"recordings disagree on the vane count ({vanes}): no vane-pass line")
    if bearing is None:
        geo = next((r.sidecar["bearing"] for s in streams for r in s if isinstance(r.sidecar.get("bearing"), dict)), None)
        if geo:
            bearing = geometry_from_record(geo)
    keys: dict[str, Any] = {"fc_speed_lo_q8": int(lo_hz * 256), "fc_speed_hi_q8": int(math.ceil(hi_hz * 256)),
                            "fc_vane": vane, "fc_env_band": [], "fc_bear_q12": []}
    why = {"speed": why_speed, "vane": f"{vane} vanes (sidecars)" if vane else "no vane count in the sidecars",
           "envelope": "no bearing geometry: no envelope lines"}
    if vane and vane * hi_hz * 1.1 >= fs / 2:
        keys["fc_vane"] = 0
        why["vane"] = f"vane pass ({vane} x {hi_hz:.0f} Hz) lies above half the sample rate"
    if bearing is not None:
        o = defect_orders(bearing)
        keys["fc_bear_q12"] = [int(round(v * 4096)) for v in (o.bpfo, o.bpfi, o.bsf, o.ftf)]
        band, why["envelope"] = _envelope_band(base, hi_hz * max(o.bpfo, o.bpfi, o.bsf, o.ftf))
        keys["fc_env_band"] = band
    return keys, why


def _envelope_band(base: dict, top_hz: float) -> tuple[list[int], str]:
    """The high-frequency band the envelope demodulates: the widest band the envelope stage takes
    (fs/4), at the top of the sensor's range (up to 15/16 of the Nyquist frequency, clear of the
    converter's own roll-off). Bearing impacts ring the structure's resonances, which lie high
    and are rung by the impacts, not by healthy running: healthy data cannot show where they are
    (a band chosen as the loudest healthy band lands on the machine's flow noise instead). Randall
    and Antoni (2011) demodulate a band around an excited resonance, found by its impulsiveness
    when a fault exists; before one exists, a wide band high in the range holds the likely
    resonances and little of the machine's own lines and flow noise. The band must also be at least
    2.5 times the highest defect frequency wide (its envelope must hold the line and its lobe)."""
    n, fs = base["n"], base["fs_hz"]
    m = n // 2
    df = fs / n
    need = int(math.ceil(2.5 * top_hz / df)) + 4
    width = m // 2
    hi = m - m // 16
    lo = hi - width
    if need > width or lo < m // 4:
        return [], "the sample rate leaves no band above the machine lines wide enough for the envelope"
    return [lo, hi], (f"{lo * df:.0f}-{hi * df:.0f} Hz: the widest band the envelope takes, at the top of the "
                      "sensor's range, where the structural resonances that bearing impacts ring lie")


def _op_of(sf: StreamFeatures, params: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Speed (Hz), confidence (Q8) and broadband level (log2 of F_VEL) of each window, from the
    axis the device's op_axis picks (the most confident estimate not pinned at an end of the
    search range, else the most confident)."""
    pa = fi.per_axis(len(params["fc_bands"]))
    axes = params["axes"]
    conf = sf.feats[:, fi.F_SPEED_CONF::pa][:, :axes]
    sp = sf.feats[:, fi.F_SPEED::pa][:, :axes]
    lo, hi = modes_fit.pinned_limits_q8(params)
    best = np.array([op_axis(row, axes, pa, lo, hi) for row in sf.feats.tolist()], dtype=np.int64)
    rows = np.arange(len(best))
    vel = sf.feats[:, fi.F_VEL::pa][:, :axes].max(1)
    return sp[rows, best] / 256.0, conf[rows, best].astype(float), np.log2(np.maximum(vel, 1))


def _window_rpm(recs: list[Recording], sf: StreamFeatures) -> np.ndarray:
    """Each window's sidecar rpm (the recording it ends in), nan where the sidecar gives none."""
    return np.array([np.nan if r.rpm is None else r.rpm for r in recs])[sf.rec]


def _coarse_reads(feats: list[StreamFeatures], streams: list[list[Recording]], p: dict) -> tuple[bool, str | None]:
    """Whether to train again with the search kept at 2.5 bins, and the warning to give. Under 2.5
    bins the 1x and 2x lobes overlap (dsp/speed.py): on some pumps the estimate then jumps to
    another line, which would merge the operating points and widen the steady tolerance for every
    speed. So a duty under 2.5 bins (sidecar rpm) must read its speed within COARSE_READ_TOL of
    the sidecar in COARSE_READ_SHARE of its windows, or the search stays at 2.5 bins, as for a
    faster pump, and that duty goes unscored. That remedy needs a duty clear of 2.5 bins (by
    MIN_MARGIN, where the trims and slip keep it off the end of the search) to score instead:
    without one it would leave every duty unscored and train on nothing (on a fresh seed a 6-pole
    pump at 12.6 and 16.8 Hz read 89 % of one duty's windows right, and kept 58 windows of 17 058).
    Then the coarse search stays, with the warning. (False, None): every coarse duty reads well."""
    fine_hz = _fine_hz(p["fs_hz"], p["n"])
    if p["fc_speed_lo_q8"] / 256.0 >= fine_hz:
        return False, None
    sp = np.concatenate([_op_of(sf, p)[0] for sf in feats])
    rpm = np.concatenate([_window_rpm(s, sf) for s, sf in zip(streams, feats)])
    duties = sorted(set(rpm[rpm > 0].tolist()))
    for r in (d for d in duties if d / 60.0 < fine_hz):
        est = sp[rpm == r]
        share = float(np.mean(np.abs(est - r / 60.0) <= COARSE_READ_TOL * r / 60.0))
        if share < COARSE_READ_SHARE:
            said = (f"the duty at {r:g} r/min reads its speed within {100 * COARSE_READ_TOL:g} % in only {100 * share:.0f} % "
                    "of its windows at this window length")
            if any(d / 60.0 >= fine_hz * (1 + MIN_MARGIN) for d in duties):
                return True, said + (": the speed search stays at 2.5 bins, so such windows are left unscored; a longer "
                                     "window would resolve them")
            return False, said + (": the search still goes under 2.5 bins, since no duty turns clear of them (kept "
                                  "there, every duty would go unscored); some of its windows may be judged at the wrong "
                                  "operating point or left unscored; a longer window would resolve them")
    return False, None


def _steadiness(feats: list[StreamFeatures], streams: list[list[Recording]], p: dict, every: int
                ) -> tuple[dict, dict, list[str]]:
    """det_conf_min_q8, det_speed_tol_q12 and det_level_tol_q8 from the steady running recordings
    (sidecar rpm > 0, so no run-up or speed change inside; spans within one recording, since
    the next may be at another speed): the confidence floor is half the 1st
    percentile of their speed confidence; the tolerances are 1.5 times the 99th percentile of the
    speed spread (max - min over max) and of the level fall over det_steady_ms, at least 0.5 % and
    1/8 octave, at most 25 % (a run-up changes the speed faster than that over 2 s; a window of 0.16 s
    resolves 6.25 Hz, so a single estimate can miss by 20 % at 25 Hz) and 1 octave. Keys, why, warnings."""
    span = min(al.windows_for(p["det_steady_ms"], p["n"], p["fs_hz"], every), _STEADY_MAX)
    h = span // 2
    sp_all, conf_all, spread, fall = [], [], [], []
    for sf, recs in zip(feats, streams):
        rpm = _window_rpm(recs, sf)
        sp, conf, lv = _op_of(sf, p)
        # an estimate pinned at an end of the search range is the range, not the shaft (a shaft
        # slower than the window resolves): it would set the tolerance for every other speed
        lo, hi = p["fc_speed_lo_q8"] / 256 * 1.01, p["fc_speed_hi_q8"] / 256 * 0.99
        ok = (rpm > 0) & (sp > lo) & (sp < hi)
        sp_all.append(sp[ok])
        conf_all.append(conf[ok])
        if len(sp) >= span and h > 0:
            # the device's statistic: medians of the span's older and newer halves, apart by
            w = np.lib.stride_tricks.sliding_window_view(np.where(sp > 0, sp, np.nan), span)
            recw = np.lib.stride_tricks.sliding_window_view(sf.rec, span)
            okw = np.lib.stride_tricks.sliding_window_view(ok, span).all(1) & (recw.min(1) == recw.max(1))
            old, new = np.nanmedian(w[:, :h], 1), np.nanmedian(w[:, h:], 1)
            spread.append((np.abs(new - old) / np.nanmedian(w, 1))[okw])
            lw = np.lib.stride_tricks.sliding_window_view(lv, span)
            fall.append((lw[:, 0] - lw[:, -1])[okw])
    conf = np.concatenate(conf_all) if conf_all else np.zeros(0)
    spread_a = np.concatenate(spread) if spread else np.zeros(0)
    fall_a = np.concatenate(fall) if fall else np.zeros(0)
    warns = []
    if len(conf) < 50:
        warns.append("too few steady running windows with a speed estimate to learn the steadiness tolerances: defaults kept")
        return {}, {"steadiness": "defaults (too few steady windows with a speed estimate)"}, warns
    conf_min = int(np.clip(0.5 * np.percentile(conf, 1), 16, 128))
    tol = float(np.clip(1.5 * np.percentile(spread_a, 99), 0.005, 0.25)) if len(spread_a) else 0.03
    lvl = float(np.clip(1.5 * np.percentile(fall_a, 99), 0.125, 1.0)) if len(fall_a) else 0.5
    keys = {"det_conf_min_q8": conf_min, "det_speed_tol_q12": int(round(tol * 4096)),
            "det_level_tol_q8": int(round(lvl * 256))}
    why = {"steadiness": f"speed steady within {100 * tol:.1f} % and level falling by less than {lvl:.2f} octave over "
                         f"{p['det_steady_ms'] / 1000:g} s (1.5 x the 99th percentile of steady running); speed "
                         f"estimate trusted from confidence {conf_min / 256:.2f} (half the 1st percentile)"}
    return keys, why, warns


def _hold_off(feats: list[StreamFeatures], p: dict, every: int, window_s: float) -> tuple[int, str, list[str]]:
    """det_hold_ms from the starts seen in the data. A mute detector with no hold-off scores
    every window once the speed is steady; a provisional model (from windows at least 2 minutes
    after any start) scores them; for each start the settling time is from its first steady
    window to the last of the next 2 minutes that scores over the 99th percentile of the settled
    windows. The hold-off is 1.25 times the longest settling time, at least HOLD_FLOOR_S and at
    most 2 minutes; without any start in the data, HOLD_DEFAULT_S with a warning."""
    q = _with(p, det_hold_ms=0)
    probe = _run(_probe_model(q), feats, every)
    after = int(120.0 / window_s)
    starts, settled = [], []
    for sf, st in zip(feats, probe):
        idle = st.why == W_IDLE
        sc = st.why == W_SCORED
        since = np.full(len(sc), 10 ** 9)
        last = -10 ** 9
        for i in range(len(sc)):
            if idle[i]:
                last = -10 ** 9
            elif i > 0 and idle[i - 1]:
                last = i
            since[i] = i - last
        settled.append(sc & (since > after))
        for i in np.flatnonzero(~idle[1:] & idle[:-1]) + 1:
            first = np.flatnonzero(sc[i:i + after])
            if len(first):
                starts.append((len(starts), i + int(first[0])))
    if not starts:
        return int(HOLD_DEFAULT_S * 1000), f"{HOLD_DEFAULT_S:g} s (no start in the training data)", [
            "no start of the pump in the training data: the hold-off after a start is the default "
            f"{HOLD_DEFAULT_S:g} s; record a few starts to learn it"]
    rows = [sf.feats[m] for sf, m in zip(feats, settled)]
    ops = [st.speed_q8[m] / 256.0 for st, m in zip(probe, settled)]
    allrows = np.concatenate(rows)
    if len(allrows) < MIN_WINDOWS:
        return int(HOLD_DEFAULT_S * 1000), f"{HOLD_DEFAULT_S:g} s (too few settled windows)", []
    strs = np.concatenate([r[m] for r, m in zip(_recording_ids(feats), settled)])
    keys = modes_fit.fit(allrows, q, np.concatenate(ops), q["det_speed_tol_q12"] / 4096.0, stretch=strs)
    keys.pop("det_idle_vel_q16")
    scored = _run(_mute(_with(q, **keys)), feats, every)
    span = min(al.windows_for(p["det_steady_ms"], p["n"], p["fs_hz"], every), _STEADY_MAX)
    smooth = [_running_median(st.score_q8.astype(float), span) for st in scored]
    level = np.percentile(np.concatenate([sm[m] for sm, m in zip(smooth, settled)]), 95)
    worst = 0
    k = 0
    for st, sm in zip(scored, smooth):
        idle = st.why == W_IDLE
        for i in np.flatnonzero(~idle[1:] & idle[:-1]) + 1:
            sc = st.why[i:i + after] == W_SCORED
            first = np.flatnonzero(sc)
            if not len(first):
                continue
            j0 = i + int(first[0])
            calm = np.flatnonzero((sm[j0:i + after] <= level) & (st.why[j0:i + after] == W_SCORED))
            worst = max(worst, int(calm[0]) if len(calm) else after)
            k += 1
    hold_s = float(np.clip(1.25 * worst * window_s, HOLD_FLOOR_S, 120.0))
    return (int(round(hold_s * 1000)),
            f"{hold_s:.1f} s: 1.25 x the longest settling after {k} start(s) seen ({worst * window_s:.1f} s "
            f"from steady speed until the scores came down to their settled 95th percentile), at least {HOLD_FLOOR_S:g} s",
            [])


def _running_median(x: np.ndarray, span: int) -> np.ndarray:
    """Median of the last `span` values of x at each index (fewer at the start)."""
    if span <= 1 or len(x) < span:
        return x
    w = np.lib.stride_tricks.sliding_window_view(x, span)
    return np.concatenate([x[:span - 1], np.median(w, 1)])


def _feature_list(p: dict) -> list[int]:
    """Scored features: the default list, plus the order lines (and vane pass) and the half-order
    prominence (half_lines) when the speed is estimated, and the envelope lines when the envelope
    is on. The 0.5x line when the fastest
    shaft of the range reads it clear of the 1x's main lobe (orders.HALF_CLEAR_BINS; Harris, "On
    the use of windows for harmonic analysis with the discrete Fourier transform", Proc. IEEE 66,
    1978: Hann main lobe +-2 bins); a mode slower than that sets it aside
    (modes_fit.set_aside). Closer, the 0.5x feature is the 1x's leakage, which swings with the
    fraction of a bin the speed sits at.

    At most dm.DMAX: over that, the peaks go first, the last axis's first. Compared on a log
    scale, log peak = log crest + log r.m.s. (crest = peak / r.m.s.), so a peak adds nothing that
    its axis's crest and r.m.s. do not hold. Then the window's own 0.5x lines, the last axis's
    first: the half-order prominence reads that line over many windows, with 1.5x and 2.5x."""
    pa = fi.per_axis(len(p["fc_bands"]))
    extra = []
    if p.get("fc_speed_hi_q8"):
        hi_bins = p["fc_speed_hi_q8"] / 256 * p["n"] / p["fs_hz"]
        half = [fi.F_ORD_HALF] if hi_bins >= orders.HALF_CLEAR_BINS else []
        extra += half + [fi.F_ORD_1X, fi.F_ORD_2X, fi.F_ORD_3X] + ([fi.F_ORD_VANE] if p.get("fc_vane") else [])
        extra.append(fi.F_HALF)
    if p.get("fc_env_band") and p.get("fc_bear_q12"):
        extra += [fi.F_ENV_BPFO, fi.F_ENV_BPFI, fi.F_ENV_BSF, fi.F_ENV_FTF]
    out = list(default_feature_list(p["axes"], len(p["fc_bands"])))
    out += [a * pa + f for a in range(p["axes"]) for f in extra]
    for f in (fi.F_PEAK, fi.F_ORD_HALF):
        for a in reversed(range(p["axes"])):
            if len(out) > dm.DMAX and a * pa + f in out:
                out.remove(a * pa + f)
    return sorted(out)[:dm.DMAX]


def zlam_q8(d: int) -> int:
    """Weight of the per-feature channel: the ratio of the two channels' tail points on ideal data
    (d independent standard normal features) at a per-window probability of 1e-3, so that on such
    data each channel alone would exceed the same threshold equally often: sqrt(chi2.isf(p, d))
    over the |z| that the largest of d exceeds with probability p (scipy.stats)."""
    from scipy.stats import chi2, norm
    p = 1e-3
    zmax = norm.isf((1.0 - (1.0 - p) ** (1.0 / d)) / 2.0)
    return int(round(256 * math.sqrt(chi2.isf(p, d)) / zmax))


def _model(rows: np.ndarray, speeds: np.ndarray, params: dict, stretch: np.ndarray) -> dict:
    """modes_fit.fit's baseline, modes by operating point (stretch: each row's recording); the
    idle floor stays the one set here."""
    keys = modes_fit.fit(rows, params, speeds, params["det_speed_tol_q12"] / 4096.0, stretch=stretch)
    keys.pop("det_idle_vel_q16")
    return keys


def _fit_all(rows: list[np.ndarray], speeds: list[np.ndarray], params: dict, jobs: int,
             stretches: list[np.ndarray]) -> list[dict]:
    """_model over each row set, in up to `jobs` processes (the same result for any jobs)."""
    if jobs <= 1 or len(rows) == 1:
        return [_model(r, s, params, t) for r, s, t in zip(rows, speeds, stretches)]
    with ProcessPoolExecutor(max_workers=min(jobs, len(rows))) as pool:
        return list(pool.map(_model, rows, speeds, [params] * len(rows), stretches))


def _recording_ids(feats: list[StreamFeatures]) -> list[np.ndarray]:
    """Each window's recording as one id over all streams (stream index << 20 | recording)."""
    return [(i << 20) + sf.rec for i, sf in enumerate(feats)]


def _thresholds(seqs: list[np.ndarray], p: dict, every: int, window_s: float, target: float,
                warnings: list[str]) -> tuple[int, int, dict]:
    """Alert and alarm thresholds (Q8) from the raise rate of held-out healthy sequences
    (host_tools.fit.raise_rate); the promise and how it was reached."""
    det = Detector(p, every)
    span, k = det.alarm.ev.span, det.alarm.k
    chi_alert, chi_alarm = p["det_thr_alert_q8"], p["det_thr_alarm_q8"]
    try:
        rf = raise_rate.fit(seqs, span, k, window_s)
    except EdgevibError as e:
        # no tail to fit: the chi-square thresholds stay, and what the held-out running does show
        # at them is stated, as the exact Poisson upper limit of the count (an upper bound)
        counts = raise_rate.count_bound(seqs, [(float(chi_alert), target), (float(chi_alarm), target / ALARM_RATE_RATIO)],
                                        span, k, window_s)
        if counts is None:
            warnings.append(f"{e}: thresholds from the device's conservative chi-square rule, no stated rate")
            return chi_alert, chi_alarm, {
                "method": "the device's chi-square rule (no held-out running to count raises on)",
                "expected_false_alerts_per_30_days": None, "range_95_per_30_days": None}
        ca, cm = counts
        warnings.append(f"{e}: thresholds from the device's conservative chi-square rule; without a fit the data "
                        f"support {stated_rate(ca.promise.per_30_days, True)} false alerts per 30 days (95 % upper limit of "
                        f"{ca.clusters} raise-like stretches counted in {ca.hours:.2f} h of held-out running). Train on "
                        "more running time to promise fewer")
        return chi_alert, chi_alarm, {
            "method": "the device's chi-square rule (too little held-out data for a raise-rate fit); the stated rate is "
                      "the exact Poisson 95 % upper limit (Garwood) of the raise-like stretches counted at the alert "
                      "threshold on held-out healthy running",
            **_promise_fields(ca.promise, cm.promise),
            "raise_count": {"clusters": ca.clusters, "hours": ca.hours, "span_windows": span, "k_windows": k}}
    pr = raise_rate.promise(rf, target)
    pa = raise_rate.promise(rf, pr.per_30_days / ALARM_RATE_RATIO)
    floored = not pr.supported and pr.threshold < chi_alert
    alarm_floored = not pr.supported and pa.threshold < chi_alarm
    if not pr.supported:
        # Too little data for the target. The rate the data can vouch for is stated, but the
        # thresholds never go under the device's conservative chi-square rule (which rests on no
        # data): a set for hundreds of false alerts a month is no use in the field. At the higher
        # floor the supported rate is an upper bound, not extrapolated (raise_rate.at_most).
        warnings.append(f"{rf.hours:.2f} h of held-out running hold only {rf.clusters} independent stretches of high "
                        f"scores: they cannot support {target:g} false alert(s) per 30 days; they support "
                        f"{pr.per_30_days:.3g} per 30 days (95 % range {pr.range_95[0]:.3g} to "
                        f"{pr.range_95[1]:.3g})" + ("; the thresholds stay at the device's conservative chi-square rule "
                                                    "instead, which raises no more often: at most that rate is promised"
                                                    if floored else "; thresholds are set for that rate") +
                        ". Train on more running time to promise fewer")
        if floored:
            pr = raise_rate.at_most(rf, float(chi_alert), pr)
        if alarm_floored:
            pa = raise_rate.at_most(rf, float(chi_alarm), pa)
    # a fitted point is continuous: the next Q8 step over it; a floor is the device's own value
    alert = chi_alert if floored else min(int(math.floor(pr.threshold)) + 1, _THR_MAX)
    at_fit = chi_alarm if alarm_floored else int(math.floor(pa.threshold)) + 1
    alarm = min(max(at_fit, -(-alert * p["det_learn_alarm_q8"] // 256)), _THR_MAX)
    if rf.tail.shape > 0.5:
        warnings.append(f"the healthy score tail is heavy (shape {rf.tail.shape:.2f}): some training windows may not be healthy")
    if pr.beyond_data and not pr.upper_bound:
        warnings.append("the alert threshold lies beyond every held-out raise statistic: the rate rests on the tail fit alone")
    return alert, alarm, {
        "method": "rate of the raise event itself: clusters of the k-th largest score in the persistence span on "
                  "held-out healthy running, generalised Pareto tail of their peaks, Poisson count of clusters",
        **_promise_fields(pr, pa),
        "raise_fit": {"u": rf.u / 256, "clusters": rf.clusters, "exceedances": rf.exceedances,
                      "hours": rf.hours, "extremal_index": rf.theta, "shape": rf.tail.shape,
                      "scale": rf.tail.scale / 256, "span_windows": span, "k_windows": k}}


def _promise_fields(pr: raise_rate.Promise, pa: raise_rate.Promise) -> dict:
    """The summary's promise keys (upper_bound: the rate is "at most"; supported: the target was)."""
    return {"expected_false_alerts_per_30_days": pr.per_30_days, "range_95_per_30_days": list(pr.range_95),
            "upper_bound": pr.upper_bound, "supported": pr.supported,
            "expected_false_alarms_per_30_days": pa.per_30_days, "beyond_training_max": bool(pr.beyond_data)}


def train(recordings: Sequence[Any], profile: dict, false_alerts_per_month: float = 1.0,
          version: int = 1, folds: int = FOLDS, jobs: int = 1, bearing: BearingGeometry | None = None,
          progress: bool = False, bands: list[list[int]] | None = None, coarse: bool = True) -> tuple[dict, dict]:
    """A parameter set trained on healthy recordings of one gateway, and a JSON-able summary.

    recordings: Recording objects (one stream) or lists of them (one per stream), read at the
    board's counts scale (m/s^2 per count = g / counts_per_g). profile: board profile dict (its
    analyse_every decides which windows the device sees). false_alerts_per_month: target expected
    false alerts per 30 days of running. version: the set's version. folds:
    held-out blocks. jobs: processes for the fits. bearing: the monitored bearing's geometry (or
    a sidecar "bearing"), for the envelope lines. progress: show the stages done (host_tools.progress).
    bands: the band edges (fc_bands) to train with. None: the board's octave bands, and when a
    learned mode puts a shaft line on an edge (modes_fit.place_edges) a second pass with the
    edges moved off the lines. coarse: the speed search may go under 2.5 bins for a duty that
    turns that slowly (_feature_options); training passes again without it when such a duty's
    windows do not read their sidecar speed (_coarse_reads).
    """
    if not false_alerts_per_month > 0:
        raise EdgevibError("the false-alert target must be a positive number per 30 days")
    streams = _streams(recordings)
    base = pm.factory(profile)
    base["version"] = int(version)
    board_bands = [list(b) for b in base["fc_bands"]]
    if bands is not None:
        base["fc_bands"] = [list(b) for b in bands]
    every = int(profile["analyse_every"])
    for s in streams:
        check_recordings(s, base)
    warnings: list[str] = []
    machines = sorted({r.machine for s in streams for r in s if r.machine})
    if len(machines) > 1:
        warnings.append(f"training recordings name several machines ({', '.join(machines)}); a parameter set is for one gateway")
    fc, learned = _feature_options(streams, base, bearing, warnings, coarse)
    p = _with(base, **fc)
    p["det_feat"] = _feature_list(p)
    d = len(p["det_feat"])
    p.update(det_base_mean_q4=[0] * d, det_base_sd_q4=[256] * d, det_zlam_q8=zlam_q8(d), det_slow_ms=SLOW_MS,
             det_wander_ms=WANDER_MS, det_slow_wander=[0] * d, det_slam_q8=0, det_sgain_q8=[256] * d)
    pm.build(p, profile)
    twin = twin_for(p, profile)
    bar = start(4, "stages", "train", enabled=progress)    # features, scoring probe, fits, check
    feats = [stream_features(s, twin, every) for s in streams]
    bar.update(1)
    again, said = _coarse_reads(feats, streams, p) if coarse else (False, None)
    if again:
        bar.close()
        p2, s2 = train(recordings, profile, false_alerts_per_month, version, folds, jobs, bearing, progress, bands, False)
        s2["warnings"].insert(0, said)
        return p2, s2
    if said:
        warnings.append(said)
    allf = np.concatenate([sf.feats for sf in feats])
    pa = fi.per_axis(len(p["fc_bands"]))
    axes = p["axes"]
    window_s = p["n"] * every / p["fs_hz"]
    scale = m_s2_per_count(p)
    axis_names = streams[0][0].axes

    # sensor health, dropout limits and the idle floor
    dc_lo, dc_hi = _dc_range(allf, p, profile)
    clipped = int((allf[:, fi.F_CLIP::pa][:, :axes] > 0).any(1).sum())
    if clipped:
        warnings.append(f"{clipped} training windows hold samples at full scale: the sensor range may be too small, or the data is not healthy")
    flat = int((allf[:, fi.F_RMS::pa][:, :axes] < p["det_flat_rms_q8"]).any(1).sum())
    if flat:
        warnings.append(f"{flat} training windows look like a stuck sensor (r.m.s. under the flatline floor)")
    stuck, zero, run_detail = sensor_fit.run_limits([r.counts for s in streams for r in s], p["n"],
                                                    _DAYS_30_S / window_s)
    knock, knock_detail = sensor_fit.crest_limits(allf[:, fi.F_CREST::pa][:, :axes], allf[:, fi.F_RMS::pa][:, :axes],
                                                  p["n"], _DAYS_30_S / window_s)
    run_detail["knock"] = knock_detail
    knocks = _knocks(allf, _with(p, det_knock_crest_q12=[int(math.ceil(d["gaussian"] * 4096)) for d in knock_detail["axes"]]))
    if knocks:
        warnings.append(f"{knocks} training windows hold a knock on one axis that the other axes did not see (a loose or "
                        "struck sensor, a glitching connection?): the knock limit was raised to cover them; check the "
                        "mount and retrain on clean recordings")
    seen_stuck = allf[:, fi.F_STUCK::pa][:, :axes].max(0)
    seen_zero = allf[:, fi.F_ZERO::pa][:, :axes].max(0)
    for a in range(axes):
        if seen_stuck[a] > stuck[a] or seen_zero[a] > zero[a]:
            warnings.append(f"axis {axis_names[a]}: training windows hold runs of identical or zero samples longer than "
                            "the sensor's noise allows (a dropout in the training data?)")
    bb = allf[:, fi.F_VEL::pa][:, :axes].max(1).astype(np.float64)
    rpm = np.concatenate([_window_rpm(s, sf) for s, sf in zip(streams, feats)])
    idle, idle_rule, w = _idle_floor(bb, rpm, scale)
    warnings += w
    p = _with(p, det_dc_lo_q8=dc_lo, det_dc_hi_q8=dc_hi, det_clip_max=0, det_idle_vel_q16=idle,
              det_stuck_max=[int(v) for v in stuck], det_zero_max=[int(v) for v in zero], det_knock_crest_q12=knock)

    # steadiness, then the hold-off after a start
    keys, why, w = _steadiness(feats, streams, p, every)
    p = _with(p, **keys)
    learned.update(why)
    warnings += w
    hold_ms, learned["hold_off"], w = _hold_off(feats, p, every, window_s)
    p["det_hold_ms"] = hold_ms
    warnings += w

    # which windows the device scores, and which of those are fit for training (zone A/B)
    probe = _run(_probe_model(p), feats, every)
    bar.update(1)
    _fill_half(feats, probe, p)
    scored = [st.why == W_SCORED for st in probe]
    vel = [sf.feats[:, fi.F_VEL::pa][:, :axes].max(1) for sf in feats]
    zone_c = [v >= p["det_iso_bounds"][ZONE_C - 1] for v in vel]
    use = [s & ~z for s, z in zip(scored, zone_c)]
    n_zone_c = int(sum((s & z).sum() for s, z in zip(scored, zone_c)))
    if n_zone_c:
        warnings.append(f"{n_zone_c} running training windows are in ISO zone C or D and were left out: the training data does not look healthy")
    n_use = int(sum(u.sum() for u in use))
    if n_use < MIN_WINDOWS:
        raise EdgevibError(f"only {n_use} steady running, healthy training windows; record more of the pump in normal duty (at least {MIN_WINDOWS})")
    if n_use * window_s < MIN_HOURS * 3600:
        warnings.append(f"only {n_use * window_s / 3600:.2f} h of steady running windows: thresholds and modes rest on little data")
    # the device chooses the mode by the median speed of the steadiness span (det.speed_q8 of a
    # scored window), so the modes are learned from the same quantity
    speeds = [st.speed_q8 / 256.0 for st in probe]
    # a speed pinned at an end of the search range is no operating point (modes_fit.pinned_limits_q8):
    # such windows stay out of the model, and out of every mode's range
    pin_lo, pin_hi = (v / 256.0 for v in modes_fit.pinned_limits_q8(p))
    pinned = int(sum((u & ((sp < pin_lo) | (sp > pin_hi))).sum() for u, sp in zip(use, speeds)))
    use = [u & (sp >= pin_lo) & (sp <= pin_hi) for u, sp in zip(use, speeds)]
    if pinned:
        warnings.append(f"{pinned} steady windows read their speed at an end of the search range (a shaft the window "
                        "cannot resolve, or outside the range): they are not learned, and the gateway leaves such "
                        "windows unscored")
    n_use = int(sum(u.sum() for u in use))
    if n_use < MIN_WINDOWS:
        raise EdgevibError(f"only {n_use} steady running windows with a resolved speed; "
                           f"record more of the pump in normal duty (at least {MIN_WINDOWS})")

    # held-out scores, by contiguous blocks of recordings; fold models and the full model
    rec_fold = _blocks(streams, folds)
    win_fold = [rf[sf.rec] for rf, sf in zip(rec_fold, feats)]
    n_folds = len(np.unique(np.concatenate(rec_fold)))
    fold_ids = [f for f in range(n_folds if n_folds > 1 else 0)
                if sum((u & (wf != f)).sum() for u, wf in zip(use, win_fold)) >= MIN_WINDOWS]
    # each fold model's windows (those outside the fold), then the full model's (all)
    masks = [[u & (wf != f) for u, wf in zip(use, win_fold)] for f in fold_ids] + [use]

    def pick(per_stream: list[np.ndarray]) -> list[np.ndarray]:
        return [np.concatenate([x[m] for x, m in zip(per_stream, ms)]) for ms in masks]
    rows = pick([sf.feats for sf in feats])
    fits = _fit_all(rows, pick(speeds), p, jobs, pick(_recording_ids(feats)))
    bar.update(1)
    # held-out sequences: each feature's slow weight from its own held-out EWMA spread, then the
    # slow channel is weighted against the per-feature one, then the thresholds are fitted on the
    # combined score with all three channels in it
    fold_sets = [(f, _with(p, **keys)) for f, keys in zip(fold_ids, fits)]
    if n_folds < 2:
        warnings.append("a single recording: thresholds come from the model's own training windows (optimistic)")
    p = _with(p, **fits[-1])
    if bands is None:      # the modes are known: train again at once if they put a line on an edge
        moved = modes_fit.place_edges(p, modes_fit.edge_ranges_hz(p))
        if moved != board_bands:
            bar.close()
            return train(recordings, profile, false_alerts_per_month, version, folds, jobs, bearing, progress, moved)
    held = [(pf, [wf == f for wf in win_fold]) for f, pf in fold_sets] or [(p, None)]
    averaged = [i % pa == fi.F_HALF for i in p["det_feat"]]
    parts = [_held_out(pf, feats, every, sel, sequences=False) for pf, sel in held]
    det = Detector(p, every)
    wander, learned["slow_wander"] = slow_wander(sum(h.ew_ss for h in parts), sum(h.ew_n for h in parts),
                                                 det.ew_shift, averaged,
                                                 (1 << det.ew_long) * window_s / 60)
    learned["slow_run_min"] = (1 << det.ew_frun) * window_s / 60
    if any(wander):
        p["det_slow_wander"] = wander
        fold_sets = [(f, _with(pf, det_slow_wander=wander)) for f, pf in fold_sets]
        held = [(_with(pf, det_slow_wander=wander), sel) for pf, sel in held]
        parts = [_held_out(pf, feats, every, sel, sequences=False) for pf, sel in held]
    shifts = [det.ew_wshift if w else det.ew_shift for w in wander]
    gains, learned["slow_gains"] = sgain_q8(sum(h.ew_ss for h in parts), sum(h.ew_n for h in parts),
                                            shifts, averaged)
    p["det_sgain_q8"] = gains
    fold_sets = [(f, _with(pf, det_sgain_q8=gains)) for f, pf in fold_sets]
    held = [(_with(pf, det_sgain_q8=gains), sel) for pf, sel in held]
    full = Detector(p, every)
    parts = [_held_out(pf, feats, every, sel, full=full) for pf, sel in held]
    slam, learned["slow_channel"] = slam_q8([c for h in parts for c in h.per_feature],
                                            [c for h in parts for c in h.slow], p, every)
    mslam, learned["slow_by_mode"] = mslam_q8([([c for h in parts for c in h.by_mode[m][0]],
                                                [c for h in parts for c in h.by_mode[m][1]])
                                               for m in range(len(parts[0].by_mode))], slam, p, every)
    p["det_slam_q8"], p["det_mslam_q8"] = slam, mslam
    fold_sets = [(f, _with(pf, det_slam_q8=slam, det_mslam_q8=_fold_mslam(pf, full, mslam, slam))) for f, pf in fold_sets]
    if slam:
        held = [(_with(pf, det_slam_q8=slam, det_mslam_q8=_fold_mslam(pf, full, mslam, slam)), sel) for pf, sel in held]
        seqs = [c for pf, sel in held for c in _held_out(pf, feats, every, sel).combined]
    else:
        seqs = [c for h in parts for c in h.combined]
    alert, alarm, thr = _thresholds(seqs, p, every, window_s, false_alerts_per_month, warnings)
    p = _with(p, det_thr_alert_q8=alert, det_thr_alarm_q8=alarm)
    if thr.get("expected_false_alerts_per_30_days") is not None:
        p["fit_promise_milli"] = [int(round(1000 * v)) for v in
                                  [thr["expected_false_alerts_per_30_days"], *thr["range_95_per_30_days"]]]
        p["fit_promise_upper"] = int(thr["upper_bound"])

    # checks: held-out replay with the chosen thresholds, and the set on its own training data
    held_raises, held_h = 0, 0.0
    for f, pf in fold_sets:
        pf = _with(pf, det_thr_alert_q8=alert, det_thr_alarm_q8=alarm)
        for st, wf in zip(_run(pf, feats, every), win_fold):
            held_h += float((st.pushed.astype(bool) & (wf == f)).sum()) * window_s / 3600
            held_raises += sum(1 for e in st.events if is_raise(e[1], e[2]) and wf[e[0]] == f)
    own = _run(p, feats, every)
    own_alerts = sum(1 for st in own for e in st.events if e[2] in (al.ALERT, al.ALARM))
    if own_alerts:
        warnings.append(f"the trained set raises {own_alerts} alerts on its own training data: check that the data is healthy")
    modes = np.concatenate([st.mode[u] for st, u in zip(own, use)])
    table = _mode_table(rows[-1], modes, p["det_modes"], p, scale, axis_names)
    for m in table:
        if m["windows"] < MIN_MODE_WINDOWS:
            warnings.append(f"mode {m['mode']} rests on {m['windows']} windows only (fewer than {MIN_MODE_WINDOWS})")
    thr["held_out_check"] = {"running_h": held_h, "raises": held_raises,
                             "per_30_days": held_raises * 720.0 / held_h if held_h else None,
                             "promise": promise_check(held_raises, held_h, p)}
    if thr["held_out_check"]["promise"] and thr["held_out_check"]["promise"]["verdict"] == "more than promised":
        warnings.append(f"held-out replay raised {held_raises} alerts in {held_h:.2f} h of running, more than the stated "
                        "rate allows: training data that is not all healthy, or slower variation than the data show")

    n_windows = int(len(allf))
    n_scored = int(sum(s.sum() for s in scored))
    ranges = modes_fit.mode_ranges_hz(p)
    seen = p.get("det_op_seen_q8") or []
    for m in table:
        i = m["mode"]
        m["speed_hz"] = list(ranges[i]) if ranges else None
        m["trained_hz"] = [seen[2 * i] / 256, seen[2 * i + 1] / 256] if seen else None
        m["half_aside"] = bool(ranges) and bool(modes_fit.set_aside(p, ranges[i][0]))
        m["half_orders_unjudged"] = [axis_names[f // pa] for j, f in enumerate(p["det_feat"]) if f % pa == fi.F_HALF
                                     and p["det_mode_s_q8"][i * len(p["det_feat"]) + j] >= dm.Z_LIM]
    half_judged = any(i % pa == fi.F_ORD_HALF for i in p["det_feat"])
    summary = {
        "board": p["board"], "version": p["version"], "fs_hz": p["fs_hz"], "n": p["n"], "window_s": window_s,
        "analyse_every": every,
        "streams": len(streams), "recordings": sum(len(s) for s in streams), "machines": machines,
        "span": _span([r for s in streams for r in s]),
        "windows": {"total": n_windows, "not_scored": n_windows - n_scored, "scored": n_scored,
                    "iso_zone_c_or_d": n_zone_c, "used": n_use},
        "hours": {"recorded": n_windows * window_s / 3600, "running_used": n_use * window_s / 3600},
        "idle_floor": {"q16_counts_per_s": idle, "mm_s": units.velocity_mm_s(idle, scale), "rule": idle_rule},
        "sensor": {"dc_lo_m_s2": [v / 256 * scale for v in dc_lo], "dc_hi_m_s2": [v / 256 * scale for v in dc_hi],
                   "clip_max": 0, "flat_rms_m_s2": p["det_flat_rms_q8"] / 256 * scale,
                   "stuck_max": p["det_stuck_max"], "zero_max": p["det_zero_max"], "runs": run_detail,
                   "knock_crest": [v / 4096 for v in knock], "knock_ratio": p["det_knock_ratio_q8"] / 256,
                   "rule": f"observed window means widened by their own range each side, at least +-{DC_MARGIN_G} g, within +-7/8 full scale"},
        "learned": {**learned, "speed_range_hz": [p["fc_speed_lo_q8"] / 256, p["fc_speed_hi_q8"] / 256],
                    "band_edges": _edges_text(board_bands, p),
                    "hold_off_s": p["det_hold_ms"] / 1000, "envelope_band": p["fc_env_band"],
                    "bearing_orders": [v / 4096 for v in p["fc_bear_q12"]]},
        "modes": {"k": p["det_modes"], "criterion": MODE_CRITERION, "features": len(p["det_feat"]), "table": table,
                  "follow": _named_slopes(p, p.get("det_follow_q8") or [], axis_names),
                  "mode_follow": _mode_follow(p, axis_names),
                  "half_order": half_judged,
                  "half_clear_hz": orders.HALF_CLEAR_BINS * p["fs_hz"] / p["n"] if p["fc_speed_hi_q8"] else None},
        "thresholds": {
            "alert_q8": alert, "alarm_q8": alarm, "alert": alert / 256, "alarm": alarm / 256,
            "clear": (alert * p["det_hyst_q8"] >> 8) / 256, "units": "spreads of the mode (combined score)",
            "per_feature_weight": p["det_zlam_q8"] / 256,
            "slow_weight": p["det_slam_q8"] / 256, "slow_s": p["det_slow_ms"] / 1000,
            "persistence": f"{p['det_persist_q8'] * 100 // 256} % of {p['det_persist_ms'] / 1000:g} s of running",
            "escalation_s": p["det_escalate_ms"] / 1000,
            "target_false_alerts_per_30_days": false_alerts_per_month,
            "alarm_rule": f"the raise-rate point for {ALARM_RATE_RATIO:g} times fewer false alarms than alerts, at least "
                          f"{p['det_learn_alarm_q8'] / 256:g} x the alert threshold, and only after the alert "
                          f"persisted {p['det_escalate_ms'] / 1000:g} s",
            "validation": f"{n_folds}-fold by recording (contiguous blocks in time order), held-out scores from the device detector",
            **thr},
        "warnings": warnings,
        "caution": "advisory condition monitoring, not machinery protection; an all-clear is no guarantee",
    }
    bar.update(1)
    bar.close()
    return p, summary


def _edges_text(board_bands: list[list[int]], p: dict) -> str:
    """The band edges as trained, against the board's, in Hz, in a technician's words."""
    hz = p["fs_hz"] / p["n"]
    old = [b[0] for b in board_bands] + [board_bands[-1][1]] if board_bands else []
    new = [b[0] for b in p["fc_bands"]] + [p["fc_bands"][-1][1]] if p["fc_bands"] else []
    moves = [f"{a * hz:g} -> {b * hz:g} Hz" for a, b in zip(old, new) if a != b]
    if not moves:
        return "the board's, no shaft line of a mode on an edge"
    return ("moved off the shaft lines of the modes (" + ", ".join(moves) + "): a line on an edge would move in "
            "and out of a band with the speed, and the band would follow the speed, not the health")


def _named_slopes(p: dict, slopes: Sequence[int], axis_names: Sequence[str]) -> list[dict]:
    """The slopes (Q8, one per scored feature) that are not 0, named, for the report: octaves of
    level per octave of speed."""
    return [{"feature": units.feature_name(i, p, axis_names), "octaves_per_octave": v / 256}
            for i, v in zip(p["det_feat"], slopes) if v]


def _mode_follow(p: dict, axis_names: Sequence[str]) -> list[dict]:
    """Each mode's own slopes (det_mfollow_q8) that are not 0, per mode, for the report."""
    v, d = p.get("det_mfollow_q8") or [], len(p["det_feat"])
    rows = [{"mode": m, "follow": _named_slopes(p, v[m * d:(m + 1) * d], axis_names)} for m in range(len(v) // d)]
    return [r for r in rows if r["follow"]]


def _span(recs: Sequence[Any]) -> dict | None:
    """When the training data was recorded: the first recording's start and the last one's end,
    dated with their file names (times.moment), and the days between; None when no sidecar
    gives a start time."""
    timed = [r for r in recs if r.t0_s is not None]
    if not timed:
        return None
    first = min(timed, key=lambda r: r.t0_s)
    last = max(timed, key=lambda r: r.t0_s + r.duration_s)
    end = last.t0_s + last.duration_s
    return {"first": moment(first.t0_s, first.path), "last": moment(end, last.path, last.duration_s),
            "days": (end - first.t0_s) / 86400.0}


def report_text(summary: dict) -> str:
    """The training report as plain text (what `edgevib train` prints and writes beside the set):
    what was learned and why, in a technician's words."""
    s, t, lr = summary, summary["thresholds"], summary["learned"]
    w, h = s["windows"], s["hours"]
    lines = [
        f"edgevib training report: board {s['board']}, parameter set version {s['version']}",
        f"data: {s['recordings']} recordings in {s['streams']} stream(s), {w['total']} analysed windows of "
        f"{s['window_s']:g} s ({h['recorded']:.2f} h); {w['used']} steady running healthy windows used ({h['running_used']:.2f} h)",
        *([f"  recorded from {s['span']['first']} to {s['span']['last']}: {s['span']['days']:.1f} days"]
          if s.get("span") else []),
        "what the gateway learned, and why:",
        f"  speed: searched {lr['speed_range_hz'][0]:.1f}-{lr['speed_range_hz'][1]:.1f} Hz ({lr['speed']})",
        f"  vane pass: {lr['vane']}; bearing lines: {lr['envelope']}",
        f"  band edges: {lr['band_edges']}",
        f"  steady running: {lr.get('steadiness', 'defaults')}",
        f"  after a start or a speed change: no judgement for {lr['hold_off_s']:g} s ({lr['hold_off']})",
        f"  stopped below {s['idle_floor']['mm_s']:.3f} mm/s velocity r.m.s. on the largest axis ({s['idle_floor']['rule']})",
        f"  operating modes: {s['modes']['k']} ({s['modes']['criterion']}), {s['modes']['features']} features judged in each",
    ]
    for m in s["modes"]["table"]:
        med = m["median"]
        sp = m.get("speed_hz")
        tr = m.get("trained_hz")
        where = (f"shaft {sp[0]:.1f}-{sp[1]:.1f} Hz" + (f" (trained at {tr[0]:.1f}-{tr[1]:.1f} Hz)" if tr else "")
                 + ", ") if sp else ""
        aside = "; the 0.5x line is not judged here" if m.get("half_aside") else ""
        if m.get("half_orders_unjudged"):
            aside += (f"; the half orders over many windows are not judged on axis {', '.join(m['half_orders_unjudged'])}: "
                      "training held too few of their averages here (fewer than 2 independent ones)")
        lines.append(f"    mode {m['mode']}: {where}{m['windows']} windows ({100 * m['share']:.0f} %), median accel "
                     f"{med['accel_rms_m_s2']} m/s^2 r.m.s., velocity {med['velocity_rms_mm_s']} mm/s r.m.s.{aside}")
    fo = s["modes"].get("follow") or []
    if fo:
        lines.append("    levels judged at each mode's own speed (they follow the shaft speed within a mode; octaves of "
                     "level per octave of speed, 2 where the pump's forces grow as speed squared): "
                     + ", ".join(f"{f['feature']} {f['octaves_per_octave']:.1f}" for f in fo))
    elif s["modes"]["k"]:
        lines.append("    no level follows the speed within a mode clearly enough in this data: fixed centres")
    for mf in s["modes"].get("mode_follow") or []:
        lines.append(f"    mode {mf['mode']}: bands judged at the mode's own speed, within the speeds it was trained at "
                     "(a shaft line moves across their edges as the speed moves): "
                     + ", ".join(f"{f['feature']} {f['octaves_per_octave']:+.1f}" for f in mf["follow"]))
    if s["modes"].get("half_clear_hz"):
        lines.append(f"    0.5x line (looseness): judged only where the shaft turns at {s['modes']['half_clear_hz']:.1f} Hz "
                     f"or faster; slower, this window cannot tell it from the 1x line"
                     + ("" if s["modes"]["half_order"] else " (no mode here is that fast)"))
    lines.append(f"  thresholds (spreads of the mode): alert {t['alert']:.2f}, alarm {t['alarm']:.2f}, clear {t['clear']:.2f}; "
                 f"one feature alone counts {t['per_feature_weight']:.2f} times; raise on {t['persistence']}; "
                 f"alarm only after {t['escalation_s']:g} s in alert")
    at = " at the speeds each mode was trained at" if any(m.get("trained_hz") for m in s["modes"]["table"]) else ""
    span = (f"over {t['slow_s']:g} s of judged running after time unwatched, or about {lr['slow_run_min']:.0f} min "
            "of unbroken running" if lr.get("slow_run_min") else f"over the last {t['slow_s']:g} s of judged running")
    lines.append(f"  a small lasting rise of one feature, averaged {span}{at}, "
                 f"counts {t['slow_weight']:.2f} times ({lr['slow_channel']}); "
                 + (f"{lr['slow_wander']}; " if lr.get("slow_wander") else "") + lr["slow_gains"]
                 + (f"; {lr['slow_by_mode']}" if lr.get("slow_by_mode") else ""))
    lines.append(f"    method: {t['method']}; {t['validation']}")
    lines.append(f"    alarm: {t['alarm_rule']}")
    if t.get("expected_false_alerts_per_30_days") is not None:
        rf, rc = t.get("raise_fit", {}), t.get("raise_count")
        stated = promise_text(t["expected_false_alerts_per_30_days"], t["range_95_per_30_days"], t.get("upper_bound", False),
                              "")
        why = ("" if t.get("supported", True) else
               ", not supported: the data support this bound" if t.get("upper_bound") else ", NOT supported by this much data")
        lines.append(f"expected false alerts per 30 days of running: {stated}; target "
                     f"{t['target_false_alerts_per_30_days']:g}{why}")
        days = f" ({s['span']['days']:.1f} days)" if s.get("span") else ""
        lines.append(f"  for running like the training days{days}: a drift of the duty slower than they span (suction "
                     "level over a week, a season, a duty moved for good) is new to the set and can raise an alert; "
                     "train on the longest stretch of normal duty at hand")
        if rf:
            theta = rf.get("extremal_index")
            lines.append(f"  from {rf['clusters']} independent stretches of high scores in {rf['hours']:.2f} h of held-out "
                         f"running" + (f" (extremal index {theta:.2f}: high windows come in clusters)" if theta is not None else ""))
            if t.get("upper_bound"):
                lines.append("  the thresholds stay at the device's conservative rule, above the supported point: "
                             "they raise no more often, so that rate is an upper bound")
        if rc:
            lines.append(f"  too few for a fit: {rc['clusters']} stretches at or over the alert threshold counted in "
                         f"{rc['hours']:.2f} h of held-out running; the stated rate is their exact Poisson 95 % upper limit")
    else:
        lines.append("expected false alerts per 30 days of running: not stated: no held-out running to count raises on "
                     "(record more of the pump in normal duty); the conservative chi-square thresholds apply")
    hc = t["held_out_check"]
    if hc["running_h"]:
        v = hc["promise"]["verdict"] if hc.get("promise") else "no stated rate to compare"
        lines.append(f"held-out replay: {hc['raises']} alert(s) in {hc['running_h']:.2f} h of running ({v})")
    sen = s["sensor"]
    dc = ", ".join(f"{lo:.2f}..{hi:.2f}" for lo, hi in zip(sen["dc_lo_m_s2"], sen["dc_hi_m_s2"]))
    lines.append(f"sensor health: DC range per axis {dc} m/s^2; no sample at full scale; flatline under "
                 f"{sen['flat_rms_m_s2']:.4f} m/s^2 r.m.s.; a dropout is a run of more than {sen['stuck_max']} identical "
                 f"or {sen['zero_max']} zero samples per axis (from the sensor's own noise: once in 1000 months by chance)")
    if len(sen["knock_crest"]) > 1:
        lines.append(f"sensor coupling: a knock is a crest factor over {', '.join(f'{c:.1f}' for c in sen['knock_crest'])} "
                     f"per axis with a peak {sen['knock_ratio']:g} times every other axis's: an impulse the housing did not "
                     "carry to the other axes (a loose or struck sensor, a glitching connection), once in 1000 months by chance")
    for warn in s["warnings"]:
        lines.append(f"warning: {warn}")
    lines.append(f"caution: {s['caution']}")
    return "\n".join(lines) + "\n"
