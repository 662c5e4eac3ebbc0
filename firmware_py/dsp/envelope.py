# Squared-envelope spectrum of a high-frequency band at the bearing defect orders, in integers,
# allocation-free; buffers are made once in the constructor.
#
# Entry point: Envelope(n, band, bear_q12, hann, pos, tw, log2_t).run(buf, f1_q8, f, off) writes
# F_ENV_BPFO..F_ENV_FTF. buf holds the window's spectrum X as fft.spectrum leaves it.
#
# Method (envelope analysis, Randall and Antoni, "Rolling element bearing diagnostics: a
# tutorial", MSSP 25, 2011): band-pass around a resonance the impacts excite, demodulate, and read
# the spectrum of the envelope at the defect frequencies. Here, per window:
# 1. Band-pass and analytic signal in one step: the band's positive-frequency bins X[lo..hi-1],
#    shifted down to bin 0 (a frequency shift does not change the envelope), scaled by 2**v so
#    the largest component's top bit is bit 13, conjugated, into an m = n/2 point complex FFT.
#    Its output is the conjugate of the analytic signal z of the band-passed windowed signal at
#    every second sample (m points span the band, so nothing aliases), times 2**v / m.
# 2. Squared envelope s[t] = |z|**2 (< 2**29), scaled to a top bit at 12 (s'). The squared
#    envelope, not |z|: no square root per sample, and it is the form the tutorial recommends
#    (the modulus adds components of its own; from memory).
# 3. Mean removal. The raw window was Hann-weighted, so s' = w(t)**2 * e2(t): subtracting a
#    constant would leave the window's shape in the low bins. Instead e2's mean
#    eq = sum(s') / sum(w**2) is found and eq * w(t)**2 subtracted, which zeroes bin 0 exactly.
# 4. The m-point complex FFT of the real d[t] (imaginary parts 0) gives D[k] = DFT(d)[k] / m.
#    A line of the squared envelope at x bins is smeared by w**2 (Hann squared: main lobe
#    |k - x| < 3, mean(w**4) = 35/128). Its mean square is 2 * (128/35) * sum of |D[k]|**2 over
#    the 6 bins floor(x)-2 .. floor(x)+3 (bins below 0 skipped).
# 5. Each field: log2(mean square of the line / eq**2), Q8 (the reference of feature_index).
#
# Cost per window: two m-point complex FFTs (together about one n-point complex FFT), three passes
# over m points and one zeroing pass over n ints. One buffer of its own, e (n ints): the squared
# envelope is kept in e's real slots, and the second FFT runs in the core's FFT buffer, whose
# spectrum has been read by then.
#
# Scales and bounds: band components |X| <= 2**14 (fft.spectrum), scaled to <= 2**14, so FFT
# components stay < 23171 (the cfft bound); s = |z|**2 < 2**29; s' < 2**13, sum(s') < 2**24;
# w2 = w**2 in Q14 (<= 2**14), sum(w2) = 3m/8 * 2**14 < 2**24; eq <= 2**13 / (3/8) < 2**15
# (sum(s') <= m * 2**13 over sum(w**2) = 3m/8); eq * w2 < 2**29; |d| <= max(s', eq * w2 / 2**14)
# <= 21846 < 23171; |D|**2 < 2**29 and, by Parseval, any sum of them is below max(d)**2 < 2**29.
import array

from firmware_py.dsp import fft
from firmware_py.dsp.feature_index import (
    F_ENV_BPFI, F_ENV_BPFO, F_ENV_BSF, F_ENV_FTF, LOG2_ZERO_Q8)
from firmware_py.dsp.fixmath import div_pow2, log2_q8, msb, mul_shift

_S_TOP = 12                  # s' top bit


def check_band(n, fs_hz, band, bear_q12, hi_q8):
    """Raise ValueError with the reason if the envelope band or the defect orders cannot be used."""
    m = n >> 1
    if len(band) not in (0, 2):
        raise ValueError("envelope band must be [lo_bin, hi_bin] or empty")
    if band and not (1 <= band[0] and band[0] + 4 <= band[1] <= m):
        raise ValueError("envelope band bins must satisfy 1 <= lo, lo + 4 <= hi <= n/2")
    if len(bear_q12) not in (0, 4):
        raise ValueError("bearing orders must be [bpfo, bpfi, bsf, ftf] (Q12) or empty")
    for o in bear_q12:
        if not 0 < o < 1 << 18:
            raise ValueError("bearing orders must lie in (0, 64) shaft orders")
        # the line's lobe (3 bins above) must stay below m/2, the envelope spectrum's top
        if hi_q8 and (o * hi_q8 * n) // (256 * fs_hz * 4096) + 3 > m >> 1:
            raise ValueError("a bearing defect frequency at the top speed lies beyond fs/4")


def buffer_bytes(n):
    """Heap bytes of an Envelope's buffers (payloads)."""
    return 4 * n + 4 * 4


