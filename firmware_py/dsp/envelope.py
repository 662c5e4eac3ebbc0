# Squared-envelope spectrum of a high-frequency band at the bearing defect orders, in integers,
# allocation-free; buffers are made once in the constructor.
#
# Entry point: Envelope(n, fs_hz, band, bear_q12, speed_hi_q8, hann_q15, pos, tw_q15, cos_q15,
# sin_q15, log2_q15).run(buf, f1_q8, f, off) writes F_ENV_BPFO..F_ENV_FTF. buf holds the
# window's spectrum X as fft.spectrum leaves it.
#
# Method (envelope analysis, Randall and Antoni, "Rolling element bearing diagnostics: a
# tutorial", MSSP 25, 2011): band-pass around a resonance the impacts excite, demodulate, and read
# the spectrum of the envelope at the defect frequencies. Here, per window:
# 1. Band-pass and analytic signal in one step: the band's positive-frequency bins X[lo..hi-1],
#    shifted down to bin 0 (a frequency shift does not change the envelope), scaled by 2**v so
#    the largest component's top bit is bit 13, conjugated, into an M-point complex FFT. Its
#    output is the conjugate of the analytic signal z of the band-passed windowed signal at every
#    (n/M)-th sample, times 2**v / M. M is the smallest power of two (16 at least, m at most) that
#    holds twice the band (the squared envelope spans -W..W bins for a band W bins wide, so M
#    points carry it without aliasing) and twice the highest defect line at the top speed plus
#    its lobe: sampling the envelope no faster than it needs costs the least.
# 2. Squared envelope s[t] = |z|**2 (< 2**29), scaled to a top bit at 12 (s'). The squared
#    envelope, not |z|: no square root per sample, and it is the form the tutorial recommends
#    (the modulus adds components of its own; from memory).
# 3. Mean removal. The raw window was Hann-weighted, so s' = w(t)**2 * e2(t): subtracting a
#    constant would leave the window's shape in the low bins. Instead e2's mean
#    eq = sum(s') / sum(w**2) is found and eq * w(t)**2 subtracted, which zeroes bin 0 exactly.
# 4. The M-point complex FFT of the real d[t] (imaginary parts 0) gives D[k] = DFT(d)[k] / M,
#    bins of fs/n as the window's own spectrum (M samples over the same n/fs seconds). A line of
#    the squared envelope at x bins is smeared by w**2 (Hann squared: main lobe |k - x| < 3,
#    mean(w**4) = 35/128 for M >= 8). Its mean square is 2 * (128/35) * sum of |D[k]|**2 over the
#    6 bins floor(x)-2 .. floor(x)+3 (bins below 0 skipped).
# 5. Each field: log2(mean square of the line / eq**2), Q8 (the reference of feature_index).
#
# Cost per window: two M-point complex FFTs, three passes over M points and one zeroing pass over
# 2M ints. Memory: e (2M ints) and, when M < m, the M-point FFT's twiddles; the bit-reversed
# slots and the window come from the core's tables at a stride (bitrev over log2 M bits of c is
# bitrev over log2 m bits of c * m/M). The second FFT runs in the core's FFT buffer, whose
# spectrum has been read by then.
#
# Scales and bounds: band components |X| <= 2**14 (fft.spectrum), scaled to <= 2**14, so FFT
# components stay < 23171 (the cfft bound); s = |z|**2 < 2**29; s' < 2**13, sum(s') < 2**24;
# w2 = w**2 in Q14 (<= 2**14), sum(w2) = 3M/8 * 2**14 < 2**24; eq <= 2**13 / (3/8) < 2**15
# (sum(s') <= M * 2**13 over sum(w**2) = 3M/8); eq * w2 < 2**29; |d| <= max(s', eq * w2 / 2**14)
# <= 21846 < 23171; |D|**2 < 2**29 and, by Parseval, any sum of them is below max(d)**2 < 2**29.
import array

import micropython

from firmware_py.dsp import fft
from firmware_py.dsp.feature_index import (
    F_ENV_BPFI, F_ENV_BPFO, F_ENV_BSF, F_ENV_FTF, LOG2_ZERO_Q8)
from firmware_py.dsp.fixmath import div_pow2, log2_q8, msb, mul_shift
from firmware_py.viper_stand import SX32, ptr16, ptr32

_S_TOP = 12                  # s' top bit


def check_band(n, fs_hz, band, bear_q12, hi_q8):
    """Raise ValueError with the reason if the envelope band or the defect orders cannot be used."""
    m = n >> 1
    if len(band) not in (0, 2):
        raise ValueError("envelope band must be [lo_bin, hi_bin] or empty")
    if band and not (1 <= band[0] and band[0] + 4 <= band[1] <= m):
        raise ValueError("envelope band bins must satisfy 1 <= lo, lo + 4 <= hi <= n/2")
    if band and 2 * (band[1] - band[0]) > m:
        raise ValueError("envelope band wider than fs/4: its squared envelope would alias")
    if len(bear_q12) not in (0, 4):
        raise ValueError("bearing orders must be [bpfo, bpfi, bsf, ftf] (Q12) or empty")
    for o in bear_q12:
        if not 0 < o < 1 << 18:
            raise ValueError("bearing orders must lie in (0, 64) shaft orders")
    # each line and its lobe (3 bins above) below fs/4, the top of the envelope's spectrum
    if _top_line(n, fs_hz, bear_q12, hi_q8) + 4 > m >> 1:
        raise ValueError("a bearing defect frequency at the top speed lies beyond fs/4")


