"""Detector behaviour under CPython: score statistics, persistence in running time, escalation,
idle and steadiness, operating points, sensor health, events."""
from array import array

import numpy as np
import pytest
from scipy import integrate, stats

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al, event_ring
from firmware_py.dsp import feature_index as fi
from firmware_py.detect import detector as dt
from firmware_py.detect.detector import Detector, default_params
from firmware_py.detect.modes import FOLLOW_MAX
from host_tools.fit import modes_fit as mf

PA = fi.per_axis(1)
VEL_PER_MM_S = 6680          # F_VEL units per mm/s (a 1 mg/count sensor: 65536 / 9.81)
IDLE = VEL_PER_MM_S // 4     # idle floor of these tests: 0.25 mm/s
W_MS = 160                   # one window: 512 samples at 3200 Hz
N, NO, AL, ID, SF, LE, US = (al.NORMAL, al.ALERT, al.ALARM, al.IDLE, al.SENSOR_FAULT, al.LEARNING,
                             al.UNSCORED)


def params(**kw):
    """One axis, one band; the model: one mode, one feature (the band power, log2 Q8), baseline
    1000 +- 100, so a band value of 1000 + 100 s scores s spreads exactly. Idle under 0.25 mm/s.
    Persistence: 3 of the last 5 windows (800 ms, 0.6); escalation after 4 windows in alert;
    dwell 4 windows; hold-off 1 window; steadiness over 1 window (so any window is steady)."""
    p = default_params(1, 1, VEL_PER_MM_S)
    p.update(det_feat=[fi.F_BAND0], det_base_mean_q4=[1000 * 16], det_base_sd_q4=[100 * 16],
             det_modes=1, det_mode_c_q8=[0], det_mode_s_q8=[256], det_thr_alert_q8=3 * 256,
             det_thr_alarm_q8=6 * 256, det_hyst_q8=205, det_persist_ms=5 * W_MS,
             det_persist_q8=154, det_escalate_ms=4 * W_MS, det_dwell_ms=4 * W_MS,
             det_hold_ms=0, det_steady_ms=0, det_idle_vel_q16=IDLE, det_fault_k=2,
             det_fault_clear_ms=2 * W_MS)
    p.update(kw)
    return p


def win(score=0.0, rms=4000, vel=1.0, mean=0, clip=0, band=None, speed=0, conf=0, stuck=1,
        zero=0):
    """A feature vector scoring `score` spreads, velocity vel mm/s, r.m.s. rms (Q8 counts)."""
    f = array("i", bytes(4 * PA))
    f[fi.F_MEAN] = mean
    f[fi.F_RMS] = rms
    f[fi.F_PEAK] = 4 * rms
    f[fi.F_CREST] = 4 << 12
    f[fi.F_KURT] = 3 << 12
    f[fi.F_CLIP] = clip
    f[fi.F_VEL] = int(vel * VEL_PER_MM_S)
    f[fi.F_STUCK] = stuck
    f[fi.F_ZERO] = zero
    f[fi.F_SPEED] = int(speed * 256)
    f[fi.F_SPEED_CONF] = conf
    f[fi.F_ORD_VANE] = fi.LOG2_ZERO_Q8
    f[fi.F_BAND0] = 1000 + round(score * 100) if band is None else band
    return f


def run(det, scores, t0=0, **kw):
    """Step once per score; returns the states."""
    return [det.step(win(s, **kw), t0 + i, 0) for i, s in enumerate(scores)]


def events(det):
    e = det.events
    out = []
    while True:
        i = e.pop()
        if i < 0:
            return out
        out.append((e.t[i], e.old[i], e.new[i], e.reason[i], e.mode[i], e.feat[i], e.score_q8[i]))


def running(det, **kw):
    """Step quiet running windows until the detector is out of its start-up hold-off and its
    evidence span is full (clearing is judged on a full span only)."""
    score = kw.pop("score", 0)
    for _ in range(200):
        det.step(win(score, **kw), 0, 0)
        if det.state != ID and det.alarm.ev.filled == det.alarm.ev.span:
            break
    assert det.state in (N, US)
    events(det)
    return det


# -- the score ------------------------------------------------------------------------------

def test_gaussian_tail_three_spreads():
    # Standard normal table ('three sigma' rule, common practice): P(|Z| >= 3) = 0.27 %.
    # Single mode, single feature; per-window exceedance of 3 spreads on a long stream must be
    # within binomial error (3 standard deviations) of it. The band value is rounded to whole
    # units of 1/100 spread, so the exact point is |Z| >= 2.995 (value 299.5 of 100).
    n = 120_000
    det = running(Detector(params(det_thr_alert_q8=1 << 16, det_thr_alarm_q8=1 << 16)))
    x = np.rint(1000 + 100 * np.random.default_rng(5).standard_normal(n)).astype(int)
    f = win(0)
    over = 0
    for i, v in enumerate(x.tolist()):
        f[fi.F_BAND0] = v
        det.step(f, i, 0)
        over += det.score_q8 >= 3 * 256
    p = 2 * stats.norm.sf(2.995)
    assert abs(over - n * p) <= 3 * np.sqrt(n * p * (1 - p))
    assert 2 * stats.norm.sf(3) == pytest.approx(0.0027, abs=5e-5)   # the table value itself
    # and the same count as the float reference on the same stream
    assert over == int((np.abs(x - 1000) >= 300).sum())