class Envelope:
    """Squared-envelope lines for one band and one bearing, reused for every window and axis."""

    def __init__(self, n, band, bear_q12, hann, pos, tw, log2_t):
        m = n >> 1
        self.n = n
        self.m = m
        self.on = len(band) == 2 and len(bear_q12) == 4
        self.lo = band[0] if self.on else 0
        self.hi = band[1] if self.on else 0
        self.bear = array.array('i', bear_q12 if self.on else (0, 0, 0, 0))
        self.hann = hann
        self.pos = pos
        self.tw = tw
        self.log2_t = log2_t
        self.e = array.array('i', bytes(4 * n))         # m complex points, interleaved
        w2sum = 0                                       # sum of w**2 at even samples, Q14
        for t in range(m):
            h = hann[2 * t] >> 1                        # Q14, <= 2**14
            w2sum += (h * h) >> 14
        self.w2sum = w2sum
        self.c_ms = 2048 - log2_q8(35, log2_t)          # log2(256/35): one side, / mean(w**4)

    def run(self, buf, f1_q8, f, off):
        """Lines for the spectrum X in buf (fft.spectrum's layout) at 1x = f1_q8 (bins Q8).
        Overwrites buf (with the squared envelope's spectrum D)."""
        eq = self._squared_envelope(buf) if self.on and f1_q8 else 0
        if eq == 0:
            f[off + F_ENV_BPFO] = LOG2_ZERO_Q8
            f[off + F_ENV_BPFI] = LOG2_ZERO_Q8
            f[off + F_ENV_BSF] = LOG2_ZERO_Q8
            f[off + F_ENV_FTF] = LOG2_ZERO_Q8
            return
        c = self.c_ms - 2 * log2_q8(eq, self.log2_t)
        b = self.bear
        f[off + F_ENV_BPFO] = self._line(buf, mul_shift(f1_q8, b[0], 12), c)
        f[off + F_ENV_BPFI] = self._line(buf, mul_shift(f1_q8, b[1], 12), c)
        f[off + F_ENV_BSF] = self._line(buf, mul_shift(f1_q8, b[2], 12), c)
        f[off + F_ENV_FTF] = self._line(buf, mul_shift(f1_q8, b[3], 12), c)

    def _squared_envelope(self, buf):
        """Steps 1-4: leaves D in buf; returns eq (0 if the band or its envelope is empty)."""
        lo = self.lo
        hi = self.hi
        mx = 0
        for i in range(2 * lo, 2 * hi):
            v = buf[i]
            if v > mx:
                mx = v
            elif -v > mx:
                mx = -v
        if mx == 0:
            return 0
        u = 13 - msb(mx)                # -1 <= u <= 13
        g = 1 << u if u > 0 else 1
        sh = 1 if u < 0 else 0
        e = self.e
        pos = self.pos
        m = self.m
        for i in range(self.n):
            e[i] = 0
        for k in range(lo, hi):
            q = pos[2 * (k - lo)]       # slot of complex point k - lo, bit-reversed
            e[q] = (buf[2 * k] * g) >> sh
            e[q + 1] = -((buf[2 * k + 1] * g) >> sh)
        fft.cfft(e, m, self.tw)
        top = 0
        for i in range(0, self.n, 2):   # s[t] = |z[t]|**2 into the real slot e[2t]
            zr = e[i]
            zi = e[i + 1]
            v = zr * zr + zi * zi
            e[i] = v
            if v > top:
                top = v
        if top == 0:
            return 0
        w = msb(top) - _S_TOP           # s' = s * 2**-w: top bit at 12
        gs = 1 << -w if w < 0 else 1
        ws = w if w > 0 else 0
        tot = 0
        for i in range(0, self.n, 2):
            v = (e[i] * gs) >> ws
            e[i] = v
            tot += v
        # eq = round(tot / sum(w**2)) = round(tot * 2**14 / w2sum), e2's mean in s' units
        eq = (div_pow2(tot, self.w2sum, 15) + 1) >> 1
        hann = self.hann
        for t in range(m):
            h = hann[2 * t] >> 1        # w(t), Q14
            q = pos[2 * t]
            buf[q] = e[2 * t] - ((eq * ((h * h) >> 14) + 8192) >> 14)
            buf[q + 1] = 0
        fft.cfft(buf, m, self.tw)
        return eq

    def _line(self, d, x_q8, c):
        """log2 Q8 of a squared-envelope line at x_q8 (bins Q8) of the spectrum d, against eq**2
        (c folds that in)."""
        k = (x_q8 >> 8) - 2
        if k < 0:
            k = 0
        s = 0
        for j in range(k, (x_q8 >> 8) + 4):
            r = d[2 * j]
            i = d[2 * j + 1]
            s += r * r + i * i
        return log2_q8(s, self.log2_t) + c if s > 0 else LOG2_ZERO_Q8
