"""The feature core: per axis, each window of n int16 counts becomes the integer feature fields
of feature_index (scales documented there). All memory is allocated in the constructor; step()
allocates nothing and keeps every intermediate below 2**30 in magnitude (docs/fixed-point.md).

Per window and axis: one pass over the samples (statistics, stuck and zero runs: _scan), a
second that normalises, windows and stores them bit-reversed (_shape), the FFT and power spectrum (fft), the moments and band powers (_finish),
then the shaft speed (speed), the order amplitudes (orders) and the squared-envelope lines
(envelope), each of which reads the spectrum the FFT left, and the half-order taps (half_taps),
which read the samples around the boundary with the window before, at that window's speed.

Entry points: check_config(), footprint_bytes(), FeatureCore. The per-sample passes (_scan,
_shape), the FFT stages and the band powers (_bands) are viper-compiled on the boards
(firmware_py.viper_stand), as are the speed and envelope stages' loops in their modules."""
import array

import micropython
from micropython import const

from firmware_py.dsp import envelope, fft, half_taps, orders, speed, tables
from firmware_py.dsp.feature_index import (
    F_BAND0, F_CLIP, F_CREST, F_ENV_FTF, F_HALF, F_KURT, F_MEAN, F_ORD_HALF, F_PEAK, F_RMS,
    F_SPEED, F_SPEED_CONF, F_STUCK, F_TAP_RE, F_TAP_X1, F_VEL, F_ZERO, LOG2_ZERO_Q8, per_axis)
from firmware_py.dsp.fft import power_sum
from firmware_py.dsp.fixmath import div_pow2, log2_q8, msb, sqrt_pow2
from firmware_py.dsp.ring import SampleRing, footprint_bytes as _ring_bytes
from firmware_py.viper_stand import ptr16, ptr32

Y_BITS = const(13)      # windows are normalised so the peak's top bit is bit 13: |y| <= 2**14
_MIN_N = const(64)
_MAX_N = const(4096)
# Window sums in FeatureCore.st (array('i')), written by _scan and _shape
_S_SUM = const(0)       # sum of counts, |.| <= 2**27
_S_MAX = const(1)       # largest count
_S_MIN = const(2)       # smallest count
_S_CLIP = const(3)      # counts at or beyond the converter's full-scale codes
_S_SQ = const(4)        # sum(y*y >> (L-1)) < 2**29
_S_S4 = const(5)        # sum(round(y*y / 2**14)**2 >> L) < 2**28
_S_STUCK = const(6)     # longest run of identical consecutive counts, samples
_S_ZERO = const(7)      # longest run of counts exactly 0, samples (0: none)
_S_LEN = const(8)


def check_config(n, axes, fs_hz, bands, vel_lo_hz, vel_hi_hz, speed_lo_q8=0, speed_hi_q8=0,
                 vane=0, env_band=(), bear_q12=()):
    """Raise ValueError with the reason if the feature core cannot run this configuration."""
    if n < _MIN_N or n > _MAX_N or n & (n - 1):
        raise ValueError("window length must be a power of two from 64 to 4096")
    if axes < 1 or axes > 3:
        raise ValueError("1 to 3 axes")
    if not 0 < vel_lo_hz < vel_hi_hz or 2 * vel_lo_hz >= fs_hz:
        raise ValueError("velocity band must satisfy 0 < lo < hi and lo below fs/2")
    if fs_hz < 1 or fs_hz >= 1 << 20:
        raise ValueError("sample rate must be 1 to 2**20 - 1 Hz")
    m = n >> 1
    for b in bands:
        if not 1 <= b[0] < b[1] <= m:
            raise ValueError("band bins must satisfy 1 <= lo < hi <= n/2")
    speed.check_range(n, fs_hz, speed_lo_q8, speed_hi_q8)
    orders.check_vane(n, fs_hz, vane, speed_hi_q8)
    envelope.check_band(n, fs_hz, env_band, bear_q12, speed_hi_q8)


