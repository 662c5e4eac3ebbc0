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
   standardisation, k-means with k-means++ seeding, k by the average silhouette).
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
from dataclasses import dataclass
from concurrent.futures import ProcessPoolExecutor
from typing import Any, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from firmware_py.detect.detector import Detector
from firmware_py.detect.iso_zones import ZONE_C
from host_tools.fit import modes_fit, tail_fit
from host_tools.data import units
from host_tools.data.units import m_s2_per_count
from host_tools.errors import EdgevibError
from host_tools.progress import start
from host_tools.data.recording import Recording, RecordingFile
from host_tools.twin.replay import (
    StreamFeatures, check_recordings, physical_columns, step_detector, stream_features,
    twin_for)

FOLDS = 3                 # held-out blocks of recordings (each model is fitted on the others)
ALARM_RATE_RATIO = 10.0   # false alarms aimed 10 times rarer than false alerts
DC_MARGIN_G = 0.25        # least half-width of the healthy DC range (g): tilt or a loose mount, not drift
MIN_MODE_WINDOWS = 30     # a mode with fewer training windows is thinly supported
MIN_WINDOWS = 50          # fewer running healthy windows cannot support a baseline and modes
MIN_HOURS = 1.0           # less scored running time than this is thin training data
_THR_MAX = 1 << 16        # the detector's limit on thresholds (Q8 spreads)
_DAYS_30_S = 30 * 86400.0
MODE_CRITERION = ("k-means (k-means++ seeding, 10 starts) in the detector's standardised features; "
                  "k from 1 to 8 with the largest average silhouette (Rousseeuw 1987), k = 1 when no k "
                  "exceeds 0.25 (Kaufman and Rousseeuw: no substantial structure)")


def _streams(recordings: Sequence[Any]) -> list[list[Recording]]:
    """A flat list of Recording (or RecordingFile) is one stream; a list of lists is several."""
    if recordings and all(isinstance(r, (Recording, RecordingFile)) for r in recordings):
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
    """A one-mode stand-in model: only so that scored windows show a mode (which windows the
    device scores does not depend on the model)."""
    d = len(params["det_feat"])
    return _mute(_with(params, det_modes=1, det_mode_c_q8=[0] * d, det_mode_s_q8=[256] * d))


def _run(params: dict, feats: list[StreamFeatures]):
    """Step a fresh device Detector over each stream; the list of Steps."""
    return [step_detector(Detector(params), sf.feats) for sf in feats]


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


def _model(rows: np.ndarray, params: dict, seed: int) -> dict:
    """modes_fit.fit's baseline, modes and thresholds; the idle floor stays the one set here."""
    keys = modes_fit.fit(rows, params, seed=seed)
    keys.pop("det_idle_vel_q16")
    return keys


def _fit_all(rows: list[np.ndarray], params: dict, seed: int, jobs: int) -> list[dict]:
    """_model over each row set, in up to `jobs` processes (the same result for any jobs)."""
    if jobs <= 1 or len(rows) == 1:
        return [_model(r, params, seed) for r in rows]
    with ProcessPoolExecutor(max_workers=min(jobs, len(rows))) as pool:
        return list(pool.map(_model, rows, [params] * len(rows), [seed] * len(rows)))


def score_threshold(scores: np.ndarray, windows_30: float, k: int, n: int, target: float) -> tuple[int, Any]:
    """(threshold Q8, ThresholdChoice): the least integer score T with S >= T exactly when S > x."""
    ch = tail_fit.choose_threshold(scores, windows_30, k, n, target)
    return min(int(math.floor(ch.threshold)) + 1, _THR_MAX), ch