def _gauss_params(d, zlam_q8):
    p = default_params(1, d, VEL_PER_MM_S)
    p.update(det_feat=[fi.F_BAND0 + j for j in range(d)], det_base_mean_q4=[0] * d,
             det_base_sd_q4=[200 * 16] * d, det_modes=1, det_mode_c_q8=[0] * d,
             det_mode_s_q8=[256] * d, det_hold_ms=0, det_steady_ms=0, det_zlam_q8=zlam_q8,
             det_idle_vel_q16=IDLE, det_thr_alert_q8=1 << 16, det_thr_alarm_q8=1 << 16)
    return p


def _gauss_scores(d, n, zlam_q8, seed):
    det = Detector(_gauss_params(d, zlam_q8))
    x = np.rint(200 * np.random.default_rng(seed).standard_normal((n, d))).astype(int)
    f = array("i", bytes(4 * fi.per_axis(d)))
    f[fi.F_RMS] = 4000
    f[fi.F_VEL] = VEL_PER_MM_S        # running: 1 mm/s
    f[fi.F_STUCK] = 1
    det.step(f, 0, 0)                 # the start: out of the hold-off at once
    assert det.state == N
    out = np.empty(n, np.int64)
    for i, row in enumerate(x.tolist()):
        f[fi.F_BAND0:fi.F_BAND0 + d] = array("i", row)
        det.step(f, i, 0)
        out[i] = det.score_q8
    return out


def _one_sided_sum_sf(d, x2):
    """P(sum of d independent terms >= x2), each term max(z, -3)**2 for standard normal z: the
    distance's square on ideal data with the detector's one-sided terms. A term is chi-square
    with 1 degree of freedom below 9 (scipy.stats.chi2), a point mass of P(z <= -3) at 9, and
    above 9 only the upper tail, density phi(sqrt y) / (2 sqrt y) (scipy.stats.norm); the sum's
    law is the d-fold convolution on a grid of 1e-3 (scipy.signal.fftconvolve)."""
    from scipy import signal
    dy = 1e-3
    y = np.arange(0, 80, dy)
    c = np.where(y < 9, stats.chi2.cdf(y, 1), stats.norm.cdf(np.sqrt(y)))
    pmf = np.diff(np.concatenate([[0.0], c]))
    total = pmf
    for _ in range(d - 1):
        total = signal.fftconvolve(total, pmf)[:len(y)]
    return float(1.0 - total[: int(round(x2 / dy))].sum())


def test_mahalanobis_tail_matches_its_one_sided_law():
    # d independent standard normal features; each term of the distance counts at most 3 spreads
    # below the mode (the one-sided distance, firmware_py/detect/modes.py), so score**2 follows
    # the convolution above instead of chi-square; at its 1 % point the exceedance must be 1 %
    # within binomial error (3 standard deviations), plus the grid's own error.
    d, n = 4, 40_000
    from scipy.optimize import brentq
    thr2 = brentq(lambda x2: _one_sided_sum_sf(d, x2) - 0.01, 5.0, 40.0, xtol=1e-4)
    assert thr2 < stats.chi2.isf(0.01, d)          # one-sided terms: a lighter tail than chi-square
    over = int((_gauss_scores(d, n, 256, 9) >= round(np.sqrt(thr2) * 256)).sum())
    assert abs(over - 0.01 * n) <= 3 * np.sqrt(n * 0.01 * 0.99) + 0.002 * n


def test_combined_score_tail_against_its_analytic_value():
    # Two independent standard normal features, per-feature channel weighted lam = 1.2, T = 3:
    # the combined score max(sqrt(t1^2 + t2^2), lam * max(t1, t2, 0)), t_j = max(z_j, -3), stays
    # under T exactly when z lies in the disc of radius T (a term at -3 alone reaches T) and every
    # z_j < T / lam. Its probability is a double integral of the bivariate normal density over
    # that region (scipy.integrate.dblquad, the analytic reference); the detector's exceedance on
    # 60 000 Gaussian windows must match it within 3 binomial standard deviations plus the
    # quantisation of z (1/200 spread: a shift of 1/400 spread moves the probability by at most
    # 2 * density(T) * perimeter / 400).
    d, n, lam = 2, 60_000, 1.2
    t = 3.0
    a = t / lam
    inside, _ = integrate.dblquad(
        lambda y, x: stats.norm.pdf(x) * stats.norm.pdf(y), -t, a,
        lambda x: -np.sqrt(max(t * t - x * x, 0.0)), lambda x: min(a, np.sqrt(max(t * t - x * x, 0.0))))
    p = 1.0 - inside
    # neither channel alone: the disc alone gives chi2 (d = 2), the upper square alone max(z)
    assert p > stats.chi2.sf(t * t, 2) and p > 1 - (1 - stats.norm.sf(a)) ** 2
    over = int((_gauss_scores(d, n, round(lam * 256), 11) >= round(t * 256)).sum())
    quant = n * 2 * stats.norm.pdf(a) * 8 * a / 400
    assert abs(over - n * p) <= 3 * np.sqrt(n * p * (1 - p)) + quant


