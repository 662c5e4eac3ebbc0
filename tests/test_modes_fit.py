"""Host-side operating modes by speed: set points told apart despite strays (scikit-learn's
adjusted Rand index against the truth), mode ranges clear of the search range's ends, and the
half-order prominence's spread bound against simulation."""
import math
from array import array

import numpy as np
from sklearn.metrics import adjusted_rand_score

from firmware_py.detect import modes as dm
from firmware_py.dsp import feature_index as fi
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


def test_a_set_point_seen_in_too_few_recordings_joins_its_neighbour():
    # a pump's levels wander over tens of seconds, so one recording's windows are one sample of
    # them: a trim seen only in one 10 s snapshot (62 windows of 0.16 s) must not become a mode
    # of its own, whose centre would be that snapshot's levels; seen in MIN_MODE_STRETCHES
    # recordings it does. Set points as in the test above (scikit-learn's adjusted Rand index)
    rng = np.random.default_rng(7)
    main = 24.5 * rng.uniform(0.99, 1.01, 3000)
    trim = 24.5 * 1.08 * rng.uniform(0.995, 1.005, 62)
    x = np.concatenate([main, trim])
    rec = np.r_[np.arange(3000) // 62, np.full(62, 999)]
    assert mf.speed_modes(x, 0.03, mf.MIN_MODE_N)[0] == 2                 # by windows alone
    assert mf.speed_modes(x, 0.03, mf.MIN_MODE_N, stretch=rec,
                          min_stretches=mf.MIN_MODE_STRETCHES)[0] == 1
    rec3 = np.r_[np.arange(3000) // 62, 997 + np.arange(62) % mf.MIN_MODE_STRETCHES]
    k, lab = mf.speed_modes(x, 0.03, mf.MIN_MODE_N, stretch=rec3, min_stretches=mf.MIN_MODE_STRETCHES)
    assert k == 2 and adjusted_rand_score(np.r_[np.zeros(3000), np.ones(62)], lab) == 1.0


def test_set_points_told_apart_by_their_recordings_when_single_estimates_blur():
    # A 6-pole pump at 2 bins of the window (13.1 and 16.2 Hz, drives of 40 and 50 Hz, each
    # recording trimmed +-4 %): single estimates scatter by 3.5 % (normal), so the windows fill the
    # 14 % between the set points more densely than STRAY_DIV allows, and the steady tolerance is
    # wide (11.7 %). A recording's median of 62 windows scatters by sqrt(pi / 2) * 3.5 % / sqrt(62)
    # = 0.56 % (the median's asymptotic spread, Kendall and Stuart; from memory): by recordings the
    # gap is clear, and a short recording of 16 windows between the set points, fewer than the
    # strays allowed, does not bridge it. Windows within 5 % of their recording's set point fall
    # with it (scikit-learn's adjusted Rand index against the truth).
    rng = np.random.default_rng(11)
    speeds, recs, truth = [], [], []
    for r in range(120):
        duty = r % 2
        v = (13.1, 16.2)[duty] * rng.uniform(0.96, 1.04)
        speeds.append(v * rng.normal(1.0, 0.035, 62))
        recs.append(np.full(62, r))
        truth.append(np.full(62, duty))
    x = np.concatenate(speeds + [np.full(16, 14.6) * rng.normal(1.0, 0.035, 16)])
    rec = np.concatenate(recs + [np.full(16, 999)])
    gap = 0.117
    assert mf.speed_modes(x[:-16], gap, mf.MIN_MODE_N)[0] == 1             # by windows alone
    k, lab = mf.speed_modes(x, gap, mf.MIN_MODE_N, stretch=rec, min_stretches=mf.MIN_MODE_STRETCHES)
    assert k == 2
    t = np.concatenate(truth)
    med = np.repeat([np.median(v) for v in speeds], 62)
    near = np.abs(x[:-16] / med - 1) < 0.05
    assert adjusted_rand_score(t[near], lab[:-16][near]) == 1.0
    # a duty trimmed anywhere in +-6 % over 36 recordings stays one mode: by chance its medians
    # leave gaps of about 0.12 ln(36) / 36 = 1.2 % (the largest spacing of N uniform points,
    # common practice), wider than a tolerance of 1 %, but such gaps are what a continuum leaves
    one = 16.2 * rng.uniform(0.94, 1.06, 36)
    xc = np.repeat(one, 62) * rng.normal(1.0, 0.002, 36 * 62)
    assert mf.speed_modes(xc, 0.01, mf.MIN_MODE_N, stretch=np.repeat(np.arange(36), 62),
                          min_stretches=mf.MIN_MODE_STRETCHES)[0] == 1


def test_mode_ranges_stop_short_of_the_search_range_ends():
    # a speed read at an end of the search range (19.5-29 Hz) is the range, not the shaft: no mode
    # may cover it, so the gateway leaves such windows unscored
    from firmware_py.detect.detector import default_params
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
    # the speeds each mode was trained at (det_op_seen_q8, where the slow channel gathers
    # evidence) are its windows' 0.5 and 99.5 % points (numpy.percentile, linear), to the Q8 step
    # outward, and lie inside the mode's widened range
    seen = np.array(keys["det_op_seen_q8"]).reshape(-1, 2)
    for m, s in enumerate((sp[:n // 2], sp[n // 2:])):
        a, b = np.percentile(s, [100 * mf.STRAY_Q, 100 * (1 - mf.STRAY_Q)])
        assert 0 <= a * 256 - seen[m, 0] < 1 and 0 <= seen[m, 1] - b * 256 < 1
        assert op[m, 0] < seen[m, 0] <= seen[m, 1] < op[m, 1]


def test_band_edges_move_off_the_shaft_lines():
    # A tone whose Hann main lobe (the bins within 2 of it; Harris, Proc. IEEE 66, 1978) reaches
    # both sides of a band edge puts a share of its power on each side; further away only the
    # sidelobes cross, under -30 dB (Hann's highest sidelobe is -31.5 dB, Harris): numpy.fft.rfft
    # of the periodic Hann window. line_spans must hold every place where that happens.
    from firmware_py.detect.detector import default_params
    n, fs = 512, 3200
    p = default_params(1, 2, 3200)
    p.update(n=n, fs_hz=fs, fc_bands=[[4, 8], [8, 16], [16, 32]], fc_vane=6)
    w = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n) / n)
    t = np.arange(n) / fs
    hz = fs / n                                 # one bin in Hz

    def across(x_bins, edge):
        # share of a tone at x_bins (Hann-windowed, rfft) in the bins at and above `edge`
        pw = np.abs(np.fft.rfft(w * np.cos(2 * np.pi * x_bins * hz * t))) ** 2
        return pw[edge:].sum() / pw.sum()

    for x in np.arange(10.0, 22.0, 0.25):       # a tone's place in bins; the edge between 15 and 16
        share = across(x, 16)
        lobe = 1e-3 < share < 1 - 1e-3
        assert lobe == (14.0 < x < 17.0), (x, share)
        (a, z), = mf.line_spans(dict(p, fc_vane=0), [(x * hz, x * hz)])[:1]
        assert not lobe or a <= 16 <= z         # the span holds every edge the lobe crosses

    # worked by hand, in bins: a 2-pole pump's 1x at 7.8-8.2 bins (49 Hz at 6.25 Hz a bin) reaches
    # the edges 6.8-10.2, its 2x 14.6-18.4, 3x 22.4-26.6 and the vane pass 45.8-51.2. The edge at 8
    # goes to the nearest bin no span holds within a quarter of 8 (2 bins): 7 and 9 are held, 6 is
    # clear; the 16 within 4 bins: 15 and 17 are held, 14 is clear; 4 and 32 stay.
    moved = mf.place_edges(p, [(7.8 * hz, 8.2 * hz)])
    assert moved == [[4, 6], [6, 14], [14, 32]]
    # a shaft whose lines stay clear of 4, 8, 16 and 32 leaves the board's bands as they are:
    # 1x 12-12.2 bins (spans 11-14.2, 23-26.4, 35-38.6, 71-75.2)
    assert mf.place_edges(p, [(12.0 * hz, 12.2 * hz)]) == [[4, 8], [8, 16], [16, 32]]


def test_band_edges_are_kept_clear_over_the_trained_speeds():
    # The evaluation pump RW-1 as trained on full 13 with the night scored (6 vanes, 512 samples
    # at 3200 Hz, 6.25 Hz a bin): trained at 16.67-18.11, 20.04-21.58 and 23.90-25.24 Hz, its
    # ranges widened to 16.55-20.33, 17.59-24.22 and 20.98-28.32 Hz. By the lobe rule above,
    # over the widened ranges the edge at 16 finds no clear bin within a quarter of it (12-20:
    # 12-13 and 14-15 held by the day duties' 3x, 15-20 by the night's vane pass); over the
    # trained speeds the night's vane pass reaches 15.0-19.4 and the day duties' 3x at most 14.1,
    # so the edge goes to 15. The edges at 8 and 32 stay (8: every bin 6-10 held by a 2x or 3x;
    # 32: clear of every line).
    from firmware_py.detect.detector import default_params
    p = default_params(1, 2, 3200)
    p.update(n=512, fs_hz=3200, fc_bands=[[8, 16], [16, 32]], fc_vane=6,
             det_op_speed_q8=[4237, 5204, 4504, 6200, 5372, 7251],
             det_op_seen_q8=[4268, 4637, 5131, 5525, 6119, 6462])
    assert mf.edge_ranges_hz(p) == [(4268 / 256, 4637 / 256), (5131 / 256, 5525 / 256), (6119 / 256, 6462 / 256)]
    assert mf.place_edges(p, mf.mode_ranges_hz(p)) == [[8, 16], [16, 32]]
    assert mf.place_edges(p, mf.edge_ranges_hz(p)) == [[8, 15], [15, 32]]
    # a set without trained speeds keeps the edges clear over the whole ranges
    assert mf.edge_ranges_hz(dict(p, det_op_seen_q8=[])) == mf.mode_ranges_hz(p)


def test_half_spread_bound_covers_the_true_spread():
    # mf.half_spread_bound against simulation alone: an EWMA of weight 2**-SHIFT over iid
    # normal block values (started stationary), each held for BLK / 2 windows as the device holds
    # them (its blocks overlap by half);
    # the bound from the windows' population spread must reach the EWMA's true spread,
    # sqrt(lam / (2 - lam)) (Montgomery, EWMA chart), in at least 95 % of trials. Allowed short:
    # 3 binomial standard errors of 4000 trials at p = 0.95 (0.010)
    from scipy.signal import lfilter
    from firmware_py.detect.half_lines import BLK, SHIFT
    rng = np.random.default_rng(12)
    lam = 2.0 ** -SHIFT
    sig = math.sqrt(lam / (2.0 - lam))
    trials = 4000
    for blocks in (60, 1000):
        x = rng.standard_normal((trials, blocks))
        zi = (1.0 - lam) * sig * rng.standard_normal((trials, 1))    # the state before the first block
        e, _ = lfilter([lam], [1.0, lam - 1.0], x, axis=1, zi=zi)
        s = e.std(axis=1)                                            # = the held windows' spread
        got = np.mean([mf.half_spread_bound(v, blocks * BLK // 2, 0.0) >= sig for v in s])
        assert got >= 0.95 - 3 * math.sqrt(0.95 * 0.05 / trials), (blocks, got)
    assert mf.half_spread_bound(0.3, 4 * BLK, 0.0) == dm.Z_LIM   # one block's worth: set aside


def test_half_block_spread_covers_the_device_on_noise():
    # mf.half_block_spread (the floor's per-block spread, derived from the Hann cells' covariance)
    # against the device's own block code on noise alone: iid complex normal taps (numpy's
    # generator), each block at a speed drawn over the taps' range, so the line and the images
    # take every place. The sample spread of the blocks' prominences (the mean of three taps'),
    # may exceed the derived one by 3 standard errors at most: SE(s) / s = sqrt((kurtosis - 1) /
    # (4 N)) for a sample of N (the large-sample variance of a sample variance; a textbook
    # result), from the sample's own kurtosis. The old floor, which took the line's cells as
    # 7 / 1.5 independent ones and the floor as exact, said 0.41 where this code gives about 0.52
    from firmware_py.detect import half_lines as hl
    from firmware_py.dsp.half_taps import X1_MIN
    from firmware_py.dsp.tables import log2_table
    rng = np.random.default_rng(21)
    b, blocks = hl.BLK, 1200
    h = hl.HalfLines(1, 1, 512, 1, 205, log2_table())
    got = np.empty(blocks)
    for k in range(blocks):
        x1 = int(rng.integers(X1_MIN, 8 << 8))
        d = (b >> 1) * (x1 % 512)
        h.tap[:6 * b] = array("i", np.rint(rng.standard_normal(6 * b) * 2.0 ** 20).astype(np.int64).tolist())
        # independent taps: no lean of the noise towards the line (half_lines._lean), so 0
        got[k] = sum(h._prominence(0, i, x1, d, 0) for i in range(3)) // 3 / 256.0
    s = got.std()
    kurt = np.mean((got - got.mean()) ** 4) / s ** 4
    assert s <= mf.half_block_spread() * (1.0 + 3.0 * math.sqrt((kurt - 1.0) / (4.0 * blocks))), (s, kurt)


def _ar1(rng, n, rho, sd):
    """An AR(1) series of n values, lag-1 correlation rho, stationary spread sd (Box and Jenkins)."""
    e = rng.normal(0.0, sd * math.sqrt(1 - rho * rho), n)
    x = np.empty(n)
    x[0] = rng.normal(0.0, sd)
    for i in range(1, n):
        x[i] = rho * x[i - 1] + e[i]
    return x


def test_follow_slopes_are_least_squares_with_one_level_per_mode():
    # three modes at different levels; the 1x line's log2 power grows 4 octaves per octave of
    # speed (speed**4, common practice), a band not at all. The pooled slope equals ordinary least
    # squares on the speed plus one indicator per mode (the Frisch-Waugh-Lovell theorem; numpy's
    # lstsq as the reference), to the Q8 rounding of the result (half an LSB)
    rng = np.random.default_rng(17)
    centres, n = (17.5, 21.0, 24.5), 1500
    lab = np.repeat(np.arange(3), n)
    sp = np.concatenate([c * 2.0 ** _ar1(rng, n, 0.95, 0.02) for c in centres])
    op = [v for c in centres for v in (int(c * 0.9 * 256), int(c * 1.1 * 256))]
    dl = mf.speed_offsets_q8(sp, mf.follow_refs_q8(op), lab)
    level = np.array([300.0, 900.0, 1500.0])[lab]
    u = np.rint(np.c_[level + 4.0 * 256 * np.log2(sp) + _ar1(rng, 3 * n, 0.9, 40.0),
                      level + _ar1(rng, 3 * n, 0.9, 40.0)]).astype(np.int64)
    slopes, t = mf.follow_slopes(u, dl, lab, np.zeros(u.shape, bool), np.array([True, True]))
    design = np.c_[dl, lab[:, None] == np.arange(3)].astype(np.float64)
    ref = np.linalg.lstsq(design, u[:, 0].astype(np.float64), rcond=None)[0][0]
    assert abs(slopes[0] - 256 * ref) <= 0.5 + 1e-9
    assert abs(t[0]) >= mf.FOLLOW_T
    assert slopes[1] == 0 and abs(t[1]) < mf.FOLLOW_T      # no speed law: a fixed centroid
    # not a candidate (a band power): never followed, however strong its law
    assert mf.follow_slopes(u, dl, lab, np.zeros(u.shape, bool), np.array([False, False]))[0] == [0, 0]


def test_follow_slope_standard_error_allows_for_autocorrelation():
    # windows in time order: the speed and the line's wander both AR(1) with lag-1 correlation
    # 0.9, no true slope. Over R independent histories the spread of the fitted slope (Monte
    # Carlo, the reference) matches the standard error follow_slopes states; the plain OLS error
    # would be (1 - 0.81) / (1 + 0.81) of the variance, 9.5 times too small. Tolerance: the
    # variance of R draws has relative standard error sqrt(2 / (R - 1)) (normal theory), 3 of them
    rng = np.random.default_rng(23)
    r_n, n = 300, 2000
    b, se2 = [], []
    lab = np.zeros(n, int)
    for _ in range(r_n):
        dl = np.rint(256 * _ar1(rng, n, 0.9, 0.03)).astype(np.int64)
        u = np.rint(_ar1(rng, n, 0.9, 60.0)).astype(np.int64)[:, None]
        _, t = mf.follow_slopes(u, dl, lab, np.zeros(u.shape, bool), np.array([True]))
        x = dl - dl.mean()
        bj = float(x @ (u[:, 0] - u[:, 0].mean())) / float(x @ x)
        b.append(bj)
        se2.append((bj / t[0]) ** 2)
    ratio = np.var(b, ddof=1) / np.mean(se2)
    assert abs(ratio - 1.0) <= 3 * math.sqrt(2.0 / (r_n - 1))


def _edge_share_log2(x_bins: float, edge: int, n: int = 1024) -> float:
    """log2 of the power a tone at x_bins puts at bins >= edge, with a floor of white noise 40 dB
    under the tone in each bin: numpy's rfft of the Hann-windowed tone (numpy, the reference)."""
    t = np.arange(n)
    spec = np.abs(np.fft.rfft(np.hanning(n) * np.sin(2 * np.pi * x_bins * t / n))) ** 2
    return float(np.log2(spec[edge:].sum() + 1e-4 * spec.max() * (len(spec) - edge)))


def test_each_modes_band_slope_is_least_squares_over_that_mode():
    # a band from bin 16 up: in mode 0 the 1x's Hann lobe (|k - x| < 2, Harris 1978) moves across
    # its edge as the speed is trimmed +-3 % about 15 bins, so the band's level climbs with the
    # speed (numpy's FFT of the windowed tone, the reference, plus AR(1) wander); in mode 1 the
    # line at 8 bins never reaches the edge and the level is the noise floor's, no law. Each mode's
    # slope is the least-squares slope over that mode's windows (numpy's polyfit, the reference),
    # to the Q8 rounding of the result (half an LSB), and it is kept only in mode 0; the speed
    # offsets are those held within the trained speeds (det_op_seen_q8), as the device's
    rng = np.random.default_rng(29)
    n = 1500
    lab = np.repeat(np.arange(2), n)
    sp = np.concatenate([c * 2.0 ** np.clip(_ar1(rng, n, 0.95, 0.02), -0.04, 0.04) for c in (15.0, 8.0)])
    op = [int(c * 0.94 * 256) for c in (15.0, 8.0)]
    op = [op[0], int(15.0 * 1.06 * 256), op[1], int(8.0 * 1.06 * 256)]
    seen = [int(np.floor(sp[lab == m].min() * 256)) for m in (0, 1)]
    seen = [seen[0], int(np.ceil(sp[lab == 0].max() * 256)), seen[1], int(np.ceil(sp[lab == 1].max() * 256))]
    dl = mf.speed_offsets_q8(sp, mf.follow_refs_q8(op), lab, seen)
    level = np.array([_edge_share_log2(x, 16) for x in sp])
    u = np.rint(256 * level + _ar1(rng, 2 * n, 0.9, 20.0)).astype(np.int64)[:, None]
    got = mf.mode_slopes(u, dl, lab, np.zeros(u.shape, bool), np.array([True]), 2)
    ref = np.polyfit(dl[lab == 0].astype(np.float64), u[lab == 0, 0].astype(np.float64), 1)[0]
    assert abs(got[0] - 256 * ref) <= 0.5 + 1e-9 and 0 < got[0] < dm.FOLLOW_MAX
    assert got[1] == 0
    assert mf.mode_slopes(u, dl, lab, np.zeros(u.shape, bool), np.array([False]), 2) == [0, 0]
    # only band powers are candidates (the whole-window levels follow one law in every mode)
    assert mf.follows_in_mode(fi.F_BAND0) and not mf.follows_in_mode(fi.F_RMS)
    assert not mf.follows_in_mode(fi.F_ORD_1X)
