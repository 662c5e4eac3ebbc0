# Half-order taps: per window and axis, the complex value at 0.5x, 1.5x and 2.5x over a triangle
# of 2 L samples centred on the boundary between the window before and this one, in integers,
# allocation-free.
#
# Why: the lines at half orders (a part that lifts and knocks every other turn: looseness, common
# practice) sit within 2 bins of the integer orders at the speeds of most pumps, and far under one
# bin's noise when they first show. One window cannot see them; a run of consecutive windows can,
# if their complex values are lined up in time (firmware_py/detect/half_lines.py does that). So
# each window hands over a complex value per half order here.
#
# What each value must leave out is the whole orders (a pump's 1x stands 50 dB and more over one
# bin's noise), which lie at odd multiples of x1 / 2 from every half order. A rectangle of L
# samples has the transform sin(pi f L) / sin(pi f): zeros at every multiple of 1 / L; a triangle
# of 2 L samples, the rectangle convolved with itself, has its square, so double zeros there
# (Harris, Proc. IEEE 66, 1978). Mixed down by exactly a half order, with L a whole number of
# 0.5x periods (2 n / x1 samples each), every whole order falls on a double zero: its leakage goes
# with the square of the speed estimate's relative error (1 % leaves 1e-4, -80 dB), where a Hann
# window's nulls, or a rectangle's single ones, go with its first power. A window of n samples
# holds one 0.5x period only from a 1x of 2 bins up, so a triangle of two periods needs two
# windows: the half after the boundary is summed in this window, the half before it was summed in
# the window before, at that window's mixing speed (the same speed for both halves, so the double
# zeros stay where the whole orders were put) and kept here. A window that does not follow the one
# before (cut(), or not follows) has no tap.
#
# The mixing speed is not the window's own estimate but how far the shaft turned between the window
# before and this one, from the phase its 1x advanced by (the phase vocoder's frequency: Flanagan
# and Golden, Bell System Technical Journal 45, 1966; from memory). A line at f bins turns f cycles
# in n samples, so the phase of the spectrum's bin k near it advances by 2 pi (f - k), modulo a
# turn, from one window to the next (the window's own phase term is the same in both and cancels):
# mix_speed() takes that angle from bin k of this window times the conjugate of the window
# before's (fixmath.atan2_q16) and puts f within half a bin of the window's own estimate. Under
# 2.5 bins the 1x and 2x lobes share two bins (speed.FINE_Q2), and one window's estimate is off by
# up to 10 % and scatters by 4 % (a 1x series at 2.05 to 2.4 bins, and a slow 6-pole pump at 2.1
# bins; measured); the phase advance is left only the neighbours' sidelobes and the noise,
# 0.0015 bin there (numpy, the same series). The zeros take the error squared, and half_lines
# drops a window mixed more than 1/32 off its block's mean, so with the window's own estimate no
# block filled under 2.5 bins. The speed is that between the two windows' centres; the tap mixed
# at it is centred half a window later, where a shaft that runs steadily turns as fast. The first
# window of a run has no phase before it: it sums no half, and the second has no tap.
#
# L: the fewest whole 0.5x periods that reach n / 2, m = ceil(x1 / 4) of them (span()); so
# n / 2 <= L <= n. Samples d = -L..L-1 about the boundary (between d = -1 and d = 0), weighed by
# the triangle at their centres d + 1/2: the j-th sample from the boundary, on either side, by
# w = ((2 L - 1 - 2 j) * inv) >> 16, inv = 2**27 // L (Q12, < 4096; (2 L - 1) inv < 2**28).
# Phase: the half order h (bins: cycles per n samples, so entries of the n-point table per sample)
# times (d + 1/2), kept as Q10 table entries modulo n * 2**10; the value is then the line's phase
# at the boundary, whatever the estimate's error (the window is symmetric about it).
#
# Entry points: span(f1_q8, n), mix_speed(k, pr, pi, xr, xi, f1_q8), footprint_bytes(axes),
# HalfTaps(axes, n, cos_q15, sin_q15) with speed(x, f1_q8, follows, a),
# run(win, dc, u, x1, follows, f, off, a) and cut(a).
#
# Scales: win holds int16 counts; dc: the integer mean of the window the tap's first half was
# summed in (counts); u: this window's gain exponent (features: y = (x - dc) * 2**u, peak's top
# bit at bit 13), so |y| <= 2**14 for the window's own mean, clamped to +-32767 (a window twice as
# loud as the one before, or a mean that jumps: only then). Per sample ((y w) >> 12) times cos or
# sin (Q15, |.| <= 32768), rounded: y w < 2**27, the product < 2**30, |term| <= 32759; a half sums
# L <= 4096 of them, |H| < 2**27, and is brought to counts Q8 as round(8 H / L) / 2 * 2**(6 - u)
# (|.| <= 2**17 * 2**8 for u >= -2: a peak under 2**16 counts). A tap is the two halves' sum, the
# mean over the triangle's 2 L samples of (x - dc) w / 4096 e**(-i phase): a line of amplitude A
# counts reads A / 2 (Q8); |tap| < 2**26. x: the window's spectrum X as features left it
# (fft.spectrum, packed: X[k] at x[2 k], x[2 k + 1]; |.| <= 2**14 a component).
import micropython
from array import array
from micropython import const

