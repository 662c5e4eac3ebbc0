"""The half-order taps (firmware_py/dsp/half_taps.py) against the triangle window's transform, the
twin's taps over a stream cut into chunks, and the half-order chain on a simulated pump from the
slowest speed it reads. Tolerances are derived from the fixed-point rounding (stated beside each)
or from the statistics of noise (likewise)."""
import array
import math

import numpy as np
import pytest

from firmware_py.detect import half_lines as hl
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp import half_taps
from firmware_py.dsp import tables
from firmware_py.dsp.fixmath import msb
from firmware_py.dsp.tables import log2_table
from host_tools.twin.feature_twin import LEAD_WINDOWS, FeatureTwin, TwinConfig
from tests.test_orders_envelope import _hann_kernel_sq

N, FS = 512, 3200
PA = fi.per_axis(0)


def _kernel(nu, L):
    """The taps' window, 2 L weights (2 L - 1 - 2 j) / (2 L) on the half-sample points either side
    of the boundary, normalised to 1 at nu = 0 (cycles per sample): the triangle is two length-L
    rectangles convolved, whose transform is (sin(pi nu L) / (L sin(pi nu)))**2 (the Fejer kernel,
    Harris, Proc. IEEE 66, 1978), here averaged over two neighbouring samples, cos(pi nu)."""
    nu = np.asarray(nu, dtype=float)
    s = np.sin(np.pi * nu)
    safe = np.where(np.abs(s) < 1e-12, 1.0, s)
    return np.where(np.abs(s) < 1e-12, np.cos(np.pi * nu),
                    np.cos(np.pi * nu) * (np.sin(np.pi * nu * L) / (L * safe)) ** 2)


