"""Sensor health beyond dropouts: the knock rule (an impulse one axis sees and the others do not,
reason `coupling`), its limits from the sensor's statistics (host_tools/fit/sensor_fit.py), the
zero-run limit on a gravity axis, the time a faulty sensor needs to be trusted again, and the
window path on a real MicroPython (no allocation, every int small)."""
import math
from array import array

import numpy as np
import pytest
from scipy import optimize, stats

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.detect.detector import Detector, default_params
from host_tools.fit import sensor_fit
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.twin.mpy_guest import run_guest
from tests.test_detector import events as detector_events

AXES = 3
PA = fi.per_axis(1)
VEL = 6680                 # F_VEL units per mm/s
W_MS = 160                 # one window: 512 samples at 3200 Hz
N, SF, ID = al.NORMAL, al.SENSOR_FAULT, al.IDLE


def params(**kw):
    """Three axes, one band, one scored feature (axis 0's band, baseline 1000 +- 100): a model
    that scores 0 on every window here, so only sensor health and the level decide."""
    p = default_params(AXES, 1, VEL)
    p.update(det_feat=[fi.F_BAND0], det_base_mean_q4=[1000 * 16], det_base_sd_q4=[100 * 16],
             det_modes=1, det_mode_c_q8=[0], det_mode_s_q8=[256], det_hold_ms=0, det_steady_ms=0,
             det_idle_vel_q16=VEL // 4, det_persist_ms=5 * W_MS, det_persist_q8=154,
             det_fault_clear_ms=4 * W_MS)
    p.update(kw)
    return p


def win(peaks=(40, 40, 40), crests=(4.0, 4.0, 4.0)):
    """Features of a healthy running window; per axis its peak (counts) and crest factor."""
    f = array("i", bytes(4 * AXES * PA))
    for a in range(AXES):
        b = a * PA
        f[b + fi.F_RMS] = int(peaks[a] / crests[a] * 256)
        f[b + fi.F_PEAK] = int(peaks[a] * 256)
        f[b + fi.F_CREST] = int(crests[a] * 4096)
        f[b + fi.F_KURT] = 3 << 12
        f[b + fi.F_VEL] = VEL
        f[b + fi.F_STUCK] = 1
        f[b + fi.F_ORD_VANE] = fi.LOG2_ZERO_Q8
        f[b + fi.F_BAND0] = 1000
    return f


def running(det):
    for i in range(20):
        det.step(win(), i, 0)
    assert det.state == N
    events(det)                          # the start
    return det


def events(det):
    """(from, to, reason, feature) of each event read off the ring."""
    return [(old, new, reason, feat) for _, old, new, reason, _, feat, _ in detector_events(det)]


# -- the rule ---------------------------------------------------------------------------------

def test_a_knock_on_one_axis_is_a_coupling_fault_at_once():
    det = running(Detector(params()))
    # axis 1: crest 20 (default limit 8) and a peak 10 times the others': the sensor's own knock
    assert det.step(win((40, 400, 40), (4.0, 20.0, 4.0)), 20, 0) == SF
    assert events(det) == [(N, SF, al.R_COUPLING, PA + fi.F_PEAK)]
    assert al.REASON_NAMES[al.R_COUPLING] == "coupling"
    # trusted again only after det_fault_clear_ms of healthy windows (4 here), then the hold-off
    states = [det.step(win(), 21 + i, 0) for i in range(6)]
    assert states == [SF, SF, SF, ID, N, N]


def test_a_short_run_of_zeros_on_the_gravity_axis_is_a_dropout_not_a_knock():
    # z reads 1 g = 256 counts; a read that returned an empty frame for 4 samples pulls it to 0:
    # a 256-count impulse only z sees, with a run of 4 zeros (under z's zero-run limit here)
    def zeros_on_z(peaks, crests):
        det = running(Detector(params(det_zero_max=[44, 44, 44])))
        f = win(peaks, crests)
        f[2 * PA + fi.F_MEAN] = 254 << 8
        f[2 * PA + fi.F_ZERO] = 4
        assert det.step(f, 20, 0) == SF
        return events(det)
    assert zeros_on_z((20, 20, 256), (4.0, 4.0, 11.0)) == [(N, SF, al.R_DROPOUT, 2 * PA + fi.F_ZERO)]
    # a knock of 1000 counts on the same axis is the mount's, zeros or not
    assert zeros_on_z((40, 40, 1000), (4.0, 4.0, 20.0)) == [(N, SF, al.R_COUPLING, 2 * PA + fi.F_PEAK)]


