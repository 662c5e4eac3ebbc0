"""The detector's slow channel (firmware_py/detect/detector.py, _slow): an EWMA of each feature's
departure, checked against the EWMA chart's textbook formulas, its weight by the running time a
window stands for (the credit of unwatched time), its integer bounds, its resets, and the
unchanged behaviour of every set that leaves it off (det_slam_q8 = 0)."""
from array import array

import numpy as np
import pytest
from scipy import stats

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.detect.detector import LATER_KEYS, SLOW_HALF_S, Detector, default_params
from firmware_py.dsp import feature_index as fi
from firmware_py.run import param_check

VEL_PER_MM_S = 6680          # F_VEL units per mm/s (a 1 mg/count sensor)
IDLE = VEL_PER_MM_S // 4
W_MS = 160                   # one window: 512 samples at 3200 Hz
SD = 200                     # baseline spread of the test features, in band-power units


def _params(d, **kw):
    """One axis, d band powers scored as standard normal features (baseline 0 +- SD, one mode at
    0 with spread 1), never raising; every window steady and past the hold-off."""
    p = default_params(1, d, VEL_PER_MM_S)
    p.update(det_feat=[fi.F_BAND0 + j for j in range(d)], det_base_mean_q4=[0] * d,
             det_base_sd_q4=[SD * 16] * d, det_modes=1, det_mode_c_q8=[0] * d,
             det_mode_s_q8=[256] * d, det_hold_ms=0, det_steady_ms=0, det_idle_vel_q16=IDLE,
             det_thr_alert_q8=1 << 16, det_thr_alarm_q8=1 << 16)
    p.update(kw)
    return p


def _frame(d):
    f = array("i", bytes(4 * fi.per_axis(d)))
    f[fi.F_RMS] = 4000
    f[fi.F_VEL] = VEL_PER_MM_S        # running, 1 mm/s
    f[fi.F_STUCK] = 1
    return f


def _ewma(det, m=None):
    """The slow channel's per-feature EWMA of mode m (default: the window's mode, else 0), Q8
    spreads."""
    m = (det.mode if det.mode >= 0 else 0) if m is None else m
    return [a >> det.ew_long for a in det.ew_acc[m * det.d:(m + 1) * det.d]]


def _sparse(det, f, t):
    """One window of a sparse stream: SPARSE_S unwatched seconds, then the window. Every window
    then stands for unwatched time, so each weighs 2**-ew_shift (the plain EWMA recursion)."""
    det.gap(SPARSE_S)
    return det.step(f, t, 0)


SPARSE_S = 400               # > the 327.5 s a window spends at the shortest shift below (3), < 1 h


def test_shift_is_the_nearest_power_of_two_of_the_time_constant():
    # 5 s of 0.16 s windows is 31.25 -> ceil 32 windows = 2**5; 2.5 s -> 16 = 2**4; 3.5 s -> 22
    # windows, under 16 * sqrt(2) = 22.6 -> 2**4; 3.7 s -> 24 windows -> 2**5; 0 -> every window
    for ms, shift in ((5000, 5), (2500, 4), (3500, 4), (3700, 5), (0, 0), (160, 0)):
        assert Detector(_params(1, det_slow_ms=ms)).ew_shift == shift
    with pytest.raises(ValueError):
        Detector(_params(1, det_slow_ms=16385 * 2 * W_MS))     # beyond 16384 windows
    # running time (with det_wander_ms): SLOW_HALF_S = 3600 s is 22 500 windows of 0.16 s,
    # under 16384 * sqrt(2) = 23 170: 2**14; without it the accumulator's scale is the one shift
    assert Detector(_params(1, det_wander_ms=40960)).ew_long == 14
    assert Detector(_params(1)).ew_long == Detector(_params(1)).ew_shift == 6


