"""The gateway application: samples in, features and detector per window, events and snapshots
out, and the object the link's command handler (service.py) drives. The same class runs on the
board (main.py feeds it from the accelerometer driver) and on the desk (the virtual gateway
feeds it from a recording), so what the host sees is what the device does.

Per window (window()): FeatureCore.process, the raw copy (also into the event capture's
history, SnapshotRing.keep) and Detector.step allocate nothing and may run with the heap locked.
Starting and writing an event capture and answering the link allocate; poll() does those after
the window, outside any lock.

Duty cycle (profile key analyse_every, K): of every K windows of frames only the first goes to
the ring and is analysed; feed() discards the other K - 1 on purpose and counts them in
`skipped` (windows), never in `dropped` (frames lost by accident, which the detector is told).

Raw stream (raw_stream(True)): poll() pushes each window's raw counts with its index w and
`gap`, the frames missing just before it (ring full, the ring emptied by apply_params, or
skipped on purpose), so a host can tell contiguous windows from spliced ones. Frames lost when
the ring is full fall just before the first window not yet in it: index windows + slots, kept
in self.gaps at that index modulo slots + 1 (every index from the next window to that one is
distinct there); skipped frames fall before the next window the ring will form.

Entry points: Gateway."""
import array
import gc

from firmware_py.detect import alarm
from firmware_py.run import params as params_mod
from firmware_py.run import param_check
from firmware_py.dsp.feature_index import F_RMS
from firmware_py.dsp.counters import COUNT_MAX, sat_add

FW_VERSION = "edgevib-0.1"


