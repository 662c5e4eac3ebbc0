"""Run the feature core on a real MicroPython of the test suite (WASI bytecode by default,
host_tools.twin.mpy_guest; or the unix port with viper, host_tools.twin.mpy_unix)."""
import binascii

import numpy as np

from host_tools.twin.mpy_guest import run_guest


def guest_features(windows, n, fs, bands=(), adc=(-32768, 32767), vel=(10, 1000), axes=1,
                   speed=(0, 0), vane=0, env_band=(), bear_q12=(), run=run_guest):
    """Feed each window (int16, n frames x axes) to a FeatureCore in the guest, stepping with the
    heap locked. Returns (features per window, whether every step ran without allocating,
    core heap bytes from gc.mem_alloc around construction). speed, vane, env_band, bear_q12 as
    tests.feature_helpers.device_features.

    All work sits in functions and module level stays shallow, so gc.collect() from module
    level is safe in this guest (host_tools.twin.mpy_guest explains the collector's blind spot).
    """
    blob = b"".join(np.asarray(w, dtype=np.int16).tobytes() for w in windows)
    body = f"""
import array, binascii, gc
from firmware_py.dsp.features import FeatureCore
def build():
    return FeatureCore({n}, {axes}, {fs}, {adc[0]}, {adc[1]}, bands={list(bands)!r}, vel_lo_hz={vel[0]}, vel_hi_hz={vel[1]},
                       speed_lo_q8={speed[0]}, speed_hi_q8={speed[1]}, vane={vane}, env_band={tuple(env_band)!r}, bear_q12={tuple(bear_q12)!r})
def feed(fc):
    data = array.array('h', binascii.unhexlify({binascii.hexlify(blob).decode()!r}))
    src = array.array('h', bytes(2 * {n * axes}))
    clean = True
    for w in range(len(data) // {n * axes}):
        for i in range({n * axes}):
            src[i] = data[w * {n * axes} + i]
        fc.ring.push(src, {n})
        ok, stepped = locked(fc.step)
        clean = clean and ok and stepped
        emit(list(fc.feats))
    return clean
gc.collect()
a0 = gc.mem_alloc()
fc = build()
gc.collect()
heap = gc.mem_alloc() - a0
emit([feed(fc), heap])
"""
    res = run(body)
    *feats, (clean, heap) = res.out
    return np.array(feats), clean, heap