def test_averages_weigh_the_running_time_a_window_stands_for():
    # docs/detector.md (Slow channel): with det_wander_ms the averages run over running time. A
    # wandering feature's (det_slow_wander 1) time constant is 2**L windows (L = 14, the power
    # of two nearest an hour of 0.16 s windows); a window that follows unwatched time stands for
    # 2**r of them (r = L - w, w = 5 from det_wander_ms: 2**9) and so weighs 2**-5, while the
    # mode's credit of that time lasts, and a window of unbroken running weighs 2**-14. A
    # flickering feature (0) weighs 2**-s (s = 3 from det_slow_ms) and 2**-(s + r) = 2**-12.
    # A fresh detector's credit is full: 2**s = 8 windows' worth, each spending (2**9 - 1) * 160
    # = 81 760 ms. A step of delta spreads follows the recursion's closed form with the weights
    # in that order, delta * (1 - (1 - 2**-w)**min(k, 8) * (1 - 2**-L)**max(k - 8, 0)) (Roberts
    # 1959; Montgomery, EWMA chapter; likewise s, s + r).
    # Integer arithmetic floors once a window in units of 2**-14 of a Q8 spread, so the error
    # stays under 1/256 spread.
    d, delta = 2, 1.5
    det = Detector(_params(d, det_slow_ms=8 * W_MS, det_wander_ms=32 * W_MS, det_slow_wander=[1, 0]))
    assert (det.ew_shift, det.ew_wshift, det.ew_long, det.ew_frun, det.ew_spend_ms) == (3, 5, 14, 12, 81760)
    assert det.ew_cap_ms == 8 * 81760 and det.ew_credit_ms[0] == det.ew_cap_ms
    f = _frame(d)
    f[fi.F_BAND0] = f[fi.F_BAND0 + 1] = int(delta * SD)

    def ref(k, kc, a, b):
        return delta * (1 - (1 - 2.0 ** -a) ** min(k, kc) * (1 - 2.0 ** -b) ** max(k - kc, 0))

    for k in range(1, 400):
        det.step(f, k, 0)
        assert abs(_ewma(det)[0] / 256 - ref(k, 8, 5, 14)) < 1 / 256
        assert abs(_ewma(det)[1] / 256 - ref(k, 8, 3, 12)) < 1 / 256
    # 10 minutes unwatched (a gap, or the pump stopped or in another mode): the first second is
    # not counted, the rest is credit for floor(599 000 / 81 760) = 7 windows at 2**-5; an hour
    # would be capped at 8
    e0 = _ewma(det)[0] / 256
    det.gap(600)
    for k in range(1, 20):
        det.step(f, 400 + k, 0)
        w = (1 - 2.0 ** -5) ** min(k, 7) * (1 - 2.0 ** -14) ** max(k - 7, 0)
        assert abs(_ewma(det)[0] / 256 - (delta - (delta - e0) * w)) < 1 / 256
    # and the test can fail: one more credited window would move it by 1/32 of the rest, > 1/256
    assert (delta - e0) * (1 - 2.0 ** -5) ** 7 * 2.0 ** -5 > 1 / 256
    # 50 minutes unwatched (under the hour that halves evidence): capped at 8 credited windows
    f[fi.F_BAND0] = 0
    e0 = _ewma(det)[0] / 256
    det.gap(3000)
    for k in range(1, 20):
        det.step(f, 500 + k, 0)
        w = (1 - 2.0 ** -5) ** min(k, 8) * (1 - 2.0 ** -14) ** max(k - 8, 0)
        assert abs(_ewma(det)[0] / 256 - e0 * w) < 1 / 256
    # a set without det_wander_ms weighs every window 2**-s, credit or not (the earlier rule)
    f[fi.F_BAND0] = int(delta * SD)
    det = Detector(_params(d, det_slow_ms=8 * W_MS, det_slow_wander=[1, 0]))
    assert (det.ew_long, det.ew_spend_ms) == (3, 0)
    for k in range(1, 100):
        det.step(f, k, 0)
        assert _ewma(det)[0] == _ewma(det)[1] and abs(_ewma(det)[0] / 256 - ref(k, k, 3, 3)) < 1 / 256


def test_wander_flags_are_checked():
    good = {**_params(2), "version": 1, "board": "b", "fs_hz": 3200, "n": 512, "axes": 1,
            "counts_per_g": 256, "fc_bands": [[3, 8]] * 2, "fc_vel_hz": [10, 1000]}
    prof = {"name": "b", "sample_rate_hz": 3200, "window_n": 512, "axes": 1}
    for ok in ([], [0, 1], [1, 1]):
        param_check.validate({**good, "det_slow_wander": ok}, prof)
        Detector({**good, "det_slow_wander": ok})
    for bad in ([1], [0, 2], [0, 1, 0]):
        with pytest.raises(ValueError):
            param_check.validate({**good, "det_slow_wander": bad}, prof)
        with pytest.raises(ValueError):
            Detector({**good, "det_slow_wander": bad})
    with pytest.raises(ValueError):
        param_check.validate({**good, "det_wander_ms": 600001}, prof)