@pytest.mark.parametrize("peaks,crests", [
    ((400, 100, 40), (20.0, 10.0, 4.0)),    # the housing carried it to axis 0 at 1/4: a machine impact
    ((400, 400, 400), (20.0, 20.0, 20.0)),  # every axis alike
    ((400, 40, 40), (8.0, 4.0, 4.0)),       # peak alone, crest at the limit: not impulsive enough
    ((320, 40, 40), (20.0, 4.0, 4.0)),      # exactly 8 times the others: not over the ratio
])
def test_what_is_not_a_knock(peaks, crests):
    det = running(Detector(params()))
    assert det.step(win(peaks, crests), 20, 0) == N
    assert events(det) == []


def test_one_axis_has_no_witness_so_no_knock():
    p = default_params(1, 1, VEL)
    p.update(det_feat=[fi.F_BAND0], det_base_mean_q4=[1000 * 16], det_base_sd_q4=[100 * 16],
             det_modes=1, det_mode_c_q8=[0], det_mode_s_q8=[256], det_hold_ms=0, det_steady_ms=0,
             det_idle_vel_q16=VEL // 4)
    det = Detector(p)
    f = array("i", win((4000, 40, 40), (30.0, 4.0, 4.0))[:PA])
    assert [det.step(f, i, 0) for i in range(3)] == [N] * 3


# -- the limits against outside references ----------------------------------------------------

def test_gaussian_crest_exceedance_against_simulated_noise():
    # Reference: Gaussian noise from numpy (sigma 1000 counts, so rounding is 1/2000 sigma and
    # negligible) through the feature twin (bit-identical to the device, tests/test_feature_twin.py),
    # counted against sensor_fit's analytic probability. Tolerance: the count of W independent
    # windows over a limit of probability p is Binomial(W, p); each check accepts the central
    # 99.9 % of it (scipy.stats.binom), so a correct formula fails one of the three checks with
    # probability under 0.3 %. The probabilities are those of limits the simulation can reach;
    # the formula is the same one that sets the limit at 6e-11 per window.
    n, w = 512, 8000
    rng = np.random.default_rng(3)
    x = np.round(rng.standard_normal((w * n, 1)) * 1000).astype(np.int16)
    crest = FeatureTwin(TwinConfig(n=n, fs_hz=3200, adc_min=-32768, adc_max=32767), 1).features(x)[:, fi.F_CREST] / 4096
    for p in (0.2, 0.05, 0.01):
        c = optimize.brentq(lambda c: sensor_fit.gaussian_crest_exceedance(c, n) - p, 1.0, 10.0)
        lo, hi = stats.binom.ppf([0.0005, 0.9995], w, p)
        assert lo <= int((crest > c).sum()) <= hi, (p, c)


def test_crest_limit_meets_the_budget_and_covers_the_data():
    n, windows_30 = 512, 30 * 86400 / 0.16
    rng = np.random.default_rng(8)
    crest = (3.0 + rng.random((5000, 3)) * np.array([1.0, 1.0, 6.0])) * 4096    # axis z: up to 9
    rms = np.full((5000, 3), 3 * 256)
    lim, det = sensor_fit.crest_limits(crest.astype(int), rms, n, windows_30)
    # Gaussian limit: a false knock once in 1000 months (30 days = windows_30 windows), the
    # probability read back from scipy.stats.norm through the formula; half a count of rounding
    # at 3 counts r.m.s. lifts it by 1/6
    g = det["axes"][0]["gaussian"] - 0.5 / 3
    assert sensor_fit.gaussian_crest_exceedance(g, n) * windows_30 == pytest.approx(1e-3, rel=1e-6)
    assert 7.0 < g < 8.0          # sqrt(2 ln(n W / 1e-3)) ~ 7.8 bounds it from above (union of Gaussian tails)
    assert lim[0] == math.ceil(det["axes"][0]["gaussian"] * 4096)
    # axis z's own data (up to 9) carried from 5000 windows to the budget's 1.6e10, as the
    # maximum of a Gaussian tail grows: sqrt(ln(n 1.6e10) / ln(n 5000))
    grow = math.sqrt(math.log(n * windows_30 / 1e-3) / math.log(n * 5000))
    assert lim[2] / 4096 == pytest.approx(crest[:, 2].max() / 4096 * grow, abs=1 / 4096)


def test_zero_run_limit_on_a_gravity_axis_uses_the_axis_repeat_rate():
    # x: noise about 0; z: 1 g = 256 counts, never zero. Reference: for white Gaussian noise of
    # sigma counts rounded to whole counts, two samples are equal with probability
    # sum_k P(k)**2 (docs/detector.md, Sensor health); z's zero runs are limited by p0 (one
    # pseudo-count in 2e6 samples) and that repeat rate, not by a prior of 1/2.
    rng = np.random.default_rng(4)
    sigma = 3.0
    c = np.round(rng.standard_normal((2_000_000, 2)) * sigma + np.array([0.0, 256.0])).astype(np.int16)
    stuck, zero, det = sensor_fit.run_limits([c], 512, 30 * 86400 / 0.16)
    k = np.arange(-40, 41)
    pk = stats.norm.cdf(k + 0.5, scale=sigma) - stats.norm.cdf(k - 0.5, scale=sigma)
    q = float((pk ** 2).sum())
    assert det["axes"][0]["q_equal"] == pytest.approx(q, rel=0.02)      # 2e6 pairs: 1 % binomial spread
    z = det["axes"][1]
    assert z["q_zero_again"] == pytest.approx(z["q_equal_again"], rel=1e-9)
    budget = 1e-3 / (512 * 30 * 86400 / 0.16)
    assert zero[1] == math.ceil(math.log(budget / z["p_zero"]) / math.log(z["q_zero_again"]))
    assert zero[1] <= 7          # a short run of zeros on the gravity axis is already a dropout


# -- on the device --------------------------------------------------------------------------

GUEST = """
from array import array
from firmware_py.detect.detector import Detector, default_params
from firmware_py.dsp import feature_index as fi
PA = fi.per_axis(1)
BIG = (1 << 30) - 1
p = default_params(3, 1, 6680)
p.update(det_feat=[fi.F_BAND0], det_base_mean_q4=[16000], det_base_sd_q4=[1600], det_modes=1,
         det_mode_c_q8=[0], det_mode_s_q8=[256], det_hold_ms=0, det_steady_ms=0,
         det_knock_ratio_q8=256, det_dc_lo_q8=[-BIG] * 3, det_dc_hi_q8=[BIG] * 3,
         det_fault_clear_ms=480)
det = Detector(p)
VALS = (0, 1, BIG, BIG - 1, 1 << 24, (1 << 24) + 15, 40 << 8, 32768, 32769, -1)
NW = 240
feats = array("i", bytes(4 * 3 * PA * NW))
seed = 11
for i in range(NW):
    for a in range(3):
        b = (i * 3 + a) * PA
        feats[b + fi.F_RMS] = 10 << 8
        feats[b + fi.F_VEL] = 6680
        feats[b + fi.F_STUCK] = 1
        feats[b + fi.F_BAND0] = 1000
        feats[b + fi.F_PEAK] = 40 << 8
        feats[b + fi.F_CREST] = 4 << 12
        if i % 3 == 0:          # peaks and crest factors anywhere in the small-int range
            seed = (seed * 1103515245 + 12345) & 0x7FFFFFFF
            feats[b + fi.F_PEAK] = VALS[(seed >> 16) % len(VALS)]
            seed = (seed * 1103515245 + 12345) & 0x7FFFFFFF
            feats[b + fi.F_CREST] = VALS[(seed >> 16) % len(VALS)]
out = array("i", bytes(4 * NW))
f = array("i", bytes(4 * 3 * PA))

def run_all():
    for i in range(NW):
        for j in range(3 * PA):
            f[j] = feats[i * 3 * PA + j]
        out[i] = det.step(f, i, 0)
    return 0

ok = locked(run_all)
ev = []
while True:
    k = det.events.pop()
    if k < 0:
        break
    ev.append([det.events.new[k], det.events.reason[k], det.events.feat[k]])
emit([ok, list(out), ev])
"""


def test_knock_path_allocates_nothing_and_stays_small_on_micropython():
    # The WASI MicroPython has 31-bit small ints: any intermediate past 2**30 would allocate and
    # fail under the lock. The same script under CPython gives the same states and events.
    import json
    import textwrap
    guest = run_guest(GUEST).out[0]
    host = []
    exec(textwrap.dedent(GUEST), {"emit": lambda v: host.append(json.loads(json.dumps(v))),
                                  "locked": lambda fn: (True, fn())})
    assert guest[0][0] is True
    assert guest == host[0]
    assert [e for e in guest[2] if e[1] == al.R_COUPLING]       # the knock path ran


def test_training_counts_knocks_in_its_data_with_the_noise_limit():
    # training warns when its own windows hold knocks (its data-derived limit would rise over
    # them); the count is the device's own check with the Gaussian limit
    from host_tools.fit.training import _knocks
    p = params(det_knock_crest_q12=[7 << 12] * AXES)
    rows = np.array([list(win()), list(win((40, 400, 40), (4.0, 20.0, 4.0))), list(win())])
    assert _knocks(rows, p) == 1


@pytest.mark.parametrize("key", ["det_knock_crest_q12", "det_stuck_max", "det_zero_max"])
def test_a_set_with_per_axis_limits_for_other_axes_is_refused(key):
    # one limit per axis of the board (desk: 3), checked before anything commits the set
    from pathlib import Path
    from firmware_py.run import board, param_check, params as params_mod
    desk = board.load(str(Path(__file__).resolve().parents[1] / "boards" / "desk.json"))
    p = params_mod.factory(desk)
    param_check.validate(p, desk)
    p[key] = p[key][:2]
    with pytest.raises(ValueError, match=key):
        param_check.validate(p, desk)
