"""No intermediate of the viper path leaves the signed 32-bit range, and the explicit sign
extensions are right for viper's zero-extending loads: the device's own viper functions, re-run
in CPython on a modelled 32-bit word (the boards) and 64-bit word (the x86-64 unix port), give
the same bits as on Python ints (tests/word_model.py says how the model is built).

Windows as in tests/test_viper_windows.py (full-scale DC both signs, full-scale Nyquist square,
clipping, impulses, white noise over all of int16, one-LSB signals) at every N from 64 to 4096,
with the speed, order and envelope stages off and on; the FIFO decode on random bursts with and
without the IIS3DWB's tags.
"""
import array

import numpy as np
import pytest

from firmware_py import drivers
from firmware_py.dsp import envelope, features, fft, fixmath, orders, ring, speed, tables
from tests.feature_helpers import device_features
from tests.signals import adversarial
from tests.test_viper_windows import FS, NS, _config, stages
from tests.word_model import load


@pytest.mark.parametrize("bits", [32, 64])
def test_viper_features_on_a_machine_word_equal_python_ints(bits, monkeypatch):
    """Every viper function of the window path, the speed, order and envelope stages included
    (each N runs once with them off and once on, tests.test_viper_windows.stages)."""
    runs = []
    for n in NS:
        adc, bands = _config(n)
        x = np.concatenate(list(adversarial(n, seed=n).values()))
        for opts in ({}, stages(n)):
            want = device_features(x, n=n, fs=FS, bands=bands, adc=adc, **opts)[0]
            runs.append((n, adc, bands, x, opts, want))
    words = {}
    for mod in (fft, features, ring, fixmath, speed, envelope):
        words[mod] = load(mod, bits)
    fft_w = words[fft][0]
    fix_w = words[fixmath][0]
    for name in ("cfft", "spectrum", "power_sum"):
        monkeypatch.setattr(fft, name, getattr(fft_w, name))
    # the fixmath helpers and power_sum where the stages imported them by name
    for mod in (features, speed, orders, envelope):
        for name in ("div_pow2", "log2_q8", "msb", "sqrt_pow2", "power_sum"):
            if hasattr(mod, name):
                src = fft_w if name == "power_sum" else fix_w
                monkeypatch.setattr(mod, name, getattr(src, name))
    for mod, names in ((features, ("_scan", "_shape", "_bands")), (ring, ("scatter16",)),
                       (speed, ("_best_candidate",)),
                       (envelope, ("_peak", "_band_in", "_square", "_rescale", "_demean",
                                   "_lobe_power"))):
        for name in names:
            monkeypatch.setattr(mod, name, getattr(words[mod][0], name))
    for n, adc, bands, x, opts, want in runs:
        got, _ = device_features(x, n=n, fs=FS, bands=bands, adc=adc, **opts)
        assert np.array_equal(got, want), (n, opts)
    for _, w in words.values():
        assert w.out_of_range == [] and w.bad_shifts == []


@pytest.mark.parametrize("bits", [32, 64])
def test_fixmath_on_a_machine_word_equals_python_ints(bits):
    """Over each helper's documented domain (fixmath docstrings), at random and at the edges:
    the same results on the word as on Python ints, no intermediate past int32, no shift count
    past the word. math.isqrt is the outside reference for isqrt."""
    import math
    fix_w, word = load(fixmath, bits)
    rng = np.random.default_rng(bits)
    xs = [1, 2, 3, 2**29 - 1, 2**30 - 1] + [int(v) for v in rng.integers(1, 2**30, 400)]
    xs += [int(2 ** rng.uniform(0, 30)) for _ in range(400)]
    t = tables.log2_table()
    for x in xs:
        assert fix_w.msb(x) == fixmath.msb(x) == x.bit_length() - 1
        assert fix_w.isqrt(x) == fixmath.isqrt(x) == math.isqrt(x)
        assert fix_w.log2_q8(x, t) == fixmath.log2_q8(x, t)
        e = int(rng.integers(-70, 31))
        if fixmath.sqrt_pow2(x, e) < 2**30:
            assert fix_w.sqrt_pow2(x, e) == fixmath.sqrt_pow2(x, e)
        den = int(rng.integers(1, 2**29))
        s = int(rng.integers(0, 22))
        if (x << s) // den < 2**30:
            assert fix_w.div_pow2(x, den, s) == fixmath.div_pow2(x, den, s) == (x << s) // den
    assert word.out_of_range == [] and word.bad_shifts == []


_PROBE = """
import micropython
from firmware_py.viper_stand import ptr16
@micropython.viper
def raw_sum(buf, n: int) -> int:
    p = ptr16(buf)
    s = 0
    for i in range(n):
        s += p[i]              # no sign extension
    return s
@micropython.viper
def square(v: int) -> int:
    return v * v
"""


def test_the_model_catches_what_it_is_for():
    """A missing sign extension and a product past 2**31 do show in the model."""
    import types
    probe = types.ModuleType("probe")
    exec(_PROBE, probe.__dict__)
    mod, word = load(probe, 32, _PROBE)
    buf = array.array("h", [-1, -2])
    assert probe.raw_sum(buf, 2) == -3 and mod.raw_sum(buf, 2) == 65535 + 65534
    assert mod.square(46341) != 46341 ** 2 and word.out_of_range == [("square", 46341 ** 2)]


@pytest.mark.parametrize("bits", [32, 64])
def test_fifo_decode_on_a_machine_word_equals_python_ints(bits):
    rng = np.random.default_rng(bits)
    drv_w, word = load(drivers, bits)
    for size, first, tag in ((6, 0, -1), (7, 1, 2)):
        words = 64
        blk = bytearray(rng.integers(0, 256, words * size, dtype=np.uint8).tobytes())
        if tag >= 0:
            for w in range(0, words * size, size):   # half the words carry the accelerometer tag
                blk[w] = (tag << 3) if rng.random() < 0.5 else (blk[w] | 0x80)
        want = array.array("h", bytes(2 * 3 * words))
        got = array.array("h", bytes(2 * 3 * words))
        k = drivers.unpack_words(blk, words, size, first, 3, tag, want, 0)
        assert drv_w.unpack_words(blk, words, size, first, 3, tag, got, 0) == k > 0
        assert got == want
        # against numpy's own little-endian int16 view of the same bytes
        rows = np.frombuffer(bytes(blk), dtype=np.uint8).reshape(words, size)
        keep = rows if tag < 0 else rows[rows[:, 0] >> 3 == tag]
        ref = keep[:, first:first + 6].copy().view("<i2").ravel()
        assert list(want[:k]) == ref.tolist()
    assert word.out_of_range == [] and word.bad_shifts == []