def test_nearest_mode_without_operating_points_and_driving_feature():
    p = default_params(1, 2, VEL_PER_MM_S)
    b0, b1 = fi.F_BAND0, fi.F_BAND0 + 1
    p.update(det_feat=[b0, b1], det_base_mean_q4=[0, 0], det_base_sd_q4=[1600, 1600],
             det_modes=2, det_mode_c_q8=[0, 0, 1280, 1280], det_mode_s_q8=[256, 256, 128, 512],
             det_hold_ms=0, det_steady_ms=0, det_idle_vel_q16=IDLE, det_zlam_q8=0)
    det = Detector(p)
    f = array("i", bytes(4 * fi.per_axis(2)))
    f[fi.F_RMS] = 4000
    f[fi.F_VEL] = VEL_PER_MM_S
    f[fi.F_STUCK] = 1
    f[b0], f[b1] = 520, 460           # z = (5.2, 4.6): mode 1 at (5, 5) with spreads 0.5, 2
    det.step(f, 0, 0)
    det.step(f, 0, 0)
    assert det.mode == 1
    expect = np.hypot((5.2 - 5) / 0.5, (4.6 - 5) / 2)
    assert abs(det.score_q8 / 256 - expect) < 0.02
    assert det.feat == b0            # (0.2 / 0.5) beats (0.4 / 2)
    f[b0], f[b1] = 10, 150
    det.step(f, 1, 0)
    assert (det.mode, det.feat) == (0, b1)


# -- operating points -----------------------------------------------------------------------

def op_params(**kw):
    """Two modes told apart by speed only: 24-26 Hz (centroid 0) and 14-16 Hz (centroid +5)."""
    p = params(det_modes=2, det_mode_c_q8=[0, 1280], det_mode_s_q8=[256, 256],
               det_op_speed_q8=[24 * 256, 26 * 256, 14 * 256, 16 * 256], det_op_load_q8=[],
               det_conf_min_q8=100)
    p.update(kw)
    return p


def test_the_operating_point_chooses_the_mode_not_the_health_features():
    det = running(Detector(op_params()), speed=25, conf=200)
    # a window that looks exactly like mode 1 (5 spreads) while running at mode 0's speed is
    # scored against mode 0: 5 spreads over, not 0 from the nearest mode
    run(det, [5], speed=25, conf=200)
    assert det.mode == 0 and det.score_q8 == 5 * 256
    det2 = running(Detector(op_params()), speed=15, conf=200, score=5)
    run(det2, [5], speed=15, conf=200)
    assert det2.mode == 1 and det2.score_q8 == 0


def test_off_point_is_not_scored_never_alerts_and_the_guard_still_acts():
    det = running(Detector(op_params()), speed=25, conf=200)
    # 20 Hz lies in no mode: not scored, state unscored after the hold-off, however high
    states = run(det, [9] * 8, speed=20, conf=200)
    assert set(states) == {US} and det.why == dt.W_OFF_POINT and det.score_q8 == 0
    assert det.n_why[dt.W_OFF_POINT] == 8
    assert events(det) == [(0, N, US, al.R_UNKNOWN_POINT, -1, -1, 0)]
    # the ISO guard still raises on it (zone C, 3.0 mm/s, group 2 rigid from memory)
    assert run(det, [9] * 5, speed=20, conf=200, vel=3.0)[-1] == NO
    assert events(det)[-1][3] == al.R_ISO_C
    # a weak speed estimate (confidence under det_conf_min_q8) is not scored either
    det = running(Detector(op_params()), speed=25, conf=200)
    assert run(det, [9] * 3, speed=25, conf=50) == [US] * 3 and det.why == dt.W_NO_SPEED
    assert run(det, [0], speed=25, conf=200) == [N]
    assert events(det)[-1][1:4] == (US, N, al.R_KNOWN_POINT)


def test_speed_change_and_run_down_are_not_scored():
    # steadiness over 4 windows, speed tolerance 2 % (82 in Q12), hold-off 3 windows
    p = op_params(det_steady_ms=4 * W_MS, det_hold_ms=3 * W_MS, det_speed_tol_q12=82)
    det = Detector(p)
    # start: idle through the run-up (speed rising 2 Hz per window), then steady for the hold
    up = [10, 12, 14, 16, 18, 20, 22, 24, 25, 25, 25, 25, 25, 25, 25]
    st = [det.step(win(9, speed=s, conf=200), i, 0) for i, s in enumerate(up)]
    # steady when the medians of the span's halves agree: [24, 25 | 25, 25] at the 11th window
    # (the upper median of two is the larger); 3 steady windows later, scored
    assert st[:12] == [ID] * 12 and st[12] == N
    assert det.n_why[dt.W_UNSTEADY] > 0 and det.score_q8 == 9 * 256
    # run-down: speed falling window by window, the level too: not scored, never raises
    det2 = running(Detector(p), speed=25, conf=200)
    down = [24, 22, 20, 18, 16, 14, 12]
    st = [det2.step(win(9, speed=s, conf=200, vel=1.0 - 0.1 * i), i, 0) for i, s in enumerate(down)]
    assert NO not in st and det2.n_why[dt.W_RUNDOWN] >= 5


