"""Measured cost figures of the feature stage, on two real MicroPythons and on the host.

Entry points: device_figures (WASI fuel), viper_figures (unix port, viper against bytecode),
native_figures (Thumb instructions per viper function), host_figures, workflow_figures, MEANING.

Device cost is wasm fuel (a deterministic instruction budget of the MicroPython guest), turned
into a count of simple loop iterations measured in the same run, so the figure does not depend on
this machine's speed. Each fuel figure is a difference of two guest runs that differ only in how
many times the measured work runs (start-up, compilation and set-up cancel out).

The window path is measured with the heap locked, as the device runs it. That matters for cost,
not only for memory: unlocked, MicroPython puts each large function frame on the heap, and the
allocator's search for a free block then costs in proportion to the heap's clutter; locked, frames
go on the stack.

Entry points: loop_fuel(), device_figures(), host_figures(), workflow_figures(), met().
"""
from __future__ import annotations

import time

import numpy as np

from firmware_py.run import params
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.twin.mpy_guest import run_guest
from host_tools.twin import mpy_unix

N = 512
FS = 3200
BANDS = params.default_bands(N, FS, 8)
WINDOWS = 4          # windows per fuel measurement (different data each)

# Set-up shared by the fixed-point and float runs: WINDOWS windows of noise plus tones, 16-bit
_SETUP = f"""
import array
src = array.array('h', bytes(2 * {N * WINDOWS}))
seed = 12345
for i in range({N * WINDOWS}):
    seed = (seed * 1103515245 + 12345) & 0x3fffffff
    src[i] = ((seed >> 14) - 32768) // 8 + (i * 37 % 400) * 20 - 4000
"""

# The issue-9 stages, as a trained set of a pump at about 1480 r/min would switch them on: 1x
# searched over 20-30 Hz, a 6-vane impeller, the envelope of 800-1200 Hz, a 6205's defect orders
# (host_tools/data/bearing.orders_q12). The set-up signal has power in all those bins, so
# every stage runs its whole path.
SPEED_OPTS = {"speed_lo_q8": 20 * 256, "speed_hi_q8": 30 * 256}
ALL_OPTS = dict(SPEED_OPTS, vane=6, env_band=(128, 192), bear_q12=(14684, 22180, 9655, 1631))


def _fixed(opts: dict) -> str:
    """Guest body: a one-axis FeatureCore with keyword options `opts`, and run(steps)."""
    kw = "".join(f", {k}={v!r}" for k, v in opts.items())
    return _SETUP + f"""
from firmware_py.dsp.features import FeatureCore
fc = FeatureCore({N}, 1, {FS}, -32768, 32767, bands={BANDS!r}{kw})
blk = array.array('h', bytes(2 * {N}))
def load(w):
    for i in range({N}):
        blk[i] = src[w * {N} + i]
    fc.ring.push(blk, {N})
step = fc.step
release = fc.ring.release
def run(steps):
    for w in range({WINDOWS}):
        load(w)
        ok, _ = locked(step if steps else release)
        if not ok:
            raise MemoryError("window path allocated")
"""


_FIXED = _fixed({})

