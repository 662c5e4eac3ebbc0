"""edgevib detector: one per device, the same code on the host for replay and training.

Per window the caller passes the feature vector and gets back the detector state; the detector
checks sensor health first, then whether the machine runs, then scores the window against the
learned operating modes and the ISO 10816-3 velocity guard, and runs the alert/alarm logic.
Integer-only and allocation-free in step(), ack() and learn() (checked under heap_lock on
MicroPython); every array is made once, in the constructor, from the parameter set.

API
    det = Detector(params)          # params: dict, keys in PARAM_KEYS below (default_params())
    state = det.step(feats, t_s, dropped)
        feats   array('i') laid out as firmware_py.dsp.feature_index (axes x per_axis(n_bands))
        t_s     int, seconds (any epoch, < 2**30); only copied into events
        dropped samples dropped since the previous window
      after it: det.state, det.score_q8 (Q8 spreads of the nearest mode, 0 without a model),
      det.mode (nearest mode, -1 none), det.feat (flat feature index that drove the score or the
      guard or the fault, -1 none), det.zone (ISO zone 0..3 = A..D), det.bb_vel_q16 (broadband level:
      largest axis F_VEL, counts/s Q16, the quantity of the idle floor and the ISO guard).
    det.ack(t_s)       acknowledge a latched alarm; det.learn(t_s) start learning (False if
                       refused: alarm latched or sensor fault); det.stop_learning(t_s) abandon it
    det.events         EventRing (firmware_py/detect/event_ring.py): i = det.events.pop() -> slot or -1;
                       read det.events.t[i], old[i], new[i], reason[i], mode[i], feat[i], score_q8[i]
    det.export()       the learned model as parameter keys (allocates; not for the window path)
    States and reasons: firmware_py/detect/alarm.py (STATE_NAMES, REASON_NAMES).
"""
from array import array
from micropython import const
from firmware_py.dsp import feature_index as fi
from firmware_py.detect import alarm as al
from firmware_py.detect.alarm import Alarm
from firmware_py.detect.event_ring import EventRing
from firmware_py.detect.iso_zones import zone_of, bounds_in_vel_units, ZONE_C
from firmware_py.detect.modes import ModeModel, KMAX, DMAX, is_log_field, transform, clamp
from firmware_py.dsp.tables import log2_table
from firmware_py.detect.welford import Welford, N_MAX
from firmware_py.dsp.fixmath import sqrt_pow2

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
# names only: on the device, comments cost nothing and strings cost RAM.
PARAM_KEYS = (
    "det_axes",             # axes in the feature vector
    "det_bands",            # band powers per axis
    "det_feat",             # flat feature indices scored (<= 64), axis * per_axis + field
    "det_base_mean_q4",     # baseline mean per scored feature, log2 Q8 units, Q4
    "det_base_sd_q4",       # baseline standard deviation per scored feature, log2 Q8 units, Q4
    "det_modes",            # number of operating modes k (0 = no model: ISO guard only)
    "det_mode_c_q8",        # k x d centroids, mode-major, Q8 baseline spreads
    "det_mode_s_q8",        # k x d per-mode spreads, Q8 baseline spreads
    "det_thr_alert_q8",     # score at or over which a window counts toward an alert, Q8 spreads
    "det_thr_alarm_q8",     # score at or over which a window counts toward an alarm, Q8 spreads
    "det_hyst_q8",          # clear threshold as a fraction of det_thr_alert_q8, Q8 (205 = 0.8)
    "det_k",                # windows over threshold, of the last det_n, that raise
    "det_n",                # persistence window length (<= 30)
    "det_dwell",            # least windows in alert or alarm before it can clear
    "det_idle_vel_q16",     # idle when the largest axis F_VEL is under this, counts/s Q16
    "det_startup_n",        # windows held off after the machine starts (no scoring, no learning)
    "det_iso_group",        # ISO 10816-3 machine group (1 or 2), for the record
    "det_iso_found",        # foundation, 'rigid' or 'flexible', for the record
    "det_iso_bounds",       # zone boundaries A/B, B/C, C/D in F_VEL units (counts/s Q16)
    "det_flat_rms_q8",      # sensor flatline: any axis F_RMS under this, Q8 counts
    "det_clip_max",         # sensor clipping: any axis F_CLIP over this, samples per window
    "det_dc_lo_q8",         # per axis, least healthy F_MEAN, Q8 counts
    "det_dc_hi_q8",         # per axis, greatest healthy F_MEAN, Q8 counts
    "det_drop_max",         # sensor: more dropped samples than this in one window is a fault
    "det_fault_k",          # consecutive bad (good) windows to enter (leave) sensor_fault
    "det_sd_floor_q4",      # least baseline spread, log2 Q8 units, Q4
    "det_s_floor_q8",       # least per-mode spread, Q8 baseline spreads
    "det_learn_base_n",     # learning: windows for the baseline (phase 1, <= 65535)
    "det_learn_mode_n",     # learning: windows for the operating modes (phase 2, <= 65535)
    "det_learn_radius_q8",  # learning: new-mode radius, r.m.s. per feature, Q8 spreads
    "det_learn_min_n",      # learning: modes with fewer windows are dropped
    "det_learn_margin_q8",  # learning: alert threshold = CHI_Q8[d-1] * margin, Q8
    "det_learn_alarm_q8",   # learning: alarm threshold = alert threshold * this, Q8
    "det_drift_shift",      # drift: step 2**-shift per normal window; 0 off
    "det_drift_max_q8",     # drift: bound from the trained mean, Q8 spreads
    "det_event_n",          # capacity of the event ring
)