def test_half_order_blocks_take_running_windows_past_the_start_but_no_run_down():
    # The half orders' blocks check the speed their taps were mixed at themselves (half_lines), so
    # the detector hands them every running window once the start-up hold-off has passed, judged
    # steady or not, but none of a run-up before it, of a run-down, or of a stop: a trim of the
    # speed that trips the steadiness rule (and the hold-off after it) leaves the block running
    p = op_params(det_steady_ms=4 * W_MS, det_hold_ms=3 * W_MS, det_speed_tol_q12=82)
    det = Detector(p)
    fed = []
    push = det.half.push
    det.half.push = lambda f, steady, now: (fed.append(steady), push(f, steady, now))
    up = [10, 12, 14, 16, 18, 20, 22, 24, 25, 25, 25, 25, 25, 25, 25]
    st = [det.step(win(9, speed=s, conf=200), i, 0) for i, s in enumerate(up)]
    assert st[:12] == [ID] * 12 and st[12] == N                 # as in the run-up test above
    assert fed[:13] == [False] * 13 and fed[13:] == [True] * 2   # from the window after the start
    trim = [26] * 7                                            # 4 %: over the 2 % tolerance
    fed.clear()
    for i, s in enumerate(trim):
        det.step(win(9, speed=s, conf=200), 20 + i, 0)
    assert det.n_why[dt.W_UNSTEADY] > 0 and det.n_why[dt.W_HOLD] > 0   # not scored meanwhile
    assert fed == [True] * len(trim)
    fed.clear()
    down = [24, 22, 20, 18, 16, 14, 12]
    for i, s in enumerate(down):
        det.step(win(9, speed=s, conf=200, vel=1.0 - 0.1 * i), 40 + i, 0)
    assert det.n_why[dt.W_RUNDOWN] >= 5
    assert fed.count(True) <= len(down) - det.n_why[dt.W_RUNDOWN]
    fed.clear()
    det.step(win(9, speed=0, conf=0, vel=0.0), 60, 0)           # stopped
    assert fed == [False]


def test_unscored_windows_neither_add_to_nor_dilute_the_evidence():
    # a fault seen in short stretches, each preceded by windows that are not scored (off every
    # trained point): the span counts judged windows only, so 3 of 5 judged windows over raise
    # even though most running windows between them were unscored
    det = running(Detector(op_params()), speed=25, conf=200)
    for _ in range(3):
        run(det, [9] * 4, speed=20, conf=200)            # unscored: off every point
        run(det, [4], speed=25, conf=200)                # judged: over the alert threshold (3)
    assert det.state == NO and events(det)[-1][3] == al.R_SCORE
    # and a raised alert can still clear while the pump runs unscored (it then enters the span)
    det2 = running(Detector(op_params(det_dwell_ms=0)), speed=25, conf=200)
    run(det2, [4] * 3, speed=25, conf=200)
    assert det2.state == NO
    assert run(det2, [9] * 5, speed=20, conf=200)[-1] == US
    assert events(det2)[-1][1:4] == (NO, US, al.R_CLEAR)


def test_order_lines_read_around_a_missed_speed_are_neutral():
    # one axis, the 1x order line scored (baseline 0 +- 100); the window's operating speed is
    # the median of its steadiness span (25 Hz); a window whose own estimate missed (28 Hz, 12 %
    # off, tolerance 3 %) read its line at the wrong place: that term is set to the mode's centre
    p = op_params(det_feat=[fi.F_ORD_1X], det_base_mean_q4=[0], det_speed_tol_q12=123,
                  det_steady_ms=5 * W_MS)
    det = running(Detector(p), speed=25, conf=200)
    f = win(0, speed=25, conf=200)
    f[fi.F_ORD_1X] = 500                                 # 5 spreads over
    det.step(f, 0, 0)
    assert det.score_q8 == 5 * 256
    f[fi.F_SPEED] = 28 * 256
    det.step(f, 0, 0)                                    # the span's median speed is still 25 Hz
    assert det.speed_q8 == 25 * 256 and det.score_q8 == 0


def test_half_orders_kept_around_a_missed_speed_are_neutral():
    # the half-order prominence is an average kept per axis at that axis's own 1x estimate
    # (half_lines); where the estimate missed (28 Hz against the span's 25 Hz, 12 % off,
    # tolerance 3 %), the half orders it was read at are 14 and 42 Hz, not the shaft's 12.5 and
    # 37.5 Hz, so its value is no evidence either: the term is set to the mode's centre, as an
    # order line's is. The prominence is set here directly (5 spreads over a baseline of 0 +- 100):
    # what is tested is the detector's rule, not the average
    p = op_params(det_feat=[fi.F_HALF], det_base_mean_q4=[0], det_speed_tol_q12=123,
                  det_steady_ms=5 * W_MS)
    det = running(Detector(p), speed=25, conf=200)
    det.half.push = lambda f, steady, now: det.half.value.__setitem__(0, 500)
    f = win(0, speed=25, conf=200)
    det.step(f, 0, 0)
    assert det.score_q8 == 5 * 256
    f[fi.F_SPEED] = 28 * 256
    det.step(f, 0, 0)                                    # the span's median speed is still 25 Hz
    assert det.speed_q8 == 25 * 256 and det.score_q8 == 0 and det.held[0] == 1
    # training leaves the same windows out of the model (modes_fit.line_mask)
    rows = np.zeros((2, len(f)), dtype=np.int64)
    rows[:, fi.F_HALF] = 500
    rows[:, fi.F_SPEED] = [25 * 256, 28 * 256]
    assert mf.line_mask(rows, p, np.array([25.0, 25.0]))[:, 0].tolist() == [False, True]