def footprint_bytes(n, axes, ring_windows, n_bands):
    """Heap bytes the feature core's buffers and tables take (array payloads; object headers,
    about 16 bytes each, come on top), the envelope's buffers included whether or not a set uses
    them. Used by board profiles to check the heap budget."""
    m = n >> 1
    tables_b = 2 * 4 * (m + 1) + 2 * n + 2 * n + 2 * tables.LOG2_N + 3 * (m + 1)   # trig, hann, pos, log2, vel
    tw_b = fft.twiddle_bytes(m)                                          # radix-4 twiddles
    work_b = 4 * n + 4 * (m + 1) + 4 * axes * per_axis(n_bands)          # fft buf, power, feats
    work_b += 4 * _S_LEN + 4 * n_bands                                   # window sums, band bins
    return (_ring_bytes(axes, n, ring_windows) + tables_b + tw_b + work_b
            + envelope.buffer_bytes(n) + half_taps.footprint_bytes(axes))


class FeatureCore:
    """Ring buffer plus feature stage for `axes` axes of n-sample windows at fs_hz.

    bands: list of (lo_bin, hi_bin) half-open bin ranges for band powers; adc_min/adc_max: the
    converter's full-scale codes (a sample at or beyond them counts as clipped).
    """

    def __init__(self, n, axes, fs_hz, adc_min, adc_max, bands=(), vel_lo_hz=10, vel_hi_hz=1000,
                 ring_windows=2, speed_lo_q8=0, speed_hi_q8=0, vane=0, env_band=(), bear_q12=()):
        check_config(n, axes, fs_hz, bands, vel_lo_hz, vel_hi_hz, speed_lo_q8, speed_hi_q8, vane,
                     env_band, bear_q12)
        self.n = n
        self.m = n >> 1
        self.L = msb(n)
        self.axes = axes
        self.fs_hz = fs_hz
        self.adc_min = adc_min
        self.adc_max = adc_max
        self.ring = SampleRing(axes, n, ring_windows)
        self.cos_q15, self.sin_q15 = tables.twiddles(n)
        self.hann_q15 = tables.hann(n, self.cos_q15)
        self.pos = tables.bitrev_positions(n)
        self.tw_q15 = fft.radix4_twiddles(self.m, self.cos_q15, self.sin_q15)
        self.log2_q15 = tables.log2_table()
        self.vmant, self.vsh2, self.vel_exp = tables.velocity_weights(n, fs_hz, vel_lo_hz, vel_hi_hz)
        self.buf = array.array('i', bytes(4 * n))
        self.p = array.array('i', bytes(4 * (self.m + 1)))
        self.band_lo = array.array('H', [b[0] for b in bands])
        self.band_hi = array.array('H', [b[1] for b in bands])
        self.n_bands = len(bands)
        # band mean square = 4/3 * 2**-2u * sum(p) (Hann power normalisation); 4/3 as log2, Q8
        self.log2_4_3_q8 = 512 - log2_q8(3, self.log2_q15)
        self.per = per_axis(self.n_bands)
        self.taps = half_taps.HalfTaps(axes, n, self.cos_q15, self.sin_q15)
        self.follows = True
        self.feats = array.array('i', bytes(4 * axes * self.per))
        self.st = array.array('i', bytes(4 * _S_LEN))    # window sums, see _scan and _shape
        self.speed = speed.SpeedEstimator(n, fs_hz, speed_lo_q8, speed_hi_q8, self.p)
        self.orders = orders.OrderReader(vane, self.p, self.log2_q15)
        self.env = envelope.Envelope(n, fs_hz, env_band, bear_q12, speed_hi_q8, self.hann_q15,
                                     self.pos, self.tw_q15, self.cos_q15, self.sin_q15,
                                     self.log2_q15)
        for a in range(axes):       # the stages' fields as they stay while the stages are off
            self._stages(None, a, 0, 0)
            self.feats[a * self.per + F_HALF] = LOG2_ZERO_Q8   # the detector's field (feature_index)
        self.windows = 0

    def step(self, follows=True):
        """Process the oldest waiting window of every axis into self.feats and free its slot;
        False if no window waits. follows: as process()."""
        if not self.process(follows):
            return False
        self.ring.release()
        return True

    @micropython.native
    def process(self, follows=True):
        """As step(), but the window stays in the ring (ring.window(a) still reads it) until
        ring.release(): the caller may save it, e.g. as an event snapshot. follows: the window
        starts where the last one processed ended (no sample lost or skipped between them),
        which the half-order taps need."""
        ring = self.ring
        if not ring.ready():
            return False
        self.follows = follows
        for a in range(self.axes):
            self._axis(ring.window(a), a)
        self.windows += 1
        return True

    @micropython.native
    def _axis(self, win, a):
        n = self.n
        off = a * self.per
        L = self.L
        f = self.feats
        st = self.st
        _scan(win, n, self.adc_min, self.adc_max, st)
        s = st[_S_SUM]                  # |s| <= 2**15 * n <= 2**27
        mx = st[_S_MAX]
        mn = st[_S_MIN]
        mean = (s + (n >> 1)) >> L      # rounded integer mean, counts
        pk = mx - mean
        if mean - mn > pk:
            pk = mean - mn              # peak of x - mean, counts, <= 65535
        f[off + F_MEAN] = (s + (1 << (L - 9)) >> (L - 8)) if L > 8 else s << (8 - L)
        f[off + F_PEAK] = pk << 8
        f[off + F_CLIP] = st[_S_CLIP]
        f[off + F_STUCK] = st[_S_STUCK]
        f[off + F_ZERO] = st[_S_ZERO]
        if pk == 0:
            self._flat(off)
            self.taps.cut(a)
            return
        # normalise: y = (x - mean) * 2**u, peak's top bit at Y_BITS
        u = Y_BITS - msb(pk)
        g = 1 << u if u > 0 else 1
        sh = -u if u < 0 else 0
        _shape(win, n, L, mean, g, sh, self.hann_q15, self.pos, self.buf, st)
        m = self.m
        fft.cfft(self.buf, m, self.tw_q15)
        vs = fft.spectrum(self.buf, m, self.cos_q15, self.sin_q15, self.vmant, self.vsh2, self.p,
                          self.speed.on)
        self._finish(off, pk, u, g, sh, st[_S_SQ], st[_S_S4], vs)
        if self.speed.on:           # off: no 1x, so no orders, taps or envelope; fields as set
            self._stages(win, a, u, mean)

    def _stages(self, win, a, u, mean):
        """Speed, orders and envelope from the spectrum the FFT left, the half-order taps from
        the samples (win: axis a's window, u: its scale, mean: its integer mean, counts)."""
        f = self.feats
        off = a * self.per
        f1 = self.speed.run(f, off)
        self.orders.run(f1, self.log2_4_3_q8 - 512 * u, f, off)
        x1 = self.taps.speed(self.buf, f1, self.follows, a)
        self.taps.run(win, mean, u, x1, self.follows, f, off, a)
        self.env.run(self.buf, f1, f, off)

    @micropython.native
    def _finish(self, off, pk, u, g, sh, sq, s4, vs):
        """Features from the window sums (shared by the device and the host twin).

        sq, s4, vs, u as in _axis; pk: peak counts. Writes F_RMS..F_VEL and the band powers.
        """
        f = self.feats
        # mean square of y is sq / 2 (sq holds y*y / 2**(L-1), summed over n = 2**L samples)
        f[off + F_RMS] = sqrt_pow2(sq, 15 - 2 * u)                 # sqrt(sq/2) * 2**(8-u)
        rms_y_q8 = sqrt_pow2(sq, 15)
        f[off + F_CREST] = div_pow2((pk * g) >> sh, rms_y_q8, 20)  # Q12
        # kurtosis = mean(y**4) / mean(y**2)**2 = s4 * 2**28 / (sq/2)**2 = s4 * 2**30 / sq**2
        f[off + F_KURT] = div_pow2(div_pow2(s4, sq, 21), sq, 21)   # Q12
        f[off + F_VEL] = sqrt_pow2(vs, 62 - 2 * self.vel_exp - 2 * u)
        _bands(self.p, self.band_lo, self.band_hi, self.n_bands, self.log2_q15,
               self.log2_4_3_q8 - 512 * u, f, off + F_BAND0)

    def _flat(self, off):
        """A window with no variation at all (stuck output): no spectrum, zero features (its one
        run of n samples is already counted by _scan)."""
        f = self.feats
        f[off + F_RMS] = 0
        f[off + F_CREST] = 0
        f[off + F_KURT] = 0
        f[off + F_VEL] = 0
        f[off + F_SPEED] = 0
        f[off + F_SPEED_CONF] = 0
        for j in range(F_ORD_HALF, F_ENV_FTF + 1):
            f[off + j] = LOG2_ZERO_Q8
        for j in range(F_TAP_X1, F_TAP_RE + 6):
            f[off + j] = 0
        for b in range(self.n_bands):
            f[off + F_BAND0 + b] = LOG2_ZERO_Q8
        p = self.p
        for k in range(self.m + 1):
            p[k] = 0