def train(recordings: Sequence[Any], profile: dict, false_alerts_per_month: float = 1.0, seed: int = 0,
          version: int = 1, folds: int = FOLDS, jobs: int = 1, progress: bool = False) -> tuple[dict, dict]:
    """A parameter set trained on healthy recordings of one gateway, and a JSON-able summary.

    recordings: Recording objects (one stream) or lists of them (one per stream), read at the
    board's counts scale (m/s^2 per count = g / counts_per_g). profile: board profile dict.
    false_alerts_per_month: target expected false alerts per 30 days of running. seed: k-means.
    version: the set's version. folds: held-out blocks. jobs: processes for the k-means fits.
    progress: show the steps done (host_tools.progress).
    The steps are the module docstring's; each warning found on the way goes into the summary.
    """
    if not false_alerts_per_month > 0:
        raise EdgevibError("the false-alert target must be a positive number per 30 days")
    streams = _streams(recordings)
    base = pm.factory(profile)
    base["version"] = int(version)
    for s in streams:
        check_recordings(s, base)
    warnings: list[str] = []
    bar = start(6, "steps", "train", enabled=progress)
    data = _features(streams, base, profile, warnings)
    bar.update(1)
    p, health = _sensor_health(data, base, profile, warnings)
    bar.update(1)
    use = _usable_windows(data, p, warnings)
    bar.update(1)
    p, held = _held_out_scores(data, use, p, folds, seed, jobs, warnings)
    bar.update(1)
    p, thr = _thresholds(held.scores, p, data.windows_30, false_alerts_per_month, warnings)
    bar.update(1)
    table = _held_out_check(data, use, held, p, thr, false_alerts_per_month, warnings)
    bar.update(1)
    bar.close()
    return p, _summary(data, p, health, use, held, thr, table, false_alerts_per_month, warnings)


@dataclass
class _Data:
    """The training streams, their feature windows and the set's window geometry."""
    streams: list[list[Recording]]
    feats: list[StreamFeatures]
    allf: np.ndarray              # every window's features, the streams one after another
    pa: int                       # features per axis
    axes: int
    window_s: float               # seconds per window
    windows_30: float             # windows in 30 days
    scale: float                  # m/s^2 per count
    axis_names: Sequence[str]
    machines: list[str]


@dataclass
class _Health:
    """Sensor-health limits and the idle floor (step 2 and 3)."""
    dc_lo: list[int]              # Q8 counts, per axis
    dc_hi: list[int]              # Q8 counts, per axis
    idle: int                     # det_idle_vel_q16: counts/s Q16
    idle_rule: str


@dataclass
class _Use:
    """Which windows the device scores, and which of those train (step 4)."""
    scored: list[np.ndarray]      # per stream, bool per window
    use: list[np.ndarray]         # per stream: scored and in ISO zone A or B
    n_zone_c: int
    n_use: int


@dataclass
class _Held:
    """Held-out scores and the fold models that made them (step 6)."""
    scores: np.ndarray            # Q8 spreads
    fold_sets: list[tuple[int, dict]]
    win_fold: list[np.ndarray]    # per stream, the fold of each window
    n_folds: int
    rows: np.ndarray              # every usable window's features


def _features(streams: list[list[Recording]], base: dict, profile: dict, warnings: list[str]) -> _Data:
    """Step 1: every stream's feature windows through the numpy twin of the device feature core."""
    twin = twin_for(base, profile)
    feats = [stream_features(s, twin) for s in streams]
    window_s = base["n"] / base["fs_hz"]
    machines = sorted({r.machine for s in streams for r in s if r.machine})
    if len(machines) > 1:
        warnings.append(f"training recordings name several machines ({', '.join(machines)}); a parameter set is for one gateway")
    return _Data(streams, feats, np.concatenate([sf.feats for sf in feats]), fi.per_axis(len(base["fc_bands"])),
                 base["axes"], window_s, _DAYS_30_S / window_s, m_s2_per_count(base), streams[0][0].axes, machines)


def _sensor_health(data: _Data, base: dict, profile: dict, warnings: list[str]) -> tuple[dict, _Health]:
    """Steps 2 and 3: the healthy DC range, clipping and flatline warnings, and the idle floor."""
    allf, pa, axes = data.allf, data.pa, data.axes
    dc_lo, dc_hi = _dc_range(allf, base, profile)
    clipped = int((allf[:, fi.F_CLIP::pa][:, :axes] > 0).any(1).sum())
    if clipped:
        warnings.append(f"{clipped} training windows hold samples at full scale: the sensor range may be too small, or the data is not healthy")
    flat = int((allf[:, fi.F_RMS::pa][:, :axes] < base["det_flat_rms_q8"]).any(1).sum())
    if flat:
        warnings.append(f"{flat} training windows look like a stuck sensor (r.m.s. under the flatline floor)")
    bb = allf[:, fi.F_VEL::pa][:, :axes].max(1).astype(np.float64)
    rpm = np.concatenate([np.array([np.nan if r.rpm is None else r.rpm for r in s])[sf.rec]
                          for s, sf in zip(data.streams, data.feats)])
    idle, idle_rule, w = _idle_floor(bb, rpm, data.scale)
    warnings += w
    p = _with(base, det_dc_lo_q8=dc_lo, det_dc_hi_q8=dc_hi, det_clip_max=0, det_idle_vel_q16=idle)
    return p, _Health(dc_lo, dc_hi, idle, idle_rule)


