"""The parameter set: one MessagePack map that configures a gateway (docs/parameters in
docs/protocol.md and docs/detector.md). Keys:
  version, board, fs_hz, n, axes      identity: the store refuses a set built for another gateway
  counts_per_g                        sensor scale the set was trained with (int)
  fc_bands                            band-power bands, [[lo_bin, hi_bin), ...] (feature core)
  fc_vel_hz                           [lo, hi] band of velocity r.m.s., Hz (10-1000 by default)
  fc_speed_lo_q8, fc_speed_hi_q8      1x search range, Hz Q8 (both 0 or absent: no speed estimate,
                                      so no order or envelope fields either)
  fc_vane                             vane count of the impeller (0 or absent: no vane-pass field)
  fc_env_band                         [lo_bin, hi_bin) of the envelope's band ([] or absent: none)
  fc_bear_q12                         bearing defect orders [bpfo, bpfi, bsf, ftf], shaft orders
                                      Q12 (host_tools/data/bearing.py; [] or absent: none)
The feature core (firmware_py/dsp/features.check_config) refuses a set it cannot run, with the
reason; every fc_ key added after the first sets has a default that keeps those sets valid.
  det_*                               the detector's keys (firmware_py/detect/detector.py PARAM_KEYS)
                                      (det_slow_ms, det_slam_q8: added later, absent = 0 =
                                      the slow channel off; detector.LATER_KEYS)
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
                                     full_scale=s["adc_max"], n=n, fs_hz=fs))
    return p


def feature_options(p):
    """The speed, order and envelope options of set p as FeatureCore keywords, with the
    defaults of sets that predate them (no speed estimate, no vane, no envelope). ValueError
    names the key whose type is wrong; FeatureCore then checks the values."""
    return {"speed_lo_q8": _int(p, "fc_speed_lo_q8"), "speed_hi_q8": _int(p, "fc_speed_hi_q8"),
            "vane": _int(p, "fc_vane"), "env_band": _ints(p, "fc_env_band"),
            "bear_q12": _ints(p, "fc_bear_q12")}


def _int(p, key):
    v = p.get(key, 0)
    if not isinstance(v, int) or isinstance(v, bool):
        raise ValueError("%s must be an integer" % key)
    return v


def _ints(p, key):
    v = p.get(key, ())
    if not isinstance(v, (list, tuple)) or not all(isinstance(x, int) and not isinstance(x, bool) for x in v):
        raise ValueError("%s must be a list of integers" % key)
    return tuple(v)


def feature_core(p, profile):
    """The FeatureCore a set asks for, sized from the board profile (ring, converter range)."""
    s = profile["sensor"]
    return FeatureCore(p["n"], p["axes"], p["fs_hz"], s["adc_min"], s["adc_max"],
                       bands=[(b[0], b[1]) for b in p["fc_bands"]],
                       vel_lo_hz=p["fc_vel_hz"][0], vel_hi_hz=p["fc_vel_hz"][1],
                       ring_windows=profile["ring_windows"], **feature_options(p))


def build(p, profile):
    """(FeatureCore, Detector) for parameter set p on the board of profile; the detector's time
    base is one analysed window in the profile's analyse_every."""
    return feature_core(p, profile), detector.Detector(p, profile["analyse_every"])