def points(n, fs_hz, band, bear_q12, hi_q8):
    """M, the envelope transform's size (step 1), for a checked configuration."""
    need = 2 * (band[1] - band[0]) if band else 0
    t = 2 * (_top_line(n, fs_hz, bear_q12, hi_q8) + 4)
    if t > need:
        need = t
    mz = 16
    while mz < need:
        mz <<= 1
    return mz if mz < n >> 1 else n >> 1


def _top_line(n, fs_hz, bear_q12, hi_q8):
    """Bin of the highest defect line at the top speed (start-up ints)."""
    top = 0
    for o in bear_q12:
        k = (o * hi_q8 * n) // (256 * fs_hz * 4096)
        if k > top:
            top = k
    return top


def buffer_bytes(n):
    """Heap bytes of an Envelope's buffers (payloads), for the largest M any set may ask for:
    M = m (e: 2m ints; the core's twiddles serve) or M = m/2 (e: m ints and M's twiddles)."""
    m = n >> 1
    return 4 * 4 + max(8 * m, 4 * m + fft.twiddle_bytes(m >> 1))


class Envelope:
    """Squared-envelope lines for one band and one bearing, reused for every window and axis."""

    def __init__(self, n, fs_hz, band, bear_q12, speed_hi_q8, hann_q15, pos, tw_q15, cos_q15,
                 sin_q15, log2_q15):
        m = n >> 1
        self.on = len(band) == 2 and len(bear_q12) == 4 and speed_hi_q8 > 0
        mz = points(n, fs_hz, band, bear_q12, speed_hi_q8) if self.on else 16
        self.mz = mz
        self.lo = band[0] if self.on else 0
        self.hi = band[1] if self.on else 0
        self.bear = array.array('i', bear_q12 if self.on else (0, 0, 0, 0))
        self.hann_q15 = hann_q15
        self.pos = pos
        self.ps = 2 * (m // mz)                         # stride into pos: slot of point c
        self.hs = n // mz                               # stride into hann: w at envelope sample t
        if mz == m:
            self.tw_q15 = tw_q15
        else:                                           # W_mz = W_n ** (n/mz): every (m/mz)-th entry
            st = m // mz
            self.tw_q15 = fft.radix4_twiddles(
                mz, array.array('i', [cos_q15[k * st] for k in range(mz + 1)]),
                array.array('i', [sin_q15[k * st] for k in range(mz + 1)]))
        self.log2_q15 = log2_q15
        self.e = array.array('i', bytes(8 * mz))        # mz complex points, interleaved
        w2sum = 0                                       # sum of w**2 at the envelope's samples, Q14
        for t in range(mz):
            h = hann_q15[t * self.hs] >> 1              # Q14, <= 2**14
            w2sum += (h * h) >> 14
        self.w2sum_q14 = w2sum
        self.c_ms_q8 = 2048 - log2_q8(35, log2_q15)     # log2(256/35): one side, / mean(w**4)

    def run(self, buf, f1_q8, f, off):
        """Lines for the spectrum X in buf (fft.spectrum's layout) at 1x = f1_q8 (bins Q8).
        Overwrites buf (with the squared envelope's spectrum D in its first 2M ints)."""
        eq = self._squared_envelope(buf) if self.on and f1_q8 else 0
        if eq == 0:
            f[off + F_ENV_BPFO] = LOG2_ZERO_Q8
            f[off + F_ENV_BPFI] = LOG2_ZERO_Q8
            f[off + F_ENV_BSF] = LOG2_ZERO_Q8
            f[off + F_ENV_FTF] = LOG2_ZERO_Q8
            return
        c = self.c_ms_q8 - 2 * log2_q8(eq, self.log2_q15)
        b = self.bear
        f[off + F_ENV_BPFO] = self._line(buf, mul_shift(f1_q8, b[0], 12), c)
        f[off + F_ENV_BPFI] = self._line(buf, mul_shift(f1_q8, b[1], 12), c)
        f[off + F_ENV_BSF] = self._line(buf, mul_shift(f1_q8, b[2], 12), c)
        f[off + F_ENV_FTF] = self._line(buf, mul_shift(f1_q8, b[3], 12), c)

    def _squared_envelope(self, buf):
        """Steps 1-4: leaves D in buf; returns eq (0 if the band or its envelope is empty)."""
        lo = self.lo
        mx = _peak(buf, 2 * lo, 2 * self.hi)
        if mx == 0:
            return 0
        u = 13 - msb(mx)                # -1 <= u <= 13
        g = 1 << u if u > 0 else 1
        sh = 1 if u < 0 else 0
        e = self.e
        mz = self.mz
        _band_in(buf, lo, self.hi, g, sh, e, 2 * mz, self.pos, self.ps)
        fft.cfft(e, mz, self.tw_q15)
        top = _square(e, 2 * mz)
        if top == 0:
            return 0
        w = msb(top) - _S_TOP           # s' = s * 2**-w: top bit at 12
        tot = _rescale(e, 2 * mz, 1 << -w if w < 0 else 1, w if w > 0 else 0)
        # eq = round(tot / sum(w**2)) = round(tot * 2**14 / w2sum), e2's mean in s' units
        eq = (div_pow2(tot, self.w2sum_q14, 15) + 1) >> 1
        _demean(e, buf, mz, eq, self.hann_q15, self.hs, self.pos, self.ps)
        fft.cfft(buf, mz, self.tw_q15)
        return eq

    def _line(self, d, x_q8, c):
        """log2 Q8 of a squared-envelope line at x_q8 (bins Q8) of the spectrum d, against eq**2
        (c folds that in)."""
        k = (x_q8 >> 8) - 2
        if k < 0:
            k = 0
        s = _lobe_power(d, k, (x_q8 >> 8) + 4)
        return log2_q8(s, self.log2_q15) + c if s > 0 else LOG2_ZERO_Q8


# The per-window loops, viper-compiled on the boards (firmware_py.viper_stand): 32-bit loads of
# values that may be negative are sign-extended with SX32; the bounds are the module comment's.

@micropython.viper
def _peak(buf, a: int, b: int) -> int:
    """Largest |buf[i]| for a <= i < b (band components, <= 2**14)."""
    z = ptr32(buf)
    sx = int(SX32)
    mx = 0
    for i in range(a, b):
        v = (z[i] << sx) >> sx
        if v > mx:
            mx = v
        elif -v > mx:
            mx = -v
    return mx


@micropython.viper
def _band_in(buf, lo: int, hi: int, g: int, sh: int, e, n2: int, pos, ps: int):
    """Step 1's input: e (n2 ints) zeroed, then the conjugate of X[k] * g >> sh for k in lo..hi-1
    at the bit-reversed slot of point k - lo (pos[ps * (k - lo)]); |X[k] * g| < 2**14."""
    z = ptr32(buf)
    o = ptr32(e)
    q = ptr16(pos)             # unsigned slots: a zero-extended load is the value
    sx = int(SX32)
    for i in range(n2):
        o[i] = 0
    for k in range(lo, hi):
        t = q[ps * (k - lo)]
        o[t] = (((z[2 * k] << sx) >> sx) * g) >> sh
        o[t + 1] = -((((z[2 * k + 1] << sx) >> sx) * g) >> sh)


@micropython.viper
def _square(e, n2: int) -> int:
    """Step 2: s[t] = |z[t]|**2 (< 2**29) into the real slot e[2t]; returns the largest."""
    o = ptr32(e)
    sx = int(SX32)
    top = 0
    for i in range(0, n2, 2):
        zr = (o[i] << sx) >> sx
        zi = (o[i + 1] << sx) >> sx
        v = zr * zr + zi * zi
        o[i] = v
        if v > top:
            top = v
    return top


@micropython.viper
def _rescale(e, n2: int, gs: int, ws: int) -> int:
    """s' = (s * gs) >> ws in the real slots (s' < 2**13, so s * gs < 2**13 too); returns
    sum(s') < 2**24. s >= 0 and < 2**29: a zero-extended load is the value."""
    o = ptr32(e)
    tot = 0
    for i in range(0, n2, 2):
        v = (o[i] * gs) >> ws
        o[i] = v
        tot += v
    return tot


@micropython.viper
def _demean(e, buf, mz: int, eq: int, hann, hs: int, pos, ps: int):
    """Step 3 and the second transform's input: d[t] = s'[t] - round(eq * w(t)**2), w(t) =
    hann[hs * t] / 2 in Q14, real, at the bit-reversed slot pos[ps * t] of buf (|d| < 23171)."""
    o = ptr32(e)
    b = ptr32(buf)
    w = ptr16(hann)            # unsigned Q15: a zero-extended load is the value
    q = ptr16(pos)
    for t in range(mz):
        h = w[hs * t] >> 1
        k = q[ps * t]
        b[k] = o[2 * t] - ((eq * ((h * h) >> 14) + 8192) >> 14)
        b[k + 1] = 0


@micropython.viper
def _lobe_power(d, a: int, b: int) -> int:
    """sum of |D[j]|**2 for a <= j < b (complex points, interleaved); < 2**29 (Parseval)."""
    z = ptr32(d)
    sx = int(SX32)
    s = 0
    for j in range(a, b):
        r = (z[2 * j] << sx) >> sx
        i = (z[2 * j + 1] << sx) >> sx
        s += r * r + i * i
    return s