def _usable_windows(data: _Data, p: dict, warnings: list[str]) -> _Use:
    """Step 4: the windows the device scores, and of those the ones in ISO zone A or B."""
    probe = _run(_probe_model(p), data.feats)
    scored = [st.mode >= 0 for st in probe]
    vel = [sf.feats[:, fi.F_VEL::data.pa][:, :data.axes].max(1) for sf in data.feats]
    zone_c = [v >= p["det_iso_bounds"][ZONE_C - 1] for v in vel]
    use = [s & ~z for s, z in zip(scored, zone_c)]
    n_zone_c = int(sum((s & z).sum() for s, z in zip(scored, zone_c)))
    if n_zone_c:
        warnings.append(f"{n_zone_c} running training windows are in ISO zone C or D and were left out: the training data does not look healthy")
    n_use = int(sum(u.sum() for u in use))
    if n_use < MIN_WINDOWS:
        raise EdgevibError(f"only {n_use} running, healthy training windows; record more of the pump in normal duty (at least {MIN_WINDOWS})")
    if n_use * data.window_s < MIN_HOURS * 3600:
        warnings.append(f"only {n_use * data.window_s / 3600:.2f} h of running windows: thresholds and modes rest on little data")
    return _Use(scored, use, n_zone_c, n_use)


def _held_out_scores(data: _Data, use: _Use, p: dict, folds: int, seed: int, jobs: int,
                     warnings: list[str]) -> tuple[dict, _Held]:
    """Steps 5 and 6: the model from every usable window, and healthy scores held out by block."""
    feats = data.feats
    rec_fold = _blocks(data.streams, folds)
    win_fold = [rf[sf.rec] for rf, sf in zip(rec_fold, feats)]
    n_folds = len(np.unique(np.concatenate(rec_fold)))
    fold_rows = [(f, np.concatenate([sf.feats[u & (wf != f)] for sf, u, wf in zip(feats, use.use, win_fold)]))
                 for f in range(n_folds if n_folds > 1 else 0)]
    fold_rows = [(f, r) for f, r in fold_rows if len(r) >= MIN_WINDOWS]
    rows = np.concatenate([sf.feats[u] for sf, u in zip(feats, use.use)])
    # the fold models and the model from every usable window are independent fits
    fits = _fit_all([r for _, r in fold_rows] + [rows], p, seed, jobs)
    held: list[np.ndarray] = []
    fold_sets = []
    for (f, _), keys in zip(fold_rows, fits):
        pf = _with(p, **keys)
        fold_sets.append((f, pf))
        for st, u, wf in zip(_run(_mute(pf), feats), use.use, win_fold):
            held.append(st.score_q8[u & (wf == f)])
    held_scores = np.concatenate(held) if held else np.zeros(0)
    if n_folds < 2:
        warnings.append("a single recording: thresholds come from the model's own training windows (optimistic)")
    p = _with(p, **fits[-1])
    if n_folds < 2:
        held_scores = np.concatenate([st.score_q8[u] for st, u in zip(_run(_mute(p), feats), use.use)])
    return p, _Held(held_scores, fold_sets, win_fold, n_folds, rows)


