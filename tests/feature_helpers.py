"""Shared helpers for feature tests: run signals through the device core under CPython."""
import array

import numpy as np

from firmware_py.dsp.features import FeatureCore


def device_features(x, n=512, fs=3200, bands=(), adc=(-32768, 32767), vel=(10, 1000), speed=(0, 0),
                    vane=0, env_band=(), bear_q12=()):
    """Features of each consecutive window of x (int16, frames x axes) from firmware_py.
    speed: (lo, hi) of the 1x search, Hz Q8; the other keywords as FeatureCore's."""
    x = np.asarray(x, dtype=np.int16)
    if x.ndim == 1:
        x = x[:, None]
    fc = FeatureCore(n, x.shape[1], fs, adc[0], adc[1], bands=bands, vel_lo_hz=vel[0],
                     vel_hi_hz=vel[1], speed_lo_q8=speed[0], speed_hi_q8=speed[1], vane=vane,
                     env_band=env_band, bear_q12=bear_q12)
    out = []
    for w in range(x.shape[0] // n):
        fc.ring.push(array.array("h", x[w * n:(w + 1) * n].tobytes()), n)
        assert fc.step()
        out.append(list(fc.feats))
    return np.array(out), fc


def tone(f_hz, amp, n=512, fs=3200, windows=1, phase=0.0, dc=0.0):
    t = np.arange(n * windows) / fs
    return np.round(amp * np.sin(2 * np.pi * f_hz * t + phase) + dc).astype(np.int16)
