"""Learning on the device (baseline, sequential modes, thresholds), slow drift, and the host fit."""
from array import array

import numpy as np
import pytest
from scipy import stats

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.dsp import feature_index as fi
from firmware_py.detect.detector import CHI_Q8, Detector, default_params
from host_tools.fit import modes_fit as mf

AXES, BANDS = 3, 4
PA = fi.per_axis(BANDS)
VEL = 6680                   # F_VEL units per mm/s


def pump(n, point, rng, band_shift=None):
    """n windows of an invented pump (Brackwater P-101) at operating point 0 (low flow, shaft at
    20 Hz) or 1 (high flow, 25 Hz). band_shift: (axis, band, octaves) added to one band power."""
    level = (3000, 7000)[point]          # r.m.s., Q8 counts
    bands = ((1800, 1500, 1200, 900), (2300, 1700, 1500, 1000))[point]   # log2 Q8
    out = []
    for _ in range(n):
        f = array("i", bytes(4 * AXES * PA))
        for a in range(AXES):
            b = a * PA
            rms = int(level * (1 + 0.3 * a) * np.exp(rng.normal(0, 0.05)))
            crest = 3.5 + rng.normal(0, 0.15)
            f[b + fi.F_MEAN] = int(rng.normal(0, 50))
            f[b + fi.F_RMS] = rms
            f[b + fi.F_PEAK] = int(rms * crest)
            f[b + fi.F_CREST] = int(crest * 4096)
            f[b + fi.F_KURT] = int((3 + rng.normal(0, 0.15)) * 4096)
            f[b + fi.F_VEL] = int(VEL * 0.9 * (1 + point) * np.exp(rng.normal(0, 0.05)))
            f[b + fi.F_STUCK] = 2
            f[b + fi.F_SPEED] = (20, 25)[point] * 256 + int(rng.normal(0, 20))
            f[b + fi.F_SPEED_CONF] = 200
            for k in range(BANDS):
                f[b + fi.F_BAND0 + k] = bands[k] + int(rng.normal(0, 15))
        if band_shift:
            a, k, octv = band_shift
            f[a * PA + fi.F_BAND0 + k] += int(256 * octv)
        out.append(f)
    return out