# A straightforward float implementation of the same features, for comparison: an n-point complex
# radix-2 FFT on float lists, no fixed-point tricks (written for this comparison only).
_FLOAT = _SETUP + f"""
import math, gc
n = {N}
bands = {BANDS!r}
def tables():
    hann = [0.5 - 0.5 * math.cos(2 * math.pi * i / n) for i in range(n)]
    wv = [0.0] * (n // 2 + 1)
    for k in range(1, n // 2 + 1):
        f = k * {FS} / n
        h2 = (f / 10) ** 6 / (1 + (f / 10) ** 6) / (1 + (f / 1000) ** 6)
        wv[k] = h2 / (2 * math.pi * f) ** 2
    bits = 0
    while (1 << bits) < n:
        bits += 1
    rev = [0] * n
    for i in range(n):
        r = 0
        for b in range(bits):
            r |= ((i >> b) & 1) << (bits - 1 - b)
        rev[i] = r
    tw_r = [math.cos(-2 * math.pi * k / n) for k in range(n // 2)]
    tw_i = [math.sin(-2 * math.pi * k / n) for k in range(n // 2)]
    return hann, wv, rev, tw_r, tw_i
hann, wv, rev, tw_r, tw_i = tables()
re = [0.0] * n
im = [0.0] * n
p = [0.0] * (n // 2 + 1)
out = [0.0] * (7 + len(bands))
def features(x, off):
    mean = 0.0
    for i in range(n):
        mean += x[off + i]
    mean /= n
    s2 = 0.0
    s4 = 0.0
    pk = 0.0
    clip = 0
    for i in range(n):
        v = x[off + i]
        if v >= 32767 or v <= -32768:
            clip += 1
        d = v - mean
        d2 = d * d
        s2 += d2
        s4 += d2 * d2
        if abs(d) > pk:
            pk = abs(d)
        j = rev[i]
        re[j] = d * hann[i]
        im[j] = 0.0
    size = 2
    while size <= n:
        half = size // 2
        step = n // size
        for start in range(0, n, size):
            k = 0
            for j in range(start, start + half):
                wr = tw_r[k]
                wi = tw_i[k]
                xr = re[j + half] * wr - im[j + half] * wi
                xi = re[j + half] * wi + im[j + half] * wr
                re[j + half] = re[j] - xr
                im[j + half] = im[j] - xi
                re[j] += xr
                im[j] += xi
                k += step
        size *= 2
    vs = 0.0
    for k in range(n // 2 + 1):
        p[k] = re[k] * re[k] + im[k] * im[k]
        vs += p[k] * wv[k]
    rms = math.sqrt(s2 / n)
    out[0] = mean
    out[1] = rms
    out[2] = pk
    out[3] = pk / rms
    out[4] = (s4 / n) / (s2 / n) ** 2
    out[5] = clip
    out[6] = math.sqrt(vs * 16 / (3 * n * n))
    for b in range(len(bands)):
        s = 0.0
        for k in range(bands[b][0], bands[b][1]):
            s += p[k]
        out[7 + b] = s
def run(steps):
    if steps:
        for w in range({WINDOWS}):
            features(src, w * n)
gc.collect()    # a compact heap: the float version's allocations then cost what they would on a board
"""

_HEAP = f"""
import gc
from firmware_py.dsp.features import FeatureCore
def build():
    return FeatureCore({N}, 1, {FS}, -32768, 32767, bands={BANDS!r})
gc.collect()
a0 = gc.mem_alloc()
fc = build()
gc.collect()
emit(gc.mem_alloc() - a0)
"""

# Allocation per window: heap in use before and after WINDOWS windows without the lock (no
# collection runs: the guest heap is large), and whether every window also runs under the lock.
_ALLOC = _FIXED + """
import gc
def fill_and_run():
    for w in range(%d):
        load(w)
        m0 = gc.mem_alloc()
        fc.step()
        emit(gc.mem_alloc() - m0)
    load(0)
    emit(locked(fc.step))
fill_and_run()
""" % WINDOWS


def _fuel_diff(body_a: str, body_b: str) -> int:
    return run_guest(body_b).fuel - run_guest(body_a).fuel


def loop_fuel(module_level: bool = True) -> float:
    """Fuel of one iteration of `for i in range(n): s += i` (at module level, or in a function)."""
    def body(k):
        if module_level:
            return f"s = 0\nfor i in range({k}):\n    s += i\n"
        return f"def f():\n    s = 0\n    for i in range({k}):\n        s += i\n    return s\nf()\n"
    return _fuel_diff(body(1000), body(11000)) / 10000


def _window_fuel(opts: dict) -> float:
    """Fuel of one window's step (heap locked) for a core built with `opts`."""
    body = _fixed(opts)
    return _fuel_diff(body + "run(False)\n", body + "run(True)\n") / WINDOWS


# The detector's half-order stage (firmware_py/detect/half_lines.py) on one axis: BLOCKS blocks
# of steady windows whose taps the stage collects, lines up and transforms, against the same
# windows unsteady (the stage then only notes that no block is open)
_HALF_BLOCKS = 2
_HALF = f"""
import array
from firmware_py.detect.half_lines import HalfLines, BLK
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.tables import log2_table
pa = fi.per_axis(0)
h = HalfLines(1, pa, 512, 1, 205, log2_table())
nw = {_HALF_BLOCKS} * BLK
f = array.array('i', bytes(4 * pa * nw))
seed = 777
for w in range(nw):
    f[w * pa + fi.F_TAP_X1] = 1664          # 6.5 bins: the whole orders' images
    for i in range(6):                      # 8 cells from the lines, so every block transforms all 17
        seed = (seed * 1103515245 + 12345) & 0x3fffffff
        f[w * pa + fi.F_TAP_RE + i] = (seed >> 10) - (1 << 19)
row = array.array('i', bytes(4 * pa))
def run(steady):
    for w in range(nw):
        for j in range(pa):
            row[j] = f[w * pa + j]
        h.push(row, steady, w)
"""


