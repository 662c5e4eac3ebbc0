"""Detector states, event reasons, and the alert/alarm logic: raise on k of the last n windows,
clear with hysteresis and a minimum dwell, latch an alarm until it is acknowledged.

Entry points: KofN, Alarm."""
from micropython import const
from firmware_py.detect.iso_zones import ZONE_C, ZONE_D

# states (the order is part of the event format)
NORMAL = const(0)
ALERT = const(1)
ALARM = const(2)
IDLE = const(3)
SENSOR_FAULT = const(4)
LEARNING = const(5)
STATE_NAMES = ("normal", "alert", "alarm", "idle", "sensor_fault", "learning")

# event reasons
R_SCORE = const(1)         # learned score over threshold on k of n windows
R_ISO_C = const(2)         # velocity in ISO zone C on k of n windows
R_ISO_D = const(3)         # velocity in ISO zone D on k of n windows
R_CLEAR = const(4)         # under the clear threshold on all of the last n windows, dwell met
R_ACK = const(5)           # alarm acknowledged after its condition had cleared
R_STOPPED = const(6)       # broadband level under the idle floor
R_STARTED = const(7)       # running again and the start-up hold-off is over
R_FLAT = const(8)          # sensor: output stuck (r.m.s. under the flatline floor)
R_CLIP = const(9)          # sensor: samples at full scale
R_DC = const(10)           # sensor: DC offset outside the sensor's range
R_DROP = const(11)         # sensor: too many dropped samples
R_SENSOR_OK = const(12)    # sensor healthy again on k consecutive windows
R_LEARN_START = const(13)  # learning commanded
R_LEARN_DONE = const(14)   # learning finished, new model in use
R_LEARN_STOP = const(15)   # learning stopped by command, old model kept
REASON_NAMES = ("", "score", "iso_c", "iso_d", "clear", "ack", "stopped", "started", "flatline",
                "clipping", "dc_offset", "dropped", "sensor_ok", "learn_start", "learn_done",
                "learn_stop")

_DWELL_MAX = const(1 << 29)


class KofN:
    """Flags of the last n <= 30 windows in the bits of a small int, with their count."""

    def __init__(self, k, n):
        if not 1 <= k <= n <= 30:
            raise ValueError("persistence needs 1 <= k <= n <= 30")
        self.k = k
        self.n = n
        self.keep = (1 << (n - 1)) - 1   # bits that survive a shift
        self.bits = 0
        self.cnt = 0

    def clear(self):
        self.bits = 0
        self.cnt = 0

    def push(self, flag):
        """Record this window's flag (0 or 1); True if at least k of the last n are set."""
        self.cnt += flag - ((self.bits >> (self.n - 1)) & 1)
        self.bits = ((self.bits & self.keep) << 1) | flag
        return self.cnt >= self.k


class Alarm:
    """Machine-health level (NORMAL, ALERT, ALARM) from per-window evidence.

    After update() or ack(), `reason` says why the level last changed.
    """

    def __init__(self, k, n, dwell):
        self.raise_alert = KofN(k, n)
        self.raise_alarm = KofN(k, n)
        self.above_clear = KofN(1, n)
        self.dwell_min = dwell
        self.level = NORMAL
        self.dwell = 0
        self.acked = False
        self.reason = 0

    def reset(self):
        """Forget the evidence (machine stopped, sensor fault, learning); a latched alarm stays."""
        self.raise_alert.clear()
        self.raise_alarm.clear()
        self.above_clear.clear()
        if self.level == ALERT:
            self.level = NORMAL
        self.dwell = 0

    def _cleared(self):
        return self.above_clear.cnt == 0 and self.dwell >= self.dwell_min

    def update(self, over_alert, over_alarm, over_clear, zone):
        """One evaluated window. over_*: learned score at or over the alert, alarm and clear
        thresholds (0/1); zone: ISO zone. Zone C counts as over_alert, zone D as over_alarm."""
        if zone >= ZONE_C:
            over_alert = 1
            over_clear = 1
        if zone >= ZONE_D:
            over_alarm = 1
        a = self.raise_alert.push(over_alert)
        m = self.raise_alarm.push(over_alarm)
        self.above_clear.push(over_clear)
        if self.dwell < _DWELL_MAX:
            self.dwell += 1
        lv = self.level
        if m and lv != ALARM:
            self._go(ALARM, R_ISO_D if zone >= ZONE_D else R_SCORE)
            self.acked = False
        elif a and lv == NORMAL:
            self._go(ALERT, R_ISO_C if zone >= ZONE_C else R_SCORE)
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