def _thresholds(held_scores: np.ndarray, p: dict, windows_30: float, target: float,
                warnings: list[str]) -> tuple[dict, dict[str, Any]]:
    """Step 6: alert and alarm thresholds from the tail of the held-out scores, or the chi-square rule."""
    k_of, n_of = p["det_k"], p["det_n"]
    thr: dict[str, Any]
    try:
        alert, ch = score_threshold(held_scores, windows_30, k_of, n_of, target)
        alarm_t, ch2 = score_threshold(held_scores, windows_30, k_of, n_of, target / ALARM_RATE_RATIO)
        alarm = min(max(alarm_t, -(-alert * p["det_learn_alarm_q8"] // 256)), _THR_MAX)
        thr = {"method": "generalised Pareto tail of held-out healthy scores (peaks over threshold)",
               "expected_false_alerts_per_30_days": ch.false_alerts_per_30_days,
               "range_95_per_30_days": list(ch.false_alerts_range_95),
               "p_window": ch.p_window, "beyond_training_max": bool(ch.beyond_training_max),
               "tail": {"u": ch.fit.u / 256, "shape": ch.fit.shape, "scale": ch.fit.scale / 256,
                        "zeta": ch.fit.tail_fraction, "scores": ch.fit.n_scores, "exceedances": ch.fit.n_exceed},
               "expected_false_alarms_per_30_days": windows_30 * tail_fit.onset_prob(ch2.fit.exceedance_prob(alarm - 0.5), k_of, n_of)}
        if ch.fit.shape > 0.5:
            warnings.append(f"the healthy score tail is heavy (shape {ch.fit.shape:.2f}): some training windows may not be healthy")
        if ch.beyond_training_max:
            warnings.append("the alert threshold lies beyond every held-out training score: the rate rests on the tail fit alone")
    except EdgevibError as e:
        alert, alarm = p["det_thr_alert_q8"], p["det_thr_alarm_q8"]
        thr = {"method": "the device's chi-square rule (too few scores for a tail fit)",
               "expected_false_alerts_per_30_days": None, "range_95_per_30_days": None}
        warnings.append(f"{e}: alert threshold from the device's conservative chi-square rule")
    return _with(p, det_thr_alert_q8=alert, det_thr_alarm_q8=alarm), thr


def _held_out_check(data: _Data, use: _Use, held: _Held, p: dict, thr: dict[str, Any], target: float,
                    warnings: list[str]) -> list[dict[str, Any]]:
    """Step 7: fold models replay their blocks with the chosen thresholds (into thr), and the
    set replays its own training data; returns the mode table."""
    feats, windows_30 = data.feats, data.windows_30
    alert, alarm = p["det_thr_alert_q8"], p["det_thr_alarm_q8"]
    held_alerts, held_windows = 0, 0
    for f, pf in held.fold_sets:
        pf = _with(pf, det_thr_alert_q8=alert, det_thr_alarm_q8=alarm)
        for st, sf, u, wf in zip(_run(pf, feats), feats, use.use, held.win_fold):
            held_windows += int((u & (wf == f)).sum())
            held_alerts += sum(1 for e in st.events if e[2] in (al.ALERT, al.ALARM) and wf[e[0]] == f)
    own = _run(p, feats)
    own_alerts = sum(1 for st in own for e in st.events if e[2] in (al.ALERT, al.ALARM))
    if own_alerts:
        warnings.append(f"the trained set raises {own_alerts} alerts on its own training data: check that the data is healthy")
    modes = np.concatenate([st.mode[u] for st, u in zip(own, use.use)])
    table = _mode_table(held.rows, modes, p["det_modes"], p, data.scale, data.axis_names)
    for m in table:
        if m["windows"] < MIN_MODE_WINDOWS:
            warnings.append(f"mode {m['mode']} rests on {m['windows']} windows only (fewer than {MIN_MODE_WINDOWS})")
    thr["held_out_check"] = {
        "windows": held_windows, "alerts": held_alerts,
        "per_30_days": held_alerts * windows_30 / held_windows if held_windows else None}
    if held_windows and held_alerts and thr.get("expected_false_alerts_per_30_days") is not None and \
            held_alerts * windows_30 / held_windows > 3 * max(target, thr["expected_false_alerts_per_30_days"]):
        warnings.append(f"held-out replay raised {held_alerts} alerts in {held_windows} windows, more than the tail fit expects "
                        "(correlated windows, or training data that is not all healthy)")
    return table


def _summary(data: _Data, p: dict, health: _Health, use: _Use, held: _Held, thr: dict[str, Any],
             table: list[dict[str, Any]], target: float, warnings: list[str]) -> dict[str, Any]:
    """The JSON-able training summary (what report_text prints)."""
    window_s, scale = data.window_s, data.scale
    alert, alarm = p["det_thr_alert_q8"], p["det_thr_alarm_q8"]
    n_windows = int(len(data.allf))
    n_scored = int(sum(s.sum() for s in use.scored))
    return {
        "board": p["board"], "version": p["version"], "fs_hz": p["fs_hz"], "n": p["n"], "window_s": window_s,
        "streams": len(data.streams), "recordings": sum(len(s) for s in data.streams), "machines": data.machines,
        "windows": {"total": n_windows, "not_scored": n_windows - n_scored, "scored": n_scored,
                    "iso_zone_c_or_d": use.n_zone_c, "used": use.n_use, "held_out_scores": int(len(held.scores))},
        "hours": {"recorded": n_windows * window_s / 3600, "running_used": use.n_use * window_s / 3600},
        "idle_floor": {"q16_counts_per_s": health.idle, "mm_s": units.velocity_mm_s(health.idle, scale),
                       "rule": health.idle_rule},
        "sensor": {"dc_lo_m_s2": [v / 256 * scale for v in health.dc_lo], "dc_hi_m_s2": [v / 256 * scale for v in health.dc_hi],
                   "clip_max": 0, "flat_rms_m_s2": p["det_flat_rms_q8"] / 256 * scale,
                   "rule": f"observed window means widened by their own range each side, at least +-{DC_MARGIN_G} g, within +-7/8 full scale"},
        "modes": {"k": p["det_modes"], "criterion": MODE_CRITERION, "features": len(p["det_feat"]), "table": table},
        "thresholds": {
            "alert_q8": alert, "alarm_q8": alarm, "alert": alert / 256, "alarm": alarm / 256,
            "clear": (alert * p["det_hyst_q8"] >> 8) / 256, "units": "spreads of the nearest mode",
            "persistence": f"{p['det_k']} of {p['det_n']} windows", "target_false_alerts_per_30_days": target,
            "alarm_rule": f"the tail point for {ALARM_RATE_RATIO:g} times fewer false alarms than alerts, at least "
                          f"{p['det_learn_alarm_q8'] / 256:g} x the alert threshold",
            "validation": f"{held.n_folds}-fold by recording (contiguous blocks in time order), held-out scores from the device detector",
            "windows_per_30_days": data.windows_30, **thr},
        "warnings": warnings,
        "caution": "advisory condition monitoring, not machinery protection; an all-clear is no guarantee",
    }


def report_text(summary: dict) -> str:
    """The training report as plain text (what `edgevib train` prints and writes beside the set)."""
    s, t = summary, summary["thresholds"]
    w, h = s["windows"], s["hours"]
    lines = [
        f"edgevib training report: board {s['board']}, parameter set version {s['version']}",
        f"data: {s['recordings']} recordings in {s['streams']} stream(s), {w['total']} windows of {s['window_s']:g} s "
        f"({h['recorded']:.2f} h); {w['used']} running healthy windows used ({h['running_used']:.2f} h)",
        f"idle floor: {s['idle_floor']['mm_s']:.3f} mm/s velocity r.m.s. on the largest axis ({s['idle_floor']['rule']})",
        f"operating modes: {s['modes']['k']} over {s['modes']['features']} features; {s['modes']['criterion']}",
    ]
    for m in s["modes"]["table"]:
        med = m["median"]
        lines.append(f"  mode {m['mode']}: {m['windows']} windows ({100 * m['share']:.0f} %), median accel "
                     f"{med['accel_rms_m_s2']} m/s^2 r.m.s., velocity {med['velocity_rms_mm_s']} mm/s r.m.s.")
    lines.append(f"thresholds (spreads of the nearest mode): alert {t['alert']:.2f}, alarm {t['alarm']:.2f}, "
                 f"clear {t['clear']:.2f}; raise on {t['persistence']}")
    lines.append(f"  method: {t['method']}; {t['validation']}")
    lines.append(f"  alarm: {t['alarm_rule']}")
    if t.get("expected_false_alerts_per_30_days") is not None:
        lo, hi = t["range_95_per_30_days"]
        lines.append(f"expected false alerts per 30 days of running: {t['expected_false_alerts_per_30_days']:.2g} "
                     f"(95 % range {lo:.2g} to {hi:.2g}; target {t['target_false_alerts_per_30_days']:g})")
    hc = t["held_out_check"]
    if hc["windows"]:
        lines.append(f"held-out replay: {hc['alerts']} alerts in {hc['windows']} windows "
                     f"({hc['windows'] * s['window_s'] / 3600:.2f} h of running)")
    sen = s["sensor"]
    dc = ", ".join(f"{lo:.2f}..{hi:.2f}" for lo, hi in zip(sen["dc_lo_m_s2"], sen["dc_hi_m_s2"]))
    lines.append(f"sensor health: DC range per axis {dc} m/s^2; no sample at full scale; flatline under "
                 f"{sen['flat_rms_m_s2']:.4f} m/s^2 r.m.s.")
    for warn in s["warnings"]:
        lines.append(f"warning: {warn}")
    lines.append(f"caution: {s['caution']}")
    return "\n".join(lines) + "\n"
