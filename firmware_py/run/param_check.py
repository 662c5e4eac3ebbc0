"""Proof that a parameter set runs on this gateway, before anything commits it.

Entry points:
  validate(p, profile)   raise ValueError with the reason unless every key has a usable type
                         and the keys agree with each other and with the board profile
  trial(p, profile)      validate, build the feature core and detector (params.build), and run
                         synthetic windows through them with micropython.heap_lock() held

The store checks identity (board, fs_hz, n, axes); the detector's and feature core's
constructors check their own ranges. What neither can see is checked here: types (a None,
float, bool or nested list where an int or a list of ints belongs), small-int range (a value
past 2**30 is a heap object on a board and allocates under the lock), and the cross-key sizes
(det_axes against axes, det_bands against fc_bands, list lengths against det_feat and
det_modes). trial() then proves the window path itself: one window of a synthetic signal, and
one window whose features are moved inside the set's own healthy and running limits, so the
scoring path runs too, then one learning window. Any exception is a refusal.

The same functions run on the device (store commit path, boot) and on the host (flash, deploy,
replay). Not per-window code: allocates a second feature core and detector, garbage on return.
A MemoryError while building (outside the lock) is passed on as such: the heap had no room for
a second set, which says nothing about the set (Gateway.trial_params then tries it in place of
the running one). Any other failure, and a MemoryError under the lock, is a ValueError.
"""
import array

import micropython

from firmware_py.detect import detector
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as params_mod

_BIG = 0x3FFFFFFF         # largest small int on a 32-bit MicroPython port (py/smallint.h)
_SIZED = ("det_base_mean_q4", "det_base_sd_q4")        # one int per scored feature
_MODEL = ("det_mode_c_q8", "det_mode_s_q8")            # det_modes x scored features
_AXIAL = ("det_dc_lo_q8", "det_dc_hi_q8", "det_stuck_max", "det_zero_max",
          "det_knock_crest_q12")                       # one int per axis
# slow channel (docs/detector.md, Score): weight Q8 up to 16; time constants up to 10 min (the
# Detector also refuses one over 16384 analysed windows on this board's time base)
_RANGED = (("det_slam_q8", 1 << 12), ("det_slow_ms", 600000), ("det_wander_ms", 600000))


def _is_int(v):
    return isinstance(v, int) and not (v is True or v is False)


def _small(key, v):
    if not _is_int(v) or not -_BIG <= v <= _BIG:
        raise ValueError("'%s' must hold ints within +-(2**30 - 1)" % key)


def _int_list(p, key, length=-1):
    v = p[key]
    if not isinstance(v, list):
        raise ValueError("'%s' must be a list of ints" % key)
    for x in v:
        _small(key, x)
    if length >= 0 and len(v) != length:
        raise ValueError("'%s' must hold %d ints, not %d" % (key, length, len(v)))
    return v