def test_ewma_sd_and_mean_against_the_ewma_chart_formula():
    # Roberts (1959); Montgomery, "Introduction to Statistical Quality Control", EWMA chart: for
    # independent inputs of variance v the EWMA with weight lam has asymptotic variance
    # v * lam / (2 - lam). The detector's input is t = max(z, -3) (a term under the mode counts at
    # most 3 spreads), so v and the mean are those of the clamped standard normal, computed
    # with scipy.stats.norm. lam = 2**-3.
    d, n, shift = 4, 30_000, 3
    lam = 2.0 ** -shift
    det = Detector(_params(d, det_slow_ms=8 * W_MS))
    assert det.ew_shift == shift
    x = np.rint(SD * np.random.default_rng(5).standard_normal((n, d))).astype(int)
    f = _frame(d)
    det.step(f, 0, 0)
    ew = np.empty((n, d))
    for i, row in enumerate(x.tolist()):
        f[fi.F_BAND0:fi.F_BAND0 + d] = array("i", row)
        _sparse(det, f, i)                 # each window after unwatched time: weight 2**-3
        ew[i] = _ewma(det)
    ew = ew[20 << shift:] / 256.0          # past the start-up: (1 - lam)**160 < 1e-9 of it left
    z = stats.norm
    m = z.expect(lambda u: u, lb=-3) - 3 * z.cdf(-3)
    v = z.expect(lambda u: u * u, lb=-3) + 9 * z.cdf(-3) - m * m
    sd_ref = np.sqrt(v * lam / (2 - lam))
    # Tolerances from the sample: consecutive EWMA values are correlated with rho = 1 - lam, so
    # (Bartlett) var(sample variance) = 2 s**4 / n * (1 + rho**2) / (1 - rho**2) and
    # var(sample mean) = s**2 / n * (1 + rho) / (1 - rho), per feature; the d features are
    # independent, so pooled errors shrink by sqrt(d). 4 standard errors, plus the quantisation:
    # z is floored to 1/256 spread and the EWMA floored to 1/256, a bias of at most 2/256 spread
    # in the mean and a variance change of at most 2 * (1/256)**2 / 12 (negligible, added).
    # (The recursion keeps 2**-14 of a Q8 spread; the read floors to 1/256.)
    rho = 1 - lam
    k = len(ew)
    se_var = sd_ref ** 2 * np.sqrt(2 / (k * d) * (1 + rho ** 2) / (1 - rho ** 2))
    se_mean = sd_ref * np.sqrt((1 + rho) / (1 - rho) / (k * d))
    assert abs(ew.var(0).mean() - sd_ref ** 2) <= 4 * se_var + 2 / 12 / 256 ** 2
    assert abs(ew.mean() - m) <= 4 * se_mean + 2 / 256
    assert sd_ref == pytest.approx(np.sqrt(1 / 15), rel=2e-3)   # the untruncated formula, lam = 1/8


def test_step_response_and_driving_feature():
    # A step of delta spreads on feature 2 (from 0), in sparse windows (each after unwatched
    # time: weight lam = 2**-shift): the EWMA after k windows is delta * (1 - (1 - lam)**k) (the
    # recursion's closed form, Montgomery, EWMA chapter). Integer arithmetic: the accumulator
    # keeps 2**-14 of a Q8 spread (ew_acc = EWMA * 2**ew_long, floored once per window), so the
    # error is under 1 / 256 spread at every k. With the slow channel weighted 8x it drives the
    # score once 8 x EWMA passes the distance (the step itself: delta).
    d, shift, delta = 3, 5, 1.5
    lam = 2.0 ** -shift
    det = Detector(_params(d, det_slow_ms=32 * W_MS, det_slam_q8=8 * 256, det_zlam_q8=256))
    f = _frame(d)
    det.step(f, 0, 0)
    f[fi.F_BAND0 + 2] = int(delta * SD)
    for k in range(1, 200):
        _sparse(det, f, k)
        ref = delta * (1 - (1 - lam) ** k)
        assert abs(_ewma(det)[2] / 256 - ref) < 1 / 256 + 1e-12
        assert det.smax_q8 == _ewma(det)[2]
        sc = (det.smax_q8 * 8 * 256) >> 8
        assert det.score_q8 == max(det.dist_q8, det.zmax_q8, sc)
        if sc > max(det.dist_q8, det.zmax_q8):
            assert det.feat == fi.F_BAND0 + 2


def test_each_mode_keeps_its_own_ewma_through_stops_and_a_sensor_fault_forgets_all():
    d = 2
    p = _params(d, det_slow_ms=32 * W_MS, det_modes=2, det_mode_c_q8=[0, 0, 512, 512],
                det_mode_s_q8=[256] * 4, det_op_speed_q8=[0, 25 * 256, 25 * 256 + 1, 60 * 256],
                det_conf_min_q8=0)
    det = Detector(p)
    f = _frame(d)
    f[fi.F_SPEED] = 20 * 256
    f[fi.F_SPEED_CONF] = 200
    f[fi.F_BAND0] = 2 * SD
    for i in range(50):
        det.step(f, i, 0)
    assert det.mode == 0 and _ewma(det)[0] > 256
    kept = _ewma(det, 0)
    f[fi.F_SPEED] = 30 * 256                  # the other operating point: its own EWMA, from 0
    det.step(f, 50, 0)
    assert det.mode == 1
    # first window of mode 1: t = (2 - 2) spreads on feature 0, (0 - 2) on feature 1
    assert _ewma(det) == [0, (-512) >> 5]
    for i in range(51, 80):
        det.step(f, i, 0)
    assert _ewma(det)[1] < 0 and _ewma(det, 0) == kept     # mode 0's evidence waits
    f[fi.F_VEL] = IDLE - 1                    # stopped: the persistence span is forgotten, the
    det.step(f, 80, 0)                        # machine's condition (the EWMAs) is not
    assert det.smax_q8 == 0 and _ewma(det, 0) == kept and _ewma(det, 1)[1] < 0
    f[fi.F_VEL] = VEL_PER_MM_S
    f[fi.F_SPEED] = 20 * 256                  # back at mode 0: it goes on from where it was
    det.step(f, 81, 0)
    assert det.mode == 0 and _ewma(det)[0] >= kept[0] - 1
    f[fi.F_ZERO] = det.zero_max[0] + 1        # a dropout: a sensor fault forgets every mode's
    det.step(f, 82, 0)
    assert det.state == al.SENSOR_FAULT and not any(det.ew_acc)