# The feature core's half-order taps (firmware_py/dsp/half_taps.py) on one axis at a 1x of 3.3
# bins (21 Hz at 512 samples and 3200 Hz: L = 310 samples a half, both halves summed every
# window), their mixing speed from the phase advance included (HalfTaps.speed: one CORDIC, on a
# spectrum bin filled from the samples), against the same windows without them
_TAPS = _SETUP + f"""
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp import tables
from firmware_py.dsp.half_taps import HalfTaps
cos_t, sin_t = tables.twiddles({N})
taps = HalfTaps(1, {N}, cos_t, sin_t)
f = array.array('i', bytes(4 * fi.per_axis(0)))
win = array.array('h', bytes(2 * {N}))
xs = array.array('i', bytes(4 * {N}))
def run(on):
    for w in range({WINDOWS}):
        for i in range({N}):
            win[i] = src[w * {N} + i]
        xs[6] = win[0]
        xs[7] = win[1]
        if on:
            taps.speed(xs, 845, True, 0)
            taps.run(win, 0, 2, 845, True, f, 0, 0)
"""


def _taps_fuel() -> float:
    """Fuel of the half-order taps per window (heap locked)."""
    return _fuel_diff(_TAPS + "locked(lambda: run(False))\n", _TAPS + "locked(lambda: run(True))\n") / WINDOWS


def _half_fuel() -> float:
    """Fuel of the half-order stage per window (heap locked), blocks closed included."""
    from firmware_py.detect.half_lines import BLK
    return _fuel_diff(_HALF + "locked(lambda: run(False))\n", _HALF + "locked(lambda: run(True))\n") / (
        _HALF_BLOCKS * BLK)


def device_figures() -> dict:
    fixed = _window_fuel({})
    speed_orders = _window_fuel(SPEED_OPTS)
    every = _window_fuel(ALL_OPTS)
    flt = _fuel_diff(_FLOAT + "run(False)\n", _FLOAT + "run(True)\n") / WINDOWS
    loop = loop_fuel(True)
    loop_fn = loop_fuel(False)
    alloc = run_guest(_ALLOC).out
    per_window_bytes, locked_ok = alloc[:-1], alloc[-1]
    return {
        "mpy_window_fuel": round(fixed),
        # issue 9: added cost of the speed estimate with the order amplitudes, and of the
        # envelope on top, per sample in loop iterations (the stuck and zero runs are in the
        # per-sample pass of every figure)
        "mpy_loop_equiv_per_sample_all_stages": round(every / N / loop, 2),
        "mpy_added_loop_equiv_per_sample_speed_orders": round((speed_orders - fixed) / N / loop, 2),
        "mpy_added_loop_equiv_per_sample_envelope": round((every - speed_orders) / N / loop, 2),
        # the detector's half-order stage, per sample of one axis, its blocks' transforms spread
        # over their windows; the feature core's taps that feed it (also in the speed_orders
        # figure, which runs them at whatever 1x its signal gives)
        "mpy_added_loop_equiv_per_sample_half_orders": round(_half_fuel() / N / loop, 2),
        "mpy_added_loop_equiv_per_sample_half_taps": round(_taps_fuel() / N / loop, 2),
        "mpy_loop_fuel": round(loop, 1),
        "mpy_loop_fuel_in_function": round(loop_fn, 1),
        "mpy_loop_equiv_per_sample": round(fixed / N / loop, 2),
        "mpy_loop_equiv_per_sample_vs_function_loop": round(fixed / N / loop_fn, 2),
        "mpy_naive_float_ratio": round(fixed / flt, 3),
        "mpy_naive_float_window_fuel": round(flt),
        "core_heap_bytes": run_guest(_HEAP).out[0],
        # MicroPython allocates in 16-byte blocks: bytes / 16 bounds the number of allocations
        "allocs_per_window": max(per_window_bytes) / 16,
        "window_runs_with_heap_locked": bool(locked_ok[0] and locked_ok[1]),
    }


