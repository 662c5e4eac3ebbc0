"""The parameter set: one MessagePack map that configures a gateway (docs/parameters in
docs/protocol.md and docs/detector.md). Keys:
  version, board, fs_hz, n, axes      identity: the store refuses a set built for another gateway
  counts_per_g                        sensor scale the set was trained with (int)
  fc_bands                            band-power bands, [[lo_bin, hi_bin), ...] (feature core)
  fc_vel_hz                           [lo, hi] band of velocity r.m.s., Hz (10-1000 by default)
  det_*                               the detector's keys (firmware_py/detect/detector.py PARAM_KEYS)
Device and host build the feature core and the detector from a set with the same functions here.

Entry points: vel_per_mm_s(), default_bands(), factory(), feature_core(), build()."""
from firmware_py.detect import detector
from firmware_py.dsp.features import FeatureCore

# ISO 80000-3 standard gravity, as 9.80665 m/s^2 = 980665 / 100000, kept as integers
_G_NUM = 980665
_G_DEN = 100000


def vel_per_mm_s(counts_per_g):
    """F_VEL units (counts/s, Q16) that make 1 mm/s, for a sensor of counts_per_g (int)."""
    # 1 mm/s = 1e-3 m/s = 1e-3 * counts_per_g / 9.80665 counts/s, times 2**16
    return (counts_per_g * 65536 * _G_DEN + 500 * _G_NUM) // (1000 * _G_NUM)


def default_bands(n, fs_hz, count):
    """count bands from 10 Hz to fs/2, each about twice the width of the one before, in bins.

    Octave-like bands: fine at low frequency (1x, 2x, vane pass), coarse where bearing and
    flow noise sit. Integer arithmetic, so device and host agree.
    """
    m = n >> 1
    lo = (10 * n + fs_hz - 1) // fs_hz
    if lo < 1:
        lo = 1
    out = []
    span = m - lo
    w = (1 << count) - 1                        # widths 1, 2, 4, ... parts of the span
    edge = lo
    acc = 0
    for i in range(count):
        acc += 1 << i
        hi = lo + (span * acc) // w
        if hi <= edge:
            hi = edge + 1
        if hi > m:
            hi = m
        if edge < hi:
            out.append([edge, hi])
        edge = hi
    return out


def factory(profile):
    """The conservative set a gateway starts with before any training (no operating modes:
    the ISO guard and sensor health only, until it learns or is flashed)."""
    s = profile["sensor"]
    n = profile["window_n"]
    fs = profile["sample_rate_hz"]
    axes = profile["axes"]
    bands = default_bands(n, fs, profile["n_bands"])
    hi = 1000 if 2 * 1000 < fs else fs * 4 // 10
    p = {"version": 0, "board": profile["name"], "fs_hz": fs, "n": n, "axes": axes,
         "counts_per_g": s["counts_per_g"], "fc_bands": bands, "fc_vel_hz": [10, hi]}
    p.update(detector.default_params(axes, len(bands), vel_per_mm_s(s["counts_per_g"]),
                                     full_scale=s["adc_max"]))
    return p


def feature_core(p, profile):
    """The FeatureCore a set asks for, sized from the board profile (ring, converter range)."""
    s = profile["sensor"]
    return FeatureCore(p["n"], p["axes"], p["fs_hz"], s["adc_min"], s["adc_max"],
                       bands=[(b[0], b[1]) for b in p["fc_bands"]],
                       vel_lo_hz=p["fc_vel_hz"][0], vel_hi_hz=p["fc_vel_hz"][1],
                       ring_windows=profile["ring_windows"])


def build(p, profile):
    """(FeatureCore, Detector) for parameter set p on the board of profile."""
    return feature_core(p, profile), detector.Detector(p)