def test_each_mode_weighs_its_slow_channel_by_its_own_weight():
    # Two modes (under and over 25 Hz) with their own slow weights, 2 and 6 (det_mslam_q8), the
    # pooled one 4: the same 1.5-spread step on feature 1 enters each window's score as
    # smax * mslam[mode] / 256, the combination of docs/detector.md (Score); exported as given.
    d, shift, delta = 2, 5, 1.5
    p = _params(d, det_slow_ms=32 * W_MS, det_slam_q8=4 * 256, det_mslam_q8=[2 * 256, 6 * 256],
                det_modes=2, det_mode_c_q8=[0] * 4, det_mode_s_q8=[256] * 4,
                det_op_speed_q8=[0, 25 * 256, 25 * 256 + 1, 60 * 256], det_conf_min_q8=0)
    det = Detector(p)
    f = _frame(d)
    f[fi.F_SPEED_CONF] = 200
    f[fi.F_BAND0 + 1] = int(delta * SD)
    for i, (hz, w) in enumerate([(20, 2)] * 40 + [(30, 6)] * 40):
        f[fi.F_SPEED] = hz * 256
        det.step(f, i, 0)
        assert det.mode == (0 if hz == 20 else 1)
        assert det.score_q8 == max(det.dist_q8, det.zmax_q8, (det.smax_q8 * w * 256) >> 8)
    assert det.export()["det_mslam_q8"] == [512, 1536]
    # without it, every mode weighs by det_slam_q8
    det = Detector({**p, "det_mslam_q8": []})
    for i in range(40):
        f[fi.F_SPEED] = 30 * 256
        det.step(f, i, 0)
    assert det.score_q8 == max(det.dist_q8, det.zmax_q8, (det.smax_q8 * 4 * 256) >> 8)
    assert det.export()["det_mslam_q8"] == []


def test_mode_weights_are_checked():
    base = _params(1, det_modes=2, det_mode_c_q8=[0, 0], det_mode_s_q8=[256, 256],
                   det_op_speed_q8=[0, 25 * 256, 25 * 256 + 1, 60 * 256])
    Detector({**base, "det_mslam_q8": [0, 4096]})
    for bad in ([256], [256, 256, 256], [-1, 256], [256, 4097]):
        with pytest.raises(ValueError):
            Detector({**base, "det_mslam_q8": bad})


def test_evidence_gathers_only_at_the_speeds_the_mode_was_trained_at():
    # One mode whose range (15-25 Hz) reaches past the speeds it was trained at (18-22 Hz,
    # det_op_seen_q8). Feature 0 stands 2 spreads up everywhere. Within the trained speeds the
    # EWMA follows the step response of the EWMA recursion, delta (1 - (1 - lam)**k) (Roberts
    # 1959), to its last bit; at 16 Hz, a trim the model never saw, the window is scored (the
    # per-window channels) but every EWMA holds to the bit and the evidence so far is still read;
    # back at 20 Hz it goes on from where it was.
    d, shift = 2, 5
    lam = 2.0 ** -shift
    p = _params(d, det_slow_ms=32 * W_MS, det_slam_q8=256, det_op_speed_q8=[15 * 256, 25 * 256],
                det_op_seen_q8=[18 * 256, 22 * 256], det_conf_min_q8=0)
    det = Detector(p)
    f = _frame(d)
    f[fi.F_SPEED_CONF] = 200
    f[fi.F_BAND0] = 2 * SD
    f[fi.F_SPEED] = 20 * 256
    for i in range(20):
        _sparse(det, f, i)
    assert det.mode == 0 and abs(_ewma(det)[0] / 256 - 2 * (1 - (1 - lam) ** 20)) < 1 / 256
    kept = list(det.ew_acc)
    f[fi.F_SPEED] = 16 * 256
    for i in range(20, 40):
        _sparse(det, f, i)
        assert det.mode == 0 and det.dist_q8 >= 2 * 256 - 1 and list(det.ew_acc) == kept
        assert det.smax_q8 == _ewma(det)[0] > 0 and det.score_q8 >= det.smax_q8
    f[fi.F_SPEED] = 20 * 256
    for i in range(40, 60):
        _sparse(det, f, i)
    assert abs(_ewma(det)[0] / 256 - 2 * (1 - (1 - lam) ** 40)) < 2 / 256
    # a set without the key (or with it empty) gathers evidence anywhere in the range
    for q in ({k: v for k, v in p.items() if k != "det_op_seen_q8"}, {**p, "det_op_seen_q8": []}):
        det = Detector(q)
        f[fi.F_SPEED] = 16 * 256
        for i in range(20):
            _sparse(det, f, i)
        assert abs(_ewma(det)[0] / 256 - 2 * (1 - (1 - lam) ** 20)) < 1 / 256
    assert Detector(p).export()["det_op_seen_q8"] == [18 * 256, 22 * 256]


