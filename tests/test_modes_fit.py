"""Host-side operating modes by speed: set points told apart despite strays (scikit-learn's
adjusted Rand index against the truth), mode ranges clear of the search range's ends."""
import numpy as np
from sklearn.metrics import adjusted_rand_score

from host_tools.fit import modes_fit as mf


def test_speed_modes_split_set_points_despite_strays():
    # two drive set points 18 % apart, each trimmed +-4 % (uniform), and 1 window in 400 an estimate
    # that missed by a bin and landed between them: still two modes, each set point's windows
    # together (scikit-learn's adjusted Rand index against the truth, 1 for the same partition)
    rng = np.random.default_rng(5)
    a, b = 20.7 * rng.uniform(0.96, 1.04, 2000), 24.5 * rng.uniform(0.96, 1.04, 2000)
    stray = rng.uniform(21.6, 23.4, 10)
    x = np.concatenate([a, b, stray])
    k, lab = mf.speed_modes(x, 0.03, mf.MIN_MODE_N)
    assert k == 2
    truth = np.r_[np.zeros(2000), np.ones(2000)]
    assert adjusted_rand_score(truth, lab[:4000]) == 1.0
    # a continuum of speeds (a drive trimmed slowly across the range) stays one mode
    assert mf.speed_modes(rng.uniform(19.0, 26.0, 4000), 0.03, mf.MIN_MODE_N)[0] == 1


def test_mode_ranges_stop_short_of_the_search_range_ends():
    # a speed read at an end of the search range (19.5-29 Hz) is the range, not the shaft: no mode
    # may cover it, so the gateway leaves such windows unscored
    from firmware_py.detect.detector import default_params
    from firmware_py.dsp import feature_index as fi
    p = default_params(1, 1, 6680)
    p.update(fc_speed_lo_q8=int(19.5 * 256), fc_speed_hi_q8=29 * 256, det_bands=1)
    rng = np.random.default_rng(6)
    n = 400
    feats = np.zeros((n, fi.per_axis(1)), np.int64)
    feats[:, fi.F_RMS] = rng.integers(3000, 5000, n)
    feats[:, fi.F_VEL] = rng.integers(6000, 9000, n)
    feats[:, fi.F_BAND0] = rng.integers(900, 1100, n)
    sp = np.r_[rng.uniform(19.6, 21.0, n // 2), rng.uniform(27.5, 28.9, n // 2)]
    keys = mf.fit(feats, p, sp, 0.05)
    op = np.array(keys["det_op_speed_q8"]).reshape(-1, 2)
    lo, hi = mf.pinned_limits_q8(p)
    assert lo > p["fc_speed_lo_q8"] and hi < p["fc_speed_hi_q8"]
    assert op.min() >= lo and op.max() <= hi and len(op) == 2
