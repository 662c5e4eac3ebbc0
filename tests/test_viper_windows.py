"""The viper code of the feature core on a real MicroPython with native emitters (the unix port,
x86-64: host_tools.twin.mpy_unix), against CPython, the numpy twin and the WASI bytecode run.

Viper ints are machine words and its ptr16/ptr32 loads zero-extend (firmware_py.viper_stand), so
a missing sign extension, a shift count past the word or a store out of its element's range
would change bits here; every window also runs under heap_lock on both MicroPythons.

Windows: full-scale DC of both signs, a full-scale Nyquist square, clipping (against full scale
and, at the Pico's N, against the ADXL345's +-16 g codes), impulses on zero and on DC, white
noise over all of int16, one-LSB signals (tests/signals.adversarial), at every N from 64 to 4096.
The reference is CPython running the same source (tests/feature_helpers.device_features) and the
twin, which is written independently in numpy; the WASI bytecode run covers three sizes (its
cost grows as N log N and it is the slowest engine).
"""
import functools

import numpy as np
import pytest

from firmware_py.dsp import feature_index as fi
from firmware_py.run import params
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.twin.mpy_guest import run_guest
from host_tools.twin.mpy_unix import run_unix
from tests.feature_helpers import device_features
from tests.mpy_core import guest_features
from tests.signals import adversarial

NS = (64, 128, 256, 512, 1024, 2048, 4096)
WASI_NS = (64, 512, 4096)
FS = 3200
PICO_ADC = (-4096, 4095)          # ADXL345 full resolution at +-16 g (boards/pico_adxl345.json)
_WASI = functools.partial(run_guest, fuel=40_000_000_000, timeout_s=600)


def _config(n):
    adc = PICO_ADC if n == 1024 else (-32768, 32767)
    m = n // 2
    # band edges at the first bin, mid-spectrum and the last bin, plus the profile-style bands
    bands = ((1, 2), (2, m // 2), (m // 2, m)) + tuple(map(tuple, params.default_bands(n, FS, 3)))
    return adc, bands


def stages(n):
    """Speed, order and envelope settings that every N from 64 to 4096 accepts (FeatureCore's
    checks): 1x searched over lo..hi bins (lo >= 3, hi below an octave), a vane count and
    defect orders whose lines at the top speed fit the spectrum and the envelope's (fs/4), and
    an envelope band of m/4 bins. Keyword arguments of tests.feature_helpers.device_features.
    At FS = 3200, bins * FS * 256 / n is a whole Hz Q8 for every n <= 4096 (3200 * 256 = 2**15 * 25)."""
    m = n // 2
    lo = 3 + m // 64
    hi = lo + 2 + m // 128
    # orders 2.3, 1.9, 1.4, 0.4 (Q12): the top line 2.3 * hi bins + 4 stays within m/2 at n = 64
    return dict(speed=(lo * FS * 256 // n, hi * FS * 256 // n), vane=min(7, (m - 2) // hi),
                env_band=(m // 4, m // 2), bear_q12=(9421, 7782, 5734, 1638))


def _twin(n, adc, bands, speed=(0, 0), vane=0, env_band=(), bear_q12=()):
    return FeatureTwin(TwinConfig(n=n, fs_hz=FS, adc_min=adc[0], adc_max=adc[1], bands=bands,
                                  speed_lo_q8=speed[0], speed_hi_q8=speed[1], vane=vane,
                                  env_band=env_band, bear_q12=bear_q12))


@pytest.mark.parametrize("with_stages", [False, True], ids=["core", "speed-orders-envelope"])
@pytest.mark.parametrize("n", NS)
def test_viper_features_equal_cpython_and_the_twin_bit_for_bit(n, with_stages):
    """core: the feature core alone (the spectrum's X not kept); speed-orders-envelope: with the
    shaft speed, order amplitudes and squared-envelope lines on (stages(n))."""
    adc, bands = _config(n)
    opts = stages(n) if with_stages else {}
    windows = list(adversarial(n, seed=n).values())
    got, clean, _ = guest_features(windows, n, FS, bands, adc, run=run_unix, **opts)
    assert clean, "a viper window step allocated under heap_lock"
    x = np.concatenate(windows)
    cpy, _ = device_features(x, n=n, fs=FS, bands=bands, adc=adc, **opts)
    twin = _twin(n, adc, bands, **opts).features(x)
    assert np.array_equal(cpy, twin)
    assert np.array_equal(got, cpy)
    if with_stages:
        # the stages ran their whole path on some of these windows, not only the early exits
        assert (cpy[:, fi.F_SPEED] > 0).any() and (cpy[:, fi.F_ORD_VANE] != fi.LOG2_ZERO_Q8).any()
        assert (cpy[:, fi.F_ENV_BPFO:fi.F_ENV_FTF + 1] != fi.LOG2_ZERO_Q8).any()
        assert (cpy[:, fi.F_TAP_X1] > 0).any()     # half-order taps over two windows
    if n in WASI_NS:
        wasi, clean, _ = guest_features(windows, n, FS, bands, adc, run=_WASI, **opts)
        assert clean, "a bytecode window step allocated (or passed 2**30) under heap_lock"
        assert np.array_equal(wasi, got)


def test_the_adversarial_set_reaches_the_bounds_it_is_meant_to():
    """Guards the test above against a weakened signal set: clipping is counted, the peak
    reaches 65535 counts (x - mean from -32768 to 32767), and a one-LSB window is analysed."""
    n = 512
    w = adversarial(n, seed=n)
    f, _ = device_features(np.concatenate(list(w.values())), n=n, fs=FS)
    rows = dict(zip(w, f))
    assert rows["square_full"][fi.F_CLIP] == n
    # one sample 65535 above n - 1 others: the mean sits round(65535 / n) = 128 above them, so
    # the peak of x - mean is 65535 - 128 counts, the largest any window can give at this n
    assert rows["impulse_pos_on_neg_dc"][fi.F_PEAK] >> 8 == 65535 - 128
    assert rows["one_lsb_step"][fi.F_RMS] > 0 and rows["tiny"][fi.F_RMS] > 0


def test_viper_speed_from_the_floor_of_two_bins_equals_cpython_and_the_twin():
    """A 1x from 2 bins up (12.5 Hz at n = 512), where the 1x peak search is cut to start at bin
    1 (dsp/speed.py): pump-like windows with a strong 2x, on the native emitters."""
    n = 512
    adc, bands = _config(n)
    opts = dict(speed=(3200, 20 * 256), vane=7, env_band=(64, 128), bear_q12=(9421, 7782, 5734, 1638))
    rng = np.random.default_rng(13)
    t = np.arange(n) / FS
    windows = [np.clip(np.round(9000 * np.sin(2 * np.pi * f1 * t) + 4000 * np.sin(4 * np.pi * f1 * t + 1)
                                + rng.normal(0, 600, n)), -32768, 32767).astype(np.int16)
               for f1 in (12.6, 13.1, 14.0)]
    got, clean, _ = guest_features(windows, n, FS, bands, adc, run=run_unix, **opts)
    assert clean, "a viper window step allocated under heap_lock"
    x = np.concatenate(windows)
    cpy, _ = device_features(x, n=n, fs=FS, bands=bands, adc=adc, **opts)
    assert np.array_equal(cpy, _twin(n, adc, bands, **opts).features(x))
    assert np.array_equal(got, cpy)
    assert np.all(cpy[:, fi.F_SPEED] * n < 2.5 * FS * 256)
