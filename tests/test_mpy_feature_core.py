"""firmware_py on a real MicroPython (1.27, WASI, 31-bit small ints): the same features as under
CPython and as the numpy twin, with the heap locked for every window.

heap_lock also proves the 2**30 bound: on this port an int past +-2**30 is a heap object, so any
intermediate that overflowed would raise MemoryError inside locked() and fail the test.
"""
import numpy as np

from firmware_py.dsp import features
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


def test_core_heap_footprint_n512_one_axis():
    heap = _check(list(random_windows(512, 2, seed=2)), 512, 3200, ((10, 20), (100, 200)))
    payload = features.footprint_bytes(512, 1, 2, 2)
    # measured = array payloads + object headers; the budget of the feature-core issue is 16 KiB
    assert payload <= heap <= 16384, (payload, heap)
