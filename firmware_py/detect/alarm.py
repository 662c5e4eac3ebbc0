"""Detector states, event reasons, and the alert/alarm logic in running time: raise an alert when
at least k of the last L evaluated windows are over the alert threshold (L and k from seconds
and a fraction, so the rule means the same on any board), escalate to an alarm only after the
alert has persisted, clear with hysteresis and a minimum dwell, latch an alarm until it is
acknowledged. Allocation-free after construction.

Entry points: windows_for() (time to analysed windows), Evidence (the span of per-window flags),
Alarm (the level)."""
from micropython import const
from firmware_py.detect.iso_zones import ZONE_C, ZONE_D

# states (the order is part of the event format)
NORMAL = const(0)
ALERT = const(1)
ALARM = const(2)
IDLE = const(3)
SENSOR_FAULT = const(4)
LEARNING = const(5)
UNSCORED = const(6)        # running steadily, but at an operating point no mode was trained for
STATE_NAMES = ("normal", "alert", "alarm", "idle", "sensor_fault", "learning", "unscored")

# event reasons
R_SCORE = const(1)         # learned score over threshold on k of the last L windows
R_ISO_C = const(2)         # velocity in ISO zone C on k of the last L windows
R_ISO_D = const(3)         # velocity in ISO zone D on k of the last L windows
R_CLEAR = const(4)         # fewer than k of the last L windows over the clear threshold, dwell met
R_ACK = const(5)           # alarm acknowledged after its condition had cleared
R_STOPPED = const(6)       # broadband level under the idle floor
R_STARTED = const(7)       # running again, steady for the hold-off
R_FLAT = const(8)          # sensor: output stuck (r.m.s. under the flatline floor)
R_CLIP = const(9)          # sensor: samples at full scale
R_DC = const(10)           # sensor: DC offset outside the sensor's range
R_DROP = const(11)         # sensor: too many dropped samples
R_SENSOR_OK = const(12)    # sensor healthy again on k consecutive windows
R_LEARN_START = const(13)  # learning commanded
R_LEARN_DONE = const(14)   # learning finished, new model in use
R_LEARN_STOP = const(15)   # learning stopped by command, old model kept
R_DROPOUT = const(16)      # sensor: a run of identical or zero samples no healthy sensor makes
R_UNKNOWN_POINT = const(17)  # running steadily at an operating point no mode covers
R_NO_SPEED = const(18)     # running, but no confident speed estimate to choose a mode by
R_KNOWN_POINT = const(19)  # back at a trained operating point: scored again
R_ESCALATE = const(20)     # the alert persisted for the escalation time and the alarm rule holds
R_COUPLING = const(21)     # sensor: an impulse on one axis that the others do not see (loose mount)
REASON_NAMES = ("", "score", "iso_c", "iso_d", "clear", "ack", "stopped", "started", "flatline",
                "clipping", "dc_offset", "dropped", "sensor_ok", "learn_start", "learn_done",
                "learn_stop", "dropout", "unknown_point", "no_speed", "known_point", "escalate",
                "coupling")

_CAP = const(1 << 29)
SPAN_MAX = const(4096)     # most windows in an evidence span (one byte each)

# flag bits of one evaluated window in the span
_A = const(1)              # over the alert threshold, or ISO zone C
_M = const(2)              # over the alarm threshold, or ISO zone D
_C = const(4)              # over the clear threshold, or ISO zone C
_D = const(8)              # ISO zone D
_Z = const(16)             # ISO zone C or D


def windows_for(ms, n, fs_hz, every):
    """Analysed windows that cover ms milliseconds of running time (at least 1): a window of n
    samples at fs_hz, one window analysed in `every`. Construction only (may make a big int)."""
    per = 1000 * n * every                      # ms * fs_hz / per windows
    w = (ms * fs_hz + per - 1) // per
    return w if w > 0 else 1


class Evidence:
    """The flags of the last L evaluated windows in a ring of bytes, with a count per flag."""

    def __init__(self, span):
        if not 1 <= span <= SPAN_MAX:
            raise ValueError("evidence span must be 1..%d windows" % SPAN_MAX)
        self.span = span
        self.ring = bytearray(span)
        self.clear()

    def clear(self):
        """Forget every window (stop, sensor fault, learning)."""
        r = self.ring
        for i in range(self.span):
            r[i] = 0
        self.head = 0
        self.filled = 0       # windows pushed since the last clear, up to span
        self.n_a = 0
        self.n_m = 0
        self.n_c = 0
        self.n_d = 0
        self.n_z = 0

    def push(self, bits):
        """Add one window's flags, dropping the oldest once the span is full."""
        r = self.ring
        h = self.head
        old = r[h]
        self.n_a += (bits & _A) - (old & _A)
        self.n_m += ((bits & _M) - (old & _M)) >> 1
        self.n_c += ((bits & _C) - (old & _C)) >> 2
        self.n_d += ((bits & _D) - (old & _D)) >> 3
        self.n_z += ((bits & _Z) - (old & _Z)) >> 4
        r[h] = bits
        h += 1
        self.head = h if h < self.span else 0
        if self.filled < self.span:
            self.filled += 1