def test_trained_speeds_are_checked():
    good = {**_params(1, det_op_speed_q8=[15 * 256, 25 * 256], det_op_seen_q8=[18 * 256, 22 * 256]),
            "version": 1, "board": "b", "fs_hz": 3200, "n": 512, "axes": 1,
            "counts_per_g": 256, "fc_bands": [[3, 8]], "fc_vel_hz": [10, 1000]}
    prof = {"name": "b", "sample_rate_hz": 3200, "window_n": 512, "axes": 1}
    param_check.validate(good, prof)
    with pytest.raises(ValueError):
        param_check.validate({**good, "det_op_seen_q8": [18 * 256]}, prof)
    for bad in ({"det_op_seen_q8": [18 * 256]},                           # not k x 2
                {"det_op_speed_q8": [], "det_follow_q8": []}):            # no operating points
        with pytest.raises(ValueError):
            Detector({**good, **bad})
    # every range pair is [lo, hi]: the set is refused with the key named
    for key, pair in (("det_op_seen_q8", [22 * 256, 18 * 256]), ("det_op_speed_q8", [25 * 256, 15 * 256]),
                      ("det_op_load_q8", [5, -5])):
        with pytest.raises(ValueError, match=key + " must hold"):
            Detector({**good, key: pair})


def _two_s_up(d=2):
    """A detector (slow channel of 32 windows, over running time: det_wander_ms) after 40
    windows with feature 0 two spreads up, and the frame that gave them."""
    det = Detector(_params(d, det_slow_ms=32 * W_MS, det_wander_ms=128 * W_MS))
    f = _frame(d)
    f[fi.F_BAND0] = 2 * SD
    for i in range(40):
        det.step(f, i, 0)
    return det, f


def test_a_modes_evidence_halves_for_every_full_hour_it_was_not_scored():
    # detector.SLOW_HALF_S: the accumulators of a mode are shifted right once per full hour of
    # the detector's clock (windows of n / fs s, plus the seconds det.gap(s) reports) since the
    # mode was last scored. Exact integers: the acc is an int, halved by >>, then one window's
    # update acc += (t << (L - s)) - (acc >> s) (the recursion, docs/detector.md; the window
    # follows unwatched time, so it weighs 2**-s).
    det, f = _two_s_up()
    sh, up = det.ew_shift, det.ew_long - det.ew_shift
    acc = det.ew_acc[0]
    det.gap(2 * SLOW_HALF_S + 5)              # 2 h 5 s missing: two halvings
    det.step(f, 40, 0)
    half = acc >> 2
    assert det.ew_acc[0] == half + (512 << up) - (half >> sh)
    acc = det.ew_acc[0]
    det.gap(SLOW_HALF_S - 1)                  # 1 s short of an hour (the window's 0.16 s do
    det.step(f, 41, 0)                        # not make it up): no halving
    assert det.ew_acc[0] == acc + (512 << up) - (acc >> sh)
    # stopped windows count on the clock too: 22 500 windows of 0.16 s are exactly an hour
    acc = det.ew_acc[0]
    f[fi.F_VEL] = IDLE - 1
    for i in range(22500):
        det.step(f, 42 + i, 0)
    f[fi.F_VEL] = VEL_PER_MM_S
    det.step(f, 30000, 0)
    half = acc >> 1
    assert det.ew_acc[0] == half + (512 << up) - (half >> sh)


def test_the_clock_rebases_and_keeps_every_age_right():
    # Gaps of _GAP_MAX_S push the clock over 2**29 s; it moves back by 2**28 with the modes'
    # times, so every value stays a small int (< 2**30 on the device) and the age is unchanged:
    # 40 gaps of 194 days are thousands of halvings, capped at 29, which leave 0 of a positive
    # accumulator; the credit is full, so the one window's update weighs 2**-s.
    det, f = _two_s_up()
    for _ in range(40):
        det.gap(1 << 24)
        assert det.clock_s < 1 << 29 and all(-(1 << 28) <= v < 1 << 29 for v in det.ew_seen_s)
    det.step(f, 40, 0)
    assert det.ew_acc[0] == 512 << (det.ew_long - det.ew_shift)   # the old evidence gone, one
    assert det.ew_credit_ms[0] == det.ew_cap_ms - det.ew_spend_ms  # window's update left


