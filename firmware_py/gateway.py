# The gateway application: samples in, features and detector per window, events and snapshots
# out, and the object the link's command handler (service.py) drives. The same class runs on the
# board (main.py feeds it from the accelerometer driver) and on the desk (the virtual gateway
# feeds it from a recording), so what the host sees is what the device does.
#
# Per window (window()): FeatureCore.process, the raw copy and Detector.step allocate nothing and
# may run with the heap locked. Saving a snapshot and answering the link allocate; poll() does
# those after the window, outside any lock.
import array
import gc

from firmware_py import alarm, params as params_mod
from firmware_py.feature_index import F_RMS

FW_VERSION = "edgevib-0.1"


class Gateway:
    """profile: board profile dict; store: ParamStore; snapshots: SnapshotRing;
    ticks_ms: function giving milliseconds since start (time.ticks_ms on the board)."""

    def __init__(self, profile, store, snapshots, ticks_ms):
        self.profile = profile
        self.params = store
        self.snapshots = snapshots
        self.ticks_ms = ticks_ms
        self.clock_base = 0          # wall-clock seconds at ticks 0 (set_clock)
        self.streaming = False
        self.reboot_wanted = False
        self.pending_kind = None     # "alert"/"alarm": a snapshot to save after this window
        self.service = None          # set by the application: pushes the stream
        self.dropped_seen = 0
        self.windows = 0
        n = profile["window_n"]
        axes = profile["axes"]
        self.raw = array.array('h', bytes(2 * n * axes))
        mv = memoryview(self.raw)
        self.raw_views = [mv[a * n:(a + 1) * n] for a in range(axes)]
        self.raw_valid = False
        self.apply_params(store.params)

    # ---- samples and windows ----
    def feed(self, src, frames):
        """Interleaved int16 frames from the sensor FIFO into the ring (drops are counted)."""
        self.core.ring.push(src, frames)

    def window(self):
        """Run one waiting window through features and detector; False if none waits.

        Allocation-free: may run with micropython.heap_lock() held.
        """
        core = self.core
        if not core.process():
            return False
        ring = core.ring
        for a in range(core.axes):
            self.raw_views[a][0:core.n] = ring.window(a)
        ring.release()
        self.raw_valid = True
        d = ring.dropped - self.dropped_seen
        self.dropped_seen = ring.dropped
        det = self.det
        old = det.state
        new = det.step(core.feats, self.now_s(), d)
        if new != old and (new == alarm.ALERT or new == alarm.ALARM):
            self.pending_kind = new
        self.windows += 1
        return True

    def poll(self):
        """Process every waiting window, then do the work that allocates: snapshots, stream."""
        while self.window():
            if self.pending_kind is not None:
                kind = alarm.STATE_NAMES[self.pending_kind]
                self.pending_kind = None
                self.snapshots.save(kind, self.now_s(), self.core.feats, self.raw)
            if self.streaming and self.service is not None:
                self.service.push(self.status())

    def now_s(self):
        return self.clock_base + self.ticks_ms() // 1000

    # ---- the interface service.py drives ----
    def info(self):
        p = self.profile
        return {"fw": FW_VERSION, "board": p["name"], "fs_hz": p["sample_rate_hz"],
                "n": p["window_n"], "axes": p["axes"], "uptime_s": self.ticks_ms() // 1000,
                "heap_free": gc.mem_free() if hasattr(gc, "mem_free") else 0}

    def status(self):
        det = self.det
        return {"state": alarm.STATE_NAMES[det.state], "mode": det.mode,
                "score_q8": det.score, "feature": det.feat, "zone": det.zone,
                "features": list(self.core.feats), "windows": self.windows,
                "dropped": self.core.ring.dropped, "events": self.snapshots.next_id,
                "t_s": self.now_s()}

    def stream(self, on):
        self.streaming = bool(on)

    def apply_params(self, p):
        """Rebuild feature core and detector for parameter set p (after boot, commit, rollback).

        Allocates; the old buffers become garbage, collected here rather than mid-window.
        """
        self.core = None
        self.det = None
        gc.collect()
        self.core, self.det = params_mod.build(p, self.profile)
        self.dropped_seen = 0

    def acknowledge(self):
        latched = self.det.state == alarm.ALARM
        self.det.ack(self.now_s())
        return latched

    def learn(self, on):
        if on:
            self.det.learn(self.now_s())
        else:
            self.det.stop_learning(self.now_s())

    def capture(self):
        """The latest processed raw window, int16 little-endian counts, axis-major."""
        return bytes(self.raw) if self.raw_valid else b""

    def set_clock(self, t):
        self.clock_base = t - self.ticks_ms() // 1000

    def request_reboot(self):
        self.reboot_wanted = True

    def rms_q8(self, axis):
        """r.m.s. of the last window on one axis (Q8 counts), for the status LED."""
        return self.core.feats[axis * self.core.per + F_RMS]
