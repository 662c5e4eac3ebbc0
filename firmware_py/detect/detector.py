"""edgevib detector: one per device, the same code on the host for replay and training.

Per window the caller passes the feature vector and gets back the detector state. In order:
1. sensor health (a dropout run, a knock on one axis only, flatline, clipping, DC offset, lost
   samples): sensor_fault, decided before anything about the machine;
2. running? (largest axis velocity against the idle floor), and steady? (speed estimate and
   level over the last det_steady_ms; a run-up, a speed change and a run-down are not steady);
   after a start, idle until steady for det_hold_ms;
3. the operating point (speed from the signal, and a load proxy) chooses the mode, never the
   health features; a point in no trained mode is not scored (state unscored, reason
   unknown_point); the ISO 10816-3 velocity guard acts on every running window;
4. the score within that mode: max(distance to the mode, weighted largest single rise, weighted
   largest slow (EWMA) rise of one feature);
5. alert when det_persist_q8 of the last det_persist_ms of evaluated windows are over; alarm
   only after the alert persisted det_escalate_ms (or ISO zone D); latched until acknowledged.
Integer-only and allocation-free in step(), ack() and learn() (checked under heap_lock on
MicroPython); every array is made once, in the constructor, from the parameter set.

API
    det = Detector(params, every=1)  # params: dict, keys in PARAM_KEYS (default_params());
                                     # every: the board's analyse_every (the time base)
    state = det.step(feats, t_s, dropped)
        feats   array('i') laid out as firmware_py.dsp.feature_index (axes x per_axis(n_bands))
        t_s     int, seconds (any epoch, < 2**30); only copied into events
        dropped samples dropped since the previous window
      after it: det.state; det.score_q8 (combined score, Q8 spreads, 0 when not scored), det.dist_q8,
      det.zmax_q8 and det.smax_q8 (its three channels before weighting, Q8 spreads; smax after each
      feature's det_sgain_q8, and kept even when det_slam_q8 = 0 leaves it out of the score);
      det.mode (-1 none); det.feat (flat feature index that drove the score, the guard or the
      fault, -1 none); det.zone (ISO zone 0..3 = A..D); det.bb_vel_q16 (largest axis F_VEL,
      counts/s Q16); det.why (W_* below: why not scored, 0 scored) and det.n_why (count per
      W_*); det.speed_q8 (Hz Q8), det.conf_q8 (Q8), det.load_q8 (log2 Q8): the operating point;
      det.pushed (1 if the window added to the persistence evidence) and det.resets (times that
      evidence was forgotten).
    det.gap(s=0)       the next window does not follow the last (lost samples, a recording gap);
                       s: whole seconds of signal missing, which age the slow channel's evidence
    det.ack(t_s)       acknowledge a latched alarm; det.learn(t_s) start learning (False if
                       refused: alarm latched or sensor fault); det.stop_learning(t_s) abandon it
    det.events         EventRing (firmware_py/detect/event_ring.py): i = det.events.pop() -> slot or -1;
                       read det.events.t[i], old[i], new[i], reason[i], mode[i], feat[i], score_q8[i]
    det.export()       the learned model as parameter keys (allocates; not for the window path)
    footprint_bytes(axes)  heap bytes of a Detector's arrays for the largest set (board budgets)
    States and reasons: firmware_py/detect/alarm.py (STATE_NAMES, REASON_NAMES).
"""
from array import array
from micropython import const
from firmware_py.dsp import feature_index as fi
from firmware_py.detect import alarm as al
from firmware_py.detect.alarm import Alarm, windows_for, SPAN_MAX
from firmware_py.detect import event_ring, half_lines, modes, welford
from firmware_py.detect.event_ring import EventRing
from firmware_py.detect.half_lines import HalfLines, UNSET
from firmware_py.detect.iso_zones import zone_of, bounds_in_vel_units, ZONE_C
from firmware_py.detect.modes import ModeModel, KMAX, DMAX, FOLLOW_MAX, is_log_field, transform, clamp, \
    follow, range_ref_q8, speed_offset_q8
from firmware_py.dsp.tables import log2_table, LOG2_N
from firmware_py.detect.welford import Welford, N_MAX
from firmware_py.dsp.fixmath import sqrt_pow2, log2_q8

# sqrt of the chi-square upper quantile at p = 1e-4 for d = 1..64 degrees of freedom, Q8
# (scipy.stats.chi2.isf(1e-4, d); tests/test_detector_learning.py recomputes it). For d
# independent standard normal features the score exceeds CHI_Q8[d - 1] on 1 window in 10**4.
CHI_Q8 = (996, 1099, 1176, 1241, 1299, 1351, 1399, 1444, 1487, 1527, 1565, 1601, 1637, 1670,
          1703, 1735, 1766, 1795, 1825, 1853, 1881, 1908, 1934, 1960, 1985, 2010, 2035, 2059,
          2082, 2105, 2128, 2151, 2173, 2194, 2216, 2237, 2258, 2279, 2299, 2319, 2339, 2359,
          2378, 2397, 2416, 2435, 2453, 2472, 2490, 2508, 2526, 2543, 2561, 2578, 2595, 2612,
          2629, 2646, 2662, 2679, 2695, 2711, 2727, 2743)

_BIG = const(0x3FFFFFFF)

# The detector's keys in the parameter set (formats and defaults: docs/detector.md). Kept as
# names only: on the device, comments cost nothing and strings cost RAM. Times are in ms of the
# machine's running time and become analysed windows in the constructor (window length n / fs_hz
# times the board's analyse_every), so a rule means the same on any board.
PARAM_KEYS = (
    "n", "fs_hz",           # window length (samples) and sample rate (Hz): the time base
    "det_axes",             # axes in the feature vector
    "det_bands",            # band powers per axis
    "det_feat",             # flat feature indices scored (<= 64), axis * per_axis + field
    "det_base_mean_q4",     # baseline mean per scored feature, log2 Q8 units, Q4
    "det_base_sd_q4",       # baseline standard deviation per scored feature, log2 Q8 units, Q4
    "det_modes",            # number of operating modes k (0 = no model: ISO guard only)
    "det_mode_c_q8",        # k x d centroids, mode-major, Q8 baseline spreads
    "det_mode_s_q8",        # k x d per-mode spreads, Q8 baseline spreads
    "det_op_speed_q8",      # k x 2 speed range [lo, hi] of each mode, Hz Q8 ([] = no operating point)
    "det_op_load_q8",       # k x 2 load-proxy range [lo, hi] of each mode, log2 Q8 ([] = not used)
    "det_op_seen_q8",       # k x 2 speeds [lo, hi] each mode was trained at, Hz Q8: the slow
                            # channel gathers evidence only there ([] = anywhere in its range)
    "det_conf_min_q8",      # least F_SPEED_CONF for a usable speed estimate, Q8 (256 = 1)
    "det_zlam_q8",          # weight of the per-feature channel in the combined score, Q8
    "det_slow_ms",          # slow channel: EWMA time constant, nearest 2**shift analysed windows
    "det_wander_ms",        # slow channel: the same for a wandering feature's window that stands
                            # for unwatched time (_slow), nearest 2**shift analysed windows
    "det_slow_wander",      # per scored feature, 1 where its average wanders with the process:
                            # it averages over running time (_slow) ([] = none)
    "det_slam_q8",          # weight of the slow channel in the combined score, Q8 (0 = off)
    "det_mslam_q8",         # k: each mode's own weight of the slow channel, Q8 ([] = det_slam_q8
                            # in every mode)
    "det_sgain_q8",         # per scored feature, the weight of its EWMA in the slow channel, Q8
    "det_follow_q8",        # per scored feature, its slope on log2 of the speed, Q8 ([] = none)
    "det_mfollow_q8",       # k x d, mode-major: each mode's own slope of each scored feature on
                            # log2 of the speed, the speed held within det_op_seen_q8, Q8 ([] = none)
    "det_thr_alert_q8",     # combined score at or over which a window counts toward an alert, Q8
    "det_thr_alarm_q8",     # combined score at or over which a window counts toward an alarm, Q8
    "det_hyst_q8",          # clear threshold as a fraction of det_thr_alert_q8, Q8 (205 = 0.8)
    "det_persist_ms",       # evidence span: raise on det_persist_q8 of the windows of this span
    "det_persist_q8",       # fraction of the span's windows that must be over, Q8 (205 = 0.8)
    "det_escalate_ms",      # least time in alert before the score can make it an alarm
    "det_dwell_ms",         # least time in alert or alarm before it can clear
    "det_idle_vel_q16",     # idle when the largest axis F_VEL is under this, counts/s Q16
    "det_hold_ms",          # steady running needed after a start or a transient before scoring
    "det_hold_max_ms",      # a start leaves idle after this even if never steady (guard on)
    "det_steady_ms",        # span over which speed and level steadiness are judged
    "det_speed_tol_q12",    # steady: speed max - min over the span at most this x speed, Q12
    "det_level_tol_q8",     # steady: broadband level falls by at most this over the span, log2 Q8
    "det_iso_group",        # ISO 10816-3 machine group (1 or 2), for the record
    "det_iso_found",        # foundation, 'rigid' or 'flexible', for the record
    "det_iso_bounds",       # zone boundaries A/B, B/C, C/D in F_VEL units (counts/s Q16)
    "det_flat_rms_q8",      # sensor flatline: any axis F_RMS under this, Q8 counts
    "det_clip_max",         # sensor clipping: any axis F_CLIP over this, samples per window
    "det_dc_lo_q8",         # per axis, least healthy F_MEAN, Q8 counts
    "det_dc_hi_q8",         # per axis, greatest healthy F_MEAN, Q8 counts
    "det_drop_max",         # sensor: more dropped samples than this in one window is a fault
    "det_stuck_max",        # per axis, longest healthy run of identical samples (F_STUCK), samples
    "det_zero_max",         # per axis, longest healthy run of zero samples (F_ZERO), samples
    "det_knock_crest_q12",  # per axis, crest factor (F_CREST, Q12) over which an impulse is a knock
    "det_knock_ratio_q8",   # a knock's peak over every other axis's peak by this ratio, Q8
    "det_fault_k",          # consecutive bad windows to enter sensor_fault (dropout, knock: 1)
    "det_fault_clear_ms",   # healthy windows in a row to leave sensor_fault (at least det_fault_k)
    "det_sd_floor_q4",      # least baseline spread, log2 Q8 units, Q4
    "det_s_floor_q8",       # least per-mode spread, Q8 baseline spreads
    "det_learn_base_n",     # learning: windows for the baseline (phase 1, <= 65535)
    "det_learn_mode_n",     # learning: windows for the operating modes (phase 2, <= 65535)
    "det_learn_op_q12",     # learning: new mode when the speed is this fraction from every mode, Q12
    "det_learn_min_n",      # learning: modes with fewer windows are dropped
    "det_learn_margin_q8",  # learning: alert threshold = CHI_Q8[d-1] * margin, Q8
    "det_learn_alarm_q8",   # learning: alarm threshold = alert threshold * this, Q8
    "det_drift_shift",      # drift: step 2**-shift per normal window; 0 off
    "det_drift_max_q8",     # drift: bound from the trained mean, Q8 spreads
    "det_event_n",          # capacity of the event ring, events (1..event_ring.CAP_MAX)
)