class Gateway:
    """profile: board profile dict; store: ParamStore; snapshots: SnapshotRing;
    ticks_ms: function giving milliseconds since start (time.ticks_ms on the board), used only
    for the millisecond part of raw-stream times.

    Time: up_s counts seconds since start from the samples themselves (every frame fed, kept,
    skipped or lost upstream, at the profile's rate): a small int for 34 years, where
    time.ticks_ms wraps after 12 days and Unix seconds are past 2**30. The detector gets up_s,
    so its window path never makes a big int; wall-clock times are clock_base + up_s, formed
    only outside the heap lock (status, snapshots, pushes)."""

    def __init__(self, profile, store, snapshots, ticks_ms, latch=None):
        self.profile = profile
        self.params = store
        self.snapshots = snapshots
        self.ticks_ms = ticks_ms
        self.clock_base = 0          # wall-clock seconds at up_s == 0 (set_clock)
        self.up_s = 0                # seconds since start, counted from samples
        self.up_frames = 0           # frames fed since up_s was last advanced
        self.fs = profile["sample_rate_hz"]
        self.streaming = False
        self.raw_on = False          # push each window's raw counts (raw_stream)
        self.reboot_wanted = False
        self.pending_kind = None     # "alert"/"alarm": a snapshot to save after this window
        self.service = None          # set by the application: pushes the stream
        self.dropped_seen = 0        # frames the detector has been told of (saturates)
        self.unseen = 0              # frames the ring lost since the last window (timer writes)
        self.unseen_up = 0           # frames lost upstream since the last window (main loop writes)
        self.lost_elsewhere = 0      # frames dropped outside the present ring: sensor FIFO, old rings
        self.windows = 0
        self.every = profile["analyse_every"]
        self.slot = 0                # window of the present cycle; 0 is the one analysed
        self.left = profile["window_n"]    # frames still to come in that window
        self.skipped = 0             # windows discarded on purpose, since start
        n = profile["window_n"]
        axes = profile["axes"]
        self.raw = array.array('h', bytes(2 * n * axes))
        self.raw_valid = False
        self.gaps = array.array('i', bytes(4 * (profile["ring_windows"] + 1)))   # frames
        # windows wraps at a multiple of len(gaps) (gap slots stay aligned) with windows +
        # slots below 2**30: every counter here saturates or wraps below the small-int limit
        self.wrap = len(self.gaps) * (COUNT_MAX // (2 * len(self.gaps)))
        self.raw_gap = 0             # frames lost just before the last processed window
        self.core, self.det = params_mod.build(store.params, profile)
        store.trial = self.trial_params          # no set is committed before it has run
        self.latch = latch           # LatchFile, or None: the latched alarm lives in RAM only
        self.latched = latch.load() if latch is not None else 0   # reason, 0 none
        self._relatch()

    def trial_params(self, p):
        """Raise ValueError unless set p runs on this board (firmware_py/run/param_check.py).

        Beside the running set if the heap holds two; else in its place (a board sized for one
        set, such as the ESP32-S3 profile): the running set is freed, p tried, and the committed
        set built again, as a commit would (frames in the ring are lost, the latch is kept)."""
        try:
            param_check.trial(p, self.profile)
            return
        except MemoryError:
            pass                     # no room to build p beside the running set
        self._release()
        try:
            param_check.trial(p, self.profile)
        finally:
            self._adopt(self.params.params)

    # ---- samples and windows ----
    def feed(self, src, frames):
        """Interleaved int16 frames from the sensor FIFO: into the ring for the first window of
        every `every`, discarded for the others (each counted in skipped at its first frame).
        Frames the full ring cannot take are dropped and counted. src: frames * axes counts.
        Allocation-free, and split into small methods: MicroPython takes a call's state from
        the heap when it exceeds a few words (py/objfun.c, from memory) and the heap is free."""
        self.up_frames += frames     # folded into up_s by uptime_s(), once per window
        i = 0
        while i < frames:
            k = frames - i
            if k > self.left:
                k = self.left
            if self.slot == 0:
                self._keep(src, k, i)
            else:
                self._skip(k)
            i += k
            self.left -= k
            if self.left == 0:
                self._next_window()

    def _keep(self, src, k, first):
        ring = self.core.ring
        lost = ring.push(src, k, first)
        if lost:
            self.unseen = sat_add(self.unseen, lost)
            self._lose(self.windows + ring.slots, lost)

    def _skip(self, k):
        ring = self.core.ring
        if self.left == ring.n:
            self.skipped = sat_add(self.skipped, 1)            # its first frame
        self._lose(self.windows + ring.filled // ring.n, k)   # before the next window formed

    def _next_window(self):
        self.left = self.core.n
        self.slot += 1
        if self.slot == self.every:
            self.slot = 0

    def lost_upstream(self, frames):
        """Frames the sensor lost before they reached the ring (a FIFO overrun, counted by the
        driver): added to dropped, so the detector is told, and marked as a gap before the next
        window. Allocation-free (called from the acquisition timer)."""
        ring = self.core.ring
        self.up_frames += frames        # lost frames are time that passed
        self.uptime_s()                 # folded now: no window may come for a long while
        self.lost_elsewhere = sat_add(self.lost_elsewhere, frames)   # main loop only
        self.unseen_up = sat_add(self.unseen_up, frames)
        self._lose(self.windows + ring.filled // ring.n, frames)

    def _lose(self, w, frames):
        """Note frames lost just before window index w (allocation-free)."""
        g = self.gaps
        k = w % len(g)
        g[k] = sat_add(g[k], frames)

    def window(self):
        """Run one waiting window through features and detector; False if none waits.

        Allocation-free: may run with micropython.heap_lock() held.
        """
        core = self.core
        g = self.gaps
        k = self.windows % len(g)
        if not core.process(g[k] == 0):     # a gap: the half-order taps start again
            return False
        ring = core.ring
        for a in range(core.axes):
            ring.copy_window(a, self.raw, a * core.n)
        ring.release()
        self.raw_valid = True
        self.raw_gap = g[k]
        g[k] = 0
        self.snapshots.keep(self.raw, self.raw_gap)    # the event capture's history
        d = self.unseen              # no jump between read and reset: a soft timer cannot split it
        self.unseen = 0
        d = sat_add(d, self.unseen_up)
        self.unseen_up = 0
        self.dropped_seen = sat_add(self.dropped_seen, d)
        det = self.det
        old = det.state
        new = det.step(core.feats, self.uptime_s(), d)
        if new != old and (new == alarm.ALERT or new == alarm.ALARM):
            self.pending_kind = new
        self.windows += 1
        if self.windows == self.wrap:
            self.windows = 0
        return True

    def poll(self):
        """Process every waiting window, then do the work that allocates: captures, stream;
        then one step of writing a whole capture to flash (also while no windows come)."""
        while self.window():
            self._keep_latch()
            if self.pending_kind is not None:
                self._capture(self.pending_kind)
            if self.streaming and self.service is not None:
                self.service.push(self.status())
            if self.raw_on and self.service is not None:
                t = self.ticks_ms()
                self.service.push_data("raw", {"w": (self.windows - 1) % self.wrap, "gap": self.raw_gap,
                                               "t_s": self.now_s(), "ms": t % 1000},
                                       bytes(self.raw))
        self.snapshots.work()

    def _capture(self, state):
        """Start the event capture of the window just processed, which moved the detector to
        state: its features and the transition the detector recorded for it (the newest entry
        of its event ring)."""
        kind = alarm.STATE_NAMES[state]
        self.pending_kind = None
        ev = self.det.events
        i = ev.head - 1 if ev.head else ev.cap - 1
        self.snapshots.trigger(kind, self.now_s(), self.core.feats,
                               {"reason": ev.reason[i], "feature": ev.feat[i],
                                "score_q8": ev.score_q8[i], "mode": ev.mode[i]})

    def uptime_s(self):
        """Seconds since start, from the frames fed so far (allocation-free)."""
        f = self.up_frames
        while f >= self.fs:
            f -= self.fs
            self.up_s += 1
        self.up_frames = f
        return self.up_s

    def now_s(self):
        """Wall-clock seconds (may be a big int on a board: call outside the heap lock)."""
        return self.clock_base + self.uptime_s()

    # ---- the interface service.py drives ----
    def info(self):
        p = self.profile
        return {"fw": FW_VERSION, "board": p["name"], "fs_hz": p["sample_rate_hz"],
                "n": p["window_n"], "axes": p["axes"],
                "analyse_every": p["analyse_every"], "uptime_s": self.uptime_s(),
                "heap_free": gc.mem_free() if hasattr(gc, "mem_free") else 0}

    def status(self):
        det = self.det
        return {"state": alarm.STATE_NAMES[det.state], "mode": det.mode,
                "score_q8": det.score_q8, "feature": det.feat, "zone": det.zone,
                "features": list(self.core.feats), "windows": self.windows,
                "dropped": sat_add(self.core.ring.dropped, self.lost_elsewhere),
                "skipped": self.skipped,
                "events": self.snapshots.next_id,
                "t_s": self.now_s(), "param_crc": self.params.crc()}

    def stream(self, on):
        self.streaming = bool(on)

    def raw_stream(self, on):
        """Start (True) or stop (False) pushing raw windows; returns the next window's index."""
        self.raw_on = bool(on)
        return self.windows

    def apply_params(self, p):
        """Rebuild feature core and detector for parameter set p (after boot, commit, rollback).

        Allocates; the old buffers become garbage, collected here rather than mid-window. Frames
        waiting in the old ring are lost: the raw stream reports them before the next window.
        """
        self._release()
        self._adopt(p)

    def _release(self):
        """Free the running feature core and detector (their losses and latch kept)."""
        lost = self.core.ring.filled
        g = self.gaps
        for i in range(len(g)):
            lost += g[i]
            g[i] = 0
        self._lose(self.windows, lost)
        self.lost_elsewhere = sat_add(self.lost_elsewhere, self.core.ring.dropped)   # outlives its ring
        self._keep_latch()           # a window run outside poll() may have raised it
        del self.core, self.det   # free the old buffers first: the heap holds one set, not two
        gc.collect()

    def _adopt(self, p):
        """Build and run set p after _release()."""
        self.core, self.det = params_mod.build(p, self.profile)
        self._relatch()              # a new set never clears an alarm nobody acknowledged
        self.unseen = 0              # losses before the new detector existed are not its own
        self.unseen_up = 0
        self.slot = 0                # the next frame starts a window in the new ring
        self.left = self.core.n

    def acknowledge(self):
        latched = self.det.state == alarm.ALARM
        self.det.ack(self.uptime_s())
        self._keep_latch()
        return latched

    # ---- the latched alarm, kept in the state file (firmware_py/store/latch.py) ----
    def _keep_latch(self):
        """Save the latch when it changed: an alarm raised and not acknowledged, or cleared."""
        a = self.det.alarm
        r = a.reason if a.level == alarm.ALARM and not a.acked else 0
        if r != self.latched:
            self.latched = r
            if self.latch is not None:
                self.latch.save(r)

    def _relatch(self):
        """Put a latched alarm (self.latched, its reason) back into a freshly built detector."""
        if self.latched:
            det = self.det
            det.alarm.level = alarm.ALARM
            det.alarm.reason = self.latched
            det.alarm.acked = False
            det.state = alarm.ALARM

    def learn(self, on):
        if on:
            self.det.learn(self.uptime_s())
        else:
            self.det.stop_learning(self.uptime_s())

    def capture(self):
        """The latest processed raw window, int16 little-endian counts, axis-major."""
        return bytes(self.raw) if self.raw_valid else b""

    def set_clock(self, t):
        self.clock_base = t - self.uptime_s()

    def request_reboot(self):
        self.reboot_wanted = True

    def rms_q8(self, axis):
        """r.m.s. of the last window on one axis (Q8 counts), for the status LED."""
        return self.core.feats[axis * self.core.per + F_RMS]