def default_feature_list(axes, n_bands):
    """Scored features by default: every field of every axis but the mean and the clip count."""
    pa = fi.per_axis(n_bands)
    out = []
    for a in range(axes):
        for f in range(pa):
            if f != fi.F_MEAN and f != fi.F_CLIP:
                out.append(a * pa + f)
    return out


def default_params(axes, n_bands, vel_per_mm_s, group=2, foundation="rigid", full_scale=32767):
    """A conservative parameter set with no model yet (run learn() on the device, or train).

    vel_per_mm_s: F_VEL units (counts/s Q16) per mm/s, from the calibration. full_scale: the
    converter's full scale in counts; the healthy DC range defaults to +-7/8 of it. The default
    guard is group 2 rigid, the lowest boundaries of the table (the cautious choice). The default
    idle floor is 0.05 mm/s, 1/28 of the lowest zone A/B boundary (1.4 mm/s): low enough that a
    running pump is not taken for a stopped one, so the guard is not blinded before training (the
    cautious side); a noisy MEMS sensor on a stopped pump may read more (an ADXL345 about
    0.13-0.39 mm/s in the demo) and show running until trained or learned.
    """
    feat = default_feature_list(axes, n_bands)
    dc = (full_scale * 7 // 8) << 8
    return {
        "det_axes": axes, "det_bands": n_bands, "det_feat": feat,
        "det_base_mean_q4": [0] * len(feat), "det_base_sd_q4": [256] * len(feat),
        "det_modes": 0, "det_mode_c_q8": [], "det_mode_s_q8": [],
        "det_thr_alert_q8": 5 * 256, "det_thr_alarm_q8": 8 * 256, "det_hyst_q8": 205,
        "det_k": 3, "det_n": 5, "det_dwell": 10,
        "det_idle_vel_q16": vel_per_mm_s // 20, "det_startup_n": 10,   # 0.05 mm/s
        "det_iso_group": group, "det_iso_found": foundation,
        "det_iso_bounds": bounds_in_vel_units(group, foundation, vel_per_mm_s),
        "det_flat_rms_q8": 64, "det_clip_max": 0,
        "det_dc_lo_q8": [-dc] * axes, "det_dc_hi_q8": [dc] * axes,
        "det_drop_max": 0, "det_fault_k": 3,
        "det_sd_floor_q4": 128, "det_s_floor_q8": 64,
        "det_learn_base_n": 300, "det_learn_mode_n": 600, "det_learn_radius_q8": 320,
        "det_learn_min_n": 30, "det_learn_margin_q8": 320, "det_learn_alarm_q8": 384,
        "det_drift_shift": 0, "det_drift_max_q8": 128,
        "det_event_n": 32,
    }


def _int(p, key, lo, hi):
    v = p[key]
    if not isinstance(v, int) or not lo <= v <= hi:
        raise ValueError("%s must be an int in [%d, %d]" % (key, lo, hi))
    return v


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
    """See the module docstring."""

    def __init__(self, p):
        for key in PARAM_KEYS:
            if key not in p:
                raise ValueError("parameter set lacks " + key)
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
        self.model = ModeModel(d)
        self.model.load(p["det_base_mean_q4"], p["det_base_sd_q4"], _int(p, "det_modes", 0, KMAX),
                        p["det_mode_c_q8"], p["det_mode_s_q8"], self.sd_floor_q4, self.s_floor_q8)
        self.cand = ModeModel(d)                  # the model being learned
        self.mean0_q4 = array("i", self.model.mean_q4)  # trained baseline, the drift anchor
        self.thr_alert_q8 = _int(p, "det_thr_alert_q8", 1, 1 << 16)
        self.thr_alarm_q8 = _int(p, "det_thr_alarm_q8", 1, 1 << 16)
        self.hyst_q8 = _int(p, "det_hyst_q8", 1, 256)
        self.alarm = Alarm(_int(p, "det_k", 1, 30), _int(p, "det_n", 1, 30),
                           _int(p, "det_dwell", 0, 1 << 20))
        self.idle_vel_q16 = _int(p, "det_idle_vel_q16", 0, _BIG)
        self.startup_n = _int(p, "det_startup_n", 0, 1 << 20)
        self.iso = _ints(p, "det_iso_bounds", 3)
        if not 0 < self.iso[0] <= self.iso[1] <= self.iso[2]:
            raise ValueError("det_iso_bounds must be positive and ascending")
        self.flat_rms_q8 = _int(p, "det_flat_rms_q8", 0, _BIG)
        self.clip_max = _int(p, "det_clip_max", 0, _BIG)
        self.dc_lo_q8 = _ints(p, "det_dc_lo_q8", axes)
        self.dc_hi_q8 = _ints(p, "det_dc_hi_q8", axes)
        self.drop_max = _int(p, "det_drop_max", 0, _BIG)
        self.fault_k = _int(p, "det_fault_k", 1, 1 << 20)
        self.base_n = _int(p, "det_learn_base_n", 2, N_MAX)
        self.mode_n = _int(p, "det_learn_mode_n", 1, N_MAX)
        r = _int(p, "det_learn_radius_q8", 1, 2048)
        self.r2d_q8 = ((r * r) >> 8) * d          # squared radius times d, Q8 spreads squared
        self.min_n = _int(p, "det_learn_min_n", 1, N_MAX)
        self.margin_q8 = _int(p, "det_learn_margin_q8", 256, 1 << 12)
        self.alarm_ratio_q8 = _int(p, "det_learn_alarm_q8", 256, 1 << 12)
        self.drift_shift = _int(p, "det_drift_shift", 0, 20)
        self.drift_max_q8 = _int(p, "det_drift_max_q8", 0, 1 << 10)
        self.events = EventRing(_int(p, "det_event_n", 1, 4096))
        self.tab = log2_table()
        self.u = array("i", bytes(4 * d))
        self.z = array("i", bytes(4 * d))
        self.wb = Welford(d)                      # learning phase 1: baseline
        self.wm = Welford(d * KMAX)               # learning phase 2: per-mode statistics
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
        self.running = False                      # broadband velocity at or over the idle floor
        self.hold = self.startup_n
        self.state = al.IDLE
        self.t = 0
        self.score_q8 = 0
        self.mode = -1
        self.feat = -1
        self.zone = 0
        self.bb_vel_q16 = 0

    # -- events ---------------------------------------------------------------------------------
    def _set(self, new, reason):
        """Enter state new (if it differs), logging the event with this window's figures."""
        if new != self.state:
            self.events.put(self.t, self.state, new, reason, self.mode, self.feat, self.score_q8)
            self.state = new

    def _base_state(self):
        """State when no overlay (fault, learning) holds: a latched alarm, idle, or the level."""
        lv = self.alarm.level
        if lv == al.ALARM:
            return al.ALARM
        if not self.running or self.hold > 0:
            return al.IDLE
        return lv

    # -- commands -------------------------------------------------------------------------------
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
        self.alarm.reset()
        self.wb.reset()
        self.wm.reset()
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
        """True if this window shows a sensor problem; fault_reason and fault_feat say which."""
        pa = self.pa
        for a in range(self.axes):
            b = a * pa
            if f[b + fi.F_RMS] < self.flat_rms_q8:
                self.fault_reason = al.R_FLAT
                self.fault_feat = b + fi.F_RMS
                return True
            if f[b + fi.F_CLIP] > self.clip_max:
                self.fault_reason = al.R_CLIP
                self.fault_feat = b + fi.F_CLIP
                return True
            m = f[b + fi.F_MEAN]
            if m < self.dc_lo_q8[a] or m > self.dc_hi_q8[a]:
                self.fault_reason = al.R_DC
                self.fault_feat = b + fi.F_MEAN
                return True
        if dropped > self.drop_max:
            self.fault_reason = al.R_DROP
            self.fault_feat = -1
            return True
        return False

    def step(self, f, t_s, dropped):
        """One window: features f, time t_s (s), dropped samples. Returns the state."""
        self.t = t_s
        self.score_q8 = 0
        self.mode = -1
        self.feat = -1
        pa = self.pa
        # sensor health comes first: a bad window is never scored
        if self._sensor_bad(f, dropped):
            self.fault_good = 0
            self.fault_bad += 1 if self.fault_bad < self.fault_k else 0
            if self.fault_bad >= self.fault_k and not self.fault:
                self.fault = True
                self.feat = self.fault_feat
                self.learning = False             # abandoned: the old model stays
                self.alarm.reset()
                self._set(al.SENSOR_FAULT, self.fault_reason)
            return self.state
        self.fault_bad = 0
        if self.fault:
            self.fault_good += 1
            if self.fault_good < self.fault_k:
                return self.state
            self.fault = False
            self.hold = self.startup_n            # treat like a restart: no transient alert
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
            self.running = False
            self.hold = self.startup_n
            self.alarm.reset()
            if not self.learning:
                self._set(self._base_state(), al.R_STOPPED)
            return self.state
        self.running = True
        if self.hold > 0:
            self.hold -= 1
            if self.hold > 0:
                return self.state
            if not self.learning:
                self._set(self._base_state(), al.R_STARTED)
            return self.state
        if self.state == al.IDLE:
            self._set(self._base_state(), al.R_STARTED)
        # the ISO guard: the same largest axis velocity
        self.zone = zone_of(vel, self.iso)
        transform(f, self.idx, self.logf, self.u, self.d, self.tab)
        if self.learning:
            self._learn_step(vf)
            return self.state
        m = self.model
        if m.k > 0:
            m.standardise(self.u, self.z)
            self.score_q8 = m.score(self.z)
            self.mode = m.mode
            self.feat = self.idx[m.drive]
        if self.zone >= ZONE_C:
            self.feat = vf
        s = self.score_q8
        clr = (self.thr_alert_q8 * self.hyst_q8) >> 8
        self.alarm.update(1 if s >= self.thr_alert_q8 else 0, 1 if s >= self.thr_alarm_q8 else 0,
                          1 if s >= clr else 0, self.zone)
        self._set(self._base_state(), self.alarm.reason)
        if self.drift_shift and self.state == al.NORMAL and s < clr and m.k > 0:
            self._drift()
        return self.state

    def _drift(self):
        """Move the baseline mean a 2**-shift step along this window's offset from its nearest
        mode (so every mode shifts together), staying within drift_max spreads of the trained
        mean. The offset is clamped to 8 spreads so that offset * sd_q4 < 2**28."""
        m = self.model
        sh = self.drift_shift
        b = m.mode * self.d
        for j in range(self.d):
            off_q4 = (clamp(self.z[j] - m.c_q8[b + j], 2048) * m.sd_q4[j]) >> 8
            mu = m.mean_q4[j] + ((off_q4 + (1 << sh >> 1)) >> sh)
            lim = (self.drift_max_q8 * m.sd_q4[j]) >> 8
            m.mean_q4[j] = self.mean0_q4[j] + clamp(mu - self.mean0_q4[j], lim)

    # -- learning -------------------------------------------------------------------------------
    def _learn_step(self, vf):
        """One running window while learning. The ISO guard still acts: zone C or D windows are
        not learned, and if they raise an alert or alarm, learning is abandoned."""
        if self.zone >= ZONE_C:
            self.feat = vf
            if self.alarm.update(0, 0, 0, self.zone) != al.NORMAL:
                self.learning = False
                self._set(self._base_state(), self.alarm.reason)
            return
        self.alarm.update(0, 0, 0, self.zone)
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
        wm = self.wm
        best = -1
        best_m = 0
        for m in range(self.ck):
            b = m * d
            s = 0
            for j in range(d):
                t = z[j] - wm.mi[b + j]           # |t| < 2**14, so t*t < 2**28
                s += (t * t) >> 8
            if best < 0 or s < best:
                best = s
                best_m = m
        if (best < 0 or best > self.r2d_q8) and self.ck < KMAX:
            best_m = self.ck
            self.ck += 1
        b = best_m * d
        for j in range(d):
            wm.add(b + j, z[j])
        self.seen += 1
        if self.seen >= self.mode_n:
            self._learn_finish()

    def _learn_finish(self):
        """Keep the modes with at least min_n windows (the largest if none has), set
        conservative thresholds, put the new model in use."""
        c = self.cand
        wm = self.wm
        d = self.d
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
                    s = sqrt_pow2(wm.var(m * d + j), 0)
                    c.s_q8[k * d + j] = s if s > self.s_floor_q8 else self.s_floor_q8
                k += 1
        c.k = k
        self.thr_alert_q8 = (CHI_Q8[d - 1] * self.margin_q8) >> 8
        self.thr_alarm_q8 = (self.thr_alert_q8 * self.alarm_ratio_q8) >> 8
        f = self.min_bb_vel_q16 >> 2              # a quarter of the quietest learned window
        if f > self.idle_vel_q16:
            self.idle_vel_q16 = f
        self.cand = self.model
        self.model = c
        for j in range(d):
            self.mean0_q4[j] = c.mean_q4[j]
        self.learning = False
        self.alarm.reset()
        self._set(self._base_state(), al.R_LEARN_DONE)

    def export(self):
        """The model and thresholds in use (baseline means as drifted), as parameter keys."""
        m = self.model
        kd = m.k * self.d
        return {
            "det_base_mean_q4": list(m.mean_q4), "det_base_sd_q4": list(m.sd_q4),
            "det_modes": m.k, "det_mode_c_q8": list(m.c_q8)[:kd],
            "det_mode_s_q8": list(m.s_q8)[:kd],
            "det_thr_alert_q8": self.thr_alert_q8, "det_thr_alarm_q8": self.thr_alarm_q8,
            "det_idle_vel_q16": self.idle_vel_q16,
        }