# Feed + features on one axis of the Pico's profile, on the unix port: the same Gateway built
# twice in one process, once from the viper stage and once (sys.modules purged, sys.path
# switched) from the bytecode stage, timed alternately with the heap locked, with the simple loop
# of the WASI figures (`for i in range(k): s += i` in a function, bytecode) timed in between.
# The loop is timed after every window, so its minimum and the windows' come from the same
# moments of a host that other work may load. The frames go in as the board's application feeds them: Gateway.feed with the read block it
# holds (feed_block frames), then FeatureCore.step, over as many windows as a whole number of
# blocks fills. Minimum of REPEATS for each window and for the loop; the ratios are taken within
# the run.
VIPER_REPEATS = 40
_LOOP_K = 2_000         # about as long as one viper window
_VIPER = """
import sys, time, array, json, micropython
prof = json.loads(%(profile)r)
N = prof['window_n']
B = %(block)d
W = %(windows)d
def purge():
    for k in list(sys.modules):
        if k == 'firmware_py' or k.startswith('firmware_py.'):
            del sys.modules[k]
def build(extra):
    from firmware_py.codec import mpack
    from firmware_py.run import params
    from firmware_py.run.gateway import Gateway
    from firmware_py.store.paramstore import ParamStore
    from firmware_py.store.snapshots import SnapshotRing
    p = params.factory(prof)
    p.update(extra)
    store = ParamStore('/nonexistent-edgevib', prof['name'], prof['sample_rate_hz'], N, 1,
                       mpack.packb(p), None)
    return Gateway(prof, store, SnapshotRing('/nonexistent-edgevib', 2, prof['sample_rate_hz'], N, 1),
                   lambda: 0)
gw_v = build({})
gw_s = build(%(stages)r)
purge()
sys.path[sys.path.index(%(native)r)] = %(bytecode)r
gw_b = build({})
src = array.array('h', bytes(2 * B))
seed = 12345
for i in range(B):
    seed = (seed * 1103515245 + 12345) & 0x3fffffff
    src[i] = ((seed >> 14) - 32768) // 16 + (i * 37 %% 400) * 4 - 800
def path(gw, best):
    # W windows: W * N / B read blocks fed as the application feeds them, and each window's
    # features; each window timed on its own (its minimum over the repeats kept in best[w]), so
    # a run the host's scheduler interrupts costs one window's figure, not the whole path's
    core = gw.core
    for w in range(W):
        t0 = time.ticks_us()
        while not core.ring.ready():
            gw.feed(src, B)
        core.step()
        t = time.ticks_diff(time.ticks_us(), t0)
        if t < best[w]:
            best[w] = t
        # the simple loop right after each window, so both minima come from the same moments
        t0 = time.ticks_us()
        loop(%(k)d)
        t = time.ticks_diff(time.ticks_us(), t0)
        if t < best_l[0]:
            best_l[0] = t
def loop(k):
    s = 0
    for i in range(k):
        s += i
    return s
best_v = array.array('i', [1 << 30] * W)    # microseconds per window position
best_s = array.array('i', [1 << 30] * W)
best_b = array.array('i', [1 << 30] * W)
best_l = array.array('i', [1 << 30])
def once():
    # locals only, so nothing allocates with the heap locked
    path(gw_v, best_v)
    path(gw_s, best_s)
    path(gw_b, best_b)
for rep in range(%(repeats)d):
    micropython.heap_lock()
    once()
    micropython.heap_unlock()
best = [sum(best_v), sum(best_b), best_l[0], sum(best_s)]
emit(best + [list(gw_v.core.feats) == list(gw_b.core.feats), gw_v.core.ring.filled,
             gw_s.core.env.on])
"""