def test_a_line_that_follows_the_speed_is_scored_at_the_modes_reference_speed():
    # the 1x order line's power grows as speed**4 (force ~ speed**2 from a fixed unbalance,
    # acceleration ~ force above the mount's resonance; common practice), so its log2 power grows
    # 4 octaves per octave of speed: with det_follow_q8 = 4 (1024) a healthy window anywhere in
    # the mode's range (24-26 Hz, reference its centre 25 Hz) departs from the centroid only by
    # the log2 table's rounding, while with a fixed centroid it departs by 4 log2(f / 25)
    p = op_params(det_feat=[fi.F_ORD_1X], det_base_mean_q4=[0], det_steady_ms=0)
    fixed, followed = Detector(p), Detector({**p, "det_follow_q8": [1024]})
    for hz in (24.0, 24.6, 25.0, 25.5, 26.0):
        line = round(256 * 4 * np.log2(hz / 25))           # numpy: log2 power over the centre's
        for det in (fixed, followed):
            running(det, speed=hz, conf=200)
            f = win(0, speed=hz, conf=200)
            f[fi.F_ORD_1X] = line
            det.step(f, 0, 0)
        # log2_q8 rounds within 1 LSB for speed and reference, so the followed line is within
        # 4 x 2 LSB of the centre: 8/100 of a spread here (baseline spread 100 Q8)
        assert abs(followed.model.t_q8[0]) <= 256 * 8 // 100 + 1
        assert abs(fixed.model.t_q8[0] - round(256 * line / 100)) <= 1
    # a set with slopes but no operating points is refused: there is no reference speed
    with pytest.raises(ValueError):
        Detector(params(det_follow_q8=[1024]))
    with pytest.raises(ValueError):
        Detector({**p, "det_follow_q8": [FOLLOW_MAX + 1]})  # beyond 64 octaves per octave


def test_each_modes_own_slope_holds_only_over_the_speeds_it_was_trained_at():
    # a band level with a law of its own in each mode (3 octaves per octave of speed in mode 0,
    # -2 in mode 1: a line's lobe moving across the band's edge, det_mfollow_q8) and trained at
    # 24.5-25.5 and 14.5-15.5 Hz (det_op_seen_q8). Within those speeds the level is brought to
    # the mode's reference speed (its range's centre, 25 and 15 Hz); beyond them the speed is
    # held at the nearer end, so what the level does there counts as departure: the reference,
    # numpy's log2 of the law past the end. log2_q8 rounds within 1 LSB for the speed and the
    # reference, so a departure is within |slope| x 2 LSB, 6/100 of a spread (baseline 0 +- 100)
    seen = [round(24.5 * 256), round(25.5 * 256), round(14.5 * 256), round(15.5 * 256)]
    p = op_params(det_base_mean_q4=[0], det_steady_ms=0, det_op_seen_q8=seen, det_mfollow_q8=[768, -512])
    det = Detector(p)
    for m, (slope, ref, lo, hi, centre) in enumerate(((3, 25, 24.5, 25.5, 0), (-2, 15, 14.5, 15.5, 500))):
        for hz in (ref * 0.965, lo, ref * 0.99, ref, ref * 1.01, hi, ref * 1.035):
            running(det, speed=hz, conf=200, band=centre)
            det.step(win(band=centre + round(256 * slope * np.log2(hz / ref)), speed=hz, conf=200), 0, 0)
            held = min(max(hz, lo), hi)
            past = 256 * slope * np.log2(hz / held)            # numpy: the law beyond the trained speeds
            assert det.mode == m
            assert abs(det.model.t_q8[0] - 256 * past / 100) <= 256 * 2 * abs(slope) / 100 + 1
    # refused: slopes of each mode without the speeds they hold over, a list not k x d long,
    # a slope beyond 8 octaves per octave
    for bad in ({"det_op_seen_q8": []}, {"det_mfollow_q8": [768]}, {"det_mfollow_q8": [768, FOLLOW_MAX + 1]}):
        with pytest.raises(ValueError):
            Detector({**p, **bad})
    assert Detector(p).export()["det_mfollow_q8"] == [768, -512]


# -- persistence and escalation in running time --------------------------------------------