def mixed(n, rng):
    """Operating points alternating in runs of 50 windows."""
    out = []
    for i in range(0, n, 50):
        out += pump(min(50, n - i), (i // 50) % 2, rng)
    return out


def params(**kw):
    p = default_params(AXES, BANDS, VEL)
    # time base: windows of 160 ms; no hold-off, steadiness over one window, persistence 3 of 5
    p.update(det_hold_ms=0, det_steady_ms=0, det_persist_ms=800, det_persist_q8=154,
             det_escalate_ms=640, det_dwell_ms=640, det_learn_base_n=400, det_learn_mode_n=600,
             det_learn_min_n=20)
    p.update(kw)
    return p


def feed(det, windows, t0=0):
    return [det.step(f, t0 + i, 0) for i, f in enumerate(windows)]


def learned(rng, **kw):
    det = Detector(params(**kw))
    feed(det, pump(1, 0, rng))
    assert det.learn(1)
    feed(det, mixed(1000, rng), 2)
    return det


def test_chi_table_is_scipys():
    # reference: scipy.stats.chi2, upper tail p = 1e-4, square root, Q8
    for d in range(1, 65):
        assert CHI_Q8[d - 1] == round(256 * np.sqrt(stats.chi2.isf(1e-4, d)))


def test_learning_finds_the_operating_modes_and_then_monitors():
    rng = np.random.default_rng(1)
    det = learned(rng)
    assert det.state == al.NORMAL and not det.learning
    assert det.model.k == 2
    d = det.d
    assert det.thr_alert_q8 == (CHI_Q8[d - 1] * 320) >> 8
    assert det.thr_alarm_q8 == (det.thr_alert_q8 * 384) >> 8
    # the two centroids lie about two baseline spreads apart on the r.m.s. of axis 0: a balanced
    # two-point mixture puts its modes 2 / sqrt(1 + 4 s**2 / D**2) baseline spreads apart, just
    # under 2 when the within-mode spread s (5 %) is small against the gap D (1.2 octaves)
    c = det.model.c_q8
    j = list(det.idx).index(fi.F_RMS)
    assert abs(c[j] - c[d + j]) > 1.9 * 256
    ev = [(det.events.old[i], det.events.new[i], det.events.reason[i])
          for i in iter(det.events.pop, -1)]
    assert ev[-2:] == [(al.NORMAL, al.LEARNING, al.R_LEARN_START),
                       (al.LEARNING, al.NORMAL, al.R_LEARN_DONE)]
    # healthy running at both points: no alert over 2000 windows
    states = feed(det, mixed(2000, rng), 2000)
    assert al.ALERT not in states and al.ALARM not in states
    # one band of axis 1 up by two octaves (6 dB): an alert or alarm, driven by that band
    states = feed(det, pump(10, 1, rng, band_shift=(1, 2, 2.0)), 5000)
    assert states[-1] in (al.ALERT, al.ALARM)
    assert det.feat == PA + fi.F_BAND0 + 2


def test_device_learning_agrees_with_the_host_fit():
    rng = np.random.default_rng(2)
    det = learned(rng)
    # the host fits from the same kind of data (a fresh sample): same number of modes, and each
    # device centroid within half a baseline spread (rms over features) of a host centroid
    rows = np.array([list(f) for f in mixed(1000, np.random.default_rng(3))])
    host = mf.fit(rows, params(), rows[:, fi.F_SPEED] / 256)
    assert host["det_modes"] == det.model.k == 2
    d = det.d
    hc = np.array(host["det_mode_c_q8"]).reshape(2, d)
    for m in range(2):
        dc = np.array(det.model.c_q8[m * d:(m + 1) * d])
        assert np.sqrt(((hc - dc) ** 2).mean(1)).min() < 128
    # each mode's learned speeds (det_op_seen_q8, where the slow channel gathers evidence) hold
    # its set point and lie within 6 sigma of it: the window speeds drawn above scatter N(0, 20)
    # Q8 about 20 or 25 Hz, and every one of some 10**4 Gaussian draws stays within 6 sigma but
    # with probability 2e-5 (scipy: 1e4 * 2 * norm.sf(6)); the host's 0.5-99.5 % points likewise
    seen = np.array(det.export()["det_op_seen_q8"]).reshape(2, 2)
    for span in (seen, np.array(host["det_op_seen_q8"]).reshape(2, 2)):
        for (lo, hi), hz in zip(sorted(span.tolist()), (20, 25)):
            assert hz * 256 - 6 * 20 <= lo <= hz * 256 <= hi <= hz * 256 + 6 * 20
    # and a detector built from the host's keys is quiet on healthy data
    p = params()
    p.update(host)
    quiet = Detector(p)
    states = feed(quiet, mixed(1000, rng))
    assert al.ALERT not in states and al.ALARM not in states


def test_idle_windows_are_not_learned():
    rng = np.random.default_rng(4)
    det = Detector(params(det_learn_base_n=50, det_learn_mode_n=50))
    det.learn(0)
    stopped = pump(30, 0, rng)
    for f in stopped:
        for a in range(AXES):
            f[a * PA + fi.F_VEL] = VEL // 100   # 0.01 mm/s: under the default floor, 0.05
    feed(det, stopped)
    assert det.state == al.LEARNING and det.wb.n[0] == 0
    feed(det, pump(99, 0, rng), 100)
    assert det.state == al.LEARNING
    feed(det, pump(1, 0, rng), 300)
    assert det.state == al.NORMAL


def test_learned_idle_floor_is_a_quarter_of_the_quietest_velocity():
    # the device: the quietest largest-axis F_VEL of the baseline windows, over 4; the host fit:
    # the same rule over all its windows; neither lowers the floor of the set
    rng = np.random.default_rng(10)
    w = mixed(100, rng)
    det = Detector(params(det_learn_base_n=50, det_learn_mode_n=50))
    det.learn(0)
    feed(det, w)
    assert det.state == al.NORMAL
    vel = np.array([list(f) for f in w])[:, fi.F_VEL::PA].max(1)
    assert det.export()["det_idle_vel_q16"] == int(vel[:50].min()) >> 2 > params()["det_idle_vel_q16"]
    assert mf.fit(np.array([list(f) for f in w]), params())["det_idle_vel_q16"] == int(vel.min()) >> 2
    high = params(det_idle_vel_q16=1 << 20)
    assert mf.fit(np.array([list(f) for f in w]), high)["det_idle_vel_q16"] == 1 << 20


def test_learning_refused_or_abandoned():
    rng = np.random.default_rng(5)
    det = Detector(params(det_learn_base_n=50, det_learn_mode_n=50))
    # a sensor fault abandons learning; the old (empty) model stays
    det.learn(0)
    feed(det, pump(20, 0, rng))
    bad = pump(3, 0, rng)
    for f in bad:
        f[fi.F_CLIP] = 5
    assert feed(det, bad, 20)[-1] == al.SENSOR_FAULT
    assert not det.learning and det.model.k == 0
    assert det.learn(30) is False                # refused while the sensor is faulty
    # zone D while learning: the guard raises the alarm and learning is abandoned
    det = Detector(params(det_learn_base_n=50, det_learn_mode_n=50))
    det.learn(0)
    hot = pump(5, 0, rng)
    for f in hot:
        f[fi.F_VEL] = 5 * VEL                    # 5 mm/s: zone D of group 2 rigid (from memory)
    k = det.alarm.k                              # k of the 5-window span raise at once
    assert feed(det, hot) == [al.LEARNING] * (k - 1) + [al.ALARM] * (6 - k)
    assert not det.learning and det.model.k == 0
    assert det.learn(10) is False                # refused while an alarm is latched


def test_stop_learning_keeps_the_old_model():
    rng = np.random.default_rng(8)
    det = learned(rng)
    before = det.export()
    det.learn(5000)
    feed(det, pump(450, 1, rng), 5001)               # baseline done, modes half learned
    assert det.stop_learning(6000) == al.NORMAL
    assert det.export() == before
    ev = [(det.events.old[i], det.events.new[i], det.events.reason[i])
          for i in iter(det.events.pop, -1)]
    assert ev[-1] == (al.LEARNING, al.NORMAL, al.R_LEARN_STOP)
    assert det.stop_learning(6001) == al.NORMAL        # not learning: nothing happens


def test_slow_drift_is_followed_within_its_bound_and_frozen_out_of_normal():
    rng = np.random.default_rng(6)
    det = learned(rng, det_drift_shift=6, det_drift_max_q8=128)
    j = list(det.idx).index(PA + fi.F_BAND0)    # axis 1, band 0
    m0 = det.model.mean_q4[j]
    lim = (128 * det.model.sd_q4[j]) >> 8
    for step in range(40):                       # band 0 of axis 1 creeps up
        w = mixed(50, rng)
        for f in w:
            f[PA + fi.F_BAND0] += 4 * step
        states = feed(det, w)
        assert al.ALERT not in states
    moved = det.model.mean_q4[j] - m0
    assert lim - 16 <= moved <= lim              # it followed 156 units, up to the bound
    # frozen while not normal
    feed(det, pump(5, 0, rng, band_shift=(0, 0, 3.0)))
    assert det.state in (al.ALERT, al.ALARM)
    before = list(det.model.mean_q4)
    feed(det, pump(3, 0, rng, band_shift=(0, 0, 3.0)))
    assert list(det.model.mean_q4) == before


def test_export_round_trip():
    rng = np.random.default_rng(7)
    det = learned(rng)
    p = params()
    p.update(det.export())
    twin = Detector(p)
    w = mixed(300, rng)
    a = [(det.step(f, i, 0), det.score_q8, det.mode, det.feat) for i, f in enumerate(w)]
    b = [(twin.step(f, i, 0), twin.score_q8, twin.mode, twin.feat) for i, f in enumerate(w)]
    assert [x[1:] for x in a] == [x[1:] for x in b]


@pytest.mark.parametrize("key,value", [("det_persist_q8", 0), ("det_iso_bounds", [5, 3, 1]),
                                       ("det_dc_hi_q8", [1 << 30] * AXES), ("det_feat", [999])])
def test_bad_parameters(key, value):
    p = params()
    p[key] = value
    with pytest.raises(ValueError):
        Detector(p)
