# Shaft speed (1x) of one window from its power spectrum, in integers, allocation-free.
#
# Entry point: SpeedEstimator(n, fs_hz, lo_q8, hi_q8, p).run(f, off) writes F_SPEED (Hz, Q8) and
# F_SPEED_CONF (Q8) into f[off + ...] and returns the 1x position in bins, Q8 (0: no estimate),
# which the order and envelope stages read around.
#
# Method:
# 1. Harmonic sum. Candidates c for 1x run over the speed range in quarter bins (Q2). For each,
#    S(c) = B1 + (B2 + B3)/2, with Bh the 3-bin lobe p[j-1] + p[j] + p[j+1] at j = round(h*c/4).
#    The first c with the largest S wins: a family of lines beats a single strong line, and a
#    pump with a weak 1x but clear 2x and 3x still finds its 1x. The half weight of 2x and 3x
#    keeps a lone line from being taken as the 2x or 3x of a candidate at 1/2 or 1/3 of it (with
#    equal weights those tie). What no weighting settles: a 2x far stronger than 1x with 2x itself
#    inside the range, so a range narrower than an octave (hi < 2 lo) is the safe choice.
# 2. Each harmonic h: the peak bin k_h is the largest p within 2 bins of round(h*c), and its
#    offset d from k_h towards the larger neighbour is the Hann two-bin ratio estimate
#        d = (2*a1 - a0) / (a1 + a0),   a0 = |X[k_h]|, a1 = |X[k_h +- 1]|
#    For the Hann window's kernel |W(d)| = sin(pi d) / (pi d (1 - d**2)) the ratio
#    a1/a0 = (1 + d)/(2 - d) holds exactly, so d has no bias for a lone tone (Grandke, "Interpolation
#    algorithms for discrete Fourier transforms of weighted signals", IEEE Trans. Instrum. Meas. 32,
#    1983; from memory). What is left: the image at -f (its lobe edge, at most 1.5e-3 of the line
#    at 3 bins from DC, giving < 7.2e-3 bins; 5.3e-3 and < 0.024 bins at 2.5 bins), the kernel's
#    finite-n correction (O(1/n**2)), and the quantisation: magnitudes keep >= 14 bits
#    (sqrt_pow2 of p scaled to 2**28), d is rounded to 1/256 bin (tests/test_speed_estimate.py
#    derives the total, 0.01 bin; 0.027 bin from 2.5 bins, 0.063 from 2). A parabola through
#    the three log magnitudes would leave up to 0.016 bin of bias for Hann, through the linear
#    magnitudes 0.053 bin (computed with numpy for a tone at 100 + d bins, n = 512); the ratio
#    form costs two square roots and one division per harmonic instead.
# 3. Combination. Harmonic h measures h*f1 with an error variance inversely proportional to its
#    power P_h (the 3-bin lobe at k_h), so the least-squares 1x is
#        f1 = sum(h * P_h * f_h) / sum(h**2 * P_h)
#    with P_h cut to 8 bits (each term < 255 * 2**19 * h, the sum < 2**30). Only harmonics that
#    agree with the strongest one s take part: |f_h - h * f_s / s| <= 1/2 bin. A harmonic that is
#    absent leaves its search span to noise or to the leakage of a neighbour, whose largest bin
#    lies anywhere in it; its position is not a measurement of h*f1. The weights follow the
#    window's own spectrum, so a speed that drifts with load is simply measured again.
#
# Scales: p[k] from fft.spectrum (<= 2**28, sum <= 1.5 * 2**28); bins Q8 (< m * 256 <= 2**19);
# Hz Q8 = bins_q8 * fs / n (fixmath.mul_shift). The range is checked by check_range(): 1x at
# >= 2 bins (the 1x peak search, 2 bins either side of round(c), is cut to start at bin 1, so
# its ratio's neighbour is bin 0 at worst) and round(3 * hi) + 3 <= m. From 2.5 bins up the 1x
# and 2x lobes share one bin at most; from 2 to 2.5 bins they share two, and a strong 2x leaks
# into the 1x's ratio bins, so training searches there only for a duty that turns that slowly
# (FINE_Q2; tests/test_speed_estimate.py derives the lone tone's bound there, 0.063 bin).
import micropython
from micropython import const

