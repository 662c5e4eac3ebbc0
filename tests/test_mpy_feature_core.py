"""firmware_py on a real MicroPython (1.27, WASI, 31-bit small ints): the same features as under
CPython and as the numpy twin, with the heap locked for every window.

heap_lock also proves the 2**30 bound: on this port an int past +-2**30 is a heap object, so any
intermediate that overflowed would raise MemoryError inside locked() and fail the test.
"""
import numpy as np

from firmware_py.dsp import feature_index as fi, features
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from tests.feature_helpers import device_features
from tests.mpy_core import guest_features
from tests.signals import adversarial, random_windows


def _check(windows, n, fs, bands, adc=(-32768, 32767), vel=(10, 1000)):
    got, clean, heap = guest_features(windows, n, fs, bands, adc, vel)
    assert clean, "a window step allocated (or overflowed 2**30) under heap_lock"
    x = np.concatenate(windows)
    cpy, _ = device_features(x, n=n, fs=fs, bands=bands, adc=adc, vel=vel)
    twin = FeatureTwin(TwinConfig(n=n, fs_hz=fs, adc_min=adc[0], adc_max=adc[1], bands=bands,
                                  vel_lo_hz=vel[0], vel_hi_hz=vel[1])).features(x)
    assert np.array_equal(got, cpy)
    assert np.array_equal(got, twin)
    return heap


def test_adversarial_full_scale_windows_on_micropython():
    # full-scale DC, clipped square waves, impulses, white noise at full scale, Nyquist at full scale
    n = 512
    _check(list(adversarial(n, seed=1).values()), n, 3200, ((2, 9), (9, 40), (40, 256)))


def test_random_windows_on_micropython_other_configs():
    _check(list(random_windows(64, 12, seed=9)), 64, 1000, ((1, 5), (5, 32)), vel=(2, 400))
    _check(list(random_windows(1024, 4, seed=10)), 1024, 6667, ((1, 200),), adc=(-2048, 2047))




def _check_all_stages(windows, n, fs, bands, speed, vane, env_band, bear):
    """_check with the speed, order and envelope stages on."""
    got, clean, heap = guest_features(windows, n, fs, bands, speed=speed, vane=vane,
                                      env_band=env_band, bear_q12=bear)
    assert clean, "a window step allocated (or overflowed 2**30) under heap_lock"
    x = np.concatenate(windows)
    cpy, _ = device_features(x, n=n, fs=fs, bands=bands, speed=speed, vane=vane,
                             env_band=env_band, bear_q12=bear)
    twin = FeatureTwin(TwinConfig(n=n, fs_hz=fs, adc_min=-32768, adc_max=32767, bands=bands,
                                  speed_lo_q8=speed[0], speed_hi_q8=speed[1], vane=vane,
                                  env_band=env_band, bear_q12=bear)).features(x)
    assert np.array_equal(got, cpy)
    assert np.array_equal(got, twin)
    return got


BEAR = (14684, 22180, 9655, 1631)     # a 6205's defect orders, Q12 (test_bearing)


def test_core_heap_footprint_n512_one_axis():
    # the envelope at its largest transform (a band over a quarter of the spectrum: M = m), the
    # case features.footprint_bytes counts for every set
    _, clean, heap = guest_features(list(random_windows(512, 2, seed=2)), 512, 3200,
                                    ((10, 20), (100, 200)), speed=(20 * 256, 60 * 256), vane=6,
                                    env_band=(100, 200), bear_q12=BEAR)
    assert clean
    payload = features.footprint_bytes(512, 1, 2, 2)
    # measured = array payloads + object headers; the budget of the feature-core issue is 16 KiB
    assert payload <= heap <= 16384, (payload, heap)
    # a set without the envelope takes less than the footprint (its transform is 16 points)
    small = _check(list(random_windows(512, 2, seed=2)), 512, 3200, ((10, 20), (100, 200)))
    assert small < heap


def test_every_stage_on_micropython_adversarial_and_pump_windows():
    # the adversarial windows (full-scale DC both signs, Nyquist square, clipping, impulses,
    # white noise over int16, one-LSB signals) and pump-like windows whose speed, orders and
    # envelope are all live, at two sizes; heap locked for every window on the 31-bit port
    n = 512
    rng = np.random.default_rng(4)
    t = np.arange(n) / 3200
    pump = []
    for f1 in (31.7, 44.2, 57.9):
        x = 9000 * np.sin(2 * np.pi * f1 * t) + 4000 * np.sin(4 * np.pi * f1 * t + 1) \
            + 2000 * np.sin(12 * np.pi * f1 * t) + rng.normal(0, 600, n)
        for k in range(0, n - 40, 37):
            x[k:k + 40] += 12000 * np.exp(-np.arange(40) / 6) * np.sin(2 * np.pi * 0.4 * np.arange(40))
        pump.append(np.clip(np.round(x), -32768, 32767).astype(np.int16))
    # and one whose mean jumps by 15000 counts from the window before: the half-order taps'
    # samples, taken about that window's mean, clamp (half_taps)
    pump.append(np.clip(pump[-1].astype(np.int32) + 15000, -32768, 32767).astype(np.int16))
    got = _check_all_stages(list(adversarial(n, seed=3).values()) + pump, n, 3200,
                            ((2, 9), (40, 256)), (20 * 256, 60 * 256), 6, (100, 200), BEAR)
    assert np.all(got[-4:, fi.F_SPEED] > 0)
    assert np.all(got[-3:, fi.F_TAP_X1] > 0)      # the taps of windows that follow a pump window
    # from the estimator's floor of 2 bins (12.5 Hz), where the 1x peak search is cut at bin 1
    slow = []
    for f1 in (12.6, 13.1, 14.0):
        x = 9000 * np.sin(2 * np.pi * f1 * t) + 4000 * np.sin(4 * np.pi * f1 * t + 1) + rng.normal(0, 600, n)
        slow.append(np.clip(np.round(x), -32768, 32767).astype(np.int16))
    got = _check_all_stages(slow, n, 3200, ((2, 9), (40, 256)), (3200, 20 * 256), 7, (100, 200), BEAR)
    assert np.all(got[:, fi.F_SPEED] * n < 2.5 * 3200 * 256)
    _check_all_stages(list(random_windows(64, 8, seed=12)) + list(adversarial(64).values()), 64,
                      1000, ((1, 5),), (50 * 256, 70 * 256), 2, (10, 26),
                      (10240, 11469, 6144, 1638))