def _mean_gain(w):
    """The feature core's integer mean of a window and its gain exponent u (features._axis)."""
    n = len(w)
    mean = (int(w.astype(np.int64).sum()) + n // 2) >> (n.bit_length() - 1)
    pk = max(int(w.max()) - mean, mean - int(w.min()))
    return mean, 13 - msb(pk)


def _tap_of(x, f1_q8, odd_index):
    """The device's tap of window 1 of x (2 N counts) for 1x f1_q8, both halves mixed at f1_q8."""
    cos_t, sin_t = tables.twiddles(N)
    t = half_taps.HalfTaps(1, N, cos_t, sin_t)
    f = array.array("i", bytes(4 * PA))
    w0 = array.array("h", x[:N].tobytes())
    w1 = array.array("h", x[N:].tobytes())
    m0, u0 = _mean_gain(x[:N])
    m1, u1 = _mean_gain(x[N:])
    t.run(w0, m0, u0, f1_q8, False, f, 0, 0)
    assert f[fi.F_TAP_X1] == 0                 # no window before the first: no tap
    t.run(w1, m1, u1, 0, True, f, 0, 0)
    assert f[fi.F_TAP_X1] == f1_q8
    o = fi.F_TAP_RE + 2 * odd_index
    return (f[o] + 1j * f[o + 1]) / 256.0, m0, (u0, u1)


@pytest.mark.parametrize("x1_bins", [4, 8, 12])
def test_taps_follow_the_triangle_window_on_a_pump(x1_bins):
    # A pump of whole orders 1x-4x (1x 8000 counts), half-order lines, a DC offset and a speed 1 %
    # off the one the taps are placed by, over two windows: each tap must be the sum over the
    # components of A / 2 (e**(i theta) K(f - h) + e**(-i theta) K(f + h)), theta the component's
    # phase at the boundary, h the half order the taps mix at, K the window's transform (_kernel),
    # the DC left after the integer mean by K(h). At 1x multiples of 4 bins the half orders' phases
    # fall on table entries and L = 256 exactly, so what the device adds is its rounding only, per
    # half of L samples, in counts (u its window's gain exponent):
    # - the Q12 weights, floored, and the floor of 2**27 / L: |dw| < 1 + 2 L / 2**16 LSB of 4096,
    #   times sum |x - dc| / L;
    # - the Q15 table's rounding, |d e**(-i phase)| <= 2**-15.5, times sum |x - dc| w / L;
    # - per sample the floor of (y w) >> 12 (< 1) and the rounding of the product (1/2), re and im:
    #   1.5 sqrt(2) units of y, 2**-u counts, times L / L;
    # - the halves' rounding to counts Q8 (round(8 H / L) / 2: 1 unit of 2**(-2 - u) counts, re and
    #   im) and, for u > 6, the shift's (half of 2**-8 counts);
    # - the counts' own rounding from the float signal, 1/2 count a sample, times sum w / L <= 1.
    rng = np.random.default_rng(x1_bins)
    f1_q8 = x1_bins * 256
    L = half_taps.span(f1_q8, N)
    assert L == 256
    t = np.arange(2 * N)
    tb = N - 0.5
    true_x1 = x1_bins * 1.01 / N                       # cycles per sample: the shaft 1 % faster
    comps = [(8000.0, true_x1), (2400.0, 2 * true_x1), (800.0, 3 * true_x1), (400.0, 4 * true_x1),
             (300.0, 0.5 * x1_bins / N), (180.0, 1.5 * x1_bins / N), (120.0, 2.5 * x1_bins / N)]
    phases = rng.uniform(0, 2 * np.pi, len(comps))
    dc = 517.3
    x = dc + sum(a * np.cos(2 * np.pi * f * t + p) for (a, f), p in zip(comps, phases))
    xc = np.round(x).astype(np.int16)
    for i, odd in enumerate(half_taps.ODDS):
        got, m0, (u0, u1) = _tap_of(xc, f1_q8, i)
        h = odd * f1_q8 / 512 / N
        want = (dc - m0) * _kernel(h, L)
        for (a, f), p in zip(comps, phases):
            th = 2 * np.pi * f * tb + p
            want += a / 2 * (np.exp(1j * th) * _kernel(f - h, L) + np.exp(-1j * th) * _kernel(f + h, L))
        bound = 0.0
        j = np.arange(L)
        wexact = (2 * L - 1 - 2 * j) / (2 * L)
        for half, u in ((x[:N][::-1][:L], u0), (x[N:][:L], u1)):
            ax = np.abs(half - m0)
            bound += ((1 + 2 * L / 2 ** 16) / 4096 * ax.sum() / L + 2 ** -15.5 * (ax * wexact).sum() / L
                      + 1.5 * math.sqrt(2) * 2.0 ** -u + math.sqrt(2) * 2.0 ** (-2 - u)
                      + (0.5 / 256 if u > 6 else 0) + 0.5 * wexact.sum() / L)
        assert abs(got - want) <= bound, (odd, got, want, bound)
        # so the line at this half order reads half its amplitude at its phase on the boundary, up
        # to what the kernel lets through of all the rest (the whole orders 1 % off their places,
        # the other half orders, the DC): 0.5 to 2 counts here, against the line's 60 to 150
        a, f = comps[4 + i]
        line = a / 2 * np.exp(1j * (2 * np.pi * f * tb + phases[4 + i]))
        rest = abs(dc - m0) * abs(_kernel(h, L)) + sum(
            c / 2 * (abs(_kernel(g - h, L)) + abs(_kernel(g + h, L))) for k, (c, g) in enumerate(comps) if k != 4 + i)
        assert abs(got - line) <= rest + bound


def test_chunked_stream_gives_the_same_taps_and_a_gap_gives_none():
    # the twin over a stream cut into chunks, each given the LEAD_WINDOWS windows before it
    # (replay's lead), equals one pass, as do chunks of any length chained by lead_after; the
    # shaft's speed wanders by 1 % so that the mixing speeds differ from window to window. A run's
    # first window has no phase before it and its second no tap; so without the lead a chunk's
    # first two windows have no tap, and with one window of lead its first. Windows that do not
    # follow each other (analyse_every > 1) have no taps at all
    rng = np.random.default_rng(3)
    t = np.arange(N * 24) / FS
    th = 2 * np.pi * 17.3 * (t - 0.01 * 3.1 / (2 * np.pi) * np.cos(2 * np.pi * t / 3.1))
    x = np.round(3000 * np.cos(th) + 900 * np.cos(2 * th + 1) + 60 * np.cos(0.5 * th)
                 + rng.normal(0, 30, len(t)) + 120).astype(np.int16)
    tw = FeatureTwin(TwinConfig(n=N, fs_hz=FS, adc_min=-32768, adc_max=32767,
                                speed_lo_q8=int(12.6 * 256), speed_hi_q8=60 * 256), 1)
    whole = tw.features(x)
    assert (whole[2:, fi.F_TAP_X1] > 0).all() and (whole[:2, fi.F_TAP_X1] == 0).all()
    assert len(set(whole[:, fi.F_TAP_X1].tolist())) > 10
    taps = slice(fi.F_TAP_X1, fi.F_TAP_RE + 6)
    other = [c for c in range(whole.shape[1]) if not fi.F_TAP_X1 <= c < fi.F_TAP_RE + 6]
    assert (np.abs(whole[2:, fi.F_TAP_RE:fi.F_TAP_RE + 6]) > 0).any(axis=1).all()
    for cut in (2, 7, 13):
        part = tw.features(x[cut * N:], lead=x[(cut - LEAD_WINDOWS) * N:cut * N])
        assert np.array_equal(part, whole[cut:])
        one = tw.features(x[cut * N:], lead=x[(cut - 1) * N:cut * N])
        assert (one[0, taps] == 0).all() and np.array_equal(one[1:], whole[cut + 1:])
        alone = tw.features(x[cut * N:])
        assert (alone[:2, taps] == 0).all() and np.array_equal(alone[2:], whole[cut + 2:])
        assert np.array_equal(alone[:, other], whole[cut:, other])
    lead, got = None, []
    for a, b in ((0, 1), (1, 4), (4, 5), (5, 17), (17, 24)):
        got.append(tw.features(x[a * N:b * N], lead=lead))
        lead = tw.lead_after(lead, x[a * N:b * N])
    assert np.array_equal(np.concatenate(got), whole)
    apart = tw.features(x, follows=False)
    assert (apart[:, taps] == 0).all()
    assert np.array_equal(apart[:, other], whole[:, other])


class _Blocks(hl.HalfLines):
    """HalfLines that also keeps each block's prominence (the mean of its three taps', log2)."""

    def __init__(self, *a):
        super().__init__(*a)
        self.taps = []
        self.blocks = []

    def _prominence(self, *a):
        v = super()._prominence(*a)
        self.taps.append(v)
        if len(self.taps) == 3:
            self.blocks.append(sum(self.taps) // 3 / 256)
            self.taps = []
        return v


def _chain(x1_bins, half_db, rng, blocks=10, sigma=20.0, each=None):
    """The device's chain, feature twin then HalfLines, on a healthy pump at x1_bins (1x 50 dB over
    one Hann bin's noise, 2x -10 dB, 3x -20 dB, 4x -26 dB, the speed wandering by 0.2 %) with
    half-order lines (0.5x, and 1.5x, 2.5x at 0.6 and 0.4 of it) at half_db against that bin's
    noise (None: none); the average of the blocks after the first 8, log2 (UNSET: none counted).
    each: a list that gets every block's own prominence (log2)."""
    n, b = N, hl.BLK
    bin_amp = np.sqrt(n * 3 / 8) / (n / 4) * sigma      # a tone whose Hann bin power equals the noise's
    a1 = 10 ** (50 / 20) * bin_amp
    nn = n * (b * blocks + 1)
    f = x1_bins * FS / n * (1 + 0.002 * np.cumsum(rng.standard_normal(nn)) / np.sqrt(nn))
    th = 2 * np.pi * np.cumsum(f) / FS + rng.uniform(0, 2 * np.pi)
    x = a1 * (np.cos(th) + 0.3 * np.cos(2 * th + 2) + 0.1 * np.cos(3 * th + 0.5) + 0.05 * np.cos(4 * th + 1))
    x += sigma * rng.standard_normal(nn) + 40
    if half_db is not None:
        a = 10 ** (half_db / 20) * bin_amp
        x += a * (np.cos(0.5 * th) + 0.6 * np.cos(1.5 * th + 1) + 0.4 * np.cos(2.5 * th + 2))
    tw = FeatureTwin(TwinConfig(n=n, fs_hz=FS, adc_min=-32768, adc_max=32767,
                                speed_lo_q8=int(12.6 * 256), speed_hi_q8=60 * 256), 1)
    feats = tw.features(np.round(x).astype(np.int16))
    d = _Blocks(1, PA, n, 1, 410, log2_table())
    for w in range(len(feats)):
        d.push(feats[w], True, w)
    if each is not None:
        each.extend(d.blocks)
    return d.value[0]


def _images_clear(x1_bins):
    """The whole orders' images (half_lines: x1 / 2 mod 1 of a block from the line) lie beyond the
    line's cells and their own: only there is the floor free of their residue."""
    d = (x1_bins / 2) % 1 * hl.BLK
    return min(d, hl.BLK - d) > hl.HALF_WIDTH + hl.ALIAS_WIDTH


@pytest.mark.parametrize("x1_bins", [2.05, 2.15, 2.3, 2.45, 3.3])
def test_mixing_speed_from_the_phase_advance_within_its_derived_bound(x1_bins):
    # A harmonic series (2x at -10 dB, 3x at -20 dB of the 1x) at a known speed, no noise, runs of
    # six consecutive windows at six phases: each tap's mixing speed (F_TAP_X1 of window j, from
    # the phase bin k advanced by from window j - 2 to j - 1, half_taps.mix_speed) against the
    # true speed. Under 2.5 bins the 1x and 2x lobes overlap and a window's own estimate is off by
    # up to 10 %; the phase advance is off only by what else reaches bin k. Per window, the others'
    # share of the 1x there, e = sum of a_h |W(d_h)| / |W(f - k)| (the Hann kernel, textbook), d_h
    # the 2x's and 3x's offsets from k and the images' at k + h f, turns the phase by asin(e) at
    # most, so the advance by twice that (turns, so bins); k is the bin nearest window j - 2's own
    # estimate (F_SPEED). Then the fixed point: the FFT rounds once per radix stage, under 1 LSB
    # each (from memory), so log2(n) + 1 LSB against |X[k]| (the device's own power) in each
    # window; atan2_q16's 4.3 LSB of 2**-16 turn and its truncation against the product's length
    # (|X[k]|**2 / 8; test_fixmath_tables); the offset from bin k rounded to 1/256 bin (1/512).
    amps = (1.0, 10 ** (-10 / 20), 10 ** (-20 / 20))
    t = np.arange(N * 6) / FS
    f_hz = x1_bins * FS / N
    tw = FeatureTwin(TwinConfig(n=N, fs_hz=FS, adc_min=-32768, adc_max=32767,
                                speed_lo_q8=int(12.5 * 256), speed_hi_q8=25 * 256), 1)
    fixed = 4.3 / 65536 + 1 / 512
    w = lambda d: float(np.sqrt(_hann_kernel_sq(d)))        # noqa: E731  |W(d)|, W(0) = 1
    for phase in np.linspace(0, 2 * np.pi, 7)[:-1]:
        th = 2 * np.pi * f_hz * t + phase
        x = np.round(12000 * sum(a * np.cos((h + 1) * th + h) for h, a in enumerate(amps))).astype(np.int16)
        feats, power = tw.features(x, keep_power=True)
        got = feats[2:, fi.F_TAP_X1] / 256
        own = feats[:, fi.F_SPEED] / 256 / (FS / N)                 # bins
        assert (got > 0).all()
        for j in range(2, len(feats)):
            k = int(round(own[j - 2]))
            others = sum(a * (w((h + 1) * x1_bins - k) * (h > 0) + w(k + (h + 1) * x1_bins))
                         for h, a in enumerate(amps))
            x_min = np.sqrt(power[j - 2:j, 0, k].astype(float)).min()
            trunc = 15 * math.sqrt(2) * 1.65 / (x_min ** 2 / 8) / (2 * math.pi)
            e = others / w(x1_bins - k) + (math.log2(N) + 1) / x_min
            bound = 2 * math.asin(min(1.0, e)) / (2 * math.pi) + fixed + trunc
            assert abs(got[j - 2] - x1_bins) <= bound, (j, got[j - 2], x1_bins, bound)
            assert bound < 0.02     # a fifth of the own estimate's error at 2.3 to 2.45 bins


@pytest.mark.parametrize("x1_bins", [2.05, 2.2, 2.4, 2.6, 2.9, 3.3, 3.9, 5.1, 7.3])
def test_a_half_order_line_stands_out_of_a_healthy_pump_from_2_bins(x1_bins):
    # From 2 bins up, where one 0.5x period fits a window, and where the taps of the Hann bins could
    # not read the half orders under 6 bins: with no line, the average sits where noise alone puts it,
    # 0 within 4 standard deviations of an average of blocks' log2 ratios of sums of exponential
    # powers (sd per block at most modes_fit.half_block_spread: Gamma moments of the Hann cells'
    # sums, Isserlis' theorem and the log of a Gamma(k) variable's variance trigamma(k), textbook
    # properties; checked on noise in test_modes_fit), where the whole orders' images clear the
    # line; a line at one bin's noise lifts it by more than 8 such deviations at every speed.
    from host_tools.fit.modes_fit import half_block_spread
    # _chain's 10 x BLK + 1 windows make (10 x BLK + 1 - BLK) // (BLK / 2) + 1 = 19 blocks
    # (overlapping by half, nearly independent under Hann: Welch's segments correlate 0.167 in
    # amplitude, 0.03 in power); the average is their mean over the first 2**SHIFT, then an EWMA of
    # weight lam over the rest: variance (1 - lam)**(2 k) / 8 + lam**2 sum (1 - lam)**(2 i) of a
    # block's (the variance of a weighted sum of independent values)
    lam, k = 2.0 ** -hl.SHIFT, (10 * hl.BLK + 1 - hl.BLK) // (hl.BLK // 2) + 1 - (1 << hl.SHIFT)
    var = (1 - lam) ** (2 * k) / (1 << hl.SHIFT) + lam ** 2 * sum((1 - lam) ** (2 * i) for i in range(k))
    sd = half_block_spread() * math.sqrt(var)
    rng = np.random.default_rng(int(x1_bins * 10))
    clean = _chain(x1_bins, None, rng)
    line = _chain(x1_bins, 0.0, rng)
    assert clean != hl.UNSET and line != hl.UNSET
    if _images_clear(x1_bins):
        assert abs(clean / 256) < 4 * sd, (clean / 256, sd)
    assert (line - clean) / 256 > 8 * sd, (line / 256, clean / 256, sd)


def test_noise_reads_alike_whether_neighbouring_taps_share_samples_or_not():
    # A tap's triangle spans the fewest whole 0.5x periods reaching half a window each side of its
    # boundary: at 3.6 bins one period, so neighbouring taps' triangles barely touch; at 4.4 bins
    # two, so they share most of a window, and their noise correlates (0.18 here) with the turn of
    # the half order itself, gathering in the line's own cells. Nothing in the pump changed, so the
    # prominence must not: the mean of the blocks' values at the two speeds, on the same healthy
    # pump without half orders, within 4 standard errors of their difference (the blocks' own
    # sample spreads; blocks overlap by half, nearly independent under Hann: Welch's segments
    # correlate 0.03 in power), a normal tail of 6e-5. Read without the noise's shares, the speed
    # at which taps share samples lifted it by 0.64 octave (measured, half_lines._lean at 0), and a
    # pump trimmed across 4 bins read as loosening; both speeds keep the whole orders' images off
    # the line's cells (_images_clear).
    rng = np.random.default_rng(44)
    means, var = [], 0.0
    for x1_bins in (3.6, 4.4):
        assert _images_clear(x1_bins)
        got = []
        _chain(x1_bins, None, rng, blocks=70, each=got)
        got = np.array(got)
        assert len(got) > 100
        means.append(got.mean())
        var += got.var(ddof=1) / len(got)
    assert abs(means[1] - means[0]) < 4 * math.sqrt(var), (means, math.sqrt(var))