@micropython.viper
def _bands(p, lo, hi, nb: int, t, c: int, f, off: int):
    """Band powers into f[off + b] for b < nb: log2_q8 of the sum of p[lo[b]:hi[b]] (fft.power_sum,
    < 2**30) plus c (log2 Q8), or LOG2_ZERO_Q8 for a band without power. lo, hi: array('H')."""
    bl = ptr16(lo)             # unsigned bins: a zero-extended load is the value
    bh = ptr16(hi)
    o = ptr32(f)
    for b in range(nb):
        ps = int(power_sum(p, bl[b], bh[b]))
        if ps > 0:
            o[off + b] = int(log2_q8(ps, t)) + c
        else:
            o[off + b] = int(LOG2_ZERO_Q8)


@micropython.viper
def _scan(win, n: int, adc_min: int, adc_max: int, st):
    """Sum, largest, smallest and clipped count of n int16 counts (array('h') or its view) into
    st[_S_SUM], st[_S_MAX], st[_S_MIN], st[_S_CLIP] (counts; |sum| <= 2**15 * n <= 2**27), and
    the longest runs of identical and of zero counts into st[_S_STUCK], st[_S_ZERO] (samples)."""
    x = ptr16(win)
    o = ptr32(st)
    s = 0
    mx = -32768
    mn = 32767
    c = 0
    last = 65536                    # no int16 sample: the first one starts a run
    run = 0                         # repeats of `last` so far (run length - 1)
    rmax = 0                        # longest run - 1
    zmax = 0                        # longest run of zeros (0: no zero seen)
    for i in range(n):
        v = ((x[i] & 0xFFFF) ^ 0x8000) - 0x8000      # sign-extend (viper loads zero-extend)
        s += v
        if v > mx:
            mx = v
        if v < mn:
            mn = v
        if v >= adc_max or v <= adc_min:
            c += 1
        if v == last:
            run += 1
            if run > rmax:
                rmax = run
            if v == 0 and run >= zmax:
                zmax = run + 1
        else:
            run = 0
            last = v
            if v == 0 and zmax == 0:
                zmax = 1
    o[_S_SUM] = s
    o[_S_MAX] = mx
    o[_S_MIN] = mn
    o[_S_CLIP] = c
    o[_S_STUCK] = rmax + 1
    o[_S_ZERO] = zmax


