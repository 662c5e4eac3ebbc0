"""Detector behaviour under CPython: score statistics, alarm logic, idle, sensor health, events."""
from array import array

import numpy as np
import pytest
from scipy import stats

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.detect.detector import Detector, default_params

PA = fi.per_axis(1)
VEL_PER_MM_S = 6680          # F_VEL units per mm/s (a 1 mg/count sensor: 65536 / 9.81)
IDLE = VEL_PER_MM_S // 4     # idle floor of these tests: 0.25 mm/s
N, NO, AL, ID, SF, LE = al.NORMAL, al.ALERT, al.ALARM, al.IDLE, al.SENSOR_FAULT, al.LEARNING


def params(**kw):
    """One axis, one band; the model: one mode, one feature (the band power, log2 Q8), baseline
    1000 +- 100, so a band value of 1000 + 100 s scores s spreads exactly. Idle under 0.25 mm/s."""
    p = default_params(1, 1, VEL_PER_MM_S)
    p.update(det_feat=[fi.F_BAND0], det_base_mean_q4=[1000 * 16], det_base_sd_q4=[100 * 16],
             det_modes=1, det_mode_c_q8=[0], det_mode_s_q8=[256], det_thr_alert_q8=3 * 256,
             det_thr_alarm_q8=6 * 256, det_hyst_q8=205, det_k=3, det_n=5, det_dwell=4,
             det_startup_n=0, det_idle_vel_q16=IDLE, det_fault_k=2)
    p.update(kw)
    return p


def win(score=0.0, rms=4000, vel=1.0, mean=0, clip=0, band=None):
    """A feature vector scoring `score` spreads, velocity vel mm/s, r.m.s. rms (Q8 counts)."""
    f = array("i", bytes(4 * PA))
    f[fi.F_MEAN] = mean
    f[fi.F_RMS] = rms
    f[fi.F_PEAK] = 4 * rms
    f[fi.F_CREST] = 4 << 12
    f[fi.F_KURT] = 3 << 12
    f[fi.F_CLIP] = clip
    f[fi.F_VEL] = int(vel * VEL_PER_MM_S)
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


def running(det):
    """Step quiet running windows through the start-up hold-off."""
    for _ in range(det.startup_n + 1):
        det.step(win(0), 0, 0)
    assert det.state == N
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


def test_mahalanobis_tail_matches_chi_square():
    # d independent standard normal features: score**2 is chi-square with d degrees of freedom
    # (scipy.stats.chi2); at the 1 % point the exceedance must be 1 % within binomial error.
    d, n = 4, 40_000
    p = default_params(1, 4, VEL_PER_MM_S)
    feat = [fi.F_BAND0 + j for j in range(d)]
    p.update(det_feat=feat, det_base_mean_q4=[0] * d, det_base_sd_q4=[200 * 16] * d,
             det_modes=1, det_mode_c_q8=[0] * d, det_mode_s_q8=[256] * d, det_startup_n=0,
             det_idle_vel_q16=IDLE, det_thr_alert_q8=1 << 16, det_thr_alarm_q8=1 << 16)
    det = Detector(p)
    thr = np.sqrt(stats.chi2.isf(0.01, d))
    x = np.rint(200 * np.random.default_rng(9).standard_normal((n, d))).astype(int)
    f = array("i", bytes(4 * fi.per_axis(4)))
    f[fi.F_RMS] = 4000
    f[fi.F_VEL] = VEL_PER_MM_S        # running: 1 mm/s
    over = 0
    for i, row in enumerate(x.tolist()):
        f[fi.F_BAND0:fi.F_BAND0 + d] = array("i", row)
        det.step(f, i, 0)
        over += det.score_q8 >= round(thr * 256)
    assert abs(over - 0.01 * n) <= 3 * np.sqrt(n * 0.01 * 0.99) + 0.002 * n