def _stream(d, n, seed):
    """Gaussian windows with a stop, a rising feature and an outlier burst: a stream that moves
    the detector through normal, alert, alarm, idle (a stop) and back."""
    rng = np.random.default_rng(seed)
    x = np.rint(SD * rng.standard_normal((n, d))).astype(int)
    x[300:700, 1] += np.linspace(0, 6 * SD, 400).astype(int)
    x[900:905] += 12 * SD
    vel = np.full(n, VEL_PER_MM_S)
    vel[500:510] = 100
    return x, vel


def _trace(p, x, vel):
    det = Detector(p)
    f = _frame(x.shape[1])
    out = []
    for i, (row, v) in enumerate(zip(x.tolist(), vel.tolist())):
        f[fi.F_BAND0:fi.F_BAND0 + len(row)] = array("i", row)
        f[fi.F_VEL] = v
        out.append((det.step(f, i, 0), det.score_q8, det.feat, det.mode, det.dist_q8, det.zmax_q8))
    ev = []
    while det.events.count:
        k = det.events.pop()
        e = det.events
        ev.append((e.t[k], e.old[k], e.new[k], e.reason[k], e.feat[k], e.score_q8[k]))
    return out, ev


def test_slam_zero_behaves_exactly_as_a_set_without_the_slow_channel():
    # A set written before the slow channel (no det_slow_ms, det_slam_q8) and sets with it off
    # (weight 0, any time constant) give the same states, scores, features and events, window for
    # window; and the score is the old two-channel one, max(dist, zmax * zlam / 256).
    d = 4
    base = _params(d, det_thr_alert_q8=4 * 256, det_thr_alarm_q8=7 * 256, det_persist_ms=5 * W_MS,
                   det_persist_q8=154, det_escalate_ms=4 * W_MS, det_dwell_ms=4 * W_MS, det_zlam_q8=300)
    old = {k: v for k, v in base.items() if k not in LATER_KEYS}
    param_check.validate({**old, "version": 1, "board": "b", "fs_hz": 3200, "n": 512, "axes": 1,
                          "counts_per_g": 256, "fc_bands": [[3, 8]] * d, "fc_vel_hz": [10, 1000]},
                         {"name": "b", "sample_rate_hz": 3200, "window_n": 512, "axes": 1})
    x, vel = _stream(d, 1200, 3)
    ref = _trace(old, x, vel)
    states = {s for s, *_ in ref[0]}
    assert {al.NORMAL, al.ALERT, al.ALARM, al.IDLE} <= states
    for r in ref[0]:
        assert r[1] == (max(r[4], (r[5] * 300) >> 8) if r[3] >= 0 else 0)
    for ms in (0, 5000, 40000):
        assert _trace({**old, "det_slow_ms": ms, "det_slam_q8": 0}, x, vel) == ref
    # and the channel on does change it (the test can fail)
    assert _trace({**old, "det_slow_ms": 5000, "det_slam_q8": 2048}, x, vel) != ref


def test_slow_channel_keys_are_range_checked():
    good = {**_params(1), "version": 1, "board": "b", "fs_hz": 3200, "n": 512, "axes": 1,
            "counts_per_g": 256, "fc_bands": [[3, 8]], "fc_vel_hz": [10, 1000]}
    prof = {"name": "b", "sample_rate_hz": 3200, "window_n": 512, "axes": 1}
    param_check.validate(good, prof)
    for k, v in (("det_slam_q8", -1), ("det_slam_q8", 4097), ("det_slow_ms", -5)):
        with pytest.raises(ValueError):
            param_check.validate({**good, k: v}, prof)
    with pytest.raises(ValueError):
        Detector(_params(1, det_slam_q8=4097))


def test_accumulator_stays_under_its_bound_at_the_extremes():
    # The departures the EWMA averages lie in [-768, 32767] Q8 (modes.ModeModel.distance); at the
    # longest time constant (shift 14) ew_acc = EWMA * 2**14 must stay within 32767 * 2**14 + 1 <
    # 2**29 (the docstring's bound; small ints on the device end at 2**30), and the EWMA must
    # reach the input (no precision lost to the shift). Driven directly: at shift 14 settling
    # takes 12 * 16384 windows, which leave (1 - 2**-14)**(12 * 16384) < e**-12 of the 33 535
    # Q8 between the extremes, 0.2 Q8: within the last bit.
    d = 2
    det = Detector(_params(d, det_slow_ms=16384 * W_MS))
    assert det.ew_shift == det.ew_long == 14
    t = det.model.t_q8
    bound = 32767 * 16384 + 1
    for hi, lo in ((32767, -768), (-768, 32767)):
        t[0], t[1] = hi, lo
        top = 0
        for _ in range(12 * 16384):
            det._slow(0)
            top = max(top, max(abs(a) for a in det.ew_acc))
        assert top <= bound < 1 << 29
        assert _ewma(det) == [hi, lo] or max(abs(e - v) for e, v in zip(_ewma(det), (hi, lo))) <= 1


