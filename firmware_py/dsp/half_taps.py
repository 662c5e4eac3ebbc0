# Half-order taps of one window: the complex spectrum at the bins nearest 0.5x, 1.5x and 2.5x of
# the window's own 1x estimate, in integers, allocation-free.
#
# Why: the lines at half orders (a part that lifts and knocks every other turn: looseness, common
# practice) sit within 2 bins of the integer orders at the speeds of most pumps in a 512-sample
# window, and far under one bin's noise when they first show. One window cannot see them; a run of
# consecutive windows can, if their complex values are lined up in time (the detector does that:
# firmware_py/detect/half_lines.py). So each window hands over its raw complex values here.
#
# Each tap nulls the two whole orders beside its half order (1x and 2x for 1.5x, 2x and 3x for
# 2.5x; for 0.5x the 1x and, as the window's mean is removed, the 1x's negative-frequency image).
# Through the Hann window a tone at delta bins from bin k reaches bin k + j as -e**(-i pi delta) sin(pi delta) / (2 pi) / ((delta - j) ((delta - j)**2 - 1)) (the
# periodic Hann is 0.5 D(d) - 0.25 D(d - 1) - 0.25 D(d + 1) of the Dirichlet kernel D; Harris,
# Proc. IEEE 66, 1978; n large), a common factor times a rational function. So
# T = X[k] + p X[k - 1] + q X[k + 1] reads a tone at delta as that factor times
# N(delta) / ((delta - 2)(delta - 1) delta (delta + 1)(delta + 2)) with the quadratic
# N = p (delta - 1)(delta - 2) + (delta**2 - 4) + q (delta + 1)(delta + 2); N vanishes at the two
# whole orders' offsets a < 0 < b when N = K (delta - a)(delta - b): K = 6 / (2 - ab),
# p = (K - 1 + K (a + b) / 3) / 2, q = (K - 1 - K (a + b) / 3) / 2. A line at the bin's centre
# passes at 0.75 - K / 4 of its amplitude (X[k] alone: 0.5). Why: a pump's 1x stands 50 dB and
# more over one bin's noise and leaks into the 0.5x bin at about -50 dB; across a block of windows
# that leakage turns a whole multiple of x1 / 2 cycles per window from the half-order line, on top
# of it at speeds near a multiple of 2 bins (a 2-pole pump at 49 Hz, 512 samples at 3200 Hz).
#
# Entry points: tap_bin(f1_q8, odd), weight(f1_q8, odd, k, side), run(buf, m, f1_q8, u, f, off).
#
# Scales: buf holds X[k] = DFT(x)[k] / m in the packed real-FFT layout (fft.spectrum with keep_x),
# where x = the Hann-windowed (Q15 table) window y = (counts - mean) * 2**u; |X| <= 2**14 per
# component. p, q: Q12, |p| + |q| < 3.6 for whole orders at least half a bin from the tap (a 1x
# of at least 2 bins, the speed search's floor). No taps for a 1x of X1_MAX or more (256 bins:
# 1600 Hz at 512 samples and 3200 Hz, 100 Hz at 8192), which keeps the weights' products small. A tap is T * 2**(8 - u): counts Q8 of the same
# transform, so windows of different gain u compare; u >= -2 (a peak under 2**16 counts), so
# |tap| <= 4.6 * 2**14 * 2**10 < 2**27.
from micropython import const

from firmware_py.dsp.feature_index import F_TAP_RE, F_TAP_X1

ODDS = (1, 3, 5)        # the half orders 0.5x, 1.5x, 2.5x as odd multiples of 0.5x
X1_MAX = const(1 << 16)  # bins Q8: the largest 1x, exclusive, that gets taps


def tap_bin(f1_q8, odd):
    """The bin nearest odd/2 x 1x, for 1x = f1_q8 (bins Q8): round(odd * f1 / 2)."""
    return (odd * f1_q8 + 256) >> 9


def weight(f1_q8, odd, k, side):
    """Q12 weight of bin k + side (side -1: p, +1: q) that, with bin k's 1, nulls the whole orders
    beside tap bin k (module comment); one at a time, as a pair would allocate a tuple. Offsets
    a, b in Q8 bins (|a| < 1.5 * X1_MAX + 2**8, b about x1 / 2), taken to Q6 for the products
    (|ab| < 2**29.2, Q12), so 2 - ab >= 2 bins**2 (a <= 0 <= b) and K = 6 / (2 - ab) <= 3 in Q12
    (6 * 2**24 < 2**27); K (a + b) / 3 from a + b in Q6 (|a + b| <= x1 + 2**8: K (a + b) < 2**28)."""
    lo = (odd - 1) >> 1 if odd > 1 else -1     # 0.5x: no DC (the mean is removed), but the 1x's
    a = lo * f1_q8 - (k << 8)                  # image at -1x
    b = ((odd + 1) >> 1) * f1_q8 - (k << 8)
    kk = (6 << 24) // (8192 - (a >> 2) * (b >> 2))
    ks = (kk * ((a + b) >> 2)) // 192
    return (kk - 4096 - side * ks) >> 1


def run(buf, m, f1_q8, u, f, off):
    """Write F_TAP_X1 and the three (re, im) taps at f[off + ...] from the spectrum X in buf.
    f1_q8: 1x in bins Q8 (0: none); u: the window's gain exponent. A tap whose bins k - 1..k + 1
    fall outside 1..m-1 (where the packed layout holds complex values) and a window without 1x
    get zeros. The sum X[k] 2**12 + p X[k - 1] + q X[k + 1] stays under 2**14 * 4.6 * 2**12."""
    f[off + F_TAP_X1] = f1_q8
    for i in range(3):
        k = tap_bin(f1_q8, ODDS[i]) if 0 < f1_q8 < X1_MAX else 0
        o = off + F_TAP_RE + 2 * i
        if k < 2 or k > m - 2:
            f[o] = 0
            f[o + 1] = 0
            continue
        p = weight(f1_q8, ODDS[i], k, -1)
        q = weight(f1_q8, ODDS[i], k, 1)
        for c in range(2):
            t = ((buf[2 * k + c] << 12) + p * buf[2 * k - 2 + c] + q * buf[2 * k + 2 + c]) >> 12
            f[o + c] = t << (8 - u) if u <= 8 else t >> (u - 8)