def test_nearest_mode_and_driving_feature():
    p = default_params(1, 2, VEL_PER_MM_S)
    b0, b1 = fi.F_BAND0, fi.F_BAND0 + 1
    p.update(det_feat=[b0, b1], det_base_mean_q4=[0, 0], det_base_sd_q4=[1600, 1600],
             det_modes=2, det_mode_c_q8=[0, 0, 1280, 1280], det_mode_s_q8=[256, 256, 128, 512],
             det_startup_n=0, det_idle_vel_q16=IDLE)
    det = Detector(p)
    f = array("i", bytes(4 * fi.per_axis(2)))
    f[fi.F_RMS] = 4000
    f[fi.F_VEL] = VEL_PER_MM_S
    f[b0], f[b1] = 520, 460           # z = (5.2, 4.6): mode 1 at (5, 5) with spreads 0.5, 2
    det.step(f, 0, 0)
    assert det.mode == 1
    expect = np.hypot((5.2 - 5) / 0.5, (4.6 - 5) / 2)
    assert abs(det.score_q8 / 256 - expect) < 0.02
    assert det.feat == b0            # (0.2 / 0.5) beats (0.4 / 2)
    f[b0], f[b1] = 10, 150
    det.step(f, 1, 0)
    assert (det.mode, det.feat) == (0, b1)


# -- alarm logic ----------------------------------------------------------------------------

def test_k_of_n_persistence():
    det = running(Detector(params()))
    assert run(det, [4, 0, 0, 0, 4, 0, 0, 0, 4, 0, 0, 0]) == [N] * 12   # never 3 in 5
    assert run(det, [4, 0, 4, 0, 4], 20) == [N, N, N, N, NO]             # 3 of the last 5
    ev = events(det)
    assert ev == [(24, N, NO, al.R_SCORE, 0, fi.F_BAND0, 4 * 256)]


def test_clear_needs_hysteresis_and_dwell():
    det = running(Detector(params(det_dwell=8)))
    run(det, [4, 4, 4])
    assert det.state == NO
    # 2.5 spreads is under the alert threshold but over the clear one (0.8 x 3 = 2.4): holds
    assert run(det, [2.5] * 12, 10) == [NO] * 12
    # five windows under 2.4, but the dwell (8 windows in the state) is already met: clears on
    # the fifth clean window, not before
    assert run(det, [2.3] * 5, 30) == [NO] * 4 + [N]
    det2 = running(Detector(params(det_dwell=8)))
    run(det2, [4, 4, 4])
    # dwell longer than the clean run: clears only when 8 windows have passed in alert
    assert run(det2, [0] * 8, 10) == [NO] * 7 + [N]
    assert events(det2)[-1][1:4] == (NO, N, al.R_CLEAR)


def test_alarm_latches_until_acknowledged():
    det = running(Detector(params()))
    run(det, [7, 7, 7])
    assert det.state == AL
    assert run(det, [0] * 20, 10) == [AL] * 20                  # stays latched
    assert det.ack(40) == N
    ev = events(det)
    assert [e[1:4] for e in ev] == [(N, AL, al.R_SCORE), (AL, N, al.R_ACK)]
    assert ev[1][0] == 40


def test_ack_before_the_condition_clears():
    det = running(Detector(params()))
    run(det, [7, 7, 7, 7])
    assert det.ack(5) == AL                                     # acknowledged, still over
    assert run(det, [7, 7, 0, 0, 0, 0, 0], 6) == [AL] * 6 + [N]
    assert [e[1:4] for e in events(det)][-1] == (AL, N, al.R_CLEAR)


def test_alert_escalates_to_alarm():
    det = running(Detector(params()))
    assert run(det, [4, 4, 4, 7, 7, 7]) == [N, N, NO, NO, NO, AL]


def test_iso_guard_overrides_the_learned_score():
    # group 2 rigid default, from memory: B/C 2.8 mm/s, C/D 4.5 mm/s
    det = running(Detector(params()))
    assert run(det, [0] * 3, vel=3.0) == [N, N, NO]
    ev = events(det)[-1]
    assert ev[1:4] == (N, NO, al.R_ISO_C) and ev[5] == fi.F_VEL
    assert run(det, [0] * 3, 10, vel=4.6) == [NO, NO, AL]
    assert events(det)[-1][3] == al.R_ISO_D
    # no learned model at all: the guard still acts
    det = running(Detector(params(det_modes=0, det_mode_c_q8=[], det_mode_s_q8=[])))
    assert run(det, [9] * 4, vel=1.0) == [N] * 4
    assert run(det, [0] * 3, 10, vel=5.0) == [N, N, AL]