from firmware_py.dsp.feature_index import F_TAP_RE, F_TAP_X1
from firmware_py.dsp.fixmath import atan2_q16
from firmware_py.viper_stand import SX32, ptr16, ptr32

ODDS = (1, 3, 5)         # the half orders 0.5x, 1.5x, 2.5x as odd multiples of 0.5x
X1_MIN = const(512)      # bins Q8: the slowest 1x with taps (one 0.5x period fits a window)
X1_MAX = const(1 << 16)  # bins Q8: the fastest, exclusive (256 bins), which bounds m (<= 64)
_K1 = const(0)           # state per axis: the 1x the first half was mixed at (0: none), bins Q8
_KL = const(1)           # its L
_KDC = const(2)          # its dc, counts
_KH = const(3)           # the first half's three (re, im), counts Q8
_KB = const(9)           # the bin this window's X was kept at for the next (0: none)
_KX = const(10)          # that X (re, im), as the spectrum holds it
_KLEN = const(12)


def span(f1_q8, n):
    """L for a 1x of f1_q8 (bins Q8, X1_MIN <= f1 < X1_MAX): m = ceil(x1 / 4) periods of 0.5x,
    each 512 n / f1_q8 samples, rounded (m n 1024 <= 2**28; L <= n from 2 bins)."""
    m = (f1_q8 + 1023) >> 10
    return (m * n * 1024 // f1_q8 + 1) >> 1


def mix_speed(k, pr, pi, xr, xi, f1_q8):
    """The 1x between two windows' centres, bins Q8: from the phase bin k advanced by, pr + i pi
    in the window before, xr + i xi in this one (the spectrum's, |.| <= 2**14 a component), put
    within half a bin of this window's own estimate f1_q8 (bins Q8). The product's components
    (< 2**29) are shifted by 3 for fixmath.atan2_q16; its angle, turns Q16, is the offset from
    bin k in bins Q16. Elementwise, so the host twin calls it with numpy arrays."""
    re = (xr * pr + xi * pi) >> 3
    im = (xi * pr - xr * pi) >> 3
    p = (k << 8) + ((atan2_q16(im, re) + 128) >> 8)
    return p + (((f1_q8 - p + 128) >> 8) << 8)


def footprint_bytes(axes):
    """Heap bytes of a HalfTaps' arrays: the state per axis, the mixer's phases and its sums."""
    return 4 * _KLEN * axes + 4 * 6 + 4 * 6


class HalfTaps:
    """See the module comment. cos_q15, sin_q15: the feature core's n-point tables (0..n/2)."""

    def __init__(self, axes, n, cos_q15, sin_q15):
        self.n = n
        self.ct = cos_q15
        self.st = sin_q15
        self.k = array("i", bytes(4 * _KLEN * axes))
        self.par = array("i", bytes(4 * 6))     # per half order: phase, step (Q10 table entries)
        self.out = array("i", bytes(4 * 6))     # per half order: re, im of one half

    def speed(self, x, f1_q8, follows, a):
        """The mixing speed (bins Q8, 0: none) of axis a's window of spectrum x, whose own 1x is
        f1_q8 (bins Q8, 0: none): mix_speed() from the window before, if this one follows it;
        then X at the bin nearest f1_q8 is kept for the next."""
        k = self.k
        b = a * _KLEN
        x1 = 0
        kb = k[b + _KB] if follows else 0
        if kb and f1_q8:
            x1 = mix_speed(kb, k[b + _KX], k[b + _KX + 1], x[2 * kb], x[2 * kb + 1], f1_q8)
        kb = (f1_q8 + 128) >> 8         # 0: no estimate; else 2 <= kb <= n / 6 (speed.check_range)
        k[b + _KB] = kb
        k[b + _KX] = x[2 * kb]
        k[b + _KX + 1] = x[2 * kb + 1]
        return x1

    def run(self, win, dc, u, x1, follows, f, off, a):
        """Write F_TAP_X1 and the three (re, im) taps at f[off + ...] for axis a's window win of
        integer mean dc and gain exponent u, mixing speed x1 (bins Q8, 0: none; speed());
        follows: it starts where the window before ended. Then sum this window's half of the
        next tap at x1."""
        k = self.k
        b = a * _KLEN
        n = self.n
        f1 = k[b + _K1] if follows else 0
        f[off + F_TAP_X1] = f1
        if f1:
            L = k[b + _KL]
            self._mix(win, 0, 1, L, k[b + _KDC], u, f1)
            for i in range(6):
                f[off + F_TAP_RE + i] = k[b + _KH + i] + _q8(self.out[i], L, u)
        else:
            for i in range(6):
                f[off + F_TAP_RE + i] = 0
        if X1_MIN <= x1 < X1_MAX:
            L = span(x1, n)
            self._mix(win, n - 1, -1, L, dc, u, (n << 10) - x1)
            for i in range(6):
                k[b + _KH + i] = _q8(self.out[i], L, u)
            k[b + _K1] = x1
            k[b + _KL] = L
            k[b + _KDC] = dc
        else:
            k[b + _K1] = 0

    def cut(self, a):
        """Axis a's next window will not follow this one: no tap from it, nor a phase."""
        self.k[a * _KLEN + _K1] = 0
        self.k[a * _KLEN + _KB] = 0

    def _mix(self, win, i0, di, L, dc, u, f1):
        """One half into self.out, walking L samples from win[i0] by di away from the boundary,
        phases from the one beside it: d + 1/2 = +-1/2, times each half order h = odd f1 / 2,
        Q10 entries (odd f1 < 5 * 2**22). f1 is the 1x, or (n << 10) - 1x for the half before the
        boundary, whose phases run backwards (the same walk, mirrored)."""
        pm = (self.n << 10) - 1
        par = self.par
        for j in range(3):
            h = ODDS[j] * f1
            par[2 * j] = h & pm
            par[2 * j + 1] = (2 * h) & pm
        inv = (1 << 27) // L
        _mix(win, i0, di, L, dc, u, (2 * L - 1) * inv, 2 * inv, self.ct, self.st, self.n, par,
             self.out)


def _q8(h, L, u):
    """A half's sum h as counts Q8 (module comment): round(8 h / L) / 2, times 2**(6 - u)."""
    q = ((h << 3) // L + 1) >> 1
    return q << (6 - u) if u <= 6 else (q + (1 << (u - 7))) >> (u - 6)


@micropython.viper
def _mix(win, i: int, di: int, cnt: int, dc: int, u: int, wa: int, dw: int, ct, st, n: int,
         par, out):
    """out[2 j], out[2 j + 1] = sum over cnt samples from win[i], stepping di, of
    y w e**(-i phase_j) as the module comment scales them: y = (win - dc) * 2**u, +-32767 where
    |win - dc| exceeds 32767 >> u (u >= 0; for u < 0, |win - dc| >> -u <= 2**15 - 1 as is);
    w = wa >> 16 with wa falling by dw a sample; phase_j from par[2 j] by par[2 j + 1] a sample
    (Q10 entries of the n-point table, modulo n * 2**10). Table values may be negative:
    sign-extended with SX32; win's int16 with the 16-bit rule."""
    w16 = ptr16(win)
    cp = ptr32(ct)
    sp = ptr32(st)
    pp = ptr32(par)
    op = ptr32(out)
    sx = int(SX32)
    h = n >> 1
    tm = n - 1
    pm = (n << 10) - 1
    lim = 65535                    # |win - dc| past lim clamps, before the shift (which would
    if u >= 0:                     # leave 32 bits); int16 minus int16 never passes 65535
        lim = 32767 >> u
    p0 = pp[0]
    s0 = pp[1]
    p1 = pp[2]
    s1 = pp[3]
    p2 = pp[4]
    s2 = pp[5]
    r0 = 0
    q0 = 0
    r1 = 0
    q1 = 0
    r2 = 0
    q2 = 0
    # the three half orders are written out, not looped over: their phases and sums stay in
    # locals (registers under viper); a loop over them through par and out measured 23.8 loop-eq
    # per sample in bytecode against 16.1 (edgevib bench, half_taps)
    for _ in range(cnt):
        y = (((w16[i] & 0xFFFF) ^ 0x8000) - 0x8000) - dc
        if y > lim:
            y = 32767
        elif y < 0 - lim:
            y = -32767
        elif u >= 0:
            y = y << u
        else:
            y = y >> (0 - u)
        v = (y * (wa >> 16)) >> 12
        wa -= dw
        i += di
        k = ((p0 + 512) >> 10) & tm
        if k <= h:
            c = (cp[k] << sx) >> sx
            s = (sp[k] << sx) >> sx
        else:
            c = (cp[n - k] << sx) >> sx
            s = 0 - ((sp[n - k] << sx) >> sx)
        r0 += (v * c + 16384) >> 15
        q0 -= (v * s + 16384) >> 15
        p0 = (p0 + s0) & pm
        k = ((p1 + 512) >> 10) & tm
        if k <= h:
            c = (cp[k] << sx) >> sx
            s = (sp[k] << sx) >> sx
        else:
            c = (cp[n - k] << sx) >> sx
            s = 0 - ((sp[n - k] << sx) >> sx)
        r1 += (v * c + 16384) >> 15
        q1 -= (v * s + 16384) >> 15
        p1 = (p1 + s1) & pm
        k = ((p2 + 512) >> 10) & tm
        if k <= h:
            c = (cp[k] << sx) >> sx
            s = (sp[k] << sx) >> sx
        else:
            c = (cp[n - k] << sx) >> sx
            s = 0 - ((sp[n - k] << sx) >> sx)
        r2 += (v * c + 16384) >> 15
        q2 -= (v * s + 16384) >> 15
        p2 = (p2 + s2) & pm
    op[0] = r0
    op[1] = q0
    op[2] = r1
    op[3] = q1
    op[4] = r2
    op[5] = q2