# keys added after the first sets: a set without them reads 0 (the slow channel off), as before;
# without det_sgain_q8 (or with it empty) every feature's EWMA weighs 256 (1), as before;
# without det_follow_q8 (or with it empty) no level follows the speed, as before; without
# det_op_seen_q8 (or with it empty) the slow channel gathers evidence anywhere in a mode's range;
# without det_mfollow_q8 (or with it empty) no mode has slopes of its own; without det_mslam_q8
# (or with it empty) every mode weighs its slow channel by det_slam_q8; without det_slow_wander
# (or with it empty) every feature's EWMA runs over scored windows (det_slow_ms), as before, and
# without det_wander_ms a wandering one's time constant is det_slow_ms
LATER_KEYS = ("det_slow_ms", "det_slam_q8", "det_sgain_q8", "det_follow_q8", "det_op_seen_q8",
              "det_mfollow_q8", "det_mslam_q8", "det_wander_ms", "det_slow_wander")
SGAIN_MAX = const(4096)    # largest per-feature slow weight, Q8 (16)
# slow channel: in unbroken running a window weighs 2**-long, long the shift nearest SLOW_HALF_S
# of windows, at most _SHIFT_MAX (16384 windows), so |ew_acc| <= 32767 * 2**14 + 1 < 2**29
_SHIFT_MAX = const(14)
# A mode's slow-channel evidence halves for every full SLOW_HALF_S seconds it was not scored
# (other modes, stops, gaps): kept over a stop or an excursion, gone after a day away. In unbroken
# running the channel averages over the same hour.
SLOW_HALF_S = const(3600)
_CLOCK_REBASE = const(1 << 29)   # the detector's clock (s) is moved back by 2**28 past this
_GAP_MAX_S = const(1 << 24)      # longest gap counted at once (194 days): the clock stays small

PIN_STEPS = const(2)   # an estimate this close to an end of the 1x search range (bins-Q8 steps) is the range


def pinned_limits_q8(lo_q8, hi_q8, fs, n):
    """The least and greatest speed estimate (Hz Q8) that is a measurement, not an end of the
    search range [lo_q8, hi_q8] (Hz Q8; hi 0: no search, every speed counts): the estimator
    clamps its 1x (bins Q8) to the range, so a pinned estimate is an end itself, up to the
    conversion to Hz Q8, one bins-Q8 step being fs / n Hz-Q8 units; PIN_STEPS of them of room.
    fs, n < 2**20, so PIN_STEPS * fs stays small."""
    if not hi_q8:
        return 0, _BIG
    room = (PIN_STEPS * fs) // n
    return lo_q8 + room + 1, hi_q8 - room - 1


def op_axis(f, axes, pa, lo_q8, hi_q8):
    """The axis whose speed estimate gives the operating point of features f (axes of pa
    fields): the most confident of those with an estimate inside [lo_q8, hi_q8]
    (pinned_limits_q8), else the most confident with one; 0 if none has one."""
    best = 0
    conf = -1
    free = False                      # the best so far reads a speed inside the range
    for a in range(axes):
        c = f[a * pa + fi.F_SPEED_CONF]
        s = f[a * pa + fi.F_SPEED]
        if s <= 0:
            continue
        inside = lo_q8 <= s <= hi_q8
        if (inside and not free) or (inside == free and c > conf):
            conf = c
            best = a
            free = inside
    return best


# why a window was not scored (det.why; 0 = scored); det.n_why counts each, saturating
W_SCORED = const(0)
W_IDLE = const(1)          # stopped
W_HOLD = const(2)          # starting, or settling after a transient: not yet steady for the hold-off
W_UNSTEADY = const(3)      # speed or level changing (a speed change, a run-up)
W_RUNDOWN = const(4)       # speed or level falling: a run-down
W_NO_SPEED = const(5)      # no confident speed estimate to choose a mode by
W_OFF_POINT = const(6)     # the operating point lies in no trained mode
W_FAULT = const(7)         # sensor fault
W_LEARN = const(8)         # learning
W_NO_MODEL = const(9)      # no trained model (ISO guard only)
WHY_NAMES = ("scored", "idle", "hold", "unsteady", "rundown", "no_speed", "off_point",
             "sensor_fault", "learning", "no_model")
_STEADY_MAX = const(32)    # most windows in the steadiness span
_SPEED_MAX = const(1 << 17)  # speeds are taken as at most 512 Hz (Q8): tol_q12 * speed < 2**29
# Longest healthy run of identical samples before training has measured the sensor. A run of L
# identical samples takes L - 1 coincidences in a row; if each happens with probability q, a
# window of n samples holds such a run with probability at most n q**(L - 1). For white Gaussian
# noise of sigma counts quantised to whole counts q = sum_k P(k)**2 ~ 1 / (2 sqrt(pi) sigma)
# (0.28 at 1 count); a sensor as quiet as half a count has q ~ 0.5. With q = 0.5, n = 512 and
# the 1.6e7 windows of 30 days at 0.16 s, L - 1 = log2(512 * 1.6e7 * 1000) = 43 keeps a false
# dropout under once in a thousand months. Training replaces it per axis from measured q
# (host_tools/fit/sensor_fit.py).
_RUN_DEFAULT = const(44)
# Crest factor over which a window holds an impulse, before training has measured the sensor.
# For Gaussian noise a window of n samples exceeds crest c with probability under
# n * 2 * Q(c / sqrt(1 + c**2 / (2 n))) (Q the normal upper tail; the square root: the window's
# own r.m.s. estimate, relative spread 1 / sqrt(2 n); host_tools/fit/sensor_fit.py has the exact
# form); at c = 8 and n <= 4096 that is under 1e-11 per window, under 1e-4 in the 1.6e7 windows
# of 30 days at 0.16 s. Lines make a signal's crest factor lower than noise's, so a healthy
# stationary vibration stays under it too. Training replaces it per axis (sensor_fit). Q12.
_KNOCK_CREST_DEFAULT = const(32768)
# A knock must stand above every other axis's peak by this ratio (8, Q8). A machine impact
# reaches the sensor through the bearing housing, which carries it to every axis; the next most
# excited axis sees a good fraction of it (common practice; the evaluation scenarios' housing
# mode gives 0.6 and 0.3 of the main axis). An impulse that only one axis sees, 18 dB over the
# others' own peaks, is the sensor's: rattling on a loose seat, struck, or a connection glitch.
_KNOCK_RATIO_DEFAULT = const(2048)


def default_feature_list(axes, n_bands):
    """Scored features by default: every field of every axis but the mean, the clip count and the
    sensor-run, speed, order, tap, half-order and envelope fields (F_STUCK .. F_HALF), which a
    trained set chooses for itself."""
    pa = fi.per_axis(n_bands)
    out = []
    for a in range(axes):
        for f in range(pa):
            if f != fi.F_MEAN and f != fi.F_CLIP and not fi.F_STUCK <= f <= fi.F_HALF:
                out.append(a * pa + f)
    return out


