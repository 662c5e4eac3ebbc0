"""Integer helpers and start-up tables against independent references (Python's exact ints,
math, numpy, scipy). These tables decide every feature, so each is checked entry by entry."""
import math
import random

import numpy as np
import scipy.signal
from hypothesis import given, strategies as st

from firmware_py.dsp import fixmath, tables


def machin_pi_q60():
    """pi * 2**60 by Machin's formula pi = 16 atan(1/5) - 4 atan(1/239) in exact integers."""
    one = 1 << 80

    def atan_inv(x):
        s = t = one // x
        n, sign = 1, -1
        while t:
            t //= x * x
            n += 2
            s += sign * (t // n)
            sign = -sign
        return s
    return (16 * atan_inv(5) - 4 * atan_inv(239)) >> 20


def test_pi_constant_matches_machin_formula_and_math_pi():
    assert tables.PI_Q60 == machin_pi_q60()
    assert abs(tables.PI_Q60 / 2**60 - math.pi) < 1e-15


@given(st.integers(min_value=0, max_value=2**30 - 1))
def test_isqrt_equals_math_isqrt(x):
    assert fixmath.isqrt(x) == math.isqrt(x)


@given(st.integers(min_value=1, max_value=2**30 - 1))
def test_msb_equals_bit_length(x):
    assert fixmath.msb(x) == x.bit_length() - 1


@given(st.integers(0, 2**30 - 1), st.integers(1, 2**29 - 1), st.integers(0, 40))
def test_div_pow2_is_exact_floor(num, den, s):
    q = (num << s) // den
    if q < 2**30:
        assert fixmath.div_pow2(num, den, s) == q


@given(st.integers(1, 2**30 - 1), st.integers(-40, 40))
def test_sqrt_pow2_within_its_precision(s, e):
    exact = math.sqrt(s) * 2.0 ** (e / 2)
    if exact < 2**29:
        got = fixmath.sqrt_pow2(s, e)
        # isqrt keeps >= 13.5 significant bits, the final shift rounds: |error| <= 1 + exact*2**-13
        assert abs(got - exact) <= 1 + exact * 2**-13


@given(st.floats(min_value=-math.pi, max_value=math.pi), st.floats(min_value=10.0, max_value=26.9))
def test_atan2_q16_within_its_derived_bound_of_math_atan2(angle, log2_r):
    # CORDIC's error (fixmath.atan2_q16's docstring): the last step's angle atan(2**-14), the table's
    # own rounding against math.atan summed over its steps, and the shifts' truncation, under one
    # unit per component and step, carried with the gain 1.65: 15 * sqrt(2) * 1.65 units against a
    # vector of length r or more (angle error <= perturbation / length, in radians)
    r = 2.0 ** log2_r
    x, y = round(r * math.cos(angle)), round(r * math.sin(angle))
    lsb = 65536 / (2 * math.pi)                                   # Q16 turns per radian
    table = sum(abs(t - math.atan(2.0 ** -i) * lsb) for i, t in enumerate(fixmath._ATAN_Q16))
    bound = math.atan(2.0 ** -14) * lsb + table + 15 * math.sqrt(2) * 1.65 / math.hypot(x, y) * lsb
    got = fixmath.atan2_q16(y, x)
    assert -32767 <= got <= 32768
    d = (got - math.atan2(y, x) * lsb + 32768) % 65536 - 32768
    assert abs(d) <= bound, (x, y, got, d, bound)


def test_atan2_q16_on_numpy_arrays_is_the_scalar_function():
    # the host twin calls it elementwise on int64 arrays: the same bits as one call per element
    rng = np.random.default_rng(5)
    v = rng.integers(-(2**27) + 1, 2**27, size=(2, 2000))
    v[:, :4] = [[0, 0, 5, -5], [0, 7, 0, 0]]
    want = [fixmath.atan2_q16(int(y), int(x)) for y, x in v.T]
    assert fixmath.atan2_q16(v[0], v[1]).tolist() == want


def test_log2_q8_within_one_lsb_of_math_log2():
    t = tables.log2_table()
    rng = random.Random(7)
    xs = list(range(1, 5000)) + [rng.randrange(1, 2**30) for _ in range(20000)] + [2**30 - 1]
    worst = max(abs(fixmath.log2_q8(x, t) - 256 * math.log2(x)) for x in xs)
    assert worst <= 1.0


def test_log2_table_against_math():
    t = np.array(tables.log2_table())
    ref = np.log2(1 + np.arange(257) / 256) * 32768
    assert np.abs(t - ref).max() <= 0.5 + 1e-9


def test_twiddles_are_rounded_cos_and_sin():
    for n in (64, 512, 4096):
        c, s = tables.twiddles(n)
        k = np.arange(n // 2 + 1)
        assert np.abs(np.array(c) - 32768 * np.cos(2 * np.pi * k / n)).max() <= 0.5 + 1e-9
        assert np.abs(np.array(s) - 32768 * np.sin(2 * np.pi * k / n)).max() <= 0.5 + 1e-9


def test_hann_table_against_scipy_periodic_hann():
    # scipy.signal.get_window('hann', n) is the periodic (DFT-even) Hann window
    for n in (64, 512, 2048):
        c, _ = tables.twiddles(n)
        h = np.array(tables.hann(n, c))
        assert np.abs(h - 32768 * scipy.signal.get_window("hann", n)).max() <= 1.0


def test_bitrev_positions_are_a_permutation_in_bit_reversed_order():
    n = 512
    pos = np.array(tables.bitrev_positions(n))
    assert sorted(pos) == list(range(n))
    bits = (n // 2).bit_length() - 1
    for i in (0, 1, 2, 3, 10, 511):
        c = i >> 1
        rev = int(format(c, f"0{bits}b")[::-1], 2)
        assert pos[i] == 2 * rev + (i & 1)


def test_velocity_weights_match_the_float_formula():
    """The integer table equals sqrt of 2**(2a) * 4 m^2 |H|^2 / (3 pi^2 k^2 fs^2) to within its
    rounding (ISO 2954 band limits as third-order Butterworth, from a summary of the standard)."""
    n, fs = 512, 3200
    mant, sh2, a = tables.velocity_weights(n, fs, 10, 1000)
    m = n // 2
    k = np.arange(1, m + 1)
    f = k * fs / n
    h2 = (f / 10) ** 6 / (1 + (f / 10) ** 6) / (1 + (f / 1000) ** 6)
    w2 = 4.0**a * 4 * m * m * h2 / (3 * np.pi**2 * k**2 * fs**2)
    w2[-1] /= 2                               # Nyquist bin counts once
    got = np.array(mant[1:], dtype=float) * 2.0 ** (-np.array(sh2[1:], dtype=float) / 2)
    rel = np.abs(got - np.sqrt(w2)) / np.sqrt(w2)
    assert rel.max() < 2**-13                 # mantissa >= 2**14, floor of sqrt
    assert max(mant) < 2**15 and min(mant[1:]) >= 2**14