def test_k_of_span_persistence():
    det = running(Detector(params()))
    assert run(det, [4, 0, 0, 0, 4, 0, 0, 0, 4, 0, 0, 0]) == [N] * 12   # never 3 in 5
    assert run(det, [4, 0, 4, 0, 4], 20) == [N, N, N, N, NO]             # 3 of the last 5
    assert events(det) == [(24, N, NO, al.R_SCORE, 0, fi.F_BAND0, 4 * 256)]


def test_span_is_running_time_on_any_board():
    # 20 s of persistence: 125 windows of 0.16 s, or 13 when one window in 10 is analysed
    assert Detector(params(det_persist_ms=20000)).alarm.ev.span == 125
    assert Detector(params(det_persist_ms=20000), every=10).alarm.ev.span == 13
    assert al.windows_for(20000, 512, 3200, 10) == 13 and al.windows_for(1, 512, 3200, 1) == 1


def test_a_single_burst_never_raises_nor_latches():
    det = running(Detector(params()))
    # one window far over the alarm threshold, twice: the rule needs 3 of 5
    assert run(det, [50, 0, 0, 0, 0, 0, 50, 0, 0]) == [N] * 9
    # a short burst raises at most an alert, never an alarm: escalation needs 4 windows in alert
    assert run(det, [50, 50, 50, 0, 0, 0, 0, 0, 0, 0], 20)[2] == NO
    assert AL not in [e[2] for e in events(det)]


def test_alert_escalates_to_alarm_only_after_persisting():
    det = running(Detector(params()))
    st = run(det, [7] * 10)
    # alert at the third window; the alarm rule holds from then on, but 4 windows in alert first
    # (the raising one and three more)
    assert st[:3] == [N, N, NO] and st[3:6] == [NO] * 3 and st[6] == AL
    assert [e[3] for e in events(det)] == [al.R_SCORE, al.R_ESCALATE]


def test_clear_needs_hysteresis_and_dwell():
    det = running(Detector(params(det_dwell_ms=8 * W_MS)))
    run(det, [4, 4, 4])
    assert det.state == NO
    # 2.5 spreads is under the alert threshold but over the clear one (0.8 x 3 = 2.4): holds
    assert run(det, [2.5] * 12, 10) == [NO] * 12
    # windows under 2.4, and the dwell (8 windows in the state) is already met: clears once at
    # most 2 of the last 5 (fewer than k = 3) are over the clear threshold, on the third clean window
    assert run(det, [2.3] * 5, 30) == [NO] * 2 + [N] * 3
    det2 = running(Detector(params(det_dwell_ms=8 * W_MS)))
    run(det2, [4, 4, 4])
    # dwell longer than the clean run: clears only when 8 windows have passed in alert
    assert run(det2, [0] * 8, 10) == [NO] * 7 + [N]
    assert events(det2)[-1][1:4] == (NO, N, al.R_CLEAR)


def test_alarm_latches_until_acknowledged():
    det = running(Detector(params()))
    run(det, [7] * 8)
    assert det.state == AL
    assert run(det, [0] * 20, 10) == [AL] * 20                  # stays latched
    assert det.ack(40) == N
    ev = events(det)
    assert [e[1:4] for e in ev] == [(N, NO, al.R_SCORE), (NO, AL, al.R_ESCALATE), (AL, N, al.R_ACK)]
    assert ev[2][0] == 40


def test_ack_before_the_condition_clears():
    det = running(Detector(params()))
    run(det, [7] * 8)
    assert det.ack(5) == AL                                     # acknowledged, still over
    assert run(det, [7, 7, 0, 0, 0, 0, 0], 6) == [AL] * 4 + [N] * 3   # 2 of 5 over: cleared
    assert [e[1:4] for e in events(det)][-1] == (AL, N, al.R_CLEAR)


def test_iso_guard_overrides_the_learned_score():
    # group 2 rigid default, from memory: B/C 2.8 mm/s, C/D 4.5 mm/s
    det = running(Detector(params()))
    assert run(det, [0] * 3, vel=3.0) == [N, N, NO]
    ev = events(det)[-1]
    assert ev[1:4] == (N, NO, al.R_ISO_C) and ev[5] == fi.F_VEL
    # zone D raises an alarm on its own persistence, without the escalation time
    assert run(det, [0] * 3, 10, vel=4.6) == [NO, NO, AL]
    assert events(det)[-1][3] == al.R_ISO_D
    # no learned model at all: the guard still acts
    det = running(Detector(params(det_modes=0, det_mode_c_q8=[], det_mode_s_q8=[])))
    assert run(det, [9] * 6, vel=1.0) == [N] * 6 and det.why == dt.W_NO_MODEL
    assert run(det, [0] * 5, 10, vel=5.0)[-1] == AL


# -- idle and start-up ----------------------------------------------------------------------

def test_idle_no_alarm_and_start_up_hold_off_in_seconds():
    det = running(Detector(params(det_hold_ms=4 * W_MS)))
    # stopped: broadband velocity under the floor; a high score is not evaluated
    assert run(det, [9] * 5, vel=0.1) == [ID] * 5
    assert events(det)[0][1:4] == (N, ID, al.R_STOPPED)
    # restart transient: 3 windows held off, then normal; the transient never alerts
    assert run(det, [9, 9, 9, 0, 0, 0, 0, 0], 10) == [ID, ID, ID, N, N, N, N, N]
    assert [e[1:4] for e in events(det)] == [(ID, N, al.R_STARTED)]