def default_params(axes, n_bands, vel_per_mm_s, group=2, foundation="rigid", full_scale=32767,
                   n=512, fs_hz=3200):
    """A conservative parameter set with no model yet (run learn() on the device, or train).

    vel_per_mm_s: F_VEL units (counts/s Q16) per mm/s, from the calibration. full_scale: the
    converter's full scale in counts; the healthy DC range defaults to +-7/8 of it. n, fs_hz: the
    window (samples) and sample rate (Hz), the time base of every _ms key. The default guard is
    group 2 rigid, the lowest boundaries of the table (the cautious choice). The default idle
    floor is 0.05 mm/s, 1/28 of the lowest zone A/B boundary (1.4 mm/s): low enough that a
    running pump is not taken for a stopped one, so the guard is not blinded before training (the
    cautious side); a noisy MEMS sensor on a stopped pump may read more (an ADXL345 about
    0.13-0.39 mm/s in the demo) and show running until trained or learned. Sensor dropout and
    knock: _RUN_DEFAULT, _KNOCK_CREST_DEFAULT and _KNOCK_RATIO_DEFAULT (see there) until training
    measures the sensor.
    """
    feat = default_feature_list(axes, n_bands)
    dc = (full_scale * 7 // 8) << 8
    stuck = _RUN_DEFAULT
    return {
        "n": n, "fs_hz": fs_hz,
        "det_axes": axes, "det_bands": n_bands, "det_feat": feat,
        "det_base_mean_q4": [0] * len(feat), "det_base_sd_q4": [256] * len(feat),
        "det_modes": 0, "det_mode_c_q8": [], "det_mode_s_q8": [],
        "det_op_speed_q8": [], "det_op_load_q8": [], "det_conf_min_q8": 64,
        "det_zlam_q8": 256, "det_slow_ms": 10240, "det_slam_q8": 0,
        "det_thr_alert_q8": 5 * 256, "det_thr_alarm_q8": 8 * 256, "det_hyst_q8": 205,
        "det_persist_ms": 10000, "det_persist_q8": 128, "det_escalate_ms": 300000,
        "det_dwell_ms": 60000,
        "det_idle_vel_q16": vel_per_mm_s // 20,   # 0.05 mm/s
        "det_hold_ms": 5000, "det_hold_max_ms": 60000, "det_steady_ms": 1000,
        "det_speed_tol_q12": 123, "det_level_tol_q8": 128,
        "det_iso_group": group, "det_iso_found": foundation,
        "det_iso_bounds": bounds_in_vel_units(group, foundation, vel_per_mm_s),
        "det_flat_rms_q8": 64, "det_clip_max": 0,
        "det_dc_lo_q8": [-dc] * axes, "det_dc_hi_q8": [dc] * axes,
        "det_drop_max": 0, "det_stuck_max": [stuck] * axes, "det_zero_max": [stuck] * axes,
        "det_knock_crest_q12": [_KNOCK_CREST_DEFAULT] * axes,
        "det_knock_ratio_q8": _KNOCK_RATIO_DEFAULT,
        "det_fault_k": 3, "det_fault_clear_ms": 20000,
        "det_sd_floor_q4": 128, "det_s_floor_q8": 64,
        "det_learn_base_n": 300, "det_learn_mode_n": 600, "det_learn_op_q12": 205,
        "det_learn_min_n": 30, "det_learn_margin_q8": 320, "det_learn_alarm_q8": 384,
        "det_drift_shift": 0, "det_drift_max_q8": 128,
        "det_event_n": 32,
    }


def _shift_for(w):
    """The shift s whose 2**s is nearest to w windows on a log scale (2**s <= w * sqrt(2) <
    2**(s+1)): w**2 against 2**(2s + 1). Construction only."""
    s = 0
    while (1 << (2 * s + 1)) <= w * w:
        s += 1
    return s


def _int(p, key, lo, hi):
    v = p[key]
    if not isinstance(v, int) or not lo <= v <= hi:
        raise ValueError("%s must be an int in [%d, %d]" % (key, lo, hi))
    return v


def _pairs(p, key, k, out, lim):
    """Fill out[0:2k] with p[key]'s k [lo, hi] pairs, each clamped to +-lim; ValueError unless
    lo <= hi in each (set-up only: the message allocates)."""
    v = _ints(p, key, 2 * k)
    for m in range(k):
        if v[2 * m] > v[2 * m + 1]:
            raise ValueError(key + " must hold [lo, hi] pairs with lo <= hi")
        out[2 * m] = clamp(v[2 * m], lim)
        out[2 * m + 1] = clamp(v[2 * m + 1], lim)


def _ints(p, key, n):
    """p[key] as array('i') of n ints, each a small int (reading a larger one would allocate)."""
    v = p[key]
    if len(v) != n:
        raise ValueError("%s must hold %d ints" % (key, n))
    for x in v:
        if not isinstance(x, int) or not -_BIG <= x <= _BIG:
            raise ValueError("%s must hold ints within +-(2**30 - 1)" % key)
    return array("i", v)


class Detector:
    """See the module docstring. every: the board's analyse_every (one window in `every` is
    analysed), so the _ms keys become the right number of analysed windows."""

    def __init__(self, p, every=1):
        for key in PARAM_KEYS:
            if key not in p and key not in LATER_KEYS:
                raise ValueError("parameter set lacks " + key)
        n = _int(p, "n", 1, 1 << 20)
        fs = _int(p, "fs_hz", 1, 1 << 20)
        if not isinstance(every, int) or every < 1:
            raise ValueError("analyse_every must be an int >= 1")
        axes = self.axes = _int(p, "det_axes", 1, 8)
        self.pa = fi.per_axis(_int(p, "det_bands", 0, 64))
        self.nf = axes * self.pa
        self.idx = _ints(p, "det_feat", len(p["det_feat"]))
        d = self.d = len(self.idx)
        if not 1 <= d <= DMAX:
            raise ValueError("det_feat must name 1..%d features" % DMAX)
        self.logf = array("b", bytes(d))
        for j in range(d):
            if not 0 <= self.idx[j] < self.nf:
                raise ValueError("det_feat index %d outside the feature vector" % self.idx[j])
            self.logf[j] = 1 if is_log_field(self.idx[j] % self.pa) else 0
        self.sd_floor_q4 = _int(p, "det_sd_floor_q4", 1, 1 << 16)
        self.s_floor_q8 = _int(p, "det_s_floor_q8", 1, 1 << 12)
        k = _int(p, "det_modes", 0, KMAX)
        self.model = ModeModel(d)
        self.model.load(p["det_base_mean_q4"], p["det_base_sd_q4"], k,
                        p["det_mode_c_q8"], p["det_mode_s_q8"], self.sd_floor_q4, self.s_floor_q8)
        # operating points: speed (and load proxy) range per mode, k x 2, Hz Q8 and log2 Q8
        self.op_speed_q8 = array("i", bytes(8 * KMAX))
        self.op_load_q8 = array("i", bytes(8 * KMAX))
        self.op_seen_q8 = array("i", bytes(8 * KMAX))
        self.op_on = self._load_op(p, k)
        # an axis whose estimate is pinned at an end of the search range does not give the
        # operating point (the axial axis reads a 2x beyond the range as its top end)
        self.pin_lo_q8, self.pin_hi_q8 = pinned_limits_q8(p.get("fc_speed_lo_q8") or 0,
                                                          p.get("fc_speed_hi_q8") or 0, fs, n)
        self.seen_on = self._load_seen(p, k)
        self.cand = ModeModel(d)                  # the model being learned
        self.mean0_q4 = array("i", self.model.mean_q4)  # trained baseline, the drift anchor
        self.conf_min_q8 = _int(p, "det_conf_min_q8", 0, 256)
        self.zlam_q8 = _int(p, "det_zlam_q8", 0, 1 << 12)
        q = {k: p.get(k, 0) for k in LATER_KEYS}
        self.slam_q8 = _int(q, "det_slam_q8", 0, 1 << 12)
        # per mode, the slow channel's own weight (same units): matched on that mode's held-out
        # running, so a duty whose averages wander more does not lower the weight of the others
        self.mslam_q8 = array("h", bytes(2 * KMAX))
        self.mslam_on = len(p.get("det_mslam_q8") or []) > 0
        if self.mslam_on:
            v = _ints(p, "det_mslam_q8", k)
            for m in range(k):
                if not 0 <= v[m] <= 1 << 12:
                    raise ValueError("det_mslam_q8 must hold ints in [0, 4096]")
                self.mslam_q8[m] = v[m]
        # per-feature slow weights, Q8: each feature's EWMA against its own healthy spread
        g = p.get("det_sgain_q8") or [256] * d
        self.sgain_q8 = _ints({"det_sgain_q8": g}, "det_sgain_q8", d)
        for j in range(d):
            if not 0 <= self.sgain_q8[j] <= SGAIN_MAX:
                raise ValueError("det_sgain_q8 must hold ints in [0, %d]" % SGAIN_MAX)
        self.ew_shift = _shift_for(windows_for(_int(q, "det_slow_ms", 0, _BIG), n, fs, every))
        # with det_wander_ms, averages run over running time (_slow): a wandering feature's over
        # 2**ew_long windows (the shift nearest SLOW_HALF_S, at most _SHIFT_MAX), whose window
        # after unwatched time stands for 2**(ew_long - ew_wshift) of them; a flickering one's
        # over that many times 2**ew_shift (ew_frun). Without it every window weighs 2**-ew_shift.
        self.ew_wshift = self.ew_shift
        lg = self.ew_shift
        if p.get("det_wander_ms") is not None:
            self.ew_wshift = _shift_for(windows_for(_int(p, "det_wander_ms", 0, _BIG), n, fs, every))
            lg = _shift_for(windows_for(1000 * SLOW_HALF_S, n, fs, every))
            lg = lg if lg < _SHIFT_MAX else _SHIFT_MAX
            lg = lg if lg > self.ew_wshift else self.ew_wshift
            lg = lg if lg > self.ew_shift else self.ew_shift
        self.ew_long = lg
        r = lg - self.ew_wshift
        self.ew_frun = self.ew_shift + r if self.ew_shift + r < lg else lg
        wf = p.get("det_slow_wander") or [0] * d
        self.wander = array("b", bytes(d))        # 1: a wandering feature (its average: 2**ew_long)
        for j, v in enumerate(_ints({"det_slow_wander": wf}, "det_slow_wander", d)):
            if v != 0 and v != 1:
                raise ValueError("det_slow_wander must hold 0 or 1")
            self.wander[j] = v
        # per scored feature, its slope on log2 of the speed within a mode (Q8 octaves per
        # octave, 0 = a fixed centroid): a level brought to the mode's reference speed before scoring
        self.follow_q8 = array("h", bytes(2 * d))
        self.follow_on = self._load_slopes(p, "det_follow_q8", d, self.follow_q8)
        # per mode and scored feature, a slope of the mode's own (same units) over the speeds it
        # was trained at: a band whose edge a shaft line's lobe straddles there gains or loses
        # that line as the speed moves (an S, not a power law), so the speed is held within the
        # mode's trained speeds, where the line was fitted, and the level beyond them kept
        self.mfollow_q8 = array("h", bytes(2 * k * d))
        self.mfollow_on = self._load_slopes(p, "det_mfollow_q8", k * d, self.mfollow_q8)
        if self.mfollow_on and not self.seen_on:
            raise ValueError("det_mfollow_q8 needs det_op_seen_q8")
        self.op_ref_q8 = array("i", bytes(4 * KMAX))   # per mode log2 of its range centre, Q8
        # the detector's own clock: analysed windows at win_ms each (n * every samples), plus the
        # seconds of gaps; seconds in clock_s (< 2**29, rebased), the rest in clock_ms (< 1000)
        self.win_ms = min((1000 * n * every) // fs, 1 << 20)
        self.clock_s = 0
        self.clock_ms = 0
        if self.ew_shift > _SHIFT_MAX or self.ew_wshift > _SHIFT_MAX:
            raise ValueError("det_slow_ms or det_wander_ms spans more than %d analysed windows" % (1 << _SHIFT_MAX))
        # a window that stands for time the mode was not watched (its credit) counts as
        # 2**(ew_long - ew_wshift) windows: it spends the time of those beyond its own (ms); the
        # credit is capped at 2**ew_shift such windows (a snapshot's worth): a longer stretch of
        # unbroken running holds little more of a wander than a snapshot does
        self.ew_spend_ms = ((1 << (self.ew_long - self.ew_wshift)) - 1) * self.win_ms
        self.ew_cap_ms = min((1 << self.ew_shift) * self.ew_spend_ms, 1 << 28)
        self.ew_cap_s = self.ew_cap_ms // 1000 + 1
        self.thr_alert_q8 = _int(p, "det_thr_alert_q8", 1, 1 << 16)
        self.thr_alarm_q8 = _int(p, "det_thr_alarm_q8", 1, 1 << 16)
        self.hyst_q8 = _int(p, "det_hyst_q8", 1, 256)
        span = windows_for(_int(p, "det_persist_ms", 1, _BIG), n, fs, every)
        if span > SPAN_MAX:
            raise ValueError("det_persist_ms spans more than %d analysed windows" % SPAN_MAX)
        kq = _int(p, "det_persist_q8", 1, 256)
        kw = (kq * span + 128) >> 8
        self.alarm = Alarm(span, kw if kw > 0 else 1,
                           windows_for(_int(p, "det_escalate_ms", 0, _BIG), n, fs, every),
                           windows_for(_int(p, "det_dwell_ms", 0, _BIG), n, fs, every))
        self.idle_vel_q16 = _int(p, "det_idle_vel_q16", 0, _BIG)
        self.hold_w = windows_for(_int(p, "det_hold_ms", 0, _BIG), n, fs, every)
        self.hold_max_w = windows_for(_int(p, "det_hold_max_ms", 0, _BIG), n, fs, every)
        m = windows_for(_int(p, "det_steady_ms", 0, _BIG), n, fs, every)
        self.steady_m = m if m < _STEADY_MAX else _STEADY_MAX
        self.speed_tol_q12 = _int(p, "det_speed_tol_q12", 0, 4096)
        self.level_tol_q8 = _int(p, "det_level_tol_q8", 0, 1 << 16)
        self.iso = _ints(p, "det_iso_bounds", 3)
        if not 0 < self.iso[0] <= self.iso[1] <= self.iso[2]:
            raise ValueError("det_iso_bounds must be positive and ascending")
        self.flat_rms_q8 = _int(p, "det_flat_rms_q8", 0, _BIG)
        self.clip_max = _int(p, "det_clip_max", 0, _BIG)
        self.dc_lo_q8 = _ints(p, "det_dc_lo_q8", axes)
        self.dc_hi_q8 = _ints(p, "det_dc_hi_q8", axes)
        self.drop_max = _int(p, "det_drop_max", 0, _BIG)
        self.stuck_max = _ints(p, "det_stuck_max", axes)
        self.zero_max = _ints(p, "det_zero_max", axes)
        self.knock_crest_q12 = _ints(p, "det_knock_crest_q12", axes)
        self.knock_ratio_q8 = _int(p, "det_knock_ratio_q8", 256, 1 << 16)
        self.fault_k = _int(p, "det_fault_k", 1, 1 << 20)
        w = windows_for(_int(p, "det_fault_clear_ms", 0, _BIG), n, fs, every)
        self.fault_clear_w = w if w > self.fault_k else self.fault_k
        self.base_n = _int(p, "det_learn_base_n", 2, N_MAX)
        self.mode_n = _int(p, "det_learn_mode_n", 1, N_MAX)
        self.learn_op_q12 = _int(p, "det_learn_op_q12", 1, 4096)
        self.min_n = _int(p, "det_learn_min_n", 1, N_MAX)
        self.margin_q8 = _int(p, "det_learn_margin_q8", 256, 1 << 12)
        self.alarm_ratio_q8 = _int(p, "det_learn_alarm_q8", 256, 1 << 12)
        self.drift_shift = _int(p, "det_drift_shift", 0, 20)
        self.drift_max_q8 = _int(p, "det_drift_max_q8", 0, 1 << 10)
        self.events = EventRing(_int(p, "det_event_n", 1, event_ring.CAP_MAX))
        self.tab = log2_table()
        self._refs()
        self.half = HalfLines(axes, self.pa, n, every, self.speed_tol_q12, self.tab)
        self.u = array("i", bytes(4 * d))
        self.z = array("i", bytes(4 * d))
        # per scored feature: the axis whose own 1x estimate its order or envelope line was read
        # around (F_ORD_HALF .. F_ENV_FTF), or its half-order prominence (F_HALF: the taps are
        # mixed and the average kept at that axis's own 1x), else -1 (see _mask_lines)
        self.ord_axis = array("b", bytes(d))
        self.held = array("b", bytes(d))          # 1 where _mask_lines neutralised the line
        # slow channel: per scored feature the EWMA of its departure t_j, kept as the accumulator
        # ew_acc = EWMA * 2**ew_long (Q8 spreads << ew_long) so that no precision is lost to
        # the shift (a plain Q8 EWMA would stick up to 2**shift LSB from its input); mode m's at
        # m * d, each mode's against its own centroid
        self.ew_acc = array("i", bytes(4 * d * KMAX))
        self.ew_seen_s = array("i", bytes(4 * KMAX))   # clock_s when each mode was last scored
        self.ew_credit_ms = array("i", bytes(4 * KMAX))  # each mode's unwatched time not yet spent, ms
        for m in range(KMAX):
            self.ew_credit_ms[m] = self.ew_cap_ms     # nothing known yet: as after long unwatched
        self.s_drive = 0                          # j of the largest EWMA (smax_q8)
        # per scored feature: the axis of a half-order prominence (F_HALF), which this detector
        # keeps itself (self.half), else -1 (see _transform)
        self.half_axis = array("b", bytes(d))
        for j in range(d):
            fj = self.idx[j] % self.pa
            lines = fi.F_ORD_HALF <= fj <= fi.F_ENV_FTF or fj == fi.F_HALF
            self.ord_axis[j] = self.idx[j] // self.pa if lines else -1
            self.half_axis[j] = self.idx[j] // self.pa if fj == fi.F_HALF else -1
        self.wb = Welford(d)                      # learning phase 1: baseline
        self.wm = Welford(d * KMAX)               # learning phase 2: per-mode statistics
        self.lop_q8 = array("i", bytes(8 * KMAX))   # learning: per mode speed lo, hi, Hz Q8
        self.lsp = Welford(KMAX)                  # learning: per mode mean speed (Hz Q8 >> 3)
        self.l_op = False                         # learning modes by operating point
        self.ring_speed_q8 = array("i", bytes(4 * _STEADY_MAX))   # Hz Q8, 0 = no estimate
        self.ring_level_q8 = array("i", bytes(4 * _STEADY_MAX))   # log2 of F_VEL, Q8
        self.sort_q8 = array("i", bytes(4 * _STEADY_MAX))         # scratch for medians, Hz Q8
        self.ring_i = 0
        self.ring_n = 0
        self.n_why = array("i", bytes(4 * len(WHY_NAMES)))
        self.learning = False
        self.phase = 0
        self.seen = 0                             # windows learned in this phase
        self.ck = 0                               # modes opened so far in phase 2
        self.min_bb_vel_q16 = _BIG
        self.fault_bad = 0
        self.fault_good = 0
        self.fault = False
        self.fault_reason = 0
        self.fault_feat = -1
        self.knock_axis = 0
        self.running = False                      # broadband velocity at or over the idle floor
        self.starting = True                      # since the start: idle until steady
        self.run_w = 0                            # windows running since the start
        self.steady_w = 0                         # consecutive steady running windows
        self.off_w = 0                            # consecutive windows off every trained point
        self.off_reason = 0
        self.state = al.IDLE
        self.t = 0
        self.score_q8 = 0                            # combined score, Q8 spreads (0 when not scored)
        self.dist_q8 = 0                             # distance to the mode, Q8 spreads
        self.zmax_q8 = 0                             # largest single-feature |z|, Q8 spreads
        self.smax_q8 = 0                             # largest weighted single-feature EWMA rise, Q8
        self.mode = -1
        self.feat = -1
        self.zone = 0
        self.bb_vel_q16 = 0
        self.why = W_IDLE
        self.pushed = 0                           # 1 when this window added to the evidence
        self.resets = 0                           # times the evidence was forgotten (saturates)
        self.speed_q8 = 0                         # operating point of this window: Hz Q8
        self.conf_q8 = 0
        self.load_q8 = 0                          # load proxy, log2 Q8 (see _operating_point)
        self.op_axis = 0

    def _load_op(self, p, k):
        """Fill the operating-point ranges; True if the set has them (modes chosen by speed)."""
        if len(p["det_op_speed_q8"]) == 0:
            if len(p["det_op_load_q8"]):
                raise ValueError("det_op_load_q8 needs det_op_speed_q8")
            return False
        _pairs(p, "det_op_speed_q8", k, self.op_speed_q8, _SPEED_MAX)  # centres and gaps stay small ints
        if len(p["det_op_load_q8"]):
            _pairs(p, "det_op_load_q8", k, self.op_load_q8, _BIG)
        else:
            for m in range(k):
                self.op_load_q8[2 * m] = -_BIG
                self.op_load_q8[2 * m + 1] = _BIG
        return True

    def _load_seen(self, p, k):
        """Fill the speeds each mode was trained at (det_op_seen_q8, k x 2, Hz Q8); True if the
        set has them (the slow channel then gathers evidence only there)."""
        if len(p.get("det_op_seen_q8") or []) == 0:
            return False
        if not self.op_on:
            raise ValueError("det_op_seen_q8 needs det_op_speed_q8")
        _pairs(p, "det_op_seen_q8", k, self.op_seen_q8, _SPEED_MAX)
        return True

    def _load_slopes(self, p, key, n, out):
        """Fill out[0:n] with p[key]'s slopes (Q8, within +-FOLLOW_MAX); True if the set has them,
        False for [] or none (set-up only: the messages allocate)."""
        if len(p.get(key) or []) == 0:
            return False
        if not self.op_on:
            raise ValueError("%s needs det_op_speed_q8" % key)
        v = _ints(p, key, n)
        for j in range(n):
            if not -FOLLOW_MAX <= v[j] <= FOLLOW_MAX:
                raise ValueError("%s must hold ints in [-%d, %d]" % (key, FOLLOW_MAX, FOLLOW_MAX))
            out[j] = v[j]
        return True

    def _refs(self):
        """Each mode's reference speed for det_follow_q8 (modes.range_ref_q8, as training)."""
        for m in range(self.model.k if self.op_on else 0):
            self.op_ref_q8[m] = range_ref_q8(self.op_speed_q8[2 * m], self.op_speed_q8[2 * m + 1], self.tab)

    # -- events ---------------------------------------------------------------------------------
    def _set(self, new, reason):
        """Enter state new (if it differs), logging the event with this window's figures."""
        if new != self.state:
            self.events.put(self.t, self.state, new, reason, self.mode, self.feat, self.score_q8)
            self.state = new

    def _base_state(self):
        """State when no overlay (fault, learning) holds: a latched alarm, idle, the level, or
        unscored (running steadily off every trained operating point, the level normal)."""
        lv = self.alarm.level
        if lv == al.ALARM:
            return al.ALARM
        if not self.running or self.starting:
            return al.IDLE
        if lv == al.NORMAL and self.off_w >= self.hold_w:
            return al.UNSCORED
        return lv

    def _forget(self):
        """Forget the persistence evidence and the slow channel's (a sensor fault, learning)."""
        self._forget_evidence()
        self._ew_reset()

    def _forget_evidence(self):
        """Forget the persistence evidence only (a stop: each mode's slow average outlives it)."""
        self.alarm.reset()
        if self.resets < _BIG:
            self.resets += 1

    # -- commands -------------------------------------------------------------------------------
    def gap(self, s=0):
        """The next window does not follow the last one (samples lost; a gap between recordings
        at the desk): what the detector follows over consecutive windows starts again. s: whole
        seconds of signal missing (at most _GAP_MAX_S are counted), added to the clock that ages
        the slow channel's evidence."""
        self.half.cut()
        if s > 0:
            self._tick(s if s < _GAP_MAX_S else _GAP_MAX_S, 0)

    def _tick(self, s, ms):
        """Advance the clock by s seconds and ms milliseconds (ms < 2**20); past _CLOCK_REBASE
        it moves back by 2**28 with every mode's last-scored time and the half-order averages'
        last-fed ones (kept >= -2**28), so that every value stays a small int and every age stays
        right."""
        ms += self.clock_ms
        self.clock_s += s + ms // 1000
        self.clock_ms = ms % 1000
        if self.clock_s >= _CLOCK_REBASE:
            self.clock_s -= 1 << 28
            for m in range(KMAX):
                v = self.ew_seen_s[m] - (1 << 28)
                self.ew_seen_s[m] = v if v > -(1 << 28) else -(1 << 28)
            self.half.rebase(1 << 28)

    def ack(self, t_s):
        """Acknowledge a latched alarm. Returns the state."""
        self.t = t_s
        if self.alarm.level == al.ALARM and self.alarm.ack() != al.ALARM and \
                self.state == al.ALARM:
            self._set(self._base_state(), al.R_ACK)
        return self.state

    def learn(self, t_s):
        """Start learning (baseline, then modes). False if an alarm is latched or the sensor is
        faulty; the old model stays in use until learning completes."""
        self.t = t_s
        if self.alarm.level == al.ALARM or self.fault:
            return False
        self._forget()
        self.wb.reset()
        self.wm.reset()
        self.lsp.reset()
        self.learning = True
        self.phase = 0
        self.seen = 0
        self.ck = 0
        self.min_bb_vel_q16 = _BIG
        self._set(al.LEARNING, al.R_LEARN_START)
        return True

    def stop_learning(self, t_s):
        """Abandon learning; the model in use before learn() stays. Returns the state."""
        self.t = t_s
        if self.learning:
            self.learning = False
            self._set(self._base_state(), al.R_LEARN_STOP)
        return self.state

    # -- the window path ------------------------------------------------------------------------
    def _sensor_bad(self, f, dropped):
        """True if this window shows a sensor problem; fault_reason and fault_feat say which. The
        conclusive findings come first (a dropout run, a knock: each enters sensor_fault at once),
        then those that need fault_k windows in a row (flatline, clipping, DC offset, lost
        samples). One pass over the axes notes the first of the latter and any axis impulsive
        enough to be a knock; the knock's witness test runs only then."""
        pa = self.pa
        slow = 0                                  # first k-window finding, 0 none
        feat = -1
        loud = -1                                 # an axis whose crest factor is over its limit
        for a in range(self.axes):
            b = a * pa
            if f[b + fi.F_STUCK] > self.stuck_max[a]:
                self.fault_reason = al.R_DROPOUT
                self.fault_feat = b + fi.F_STUCK
                return True
            if f[b + fi.F_ZERO] > self.zero_max[a]:
                self.fault_reason = al.R_DROPOUT
                self.fault_feat = b + fi.F_ZERO
                return True
            if f[b + fi.F_CREST] > self.knock_crest_q12[a] and loud < 0:
                loud = a
            if slow == 0:
                m = f[b + fi.F_MEAN]
                if f[b + fi.F_RMS] < self.flat_rms_q8:
                    slow = al.R_FLAT
                    feat = b + fi.F_RMS
                elif f[b + fi.F_CLIP] > self.clip_max:
                    slow = al.R_CLIP
                    feat = b + fi.F_CLIP
                elif m < self.dc_lo_q8[a] or m > self.dc_hi_q8[a]:
                    slow = al.R_DC
                    feat = b + fi.F_MEAN
        if loud >= 0 and self._knock(f, loud):
            # an impulse to exactly zero (a run of zeros) on an axis that carries a large offset
            # (gravity), peak about the offset itself: a read that returned an empty frame
            b = self.knock_axis * pa
            m = f[b + fi.F_MEAN]
            m = m if m >= 0 else -m
            if f[b + fi.F_ZERO] >= 2 and m > f[b + fi.F_PEAK] >> 1:
                self.fault_reason = al.R_DROPOUT
                self.fault_feat = b + fi.F_ZERO
            else:
                self.fault_reason = al.R_COUPLING
                self.fault_feat = b + fi.F_PEAK
            return True
        if slow == 0 and dropped > self.drop_max:
            slow = al.R_DROP
        if slow:
            self.fault_reason = slow
            self.fault_feat = feat
            return True
        return False

    def _knock(self, f, first):
        """True if an axis from `first` on holds a knock (its index in knock_axis): its crest
        factor over knock_crest_q12 (an impulse no healthy vibration makes) and its peak over
        knock_ratio_q8 / 256 times the peak of every other axis (no other axis saw it, which a
        machine impact, carried by the housing to every axis, cannot do). Needs two axes or more.
        Peaks are clamped to 2**24 (Q8 counts) and compared in Q4, so (peak >> 4) << 8 < 2**29."""
        n = self.axes
        if n < 2:
            return False
        pa = self.pa
        for a in range(first, n):
            b = a * pa
            if f[b + fi.F_CREST] > self.knock_crest_q12[a]:
                lim_q4 = ((clamp(f[b + fi.F_PEAK], 1 << 24) >> 4) << 8) // self.knock_ratio_q8
                for c in range(n):
                    if c != a and clamp(f[c * pa + fi.F_PEAK], 1 << 24) >> 4 >= lim_q4:
                        break
                else:
                    self.knock_axis = a
                    return True
        return False

    def _count(self, why):
        self.why = why
        if self.n_why[why] < _BIG:
            self.n_why[why] += 1

    def _operating_point(self, f):
        """Speed (Hz Q8), its confidence (Q8) and the load proxy (log2 Q8) of this window, from
        the axis op_axis picks. Load proxy: the vane-pass line's power
        less 4 log2 of the speed, log2 Q8. By the pump affinity laws pressure pulsation, and so
        the force and acceleration at vane pass, grow as speed squared (power as speed**4), so
        what remains after dividing by speed**4 follows the hydraulic duty (flow against the
        best-efficiency point), and none of the five mechanical faults acts on that line
        (docs/detector.md, Operating point)."""
        pa = self.pa
        best = op_axis(f, self.axes, pa, self.pin_lo_q8, self.pin_hi_q8)
        self.op_axis = best
        b = best * pa
        sp = f[b + fi.F_SPEED]
        conf = f[b + fi.F_SPEED_CONF] if sp > 0 else -1
        sp = sp if sp < _SPEED_MAX else _SPEED_MAX
        self.speed_q8 = sp if sp > 0 and conf >= 0 else 0
        self.conf_q8 = conf if conf > 0 else 0
        v = clamp(f[b + fi.F_ORD_VANE], 1 << 28)
        if sp > 0 and v > fi.LOG2_ZERO_Q8:
            self.load_q8 = v - 4 * log2_q8(sp, self.tab)
        else:
            self.load_q8 = -_BIG

    def _steadiness(self, level_q8):
        """Push this window's speed and level into the steadiness span; W_SCORED (0) if the
        machine runs steadily, else why not: W_NO_SPEED (under half the span has a confident
        speed estimate), W_RUNDOWN (the newer half's median speed under the older half's by
        more than the tolerance, or the level fallen by more than its tolerance across the span)
        or W_UNSTEADY (the halves' medians apart by more than the tolerance, or the span not yet
        full). Medians, not extremes: a single window's estimate can miss by a bin, and the median
        of a span ignores such misses. Sets speed_q8 to the span's median (the operating point).
        Without operating points only the level is judged."""
        i = self.ring_i
        sp = self.speed_q8 if self.conf_q8 >= self.conf_min_q8 else 0
        self.ring_speed_q8[i] = sp
        self.ring_level_q8[i] = level_q8
        m = self.steady_m
        i += 1
        self.ring_i = i if i < m else 0
        if self.ring_n < m:
            self.ring_n += 1
            if self.ring_n < m:
                return W_UNSTEADY
        oldest = self.ring_i                      # the slot written m - 1 windows ago is next
        if self.ring_level_q8[oldest] - level_q8 > self.level_tol_q8:
            return W_RUNDOWN
        if not self.op_on:
            return W_SCORED
        h = m >> 1
        mid = self._median(oldest, m)
        self.speed_q8 = mid
        if mid == 0:
            return W_NO_SPEED
        if h == 0:
            return W_SCORED
        old = self._median(oldest, h)
        new = self._median(oldest + h, m - h)
        tol = (self.speed_tol_q12 * mid) >> 12
        if old - new > tol:
            return W_RUNDOWN
        if new - old > tol or old == 0 or new == 0:
            return W_UNSTEADY
        return W_SCORED

    def _median(self, first, count):
        """Median of the confident speeds (Hz Q8) in count ring slots from first (modulo the span),
        0 if fewer than half of them are confident. Insertion sort into a scratch array: count
        <= 32, allocation-free."""
        t = self.sort_q8
        m = self.steady_m
        k = 0
        for j in range(count):
            v = self.ring_speed_q8[(first + j) % m]
            if v > 0:
                i = k
                while i > 0 and t[i - 1] > v:
                    t[i] = t[i - 1]
                    i -= 1
                t[i] = v
                k += 1
        if 2 * k < count or k == 0:
            return 0
        return t[k >> 1]

    def mode_at(self, sp, ld):
        """The trained mode whose operating-point range holds the speed sp (Hz Q8) and load ld
        (log2 Q8) (the nearest speed centre if several do); -1 if none."""
        best = -1
        gap = _BIG
        for m in range(self.model.k):
            lo = self.op_speed_q8[2 * m]
            hi = self.op_speed_q8[2 * m + 1]
            if lo <= sp <= hi and self.op_load_q8[2 * m] <= ld <= self.op_load_q8[2 * m + 1]:
                g = sp - (lo >> 1) - (hi >> 1)
                g = g if g >= 0 else -g
                if g < gap:
                    gap = g
                    best = m
        return best

    def step(self, f, t_s, dropped):
        """One window: features f, time t_s (s), dropped samples. Returns the state."""
        self.t = t_s
        self._tick(0, self.win_ms)
        self.score_q8 = 0
        self.dist_q8 = 0
        self.zmax_q8 = 0
        self.smax_q8 = 0
        self.mode = -1
        self.feat = -1
        self.pushed = 0
        pa = self.pa
        # sensor health comes first: a bad window is never scored. A dropout run or a knock is
        # conclusive on its own (limits set for a false call once in a thousand months), so it
        # enters sensor_fault at once; the other checks need fault_k windows in a row.
        if dropped:
            self.half.cut()
        if self._sensor_bad(f, dropped):
            self.half.push(f, False, self.clock_s)
            self._count(W_FAULT)
            self.fault_good = 0
            if self.fault_reason == al.R_DROPOUT or self.fault_reason == al.R_COUPLING:
                self.fault_bad = self.fault_k
            elif self.fault_bad < self.fault_k:
                self.fault_bad += 1
            if self.fault_bad >= self.fault_k and not self.fault:
                self.fault = True
                self.feat = self.fault_feat
                self.learning = False             # abandoned: the old model stays
                self._forget()
                self._set(al.SENSOR_FAULT, self.fault_reason)
            return self.state
        self.fault_bad = 0
        if self.fault:
            # trusted again only after fault_clear_w healthy windows in a row: an intermittent
            # fault (a rattling mount, a loose connector) returns within seconds, and between its
            # bursts the signal is still the faulty sensor's
            self._count(W_FAULT)
            self.half.push(f, False, self.clock_s)
            if self.fault_good < _BIG:
                self.fault_good += 1
            if self.fault_good < self.fault_clear_w:
                return self.state
            self.fault = False
            self._restart()                       # treat like a restart: no transient alert
            self._set(self._base_state(), al.R_SENSOR_OK)
            return self.state
        # machine running? broadband level = largest axis velocity r.m.s.: the 1/f weighting
        # favours the machine's low-frequency lines over the sensor's flat noise
        vf = fi.F_VEL
        vel = f[vf]
        for a in range(1, self.axes):
            if f[a * pa + fi.F_VEL] > vel:
                vel = f[a * pa + fi.F_VEL]
                vf = a * pa + fi.F_VEL
        self.bb_vel_q16 = vel
        if vel < self.idle_vel_q16:
            self.half.push(f, False, self.clock_s)
            self._count(W_IDLE)
            self.running = False
            self._restart()
            self._forget_evidence()
            if not self.learning:
                self._set(self._base_state(), al.R_STOPPED)
            return self.state
        self.running = True
        # the ISO zone on every running window, so status shows it during the hold-off too; the
        # guard acts on it only past the start (below)
        self.zone = zone_of(vel, self.iso)
        if self.run_w < _BIG:
            self.run_w += 1
        self._operating_point(f)
        st = self._steadiness(log2_q8(vel if vel > 1 else 1, self.tab))
        if st == W_SCORED:
            if self.steady_w < _BIG:
                self.steady_w += 1
        else:
            self.steady_w = 0
        # the half orders' blocks take every running window past the start but a run-down: they
        # check the speed their taps were mixed at themselves (half_lines: 1/32 off the block's
        # mean, or a lone window beyond the steady tolerance, enters as zeros; two in a row
        # beyond it start a new block), where the estimate's steadiness trips on its own scatter
        # at a slow shaft (3 % a window at 2.8 bins, more once the half orders crowd the 1x) and
        # left a snapshot no 32 in a row
        self.half.push(f, not self.starting and st != W_RUNDOWN, self.clock_s)
        if self.starting:
            if self.steady_w < self.hold_w and self.run_w < self.hold_max_w:
                self._count(W_HOLD if st == W_SCORED else st)
                return self.state
            self.starting = False
            if not self.learning:
                self._set(self._base_state(), al.R_STARTED)
        if self.learning:
            self._learn_step(f, vf, st)
            return self.state
        m = -1
        why = st
        if st == W_SCORED and self.steady_w < self.hold_w:
            why = W_HOLD
        elif st == W_SCORED:
            if self.model.k == 0:
                why = W_NO_MODEL
            elif self.op_on:
                m = self.mode_at(self.speed_q8, self.load_q8)
                why = W_SCORED if m >= 0 else W_OFF_POINT
            else:
                self._transform(f)
                self.model.standardise(self.u, self.z)
                m = self.model.nearest(self.z)
        if why == W_OFF_POINT or why == W_NO_SPEED:
            if self.off_w < _BIG:
                self.off_w += 1
            self.off_reason = al.R_UNKNOWN_POINT if why == W_OFF_POINT else al.R_NO_SPEED
        elif why == W_SCORED:
            self.off_w = 0
        self._count(why)
        if m >= 0:
            self._score(f, m)
        if self.zone >= ZONE_C:
            self.feat = vf
        s = self.score_q8
        clr = (self.thr_alert_q8 * self.hyst_q8) >> 8
        lv = self.alarm.level
        # Evidence comes from judged windows: scored ones, or the ISO guard's when it is all there
        # is (no model) or when it speaks (zone C or D). A window that runs but is not scored (a
        # transient, an unknown point) says nothing about health, so it neither adds to the span
        # nor dilutes it; once raised, it does enter, so that a level can clear while unscored.
        if why == W_SCORED or why == W_NO_MODEL or self.zone >= ZONE_C or lv != al.NORMAL:
            self.alarm.update(1 if s >= self.thr_alert_q8 else 0, 1 if s >= self.thr_alarm_q8 else 0,
                              1 if s >= clr else 0, self.zone)
            self.pushed = 1
        if self.alarm.level != lv:
            reason = self.alarm.reason
        elif self.off_w >= self.hold_w:
            reason = self.off_reason
        else:
            reason = al.R_KNOWN_POINT
        self._set(self._base_state(), reason)
        if self.drift_shift and self.state == al.NORMAL and m >= 0 and s < clr:
            self._drift()
        return self.state

    def _restart(self):
        """The machine stopped (or the sensor came back): idle until steady again."""
        self.starting = True
        self.run_w = 0
        self.steady_w = 0
        self.off_w = 0
        self.ring_n = 0
        self.ring_i = 0

    def _score(self, f, m):
        """Score this window against mode m: the distance, the per-feature channel and the slow
        channel, combined as score = max(dist, zmax * zlam / 256, smax * slam / 256), Q8 spreads
        (zlam, slam: docs/detector.md, Score). zmax, smax <= 32767 and zlam, slam <= 4096, so
        the products stay < 2**27."""
        md = self.model
        self._transform(f)
        if self.follow_on:
            follow(self.u, self.follow_q8, 0, speed_offset_q8(self.speed_q8, self.op_ref_q8[m], self.tab), self.d)
        if self.mfollow_on:
            sp = self.speed_q8
            lo = self.op_seen_q8[2 * m]
            hi = self.op_seen_q8[2 * m + 1]
            sp = lo if sp < lo else (hi if sp > hi else sp)
            follow(self.u, self.mfollow_q8, m * self.d, speed_offset_q8(sp, self.op_ref_q8[m], self.tab), self.d)
        md.standardise(self.u, self.z)
        if self.op_on:
            self._mask_lines(f, m)
        dist = md.distance(self.z, m)
        self._slow(m)
        zc = (md.zmax_q8 * self.zlam_q8) >> 8
        sc = (self.smax_q8 * (self.mslam_q8[m] if self.mslam_on else self.slam_q8)) >> 8
        self.dist_q8 = dist
        self.zmax_q8 = md.zmax_q8
        self.score_q8 = dist if dist >= zc else zc
        self.mode = m
        self.feat = self.idx[md.drive]
        if sc > self.score_q8:
            self.score_q8 = sc
            self.feat = self.idx[self.s_drive]

    def _transform(self, f):
        """u from the window's features (modes.transform), the half-order prominences from this
        detector's own average (half_lines.HalfLines): 0 (no line over the floor) while it is
        unset, which _mask_lines then holds neutral when scoring."""
        transform(f, self.idx, self.logf, self.u, self.d, self.tab)
        for j in range(self.d):
            a = self.half_axis[j]
            if a >= 0:
                v = self.half.value[a]
                self.u[j] = v if v != UNSET else 0

    def _slow(self, m):
        """The slow channel: each feature's departure t_j (md.t_q8, within [-768, 32767] Q8)
        enters its EWMA, kept as ew_acc = EWMA * 2**L (L = ew_long), with weight 2**-k:
        ew_acc += (t << (L - k)) - (ew_acc >> k), so |ew_acc| <= 32767 * 2**L + 1 < 2**29
        (L <= 14). A set without det_wander_ms: k = ew_shift in every scored window (L = ew_shift
        too). With it, the averages run over running time. A mode scored again after time
        unwatched (a gap between snapshots, other modes, a stop) gains that time as credit
        (whole seconds past the first, ms); while it lasts a window stands for 2**r windows (r =
        L - ew_wshift) and spends the time of those beyond its own, for at most 2**ew_shift
        windows (the cap: a 60-s recording holds little more of a slow wander than a snapshot).
        A wandering feature (det_slow_wander 1: its level moves with the process for longer
        than a snapshot lasts, the 1x line with the load) then weighs 2**-ew_wshift, a
        flickering one (0: its departures are the window's own noise) 2**-ew_shift. In unbroken
        running (no credit) a window is its own share of the same running time: 2**-L and
        2**-(ew_shift + r) (ew_frun). So half-hourly snapshots average some five of them in a
        wandering feature and two in a flickering one, as over scored windows, and unbroken
        running an hour and some 11 min, not seconds of a wander slower than that, which
        training never saw as a whole. A line neutralised by _mask_lines carries no evidence:
        its EWMA holds. Each mode m keeps its own accumulators (ew_acc[m * d:(m + 1) * d]), the
        departures being against its centroid, so a return to a mode resumes its evidence,
        halved for every full SLOW_HALF_S seconds of the clock since the mode was last scored
        (an arithmetic shift: a negative accumulator tends to -1, an EWMA of -1/2**L LSB, which
        cannot drive smax). smax = the largest weighted EWMA (EWMA * sgain_q8 >> 8, Q8; |EWMA|
        <= 32767 and sgain <= 4096, so the product < 2**27), at least 0 (rises only, like
        zmax); s_drive its j. At a speed outside the span mode m was trained at
        (det_op_seen_q8) every EWMA holds and no credit is spent: the centroid is known only
        there, and a small lasting offset of a trim the model never saw is the operating point,
        not health; the evidence gathered so far is still read."""
        b = m * self.d
        acc = self.ew_acc
        away = self.clock_s - self.ew_seen_s[m]
        if away >= SLOW_HALF_S:
            h = away // SLOW_HALF_S
            h = h if h < 29 else 29                # |acc| < 2**29: 0 or -1 after 29
            for j in range(self.d):
                acc[b + j] >>= h
        cr = self.ew_credit_ms[m]
        if away > 1:
            # away can reach 2**29 s: capped before the product, which stays a small int
            cr += (away - 1) * 1000 if away <= self.ew_cap_s else self.ew_cap_ms
            cr = cr if cr < self.ew_cap_ms else self.ew_cap_ms
        self.ew_seen_s[m] = self.clock_s
        t = self.model.t_q8
        g = self.sgain_q8
        lg = self.ew_long
        ks = self.ew_shift
        op = self.op_on                           # held[] is set only with operating points
        sp = self.speed_q8
        seen = not self.seen_on or self.op_seen_q8[2 * m] <= sp <= self.op_seen_q8[2 * m + 1]
        kw = lg
        kf = self.ew_frun
        if seen and cr >= self.ew_spend_ms:
            cr -= self.ew_spend_ms
            kw = self.ew_wshift
            kf = ks
        self.ew_credit_ms[m] = cr
        top = 0
        self.s_drive = 0
        for j in range(self.d):
            if seen and not (op and self.held[j]):
                k = kw if self.wander[j] else kf
                acc[b + j] += (t[j] << (lg - k)) - (acc[b + j] >> k)
            e = ((acc[b + j] >> lg) * g[j]) >> 8
            if e > top:
                top = e
                self.s_drive = j
        self.smax_q8 = top

    def _ew_reset(self):
        """Start every mode's slow channel afresh (a sensor fault, learning: once each, so the
        loop over every mode costs nothing per window). A stop keeps it: a stop does not change
        the machine's condition."""
        for j in range(self.d * KMAX):
            self.ew_acc[j] = 0
        for m in range(KMAX):
            self.ew_credit_ms[m] = self.ew_cap_ms   # nothing known: like a long time unwatched

    def _mask_lines(self, f, m):
        """Order and envelope lines and the half-order prominence of an axis whose own 1x
        estimate (F_SPEED) lies more than the steady tolerance from the window's operating speed
        were read at the wrong places (each axis reads its lines, and keeps its half-order
        average, around its own estimate, and an axis where the rotating 1x is weak, the axial
        one, misses it often: on a slow shaft it can read its speed at the top of the range
        window after window, and the half orders of that are lines of no order of the shaft):
        they carry no evidence, so they are set to the mode's centre (a neutral term). So is a
        half-order prominence with no average yet (UNSET). Same rule in training
        (host_tools/fit/modes_fit.line_mask).
        op * tol_q12 < 2**17 * 2**12 = 2**29."""
        op = self.speed_q8
        tol = (self.speed_tol_q12 * op) >> 12
        b = m * self.d
        pa = self.pa
        for j in range(self.d):
            a = self.ord_axis[j]
            self.held[j] = 0
            h = self.half_axis[j]
            if h >= 0 and self.half.value[h] == UNSET:
                self.z[j] = self.model.c_q8[b + j]
                self.held[j] = 1
            if a >= 0:
                e = f[a * pa + fi.F_SPEED] - op
                if e > tol or e < -tol:
                    self.z[j] = self.model.c_q8[b + j]
                    self.held[j] = 1

    def _drift(self):
        """Move the baseline mean a 2**-shift step along this window's offset from its mode (so
        every mode shifts together), staying within drift_max spreads of the trained mean. The
        offset is clamped to 8 spreads so that offset * sd_q4 < 2**28."""
        m = self.model
        sh = self.drift_shift
        b = self.mode * self.d
        for j in range(self.d):
            off_q4 = (clamp(self.z[j] - m.c_q8[b + j], 2048) * m.sd_q4[j]) >> 8
            mu = m.mean_q4[j] + ((off_q4 + (1 << sh >> 1)) >> sh)
            lim = (self.drift_max_q8 * m.sd_q4[j]) >> 8
            m.mean_q4[j] = self.mean0_q4[j] + clamp(mu - self.mean0_q4[j], lim)

    # -- learning -------------------------------------------------------------------------------
    def _learn_step(self, f, vf, st):
        """One running window while learning. Only steady windows past the hold-off are learned;
        the ISO guard still acts: zone C or D windows are not learned, and if they raise an alert
        or alarm, learning is abandoned."""
        if self.zone >= ZONE_C:
            self.feat = vf
            self.pushed = 1
            if self.alarm.update(0, 0, 0, self.zone) != al.NORMAL:
                self.learning = False
                self._set(self._base_state(), self.alarm.reason)
            return
        self.alarm.update(0, 0, 0, self.zone)
        self.pushed = 1
        if st != W_SCORED or self.steady_w < self.hold_w:
            self._count(W_HOLD if st == W_SCORED else st)
            return
        self._count(W_LEARN)
        self._transform(f)
        d = self.d
        if self.phase == 0:
            for j in range(d):
                self.wb.add(j, self.u[j])
            if self.bb_vel_q16 < self.min_bb_vel_q16:
                self.min_bb_vel_q16 = self.bb_vel_q16
            self.seen += 1
            if self.seen >= self.base_n:
                c = self.cand
                for j in range(d):
                    c.mean_q4[j] = self.wb.mean_q(j, 4)
                    sd = sqrt_pow2(self.wb.var(j), 8)
                    c.sd_q4[j] = sd if sd > self.sd_floor_q4 else self.sd_floor_q4
                self.phase = 1
                self.seen = 0
            return
        c = self.cand
        z = self.z
        c.standardise(self.u, z)
        best_m = self._learn_mode()
        if best_m < 0:
            return
        wm = self.wm
        b = best_m * d
        for j in range(d):
            wm.add(b + j, z[j])
        self.seen += 1
        if self.seen >= self.mode_n:
            self._learn_finish()

    def _learn_mode(self):
        """Phase 2: the mode this window is learned into, by operating point; -1 if not learned.

        The first window decides: with a speed estimate, modes are operating points (a window
        joins the mode whose mean speed is within det_learn_op_q12 of its own, or opens a new
        one; windows without a speed are not learned); without one, a single mode and no
        operating points. Speeds are learned as Hz Q8 >> 3 (|x| <= 8191, Welford's input)."""
        sp = self.speed_q8 if self.conf_q8 >= self.conf_min_q8 else 0
        if self.ck == 0:
            self.l_op = sp > 0
        lop = self.lop_q8
        if not self.l_op:
            if self.ck == 0:
                self.ck = 1
            return 0
        if sp == 0:
            return -1
        x = sp >> 3
        x = x if x < 8191 else 8191
        best = -1
        gap = _BIG
        for m in range(self.ck):
            g = x - self.lsp.mi[m]
            g = g if g >= 0 else -g
            if g < gap:
                gap = g
                best = m
        if (best < 0 or gap > (self.learn_op_q12 * x) >> 12) and self.ck < KMAX:
            best = self.ck
            self.ck += 1
            lop[2 * best] = sp
            lop[2 * best + 1] = sp
        self.lsp.add(best, x)
        b = 2 * best
        if sp < lop[b]:
            lop[b] = sp
        if sp > lop[b + 1]:
            lop[b + 1] = sp
        return best

    def _learn_finish(self):
        """Keep the modes with at least min_n windows (the largest if none has), widen their
        speed ranges by half the new-mode distance (modes learned on the device are told apart
        by speed alone: the load proxy is left open), set conservative thresholds, put the new
        model in use."""
        c = self.cand
        wm = self.wm
        d = self.d
        lop = self.lop_q8
        top = 0
        for m in range(self.ck):
            if wm.n[m * d] > wm.n[top * d]:
                top = m
        k = 0
        for m in range(self.ck):
            n = wm.n[m * d]
            if n >= self.min_n or (m == top and wm.n[top * d] < self.min_n):
                for j in range(d):
                    c.c_q8[k * d + j] = wm.mean_q(m * d + j, 0)
                    s = sqrt_pow2(wm.var(m * d + j), 0)     # of z within +-Z_LIM: at most Z_LIM
                    c.s_q8[k * d + j] = s if s > self.s_floor_q8 else self.s_floor_q8
                w = (self.learn_op_q12 * lop[2 * m + 1]) >> 13
                self.op_speed_q8[2 * k] = lop[2 * m] - w
                self.op_speed_q8[2 * k + 1] = lop[2 * m + 1] + w
                self.op_seen_q8[2 * k] = lop[2 * m]
                self.op_seen_q8[2 * k + 1] = lop[2 * m + 1]
                self.op_load_q8[2 * k] = -_BIG
                self.op_load_q8[2 * k + 1] = _BIG
                k += 1
        c.k = k
        self.op_on = self.l_op
        self.seen_on = self.l_op                          # the speeds it learned each mode at
        self.follow_on = False                            # learned here: fixed centroids
        self.mfollow_on = False
        self.mslam_on = False                             # one weight for the modes learned here
        self._refs()
        self.thr_alert_q8 = (CHI_Q8[d - 1] * self.margin_q8) >> 8
        self.thr_alarm_q8 = (self.thr_alert_q8 * self.alarm_ratio_q8) >> 8
        f = self.min_bb_vel_q16 >> 2                      # a quarter of the quietest learned window
        if f > self.idle_vel_q16:
            self.idle_vel_q16 = f
        self.cand = self.model
        self.model = c
        for j in range(d):
            self.mean0_q4[j] = c.mean_q4[j]
        self.learning = False
        self._forget()
        self._set(self._base_state(), al.R_LEARN_DONE)

    def export(self):
        """The model and thresholds in use (baseline means as drifted), as parameter keys."""
        m = self.model
        kd = m.k * self.d
        op = self.op_on
        return {
            "det_base_mean_q4": list(m.mean_q4), "det_base_sd_q4": list(m.sd_q4),
            "det_modes": m.k, "det_mode_c_q8": list(m.c_q8)[:kd],
            "det_mode_s_q8": list(m.s_q8)[:kd],
            "det_op_speed_q8": list(self.op_speed_q8)[:2 * m.k] if op else [],
            "det_op_load_q8": list(self.op_load_q8)[:2 * m.k] if op else [],   # +-(2**30 - 1) = open
            "det_op_seen_q8": list(self.op_seen_q8)[:2 * m.k] if self.seen_on else [],
            "det_follow_q8": list(self.follow_q8) if self.follow_on else [],
            "det_mfollow_q8": list(self.mfollow_q8)[:kd] if self.mfollow_on else [],
            "det_mslam_q8": list(self.mslam_q8)[:m.k] if self.mslam_on else [],
            "det_thr_alert_q8": self.thr_alert_q8, "det_thr_alarm_q8": self.thr_alarm_q8,
            "det_idle_vel_q16": self.idle_vel_q16,
        }


def footprint_bytes(axes):
    """Heap bytes the arrays of a Detector on `axes` axes (det_axes, 1 to 8) take for the largest
    parameter set it accepts (array payloads; object headers and the instances' attribute tables
    come on top, and board.memory_need allows for them): d = DMAX scored features, KMAX modes, an
    evidence span of SPAN_MAX windows (one byte each), an event ring of event_ring.CAP_MAX events
    and the half-order stage. Array by array as Detector.__init__ makes them, so a smaller set
    takes less. Used by board profiles to check the heap budget."""
    d = DMAX
    # per scored feature, 5 int arrays (idx, mean0_q4, sgain_q8, u, z), the slow channel's
    # accumulators of every mode (ew_acc), 5 byte arrays (logf, ord_axis, held, half_axis,
    # wander), the int16 follow slopes and those of every mode (mfollow_q8)
    feat_b = 4 * 5 * d + 4 * d * KMAX + 5 * d + 2 * d + 2 * d * KMAX
    feat_b += 2 * KMAX                            # mslam_q8: each mode's slow weight, int16
    model_b = 2 * modes.footprint_bytes(d)        # the model in use and the one being learned
    learn_b = welford.footprint_bytes(d) + welford.footprint_bytes(d * KMAX) \
        + welford.footprint_bytes(KMAX)           # wb, wm, lsp
    op_b = 4 * 4 * 2 * KMAX + 3 * 4 * KMAX        # op_speed_q8, op_load_q8, op_seen_q8, lop_q8:
                                                  # lo, hi a mode; ew_seen_s, ew_credit_ms,
                                                  # op_ref_q8: one int
    axis_b = 5 * 4 * axes                         # dc_lo, dc_hi, stuck, zero, knock_crest
    steady_b = 3 * 4 * _STEADY_MAX                # ring_speed_q8, ring_level_q8, sort_q8
    misc_b = 4 * 3 + 2 * LOG2_N + 4 * len(WHY_NAMES)   # iso bounds, log2 table, n_why
    return (feat_b + model_b + learn_b + op_b + axis_b + steady_b + misc_b + SPAN_MAX
            + event_ring.footprint_bytes(event_ring.CAP_MAX) + half_lines.footprint_bytes(axes))