def _stage_params(n: int, fs: int) -> dict:
    """ALL_OPTS as parameter-set keys for an n-point window: the same speed range, vane count,
    bearing, and envelope band in Hz (800-1200 Hz)."""
    lo, hi = ALL_OPTS["env_band"]
    return {"fc_speed_lo_q8": ALL_OPTS["speed_lo_q8"], "fc_speed_hi_q8": ALL_OPTS["speed_hi_q8"],
            "fc_vane": ALL_OPTS["vane"], "fc_env_band": [lo * n // N, hi * n // N],
            "fc_bear_q12": list(ALL_OPTS["bear_q12"])}


def feed_block(profile: dict) -> int:
    """Frames per Gateway.feed on the board: firmware_py.run.app reads a FIFO watermark's worth
    of frames per timer period into its read block and feeds the block once it holds more than
    block_frames - read_frames of the driver (the room one more read needs)."""
    from firmware_py.drivers import driver_module
    mod = driver_module(profile["sensor"]["model"])
    wm = profile["fifo_watermark"]
    hold = mod.block_frames(wm) - mod.read_frames(wm)
    return wm * (hold // wm + 1)


def viper_figures() -> dict:
    """Window path (feed + features, one axis of the Pico's profile, N = 1024) with viper and as
    bytecode on the unix port, in loop iterations per sample and as a ratio, one run (wall-clock
    minima)."""
    import json
    import math
    from pathlib import Path
    root = Path(__file__).resolve().parents[2]
    prof = dict(json.loads((root / "boards" / "pico_adxl345.json").read_text()), axes=1)
    block = feed_block(prof)
    n = prof["window_n"]
    windows = block // math.gcd(block, n)      # a whole number of blocks and of windows
    body = _VIPER % {"profile": json.dumps(prof), "block": block, "windows": windows,
                     "stages": _stage_params(n, prof["sample_rate_hz"]),
                     "native": str(mpy_unix.stage(True)), "bytecode": str(mpy_unix.stage(False)),
                     "repeats": VIPER_REPEATS, "k": _LOOP_K}
    tv, tb, tl, ts, same, left, env_on = mpy_unix.run_unix(body).out[0]
    if left != 0 or not env_on:
        raise AssertionError("the timed windows did not take whole read blocks, or the "
                             "envelope did not run")
    loop_us = tl / _LOOP_K
    samples = windows * n
    return {
        "mpy_viper_loop_equiv_per_sample": round(tv / samples / loop_us, 2),
        "mpy_unix_bytecode_loop_equiv_per_sample": round(tb / samples / loop_us, 2),
        "mpy_viper_speedup": round(tb / tv, 1),
        "mpy_viper_loop_equiv_per_sample_all_stages": round(ts / samples / loop_us, 2),
        "mpy_viper_same_features_as_bytecode": bool(same),
        "mpy_viper_feed_block_frames": block,
    }


def native_figures() -> dict:
    """Thumb instructions of each viper function for the RP2040 (mpy-cross -march=armv6m)."""
    from pathlib import Path

    from host_tools.ops import native_size
    return {"armv6m_thumb_instructions":
            native_size.thumb_instructions(Path(__file__).resolve().parents[2])}


def host_figures(seconds: float = 60.0, repeat: int = 5) -> dict:
    """numpy twin on a `seconds`-long 3200 Hz one-axis recording, against numpy.fft.rfft."""
    rng = np.random.default_rng(1)
    frames = int(seconds * FS)
    t = np.arange(frames) / FS
    x = np.clip(np.round(rng.normal(0, 2000, frames) + 6000 * np.sin(2 * np.pi * 24.6 * t)),
                -32768, 32767).astype(np.int16)
    twin = FeatureTwin(TwinConfig(n=N, fs_hz=FS, adc_min=-32768, adc_max=32767, bands=tuple(map(tuple, BANDS))))
    wins = x[: (frames // N) * N].reshape(-1, N).astype(np.float64)
    twin.features(x)
    np.fft.rfft(wins, axis=1)
    best_twin = best_fft = float("inf")
    for _ in range(repeat):       # side by side, best of `repeat` for each
        t0 = time.perf_counter()
        twin.features(x)
        best_twin = min(best_twin, time.perf_counter() - t0)
        t0 = time.perf_counter()
        np.fft.rfft(wins, axis=1)
        best_fft = min(best_fft, time.perf_counter() - t0)
    return {
        "host_msamples_per_s": round(frames / best_twin / 1e6, 2),
        "host_vs_numpy_rfft_ratio": round(best_twin / best_fft, 2),
    }


STREAM_MINUTES = 20.0   # length of the long single stream replayed by stream_figures


def workflow_figures(stream_minutes: float = STREAM_MINUTES) -> dict:
    """Training time per hour of 3200 Hz recording and replay throughput on a small invented demo
    scenario (snapshots: reading the files, features, device detector, events, on one core); then
    stream_figures on one long stream made of the same field data."""
    import json
    import tempfile
    from pathlib import Path

    from host_tools.data import demo_scenario
    from host_tools.twin import replay
    from host_tools.fit import training
    from host_tools.data.recording import read_stream

    root = Path(__file__).resolve().parents[2]
    profile = json.loads((root / "boards" / "desk.json").read_text())
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        demo_scenario.write_scenario(d, days=10, training_days=5, interval_s=3600)
        recs = read_stream(d / "P-101" / "training")
        hours = sum(r.duration_s for r in recs) / 3600
        t0 = time.perf_counter()
        p, _ = training.train(recs, profile)
        train_s = time.perf_counter() - t0
        field = d / "P-101" / "field"
        t0 = time.perf_counter()
        res = replay.replay([field], p, profile)           # reads the files itself
        replay_s = time.perf_counter() - t0
        field_recs = read_stream(field)
        frames = sum(r.n_frames for r in field_recs)
        axes = profile["axes"]
        figures = {
            "train_s_per_hour": round(train_s / hours, 1),
            # samples are per axis: a 3-axis frame at 3200 Hz is 3 samples
            "replay_snapshots_msamples_per_s": round(frames * axes / replay_s / 1e6, 2),
            "replay_snapshots_windows": int(res.summary["total"]["windows"]),
        }
        figures.update(stream_figures(d, p, field_recs, stream_minutes))
    return figures


# Replays one recording in this child process, then prints windows, seconds and peak RSS (VmHWM,
# KiB: the process's own peak since exec; ru_maxrss would carry the parent's across fork).
_STREAM_CHILD = """
import sys, time, msgpack
from host_tools.data.analysis import profile_for_set
from host_tools.data.recording import open_stream
from host_tools.twin.replay import m_s2_per_count, replay
p = msgpack.unpackb(open(sys.argv[1], "rb").read(), raw=False)
recs = open_stream(sys.argv[2], p["fs_hz"], m_s2_per_count(p))
t0 = time.perf_counter()
res = replay([recs], p, profile_for_set(p, None, recs), jobs=int(sys.argv[3]), keep_windows=False)
dt = time.perf_counter() - t0
hwm = next(line.split()[1] for line in open("/proc/self/status") if line.startswith("VmHWM:"))
print(res.summary["total"]["windows"], dt, hwm)
"""


def stream_figures(folder, p: dict, field_recs: list, minutes: float = STREAM_MINUTES) -> dict:
    """One long stream (the field snapshots joined end to end, `minutes` long, one WAV file)
    replayed in a fresh process with 1 and with 2 jobs (features of chunks in worker processes,
    the detector in order), next to numpy.fft.rfft over the same windows, in the same run:
    throughput (M samples/s, samples per axis), peak RSS of the replaying process (MB) and the
    ratio of replay time to the rfft time."""
    import subprocess
    import sys
    from pathlib import Path

    import msgpack

    from host_tools.data.recording import open_stream, write_wav
    fs, n = p["fs_hz"], p["n"]
    frames = int(minutes * 60 * fs)
    pool = np.concatenate([r.counts for r in field_recs])
    counts = np.resize(pool, (frames, pool.shape[1]))             # repeats the field data
    folder = Path(folder)
    wav = write_wav(folder / "long_stream.wav", counts, fs,
                    {"m_s2_per_unit": field_recs[0].m_s2_per_count, "t0_s": field_recs[0].t0_s})
    del counts, pool
    (folder / "set.msgpack").write_bytes(msgpack.packb(p))
    root = Path(__file__).resolve().parents[2]
    out: dict = {}
    for jobs in (1, 2):
        got = subprocess.run([sys.executable, "-c", _STREAM_CHILD, str(folder / "set.msgpack"), str(wav), str(jobs)],
                             capture_output=True, text=True, check=True, cwd=str(root)).stdout.split()
        windows, seconds, kib = int(got[0]), float(got[1]), int(got[2])
        suffix = "" if jobs == 1 else "_2_jobs"
        out["replay_msamples_per_s" + suffix] = round(windows * n * p["axes"] / seconds / 1e6, 2)
        out["replay_peak_rss_mb" + suffix] = round(kib / 1024, 1)
        out["replay_stream_s" + suffix] = round(seconds, 2)
    rec = open_stream(wav)[0]
    t0 = time.perf_counter()
    step = 512 * n                                                # the replay's chunk of windows
    for k in range(0, (frames // n) * n, step):
        x = rec.read_counts(k, min(k + step, (frames // n) * n)).astype(np.float64)
        np.fft.rfft(x.T.reshape(p["axes"], -1, n), axis=2)
    rfft_s = time.perf_counter() - t0
    out.update({"replay_stream_minutes": minutes, "replay_stream_windows": frames // n,
                "numpy_rfft_same_windows_s": round(rfft_s, 3),
                "replay_vs_numpy_rfft_ratio": round(out["replay_stream_s"] / rfft_s, 1),
                "replay_x_real_time": round(frames / fs / out["replay_stream_s"])})
    return out


TARGETS = {
    "mpy_loop_equiv_per_sample": ("<=", 10),
    "mpy_viper_loop_equiv_per_sample": ("<=", 2.0),
    "core_heap_bytes": ("<=", 16384),
    "allocs_per_window": ("==", 0),
    "host_msamples_per_s": (">=", 5),
    "host_vs_numpy_rfft_ratio": ("<=", 20),
    "replay_msamples_per_s": (">=", 4),
    "replay_peak_rss_mb": ("<=", 400),
}


def met(figures: dict) -> dict:
    ops = {"<=": lambda a, b: a <= b, ">=": lambda a, b: a >= b, "==": lambda a, b: a == b}
    return {k: ops[op](figures[k], v) for k, (op, v) in TARGETS.items() if k in figures}


# What each figure means, printed beside it by `edgevib bench`.
MEANING = {
    "mpy_window_fuel": "WASI MicroPython (bytecode): fuel of one window's features, N = 512, 1 axis",
    "mpy_loop_fuel": "fuel of one iteration of `for i in range(n): s += i` at module level",
    "mpy_loop_fuel_in_function": "the same loop inside a function",
    "mpy_loop_equiv_per_sample": "bytecode feature cost per sample, in module-level loop iterations",
    "mpy_loop_equiv_per_sample_vs_function_loop": "the same, in loop iterations inside a function",
    "mpy_naive_float_ratio": "fixed-point features / a plain float version, in fuel",
    "mpy_added_loop_equiv_per_sample_half_orders": ("the detector's half-order stage per sample and axis, "
                                                    "its block transforms spread over their windows"),
    "mpy_added_loop_equiv_per_sample_half_taps": ("the feature core's half-order taps per sample and axis, "
                                                  "1x at 3.3 bins (two halves of 310 samples a window, and the "
                                                  "mixing speed's CORDIC)"),
    "mpy_naive_float_window_fuel": "fuel of the plain float version per window",
    "core_heap_bytes": "heap the feature core takes at N = 512, 1 axis, 2 bands (bytes)",
    "allocs_per_window": "heap blocks allocated per window (must be 0)",
    "window_runs_with_heap_locked": "a window runs under micropython.heap_lock()",
    "mpy_viper_loop_equiv_per_sample": ("unix port with viper: Gateway.feed in the read blocks the "
                                        "Pico's application feeds + features, N = 1024, 1 axis, "
                                        "wall time per sample in iterations of the same simple "
                                        "loop in a function (bytecode), same run"),
    "mpy_viper_feed_block_frames": "frames per Gateway.feed in that path (the Pico's read block)",
    "mpy_viper_loop_equiv_per_sample_all_stages": ("the same viper path with speed, orders and "
                                                   "the envelope (800-1200 Hz band) switched on"),
    "mpy_unix_bytecode_loop_equiv_per_sample": "the same path as bytecode on the unix port",
    "mpy_viper_speedup": "bytecode time / viper time of that path, same port, same run",
    "mpy_viper_same_features_as_bytecode": "viper and bytecode gave the same features",
    "armv6m_thumb_instructions": ("Thumb instructions of each viper function compiled for the "
                                  "RP2040 by mpy-cross -march=armv6m (deterministic)"),
    "host_msamples_per_s": "numpy twin on the host, million samples per second",
    "host_vs_numpy_rfft_ratio": "numpy twin time / numpy.fft.rfft of the same windows",
    "train_s_per_hour": "training time per hour of 3200 Hz recording, seconds",
    "replay_msamples_per_s": "end-to-end replay, million samples per second",
    "replay_x_real_time": "replay speed as a multiple of real time",
    "replay_windows": "windows replayed in that measurement",
    "targets_met": "each target figure against its limit",
}
