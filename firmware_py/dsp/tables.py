"""Constant tables of the feature core, built once at start-up with exact integer arithmetic.

Why integers: rp2 and esp32 builds of MicroPython use single-precision floats, so a table made
with math.cos would differ by a bit here and there from the host's. Built from integers (Python's
arbitrary-precision ints, MicroPython's mpz, the default on the supported ports) every engine gets
the same bits, which is what lets the host twin be bit-identical. Start-up may allocate freely.

Entry points: twiddles(), hann(), bitrev_positions(), log2_table(), velocity_weights()."""
import array

# pi * 2**60, rounded down (hex digits of pi: 3.243F6A8885A308D3...; checked by a Machin-formula test)
PI_Q60 = 0x3243F6A8885A308D
_P = 60                      # working precision of the trig series, fraction bits
LOG2_N = 257                 # entries of log2_table(), array('H'): i = 0..256


def _isqrt_big(n):
    """floor(sqrt(n)) for any int n >= 0 (Newton on arbitrary-precision ints)."""
    if n < 2:
        return n
    x = 1 << ((_bits(n) + 1) >> 1)
    while True:
        y = (x + n // x) >> 1
        if y >= x:
            return x
        x = y


def _bits(n):
    b = 0
    while n:
        n >>= 1
        b += 1
    return b


def _sin_cos_q60(num, den):
    """(sin, cos) of the angle 2*pi*num/den for 0 <= num/den <= 1/8, in Q60, by Taylor series."""
    x = (2 * PI_Q60 * num) // den            # angle, Q60, <= pi/4
    x2 = (x * x) >> _P
    s = 0
    c = 0
    ts = x                                    # x**(2i+1)/(2i+1)!
    tc = 1 << _P                              # x**(2i)/(2i)!
    i = 0
    while ts or tc:
        if i & 1:
            s -= ts
            c -= tc
        else:
            s += ts
            c += tc
        tc = (tc * x2 >> _P) // ((2 * i + 1) * (2 * i + 2))
        ts = (ts * x2 >> _P) // ((2 * i + 2) * (2 * i + 3))
        i += 1
    return s, c


def _q60_to_q15(v):
    return (v + (1 << 44)) >> 45


def twiddles(n):
    """cos and sin of 2*pi*k/n for k = 0..n/2 (0 to pi), Q15 in array('i') (1.0 is 32768).

    Computed on the first octant and extended by symmetry, so the table is exactly symmetric.
    """
    h = n >> 1
    q = n >> 2
    o = n >> 3
    cos_t = array.array('i', bytes(4 * (h + 1)))
    sin_t = array.array('i', bytes(4 * (h + 1)))
    for k in range(o + 1):
        s, c = _sin_cos_q60(k, n)
        s = _q60_to_q15(s)
        c = _q60_to_q15(c)
        cos_t[k] = c
        sin_t[k] = s
        cos_t[q - k] = s                      # cos(pi/2 - t) = sin t
        sin_t[q - k] = c
    for k in range(q + 1, h + 1):
        cos_t[k] = -cos_t[h - k]              # cos(pi - t) = -cos t
        sin_t[k] = sin_t[h - k]
    return cos_t, sin_t


def hann(n, cos_t):
    """Periodic Hann window w[i] = (1 - cos(2*pi*i/n)) / 2, Q15 in array('H') (w[n/2] = 32768)."""
    h = n >> 1
    w = array.array('H', bytes(2 * n))
    for i in range(n):
        c = cos_t[i] if i <= h else cos_t[n - i]
        w[i] = (32769 - c) >> 1            # rounded: (1 - cos)/2 in Q15
    return w


def bitrev_positions(n):
    """For real sample i of an n-point window: its slot in the interleaved buffer of the
    n/2-point complex FFT, in bit-reversed order (sample pairs form complex points)."""
    m = n >> 1
    bits = _bits(m) - 1
    pos = array.array('H', bytes(2 * n))
    for i in range(n):
        c = i >> 1
        r = 0
        for _ in range(bits):
            r = (r << 1) | (c & 1)
            c >>= 1
        pos[i] = 2 * r + (i & 1)
    return pos


def log2_table():
    """log2(1 + i/256) for i = 0..256, Q15 in array('H'), by the bit-by-bit squaring method."""
    t = array.array('H', bytes(2 * LOG2_N))
    p = 48
    for i in range(LOG2_N):
        y = (256 + i) << (p - 8)             # mantissa in [1, 2], Q48
        r = 0
        if y >= 2 << p:                      # i == 256: log2(2) == 1
            r = 1 << 16
        else:
            for b in range(16):              # 16 fraction bits, rounded to 15 below
                y = (y * y) >> p
                r <<= 1
                if y >= 2 << p:
                    y >>= 1
                    r |= 1
        t[i] = (r + 1) >> 1
    return t


def velocity_weights(n, fs_hz, lo_hz, hi_hz):
    """Per-bin amplitude weights for velocity r.m.s. by spectral integration.

    For bin k (f = k*fs/n), the power weight is |H(f)|**2 / (2*pi*f)**2, where H is the band limit
    that instruments for broadband velocity use: third-order Butterworth high-pass at lo_hz and
    low-pass at hi_hz (ISO 2954, from a summary of the standard, not the text itself), so
    |H|**2 = f**6/(f**6 + lo**6) * hi**6/(f**6 + hi**6). Folded in are the constants that turn the
    fixed-point spectrum into counts**2/s**2 (Hann power normalisation 16/(3*n**2), one-sided
    doubling, the FFT's 1/(n/2) scaling): w[k]**2 = 2**(2a) * 4*(n/2)**2*|H|**2/(3*pi**2*k**2*fs**2),
    with a chosen so that max(w) < 2**15. The Nyquist bin counts once, not twice.

    Each w[k] is stored as a mantissa and a shift, w[k] = mant[k] * 2**-(shift2[k]/2) with
    mant in [2**14, 2**15), so a small weight keeps 15 significant bits: the spectrum stage squares
    the weighted components and then shifts by shift2[k].

    Returns (mant array('H'), shift2 array('B'), a), arrays of n/2 + 1 entries (bin 0 weighs 0).
    """
    m = n >> 1
    u_lo = (lo_hz * n) ** 6
    u_hi = (hi_hz * n) ** 6
    num0 = 4 * m * m * u_hi << (2 * _P)
    r = [0] * (m + 1)                        # w[k]**2 at a = 0, Q60
    for k in range(1, m + 1):
        u = (k * fs_hz) ** 6
        den = 3 * PI_Q60 * PI_Q60 * k * k * fs_hz * fs_hz * (u + u_lo) * (u + u_hi)
        if k == m:
            den *= 2
        r[k] = ((num0 * u) << _P) // den
    top = max(r)
    limit = ((1 << 30) - (1 << 16)) << _P    # keep w**2 < 2**30, so w < 2**15
    a = 0
    while top >= limit:
        top >>= 2
        a -= 1
    while (top << 2) < limit:
        top <<= 2
        a += 1
    mant = array.array('H', bytes(2 * (m + 1)))
    shift2 = array.array('B', bytes(m + 1))
    floor = 1 << (28 + _P)                   # mant**2 >= 2**28, i.e. mant >= 2**14
    for k in range(1, m + 1):
        v = r[k] << (2 * a) if a >= 0 else r[k] >> (-2 * a)
        e = 0
        while v and v < floor and e < 254:
            v <<= 2
            e += 2
        mant[k] = _isqrt_big(v >> _P)
        shift2[k] = e
    return mant, shift2, a