def test_per_feature_gains_weigh_each_ewma():
    # det_sgain_q8 weighs each feature's EWMA before the largest is taken. Steps of 1.5 and 1.0
    # spreads on features 0 and 2, weighted 1 and 3: the weighted EWMAs follow the step's closed
    # form delta * g * (1 - (1 - lam)**k) (Montgomery, EWMA chapter), so feature 2 drives the
    # channel although its step is the smaller; a gain of 0 takes feature 1 out however large its
    # step. Integer error: the EWMA is floored to 1/256 spread, then the product once more, so
    # at most (g + 1) / 256 spread.
    d, shift = 3, 5
    lam = 2.0 ** -shift
    gains = [256, 0, 3 * 256]
    det = Detector(_params(d, det_slow_ms=32 * W_MS, det_sgain_q8=gains))
    f = _frame(d)
    det.step(f, 0, 0)
    steps = (1.5, 20.0, 1.0)
    for j, s in enumerate(steps):
        f[fi.F_BAND0 + j] = int(s * SD)
    for k in range(1, 120):
        _sparse(det, f, k)
        ref = [s * g / 256 * (1 - (1 - lam) ** k) for s, g in zip(steps, gains)]
        assert abs(det.smax_q8 / 256 - max(ref)) <= (max(gains) / 256 + 1) / 256 + 1e-12
        if k > 10:
            assert det.s_drive == 2


def test_sets_without_gains_weigh_every_feature_one():
    # a set written before det_sgain_q8, or with it empty, is the unweighted slow channel
    d = 4
    x, vel = _stream(d, 1200, 7)
    base = _params(d, det_thr_alert_q8=4 * 256, det_thr_alarm_q8=7 * 256, det_persist_ms=5 * W_MS,
                   det_slow_ms=8 * W_MS, det_slam_q8=1024)
    old = {k: v for k, v in base.items() if k != "det_sgain_q8"}
    ref = _trace(old, x, vel)
    assert _trace({**old, "det_sgain_q8": []}, x, vel) == ref
    assert _trace({**old, "det_sgain_q8": [256] * d}, x, vel) == ref
    assert _trace({**old, "det_sgain_q8": [512] * d}, x, vel) != ref


def test_gains_are_checked():
    good = {**_params(2), "version": 1, "board": "b", "fs_hz": 3200, "n": 512, "axes": 1,
            "counts_per_g": 256, "fc_bands": [[3, 8]] * 2, "fc_vel_hz": [10, 1000]}
    good["det_feat"] = [fi.F_BAND0, fi.F_BAND0 + 1]
    prof = {"name": "b", "sample_rate_hz": 3200, "window_n": 512, "axes": 1}
    param_check.validate({**good, "det_sgain_q8": [256, 256]}, prof)
    with pytest.raises(ValueError):
        param_check.validate({**good, "det_sgain_q8": [256]}, prof)       # one per scored feature
    for bad in ([256, -1], [256, 4097]):
        with pytest.raises(ValueError):
            Detector({**_params(2), "det_sgain_q8": bad})
    # the speed slopes likewise: one per scored feature, or none ([] or absent)
    param_check.validate({**good, "det_follow_q8": []}, prof)
    with pytest.raises(ValueError):
        param_check.validate({**good, "det_follow_q8": [256]}, prof)


def test_training_gains_from_ewma_spread():
    # training.sgain_q8: sigma_j is the r.m.s. of feature j's held-out EWMA, floored at the EWMA
    # spread of independent unit departures, sqrt(lam / (2 - lam)) (Montgomery, EWMA chart);
    # weights median(sigma) / sigma_j. Independent N(0, 1) departures give EWMAs at that floor, so
    # every weight is 1 within the sampling error; a feature whose departures wander as an AR(1)
    # with coefficient phi has the larger EWMA variance
    #   lam / (2 - lam) * (1 + (1 - lam) phi) / (1 - (1 - lam) phi)
    # (the EWMA's variance for AR(1) input: sum over lags of the two filters' products; derived
    # from the geometric series, common practice) and its weight falls by that ratio's root.
    from scipy.signal import lfilter
    from host_tools.fit.training import sgain_q8
    shift, n, d = 4, 200_000, 5
    lam = 2.0 ** -shift
    rng = np.random.default_rng(3)
    x = rng.standard_normal((n, d))
    phi = 0.9
    x[:, 4] = lfilter([np.sqrt(1 - phi ** 2)], [1, -phi], x[:, 4])       # unit-variance AR(1)
    e = lfilter([lam], [1, -(1 - lam)], x, axis=0)[1000:]
    q8, why = sgain_q8((e * e).sum(0), len(e), shift)
    ratio = np.sqrt((1 + (1 - lam) * phi) / (1 - (1 - lam) * phi))
    # sampling error of an EWMA variance from k correlated values: Bartlett, as in the chart test
    # above, with the EWMA's own lag-one correlation 1 - lam (the AR(1) input's phi = 0.9 decays
    # faster); the relative s.e. of sigma is half that of sigma**2, and a weight is a ratio of two
    # sigmas (sqrt 2); 4 s.e. plus the Q8 rounding
    rho = 1 - lam
    rel = np.sqrt(2) * 0.5 * np.sqrt(2 / len(e) * (1 + rho ** 2) / (1 - rho ** 2))
    for j in range(4):
        assert abs(q8[j] / 256 - 1) <= 4 * rel + 0.5 / 256
    assert abs(q8[4] / 256 - 1 / ratio) <= 4 * rel / ratio + 0.5 / 256
    assert "spread" in why
    # a feature quieter than the floor cannot earn a larger weight than one at the floor
    floor2 = lam / (2 - lam)
    q8b, _ = sgain_q8(np.array([floor2, 4.0, 1e-12]) * len(e), len(e), shift)
    assert q8b[2] == q8b[0] == 256 and q8b[1] == round(256 * np.sqrt(floor2) / 2)