def test_alert_drops_to_idle_but_a_latched_alarm_stays():
    det = running(Detector(params()))
    run(det, [4, 4, 4])
    assert run(det, [0], vel=0.1) == [ID]
    det = running(Detector(params()))
    run(det, [7] * 8)
    assert run(det, [0, 0], vel=0.1) == [AL, AL]


def test_idle_follows_the_largest_axis_velocity_not_the_acceleration():
    p = default_params(2, 1, VEL_PER_MM_S)
    p.update(det_hold_ms=0, det_steady_ms=0, det_idle_vel_q16=IDLE)
    det = Detector(p)
    f = array("i", bytes(4 * 2 * PA))

    def step(vel0, vel1, rms):
        for a, v in enumerate((vel0, vel1)):
            f[a * PA + fi.F_RMS] = rms
            f[a * PA + fi.F_VEL] = v
        return det.step(f, 0, 0)
    # acceleration near a MEMS sensor's noise (0.4 counts r.m.s.), velocity of a running pump
    assert step(VEL_PER_MM_S, 0, 100) == N and det.bb_vel_q16 == VEL_PER_MM_S
    # strong acceleration (4000 counts r.m.s.), velocity under the floor on both axes: stopped
    assert step(IDLE - 1, IDLE - 2, 4000 << 8) == ID and det.bb_vel_q16 == IDLE - 1
    # the floor itself counts as running, on whichever axis reaches it
    assert step(0, IDLE, 100) == N and det.bb_vel_q16 == IDLE
    # the default: 0.05 mm/s in F_VEL units of the calibration given, to the unit
    assert abs(default_params(1, 1, VEL_PER_MM_S)["det_idle_vel_q16"] - 0.05 * VEL_PER_MM_S) < 1


# -- sensor health --------------------------------------------------------------------------

@pytest.mark.parametrize("kw,reason,feat", [
    ({"rms": 10}, al.R_FLAT, fi.F_RMS),                 # under det_flat_rms_q8 = 64
    ({"clip": 3}, al.R_CLIP, fi.F_CLIP),
    ({"mean": 32767 << 8}, al.R_DC, fi.F_MEAN),
])
def test_sensor_faults_never_alert(kw, reason, feat):
    det = running(Detector(params()))
    # even with a score of 9 spreads and zone D, a bad sensor is a sensor fault
    assert run(det, [9] * 6, vel=9.0, **kw) == [N, SF, SF, SF, SF, SF]
    ev = events(det)
    assert ev == [(1, N, SF, reason, -1, feat, 0)]
    # two good windows to leave; then the start-up hold-off (2 windows here) before normal
    det2 = running(Detector(params(det_hold_ms=2 * W_MS)))
    run(det2, [0, 0], **kw)
    assert run(det2, [0] * 5, 10) == [SF, ID, ID, N, N]


@pytest.mark.parametrize("kw,feat", [({"stuck": 45}, fi.F_STUCK), ({"zero": 45}, fi.F_ZERO)])
def test_a_dropout_run_is_a_sensor_fault_at_once_before_any_score(kw, feat):
    # the default limit, 44 samples: one window with a longer run is a dropout, even one that
    # would score 9 spreads and sit in zone D
    assert default_params(1, 1, VEL_PER_MM_S)["det_stuck_max"] == [44]
    det = running(Detector(params()))
    assert run(det, [9], vel=9.0, **kw) == [SF]
    assert events(det) == [(0, N, SF, al.R_DROPOUT, -1, feat, 0)]
    assert run(det, [0, 0, 0], 5) == [SF, ID, N]
    det = running(Detector(params()))
    assert run(det, [0] * 3, stuck=44, zero=44) == [N] * 3    # at the limit: healthy


def test_dropped_samples_fault():
    det = running(Detector(params(det_drop_max=5)))
    assert [det.step(win(0), i, d) for i, d in enumerate([5, 6, 6, 0, 0, 0])] == [N, N, SF, SF, ID, N]


def test_latched_alarm_survives_a_sensor_fault():
    det = running(Detector(params()))
    run(det, [7] * 8)
    assert run(det, [0, 0], clip=9) == [AL, SF]
    assert run(det, [0, 0], 5) == [SF, AL]


# -- events ---------------------------------------------------------------------------------

def test_event_ring_overwrites_the_oldest():
    det = running(Detector(params(det_event_n=4, det_dwell_ms=0, det_persist_ms=W_MS)))
    run(det, [4, 0] * 5)                                          # 10 transitions
    assert det.events.lost == 6
    ev = events(det)
    assert [e[0] for e in ev] == [6, 7, 8, 9]
    assert [e[2] for e in ev] == [NO, N, NO, N]


def test_event_ring_is_at_most_cap_max_events():
    # det_event_n sizes 7 int arrays, so board.memory_need counts the ring at CAP_MAX events
    assert len(Detector(params(det_event_n=event_ring.CAP_MAX)).events.t) == event_ring.CAP_MAX
    for n in (0, event_ring.CAP_MAX + 1, 4096):
        with pytest.raises(ValueError, match="det_event_n must be an int in \\[1, 256\\]"):
            Detector(params(det_event_n=n))


