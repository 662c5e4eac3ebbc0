"""Integer helpers for the per-window path: every argument, intermediate and result is a small
int (|v| < 2**30), so nothing here allocates on a 32-bit MicroPython port, and each fits a
viper machine word: the functions are viper-compiled on the boards (firmware_py.viper_stand).

Entry points: msb(), isqrt(), sqrt_pow2(), div_pow2(), log2_q8(), mul_shift(), atan2_q16()."""
import micropython
from micropython import const

from firmware_py.viper_stand import ptr16

_LOG2_FRAC = const(7)    # mantissa bits used for interpolation between log2 table entries
# atan(2**-i) for i = 0..14, turns Q16, rounded: the angles a CORDIC step rotates by
_ATAN_Q16 = (8192, 4836, 2555, 1297, 651, 326, 163, 81, 41, 20, 10, 5, 3, 1, 1)


@micropython.viper
def msb(x: int) -> int:
    """Index of the highest set bit of 0 < x < 2**30 (msb(1) == 0); MicroPython has no bit_length."""
    n = 0
    if x >= 1 << 16:
        x >>= 16
        n = 16
    if x >= 1 << 8:
        x >>= 8
        n += 8
    if x >= 1 << 4:
        x >>= 4
        n += 4
    if x >= 1 << 2:
        x >>= 2
        n += 2
    if x >= 2:
        n += 1
    return n


@micropython.viper
def isqrt(x: int) -> int:
    """floor(sqrt(x)) for 0 <= x < 2**30, by the bitwise method (no multiply overflows)."""
    r = 0
    b = 1 << 28
    while b > x:
        b >>= 2
    while b != 0:
        if x >= r + b:
            x -= r + b
            r = (r >> 1) + b
        else:
            r >>= 1
        b >>= 2
    return r


@micropython.viper
def sqrt_pow2(s: int, e: int) -> int:
    """round(sqrt(s * 2**e)) for 0 <= s < 2**30 and any int e, if the result is < 2**30.

    s is shifted so its top bit lands at 27 or 28 (isqrt then keeps 14 bits or more), the shift
    chosen so the remaining power of two is even; that half-power is applied to the root, rounded.
    """
    if s <= 0:
        return 0
    k = 28 - int(msb(s))     # bring the top bit to 28 or 27
    if (e - k) & 1:
        k -= 1
    if k >= 0:
        r = int(isqrt(s << k))
    else:
        r = int(isqrt(s >> -k))
    h = (e - k) >> 1         # exact: e - k is even
    if h >= 0:
        return r << h
    if h < -15:
        return 0             # r < 2**15 rounds to 0 there; keeps every shift count below 32
    return (r + (1 << (-h - 1))) >> -h


@micropython.viper
def div_pow2(num: int, den: int, s: int) -> int:
    """floor(num * 2**s / den), exactly, for 0 <= num < 2**30, 0 < den < 2**29, s >= 0, with a
    result below 2**30.

    Long division in chunks: each step shifts the remainder (< den) by as many bits as keep it
    under 2**30, so the exact quotient is found without a wide intermediate.
    """
    q = num // den
    r = num - q * den
    room = 29 - int(msb(den))     # >= 1 since den < 2**29: r << room < 2**30
    while s > 0:
        c = room if s > room else s
        r <<= c
        d = r // den
        q = (q << c) + d
        r -= d * den
        s -= c
    return q


@micropython.viper
def log2_q8(x: int, table_q15) -> int:
    """round(256 * log2(x)) for 0 < x < 2**30, within 1 LSB; table_q15 from tables.log2_table().

    The mantissa's top 8 bits pick a table entry (log2(1 + i/256), Q15) and the next bits
    interpolate linearly; the result is Q8.
    """
    t = ptr16(table_q15)     # unsigned Q15: a zero-extended load is the value
    e = int(msb(x))
    # mantissa as 8 index bits and _LOG2_FRAC fraction bits below the leading one
    sh = e - 8 - _LOG2_FRAC
    m = (x >> sh) if sh >= 0 else (x << -sh)
    m &= (1 << (8 + _LOG2_FRAC)) - 1
    i = m >> _LOG2_FRAC
    f = m & ((1 << _LOG2_FRAC) - 1)
    t0 = t[i]
    lin = t0 + (((t[i + 1] - t0) * f) >> _LOG2_FRAC)    # Q15, < 2**15
    return (e << 8) + ((lin + 64) >> 7)


def mul_shift(a, b, s):
    """floor(a * b / 2**s) for 0 <= a < 2**20, 0 <= b < 2**20, s >= 0, if the result is < 2**30.

    b is split into 10-bit halves, so each partial product is below 2**30:
    floor((a*bh*2**10 + a*bl) / 2**s) = floor((a*bh + floor(a*bl / 2**10)) / 2**(s-10)) for s >= 10.
    """
    lo = a * (b & 1023)
    hi = a * (b >> 10)
    if s >= 10:
        return (hi + (lo >> 10)) >> (s - 10)
    return (hi << (10 - s)) + (lo >> s)


def atan2_q16(y, x):
    """The angle of (x, y), turns Q16, in -32767..32768, for |x|, |y| < 2**27 (ints, or numpy
    integer arrays elementwise: the host twin calls it with those); (0, 0) gives a fixed angle.

    CORDIC in vectoring mode (Volder, IRE Trans. Electronic Computers 8, 1959): (x, y) is first
    turned by half a turn into x >= 0, then by -+atan(2**-i), i = 0..14, towards y = 0, summing the
    angles. Branch-free (the sign d of each step is 1 - 2 * (y <= 0)) so that one source serves
    both. The vector grows by 1.65 at most, so |x|, |y| stay under 2**28.5. Error: the last step's
    angle (atan(2**-14), 0.64 LSB), the table's rounding (3.04 LSB summed) and the shifts'
    truncation: under one unit per component and step, carried on with the gain, at most
    15 * sqrt(2) * 1.65 units against a vector of length r or more, 3.7e5 / r LSB."""
    h = x < 0
    g = 1 - 2 * h
    x = x * g
    y = y * g
    a = h * 32768
    for i in range(15):
        d = 1 - 2 * (y <= 0)
        t = x + d * (y >> i)
        y = y - d * (x >> i)
        x = t
        a = a + d * _ATAN_Q16[i]
    return ((a + 32767) & 65535) - 32767