# -- idle and start-up ----------------------------------------------------------------------

def test_idle_no_alarm_and_start_up_hold_off():
    det = running(Detector(params(det_startup_n=4)))
    # stopped: broadband velocity under the floor; a high score is not evaluated
    assert run(det, [9] * 5, vel=0.1) == [ID] * 5
    assert events(det)[0][1:4] == (N, ID, al.R_STOPPED)
    # restart transient: 4 windows held off, then normal; the transient never alerts
    assert run(det, [9, 9, 9, 9, 0, 0, 0, 0], 10) == [ID, ID, ID, N, N, N, N, N]
    assert [e[1:4] for e in events(det)] == [(ID, N, al.R_STARTED)]


def test_alert_drops_to_idle_but_a_latched_alarm_stays():
    det = running(Detector(params()))
    run(det, [4, 4, 4])
    assert run(det, [0], vel=0.1) == [ID]
    det = running(Detector(params()))
    run(det, [7, 7, 7])
    assert run(det, [0, 0], vel=0.1) == [AL, AL]


def test_idle_follows_the_largest_axis_velocity_not_the_acceleration():
    p = default_params(2, 1, VEL_PER_MM_S)
    p.update(det_startup_n=0, det_idle_vel_q16=IDLE)
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
    det2 = running(Detector(params(det_startup_n=2)))
    run(det2, [0, 0], **kw)
    assert run(det2, [0] * 5, 10) == [SF, ID, ID, N, N]


def test_dropped_samples_fault():
    det = running(Detector(params(det_drop_max=5)))
    assert [det.step(win(0), i, d) for i, d in enumerate([5, 6, 6, 0, 0])] == [N, N, SF, SF, N]


def test_latched_alarm_survives_a_sensor_fault():
    det = running(Detector(params()))
    run(det, [7, 7, 7])
    assert run(det, [0, 0], clip=9) == [AL, SF]
    assert run(det, [0, 0], 5) == [SF, AL]


# -- events ---------------------------------------------------------------------------------

def test_event_ring_overwrites_the_oldest():
    det = running(Detector(params(det_event_n=4, det_dwell=0, det_k=1, det_n=1)))
    run(det, [4, 0] * 5)                                          # 10 transitions
    assert det.events.lost == 6
    ev = events(det)
    assert [e[0] for e in ev] == [6, 7, 8, 9]
    assert [e[2] for e in ev] == [NO, N, NO, N]


def test_missing_parameter_is_refused():
    p = params()
    del p["det_k"]
    with pytest.raises(ValueError):
        Detector(p)
    with pytest.raises(ValueError):
        Detector(params(det_mode_c_q8=[0, 0]))


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
                 det_startup_n=0, det_idle_vel_q16=IDLE, det_thr_alert_q8=1 << 16,
                 det_thr_alarm_q8=1 << 16)
        det = Detector(p)
        f = array("i", bytes(4 * pa))
        f[fi.F_RMS] = 4000
        f[fi.F_VEL] = VEL_PER_MM_S
        u = np.clip(np.rint(mean_q4 / 16 + rng.normal(0, 3, d) * sd_q4 / 16), -8191, 8191)
        f[fi.F_BAND0:fi.F_BAND0 + d] = array("i", u.astype(int).tolist())
        det.step(f, trial, 0)
        z = np.clip((u - mean_q4 / 16) / (sd_q4 / 16), -32, 32)
        dist = np.sqrt((((z - c / 256) / (s / 256)) ** 2).sum(1))
        ref = dist.min()
        assert abs(det.score_q8 / 256 - ref) <= 0.02 * np.sqrt(d) + d / 256 / max(ref, 1)
        assert dist[det.mode] <= ref + 0.04 * np.sqrt(d)   # nearest, up to a near tie