from firmware_py.dsp.feature_index import F_SPEED, F_SPEED_CONF
from firmware_py.dsp.fft import power_sum
from firmware_py.dsp.fixmath import div_pow2, msb, mul_shift, sqrt_pow2
from firmware_py.viper_stand import ptr32

MIN_Q2 = const(8)       # lowest 1x, quarter bins (2 bins): see the Scales note above
FINE_Q2 = const(10)      # from here up (2.5 bins) the 1x and 2x lobes share one bin at most


def bins_q2(hz_q8, n, fs_hz, up):
    """hz_q8 (Hz, Q8) as quarter bins of an n-point spectrum at fs_hz, rounded up or down.
    Start-up only (the product may exceed 2**30 there)."""
    return bins_q(hz_q8, n, fs_hz, 2, up)


def bins_q(hz_q8, n, fs_hz, q, up):
    """hz_q8 (Hz, Q8) as bins Qq, rounded up or down (start-up only)."""
    num = (hz_q8 * n) << q
    den = 256 * fs_hz
    return (num + den - 1) // den if up else num // den


def check_range(n, fs_hz, lo_q8, hi_q8):
    """Raise ValueError with the reason if the speed range cannot be searched."""
    if lo_q8 == 0 and hi_q8 == 0:
        return
    if not 0 < lo_q8 < hi_q8:
        raise ValueError("speed range must satisfy 0 < lo < hi (or both 0: no speed estimate)")
    if bins_q2(lo_q8, n, fs_hz, True) < MIN_Q2:
        raise ValueError("speed range starts below 2 bins (%d Hz): use a longer window" % (
            (2 * fs_hz + n - 1) // n))
    if ((3 * bins_q2(hi_q8, n, fs_hz, False) + 2) >> 2) + 3 > n >> 1:
        raise ValueError("3x of the top speed must lie 3 bins below fs/2")


class SpeedEstimator:
    """1x estimate for the power spectrum p (array('i'), n/2 + 1 bins) of every window."""

    def __init__(self, n, fs_hz, lo_q8, hi_q8, p):
        check_range(n, fs_hz, lo_q8, hi_q8)
        self.p = p
        self.fs_hz = fs_hz
        self.L = msb(n)
        self.on = hi_q8 > 0
        self.c_lo_q2 = bins_q2(lo_q8, n, fs_hz, True) if self.on else 0
        self.c_hi_q2 = bins_q2(hi_q8, n, fs_hz, False) if self.on else 0
        self.b_lo_q8 = bins_q(lo_q8, n, fs_hz, 8, True)     # the range in bins Q8
        self.b_hi_q8 = bins_q(hi_q8, n, fs_hz, 8, False)
        # the bins any family lobe can reach: confidence is the family's share of their power
        a = ((self.c_lo_q2 + 2) >> 2) - 3
        b = ((3 * self.c_hi_q2 + 2) >> 2) + 3
        self.reach_lo = a if self.on and a > 0 else 0
        self.reach_hi = b + 1 if self.on else 0
        self.fq_q8 = [0, 0, 0, 0]      # per harmonic 1..3: peak position, bins Q8
        self.pw = [0, 0, 0, 0]      # per harmonic: 3-bin lobe power at the peak

    def run(self, f, off):
        """Estimate 1x for the spectrum in self.p; returns it in bins Q8 (0: none)."""
        if not self.on:
            return self._none(f, off)
        cb = _best_candidate(self.p, self.c_lo_q2, self.c_hi_q2)
        if cb < 0:
            return self._none(f, off)
        self._harmonic(1, (cb + 2) >> 2)
        self._harmonic(2, (2 * cb + 2) >> 2)
        self._harmonic(3, (3 * cb + 2) >> 2)
        pw = self.pw
        fq = self.fq_q8
        hs = 1                          # the strongest harmonic
        if pw[2] > pw[hs]:
            hs = 2
        if pw[3] > pw[hs]:
            hs = 3
        sh = msb(pw[hs]) - 7
        if sh < 0:
            sh = 0
        fr = fq[hs]
        # 8-bit weights (128..255 for the strongest), 0 for a harmonic off h * f_s / s by more
        # than half a bin (compared times s: all terms < 3 * 2**19)
        w1 = pw[1] >> sh if _near(hs * fq[1] - fr, 128 * hs) else 0
        w2 = pw[2] >> sh if _near(hs * fq[2] - 2 * fr, 128 * hs) else 0
        w3 = pw[3] >> sh if _near(hs * fq[3] - 3 * fr, 128 * hs) else 0
        den = w1 + 4 * w2 + 9 * w3
        f1 = (w1 * fq[1] + 2 * w2 * fq[2] + 3 * w3 * fq[3] + (den >> 1)) // den
        if f1 < self.b_lo_q8:              # keep the estimate inside the range
            f1 = self.b_lo_q8
        elif f1 > self.b_hi_q8:
            f1 = self.b_hi_q8
        f[off + F_SPEED] = mul_shift(f1, self.fs_hz, self.L)
        # fam < 2.25 * 2**28: a bin lies in three lobes at most, bins 1..m-1 hold at most half the
        # two-sided Parseval sum (1.5 * 2**28), and bin 0 enters the 1x lobe alone
        fam = pw[1] + pw[2] + pw[3]
        tot = power_sum(self.p, self.reach_lo, self.reach_hi)     # <= 1.5 * 2**28
        conf = div_pow2(fam, tot, 8) if tot > 0 else 0
        f[off + F_SPEED_CONF] = conf if conf < 256 else 256
        return f1

    def _none(self, f, off):
        """No estimate: F_SPEED and its confidence 0."""
        f[off + F_SPEED] = 0
        f[off + F_SPEED_CONF] = 0
        return 0

    def _harmonic(self, h, ch):
        """Peak of harmonic h near bin ch: position (bins Q8) into fq[h], lobe power into pw[h].
        The search starts at bin 1 at the lowest (a 1x under 2.5 bins), so k - 1 >= 0."""
        p = self.p
        k = ch - 2 if ch > 2 else 1
        top = p[k]
        for j in range(k + 1, ch + 3):
            if p[j] > top:
                top = p[j]
                k = j
        lo = p[k - 1]
        hi = p[k + 1]
        self.pw[h] = lo + top + hi
        if top == 0:
            self.fq_q8[h] = k << 8
            return
        e = 28 - msb(top)               # top * 2**e < 2**29: magnitudes < 2**15, >= 14 bits
        a0 = sqrt_pow2(top, e)
        if hi >= lo:
            a1 = sqrt_pow2(hi, e)
            d = (((2 * a1 - a0) << 9) // (a1 + a0) + 1) >> 1     # bins Q8, rounded
            self.fq_q8[h] = (k << 8) + d
        else:
            a1 = sqrt_pow2(lo, e)
            d = (((2 * a1 - a0) << 9) // (a1 + a0) + 1) >> 1
            self.fq_q8[h] = (k << 8) - d


def _near(d, lim):
    """|d| <= lim."""
    return -lim <= d <= lim


@micropython.viper
def _best_candidate(p, c_lo: int, c_hi: int) -> int:
    """Step 1: the first candidate c in c_lo..c_hi (quarter bins) with the largest harmonic sum
    S(c) = B1 + (B2 + B3)/2 over the power spectrum p (array('i')), or -1 if every S is 0.
    Each p[k] <= 2**28 and a 3-bin lobe < 2**28 * 1.5 (Parseval), so S < 1.5 * 2**28 + 3.5 *
    2**27 < 2**30; p holds no negative value, so its loads need no sign extension."""
    pw = ptr32(p)
    best = 0
    cb = -1
    for c in range(c_lo, c_hi + 1):
        j = (2 * c + 2) >> 2
        s = pw[j - 1] + pw[j] + pw[j + 1]
        j = (3 * c + 2) >> 2
        s += pw[j - 1] + pw[j] + pw[j + 1]
        j = (c + 2) >> 2
        s = (s >> 1) + pw[j - 1] + pw[j] + pw[j + 1]
        if s > best:
            best = s
            cb = c
    return cb