def validate(p, profile):
    """Raise ValueError unless set p (a dict) is well-typed and consistent for profile."""
    if not isinstance(p, dict):
        raise ValueError("a parameter set is a map")
    for k in ("version", "fs_hz", "n", "axes", "counts_per_g"):
        if k not in p:
            raise ValueError("set has no '%s'" % k)
        _small(k, p[k])
    if not isinstance(p.get("board"), str):
        raise ValueError("'board' must be a str")
    for k, want in (("board", profile["name"]), ("fs_hz", profile["sample_rate_hz"]),
                    ("n", profile["window_n"]), ("axes", profile["axes"])):
        if p[k] != want:
            raise ValueError("'%s' is %s, this gateway has %s" % (k, p[k], want))
    if "gateway" in p and not isinstance(p["gateway"], str):
        raise ValueError("'gateway' (the id a set is bound to) must be a str")
    if p["version"] < 0 or p["counts_per_g"] < 1:
        raise ValueError("'version' must be >= 0 and 'counts_per_g' >= 1")
    bands = p.get("fc_bands")
    if not isinstance(bands, list):
        raise ValueError("'fc_bands' must be a list of [lo, hi] bin pairs")
    for b in bands:
        if not isinstance(b, list) or len(b) != 2:
            raise ValueError("'fc_bands' must be a list of [lo, hi] bin pairs")
        _small("fc_bands", b[0])
        _small("fc_bands", b[1])
    if "fc_vel_hz" not in p:
        raise ValueError("set has no 'fc_vel_hz'")
    _int_list(p, "fc_vel_hz", 2)
    for k in detector.PARAM_KEYS:
        if k not in p and k in detector.LATER_KEYS:
            continue                                      # an older set: the default (off)
        if k not in p:
            raise ValueError("set has no '%s'" % k)
        v = p[k]
        if isinstance(v, list):
            _int_list(p, k)
        elif not isinstance(v, str):
            _small(k, v)
    for k in ("det_axes", "det_bands", "det_modes"):     # used below as counts
        _small(k, p[k])
    if p["det_axes"] != p["axes"]:
        raise ValueError("'det_axes' is %s, the set has %d axes" % (p["det_axes"], p["axes"]))
    if p["det_bands"] != len(bands):
        raise ValueError("'det_bands' is %s, 'fc_bands' holds %d bands" % (p["det_bands"], len(bands)))
    d = len(_int_list(p, "det_feat"))
    for k in _SIZED:
        _int_list(p, k, d)
    if p.get("det_sgain_q8"):                             # absent or [] = 256 each (detector)
        _int_list(p, "det_sgain_q8", d)
    if p.get("det_slow_wander"):                          # absent or [] = none wanders (detector)
        for v in _int_list(p, "det_slow_wander", d):
            if v not in (0, 1):
                raise ValueError("'det_slow_wander' must hold 0 or 1 per scored feature")
    if p.get("det_follow_q8"):                            # absent or [] = fixed centroids
        _int_list(p, "det_follow_q8", d)
    k_modes = p["det_modes"]
    if not 0 <= k_modes <= 64:
        raise ValueError("'det_modes' must be 0..64")
    for k in _MODEL:
        _int_list(p, k, k_modes * d)
    if p.get("det_op_seen_q8"):                           # absent or [] = the whole of each range
        _int_list(p, "det_op_seen_q8", 2 * k_modes)
    if p.get("det_mfollow_q8"):                           # absent or [] = no mode's own slopes
        _int_list(p, "det_mfollow_q8", k_modes * d)
    if p.get("det_mslam_q8"):                             # absent or [] = det_slam_q8 in every mode
        _int_list(p, "det_mslam_q8", k_modes)
    for k in _AXIAL:
        _int_list(p, k, p["axes"])
    for k, hi in _RANGED:
        v = p.get(k, 0)
        if not _is_int(v) or not 0 <= v <= hi:
            raise ValueError("'%s' must be within [0, %d]" % (k, hi))


def trial(p, profile):
    """validate(p), build p on profile and run it; ValueError with the reason if any step
    fails; MemoryError if the heap has no room to build it. Allocates; frees what it built."""
    validate(p, profile)
    try:
        core, det = params_mod.build(p, profile)
    except (ValueError, MemoryError):
        raise                  # the constructors' own reasons; no room is not a bad set
    except Exception as e:
        raise ValueError("the set does not build: %s %s" % (type(e).__name__, e))
    try:
        _run(core, det, profile)
    except ValueError:
        raise
    except Exception as e:     # IndexError, MemoryError (allocated under the lock), ...
        raise ValueError("the set does not run: %s %s" % (type(e).__name__, e))


def _run(core, det, profile):
    """Synthetic windows through core and det: a signal, then healthy running features, then a
    learning window; every step with the heap locked, as on the board."""
    n = core.n
    axes = core.axes
    amp = profile["sensor"]["adc_max"] >> 2
    src = array.array('h', bytes(2 * n * axes))
    for i in range(n):                 # a triangle wave of 16 samples per period, axis-shifted
        for a in range(axes):
            t = (i + 4 * a) & 15
            src[i * axes + a] = (amp * (t if t < 8 else 16 - t)) // 8 - amp // 2
    core.ring.push(src, n)
    _locked(core.process)
    core.ring.release()
    f = core.feats
    _locked_step(det, f, 0)
    per = core.per
    for a in range(axes):              # inside the set's own sensor-health and running limits
        b = a * per
        if f[b + fi.F_RMS] < det.flat_rms_q8:
            f[b + fi.F_RMS] = det.flat_rms_q8
        f[b + fi.F_CLIP] = 0
        f[b + fi.F_MEAN] = (det.dc_lo_q8[a] >> 1) + (det.dc_hi_q8[a] >> 1)
        if f[b + fi.F_VEL] < det.idle_vel_q16:
            f[b + fi.F_VEL] = det.idle_vel_q16
    det.starting = False               # past the start-up hold-off, steady: the scoring path runs
    det.steady_w = det.hold_w
    _locked_step(det, f, 1)
    if det.learn(2):
        _locked_step(det, f, 3)


def _locked(fn):
    micropython.heap_lock()
    try:
        return fn()
    finally:
        micropython.heap_unlock()


def _locked_step(det, f, t_s):
    micropython.heap_lock()
    try:
        det.step(f, t_s, 0)
    finally:
        micropython.heap_unlock()