def test_missing_parameter_is_refused():
    p = params()
    del p["det_persist_ms"]
    with pytest.raises(ValueError):
        Detector(p)
    with pytest.raises(ValueError):
        Detector(params(det_mode_c_q8=[0, 0]))
    with pytest.raises(ValueError):
        Detector(op_params(det_op_speed_q8=[26 * 256, 24 * 256, 14 * 256, 16 * 256]))


def test_fixed_point_score_against_a_float_reference():
    # reference: the same formulas in numpy float64. Error budget per term, in mode spreads:
    # z is floored to 1/256 baseline spread and the spread is at least 1/4 of one, so 1/64;
    # the quotient and the square add 1/256 each. Checked as |score - ref| <= 0.02 * ref + 0.1.
    rng = np.random.default_rng(21)
    pa = fi.per_axis(8)
    for trial in range(60):
        d = int(rng.integers(1, 9))
        k = int(rng.integers(1, 9))
        feat = [fi.F_BAND0 + j for j in range(d)]
        mean_q4 = rng.integers(-4000 * 16, 4000 * 16, d)
        sd_q4 = rng.integers(20 * 16, 600 * 16, d)
        c = rng.integers(-1500, 1500, (k, d))
        s = rng.integers(64, 1024, (k, d))
        p = default_params(1, 8, VEL_PER_MM_S)
        p.update(det_feat=feat, det_base_mean_q4=mean_q4.tolist(), det_base_sd_q4=sd_q4.tolist(),
                 det_modes=k, det_mode_c_q8=c.ravel().tolist(), det_mode_s_q8=s.ravel().tolist(),
                 det_hold_ms=0, det_steady_ms=0, det_idle_vel_q16=IDLE, det_thr_alert_q8=1 << 16,
                 det_thr_alarm_q8=1 << 16, det_zlam_q8=0)
        det = Detector(p)
        f = array("i", bytes(4 * pa))
        f[fi.F_RMS] = 4000
        f[fi.F_VEL] = VEL_PER_MM_S
        f[fi.F_STUCK] = 1
        u = np.clip(np.rint(mean_q4 / 16 + rng.normal(0, 3, d) * sd_q4 / 16), -8191, 8191)
        f[fi.F_BAND0:fi.F_BAND0 + d] = array("i", u.astype(int).tolist())
        det.step(f, trial, 0)
        z = np.clip((u - mean_q4 / 16) / (sd_q4 / 16), -32, 32)
        t2 = (z - c / 256) / (s / 256)
        near = np.sqrt((t2 ** 2).sum(1))              # the legacy choice: nearest, two-sided
        t = np.maximum(t2, -3.0)                      # the score: one-sided terms (modes.py)
        assert near[det.mode] <= near.min() + 0.04 * np.sqrt(d)   # nearest, up to a near tie
        ref = np.sqrt((t[det.mode] ** 2).sum())       # zlam 0: the score is the distance
        assert abs(det.score_q8 / 256 - ref) <= 0.02 * np.sqrt(d) + d / 256 / max(ref, 1)
        # the per-feature channel of the chosen mode: its largest rise, to the same budget
        assert abs(det.zmax_q8 / 256 - max(t[det.mode].max(), 0.0)) <= 0.02 + 1 / 64


def test_the_operating_point_comes_from_an_axis_not_pinned_at_an_end_of_the_range():
    # The estimator holds its 1x inside the search range (firmware_py/dsp/speed.py), so an
    # estimate at an end is the range, not the shaft: an axial axis whose 2x outweighs its 1x
    # reads a shaft above the range there (docs/evaluation.md, RW-1's night). The operating point
    # comes from the most confident axis inside, whatever the pinned one's confidence; with every
    # axis pinned, from the most confident.
    from firmware_py.detect.detector import op_axis, pinned_limits_q8
    pa = fi.per_axis(0)
    lo, hi = pinned_limits_q8(16 * 256, 29 * 256, 3200, 512)
    assert (lo, hi) == (16 * 256 + 13, 29 * 256 - 13)     # 2 steps of fs / n = 6.25 Hz-Q8 units
    f = array("i", bytes(4 * 3 * pa))
    for a, (sp, c) in enumerate(((29 * 256, 250), (17 * 256 + 128, 150), (17 * 256 + 120, 140))):
        f[a * pa + fi.F_SPEED], f[a * pa + fi.F_SPEED_CONF] = sp, c
    assert op_axis(f, 3, pa, lo, hi) == 1
    f[pa + fi.F_SPEED] = 16 * 256                           # the bottom end: pinned too
    assert op_axis(f, 3, pa, lo, hi) == 2
    f[2 * pa + fi.F_SPEED] = 0                              # no estimate at all
    assert op_axis(f, 3, pa, lo, hi) == 0                   # every estimate pinned: most confident
    assert op_axis(f, 3, pa, 0, (1 << 30) - 1) == 0         # no search range: most confident