@micropython.viper
def _shape(win, n: int, L: int, mean: int, g: int, sh: int, hann, pos, buf, st):
    """The per-sample pass of a window of n = 2**L counts: y = ((x - mean) * g) >> sh (|y| <=
    2**14, g = 2**u or 1, sh = -u or 0), its sums st[_S_SQ] = sum(y*y >> (L-1)) < 2**29 and
    st[_S_S4] = sum(round(y*y / 2**14)**2 >> L) < 2**28, and the windowed sample
    (y * hann[i]) >> 15 (Q15 Hann, |.| <= 2**14) into buf at its bit-reversed slot pos[i]."""
    x = ptr16(win)
    w = ptr16(hann)            # unsigned: a zero-extended load is the value
    q = ptr16(pos)
    b = ptr32(buf)
    o = ptr32(st)
    s2 = L - 1
    sq = 0
    s4 = 0
    for i in range(n):
        v = ((x[i] & 0xFFFF) ^ 0x8000) - 0x8000
        y = ((v - mean) * g) >> sh
        yy = y * y
        sq += yy >> s2
        r = (yy + 8192) >> 14
        s4 += (r * r) >> L
        b[q[i]] = (y * w[i]) >> 15
    o[_S_SQ] = sq
    o[_S_S4] = s4
