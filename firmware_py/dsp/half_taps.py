# Half-order taps of one window: the complex spectrum at the bins nearest 0.5x, 1.5x and 2.5x of
# the window's own 1x estimate, in integers, allocation-free.
#
# Why: the lines at half orders (a part that lifts and knocks every other turn: looseness, common
# practice) sit within 2 bins of the integer orders at the speeds of most pumps in a 512-sample
# window, and far under one bin's noise when they first show. One window cannot see them; a run of
# consecutive windows can, if their complex values are lined up in time (the detector does that:
# firmware_py/detect/half_lines.py). So each window hands over its raw complex values here.
#
# Entry points: tap_bin(f1_q8, odd), run(buf, m, f1_q8, u, f, off).
#
# Scales: buf holds X[k] = DFT(x)[k] / m in the packed real-FFT layout (fft.spectrum with keep_x),
# where x = the Hann-windowed (Q15 table) window y = (counts - mean) * 2**u; |X| <= 2**14. A tap is
# X[k] * 2**(8 - u): counts Q8 of the same transform, so windows of different gain u compare;
# u >= -2 (a peak under 2**16 counts), so |tap| <= 2**14 * 2**10 = 2**24.
from firmware_py.dsp.feature_index import F_TAP_RE, F_TAP_X1

ODDS = (1, 3, 5)        # the half orders 0.5x, 1.5x, 2.5x as odd multiples of 0.5x


def tap_bin(f1_q8, odd):
    """The bin nearest odd/2 x 1x, for 1x = f1_q8 (bins Q8): round(odd * f1 / 2)."""
    return (odd * f1_q8 + 256) >> 9


def run(buf, m, f1_q8, u, f, off):
    """Write F_TAP_X1 and the three (re, im) taps at f[off + ...] from the spectrum X in buf.
    f1_q8: 1x in bins Q8 (0: none); u: the window's gain exponent. A tap whose bin falls outside
    1..m-1 (where the packed layout holds complex values) and a window without 1x get zeros."""
    f[off + F_TAP_X1] = f1_q8
    for i in range(3):
        k = tap_bin(f1_q8, ODDS[i]) if f1_q8 > 0 else 0
        o = off + F_TAP_RE + 2 * i
        if k < 1 or k >= m:
            f[o] = 0
            f[o + 1] = 0
        elif u <= 8:
            f[o] = buf[2 * k] << (8 - u)
            f[o + 1] = buf[2 * k + 1] << (8 - u)
        else:
            f[o] = buf[2 * k] >> (u - 8)
            f[o + 1] = buf[2 * k + 1] >> (u - 8)