class Alarm:
    """Machine-health level (NORMAL, ALERT, ALARM) from per-window evidence.

    span: L windows of evidence; k: windows of the L that must be over; escalate: least windows
    in ALERT before a score can make it an ALARM; dwell: least windows in a level before it can
    clear, and in NORMAL after a clear before it can raise again (with scores far over both
    thresholds the count of the span alone can sit at k, and clear and raise would take turns
    window by window). After a restart or a sensor fault (which clear the evidence) the windows
    not yet seen count as not over: k windows over raise at once, whether or not L have been seen
    since. That is the full-span rule with the missing windows under the threshold, so it raises
    only what the full span would raise once filled, only sooner (a snapshot of 10 s scores
    about 7 s after its hold-off); clearing and escalation still wait for a full span. After
    update() or ack(), `reason` says why the level last changed.
    """

    def __init__(self, span, k, escalate, dwell):
        if not 1 <= k <= span:
            raise ValueError("persistence needs 1 <= k <= span")
        self.ev = Evidence(span)
        self.k = k
        self.escalate = escalate
        self.dwell_min = dwell
        self.level = NORMAL
        self.dwell = 0
        self.acked = False
        self.reason = 0
        self.settling = False     # cleared less than dwell windows ago: no raise yet

    def reset(self):
        """Forget the evidence (machine stopped, sensor fault, learning); a latched alarm stays."""
        self.ev.clear()
        if self.level == ALERT:
            self.level = NORMAL
        self.dwell = 0
        self.settling = False

    def _cleared(self):
        """The raise rule with hysteresis: fewer than k windows of a full span over the clear
        threshold (the raise statistic, the k-th largest score of the span, has fallen under it),
        and the dwell met. Requiring most of the span under it (or all) kept an alert on for hours
        on a pump whose scores merely sat near the threshold, and a false alert that never clears
        hides the next real one."""
        ev = self.ev
        return ev.filled == ev.span and ev.n_c < self.k and self.dwell >= self.dwell_min

    def update(self, over_alert, over_alarm, over_clear, zone):
        """One evaluated window. over_*: learned score at or over the alert, alarm and clear
        thresholds (0/1); zone: ISO zone. Zone C counts as over the alert and clear thresholds;
        zone D also as over the alarm threshold, and k windows of zone D raise an alarm at once."""
        bits = 0
        if over_alert or zone >= ZONE_C:
            bits |= _A
        if over_alarm or zone >= ZONE_D:
            bits |= _M
        if over_clear or zone >= ZONE_C:
            bits |= _C
        if zone >= ZONE_C:
            bits |= _Z
        if zone >= ZONE_D:
            bits |= _D
        ev = self.ev
        ev.push(bits)
        if self.dwell < _CAP:
            self.dwell += 1
        full = ev.filled == ev.span
        lv = self.level
        if self.settling and self.dwell >= self.dwell_min:
            self.settling = False
        if lv != ALARM and ev.n_d >= self.k:
            self._go(ALARM, R_ISO_D)
            self.acked = False
        elif lv == ALERT and full and ev.n_m >= self.k and self.dwell >= self.escalate:
            self._go(ALARM, R_ESCALATE)
            self.acked = False
        elif lv == NORMAL and not self.settling and ev.n_a >= self.k:
            self._go(ALERT, R_ISO_C if ev.n_z >= self.k else R_SCORE)
        elif lv == ALERT and self._cleared():
            self._go(NORMAL, R_CLEAR)
        elif lv == ALARM and self.acked and self._cleared():
            self._go(NORMAL, R_CLEAR)
        return self.level

    def ack(self):
        """Acknowledge a latched alarm: it clears now if its condition has, else when it does."""
        if self.level == ALARM:
            self.acked = True
            if self._cleared():
                self._go(NORMAL, R_ACK)
        return self.level

    def _go(self, level, reason):
        self.level = level
        self.reason = reason
        self.dwell = 0
        self.settling = level == NORMAL