def test_training_names_the_features_whose_averages_wander():
    # training.slow_wander: a feature wanders when its held-out EWMA's r.m.s. is at least
    # WANDER_RATIO (2) times sqrt(lam / (2 - lam)), the EWMA spread of independent unit
    # departures (Montgomery, EWMA chart). For AR(1) input of coefficient phi that ratio is
    # sqrt((1 + (1 - lam) phi) / (1 - (1 - lam) phi)) (as in the test above): at lam = 1/16,
    # 1 for phi = 0 (flickers), 1.66 for phi = 0.5 (flickers), 3.43 for phi = 0.9 (wanders).
    # 200 000 values put each ratio within 4 Bartlett s.e. (1.2 % here) of its value, far from 2.
    # A feature averaged already (the half-order prominence) never wanders, however it moves.
    from scipy.signal import lfilter
    from host_tools.fit.training import WANDER_RATIO, sgain_q8, slow_wander
    shift, n = 4, 200_000
    lam = 2.0 ** -shift
    rng = np.random.default_rng(4)
    x = rng.standard_normal((n, 4))
    for j, phi in ((1, 0.5), (2, 0.9), (3, 0.9)):
        x[:, j] = lfilter([np.sqrt(1 - phi ** 2)], [1, -phi], x[:, j])
    e = lfilter([lam], [1, -(1 - lam)], x, axis=0)[1000:]
    ratio = [np.sqrt((1 + (1 - lam) * phi) / (1 - (1 - lam) * phi)) for phi in (0, 0.5, 0.9)]
    assert ratio[1] < WANDER_RATIO < ratio[2]
    flags, why = slow_wander((e * e).sum(0), len(e), shift, [False, False, False, True])
    assert flags == [0, 0, 1, 0] and why.startswith("1 of 4 features wander")
    assert slow_wander(np.zeros(4), 0, shift)[0] == [0] * 4
    # the gains then floor each feature at its own EWMA's independent-departure spread: a
    # wandering one at its longer time constant's (shift 6: sqrt(1/127)), so a feature quieter
    # than that still weighs as one at it
    lo = (2.0 ** -6) / (2 - 2.0 ** -6)
    q8, _ = sgain_q8(np.array([lam / (2 - lam), 1e-12, lo]) * 1000, 1000, [shift, 6, 6])
    assert q8[1] == q8[2] and abs(q8[0] / q8[2] - np.sqrt(lo / (lam / (2 - lam)))) < 1 / 256


def test_training_weighs_each_mode_against_its_own_held_out_running():
    # mslam_q8 makes slam_q8's match per mode. The persistence statistic (the k-th largest in a
    # span) commutes with a positive factor, so a mode whose slow channel runs twice as high over
    # the same per-feature channel gets half the weight, up to the floor to Q8 (the match itself
    # is a ratio of quantiles: numpy's); a mode with nothing held out keeps the pooled weight; a
    # set of one mode has no weights of its own.
    from host_tools.fit.training import mslam_q8
    p = _params(2, det_slow_ms=32 * W_MS, det_modes=3, det_mode_c_q8=[0] * 6, det_mode_s_q8=[256] * 6,
                det_op_speed_q8=[0, 20 * 256, 20 * 256 + 1, 30 * 256, 30 * 256 + 1, 60 * 256])
    rng = np.random.default_rng(8)
    z = [np.abs(rng.normal(0, 600, 400)) for _ in range(6)]
    s = [np.abs(rng.normal(0, 150, 400)) for _ in range(6)]
    got, why = mslam_q8([(z, s), (z, [2.0 * c for c in s]), ([], [])], 1000, p, 1)
    assert got[2] == 1000 and "mode 1" in why
    assert abs(got[1] - got[0] / 2) <= 1                # both floored to Q8 from w and w / 2
    assert mslam_q8([(z, s)], 1000, p, 1) == ([], "")
