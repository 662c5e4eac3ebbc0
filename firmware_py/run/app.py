"""The device application: board profile -> accelerometer driver -> Gateway -> Service over a
serial link, with the watchdog, the boot counter, safe mode and the status LED. main.py on the
board calls main(); tests drive App.step() with stand-ins for `machine` and the link.

Acquisition runs from a periodic soft machine.Timer (every fifo_watermark frames): the feature
and detector work of one window takes far longer than the sensor FIFO lasts (10 ms on the
ADXL345, 19.2 ms on the IIS3DWB), so polling between windows would overrun it. A soft callback
runs from MicroPython's scheduler between bytecodes, never inside a bus transfer or a
collection; it only calls read_into and SampleRing.push, which allocate nothing, so it may
run while window() holds the heap lock. The ring is single producer (the callback) and single
consumer (window()); the callback runs to completion, and the consumer's one shared update
(SampleRing.release: `filled -= n`, one statement without a jump) is not split by a soft
callback: the VM runs scheduled callbacks at jump instructions (py/vm.c, from memory). A hard
timer could split it, so it is not used.

Per main-loop pass (step()): the link is served (allocates), then at most one window runs with
the heap locked, then its snapshot and stream pushes (allocate), the LED and the watchdog.
One window per pass keeps the link answered when processing falls behind the sensor.

Entry points: elapsed_ms(), StreamLink, DeviceGateway, SafeGateway, App, prepare(), main()."""
import array

import micropython
from micropython import const

from firmware_py.codec import mpack
from firmware_py.dsp.counters import sat_add
from firmware_py.run import params as params_mod
from firmware_py.run import param_check
from firmware_py.detect.alarm import STATE_NAMES
from firmware_py.store.bootcount import BootCounter
from firmware_py.store.latch import LatchFile
from firmware_py.drivers import driver_module, open_sensor
from firmware_py.run.gateway import Gateway
from firmware_py.store.paramstore import ParamStore
from firmware_py.link.service import Service
from firmware_py.run.board import snapshot_ring
from firmware_py.run.status_led import StatusLed

CRASH_LIMIT = const(3)         # unhealthy boots in a row before safe mode
HEALTHY_MS = const(60_000)     # running this long without a reset clears the boot counter
STALL_MS = const(2_000)        # no samples for this long while sampling: sensor fault
WDT_MS = const(8_000)          # watchdog timeout; the RP2040's longest is 8388 ms (from memory)
GRACE_MS = const(3_000)        # after reset, before the link takes the console: Ctrl-C -> REPL
_TICKS_MASK = const(0x3FFFFFFF)   # time.ticks_ms wraps at 2**30
_RX_CHUNK = const(64)             # link bytes handled per pass
# Timer ids: the rp2 port has virtual timers only (-1), the esp32 port hardware timers 0..3
# (port quick-reference pages, from memory).
_TIMER_ID = {"rp2040": -1, "esp32s3": 0}


def site_key(root):
    """The site key (bytes) from root/site.key, or None: then unsigned sets are accepted."""
    try:
        with open(root + "/site.key", "rb") as f:
            k = f.read()
        return k or None
    except OSError:
        return None


def gateway_id(machine):
    """This board's id as hex (machine.unique_id(): the flash or chip serial), or None."""
    try:
        from binascii import hexlify
        return hexlify(machine.unique_id()).decode()
    except (AttributeError, OSError, TypeError):
        return None


def elapsed_ms(now, then):
    """now - then for time.ticks_ms values, modulo the 2**30 wrap (both ints, ms)."""
    return (now - then) & _TICKS_MASK


class StreamLink:
    """The link over MicroPython streams: rx and tx are sys.stdin.buffer and sys.stdout.buffer
    (the USB serial console: no extra wiring on any board) or one machine.UART for both.
    select: the select module; rx is polled with timeout 0, so reading never blocks."""

    def __init__(self, rx, tx, select):
        self._rx = rx
        self._tx = tx
        self._poll = select.poll()
        self._poll.register(rx, select.POLLIN)
        self._one = bytearray(1)

    def read_into(self, buf):
        """Move the bytes waiting (at most len(buf)) into buf; returns their count."""
        n = 0
        one = self._one
        while n < len(buf) and self._poll.poll(0):
            if not self._rx.readinto(one):
                break
            buf[n] = one[0]
            n += 1
        return n

    def write(self, data):
        self._tx.write(data)


class DeviceGateway(Gateway):
    """The Gateway as the board runs it: window() under micropython.heap_lock(), at most
    `quota` windows per poll(), and `fault` (a state name such as "sensor_fault", or "" for
    none) reported as the state while the application sees no samples."""

    def __init__(self, profile, store, snapshots, ticks_ms, latch=None):
        self.fault = ""
        self.quota = 0
        self.lost_fifo = 0           # frames lost to sensor FIFO overruns (saturates)
        self.lost_acquire = 0        # frames read but lost when acquire() raised (saturates)
        self.acq_errors = 0          # exceptions in acquire(), since start
        self.error = ""              # the first acquisition error, as text
        Gateway.__init__(self, profile, store, snapshots, ticks_ms, latch)

    def window(self):
        if self.quota <= 0:
            return False
        micropython.heap_lock()
        try:
            ran = Gateway.window(self)
        finally:
            micropython.heap_unlock()
        if ran:
            self.quota -= 1
        return ran

    def status(self):
        r = Gateway.status(self)
        if self.fault:
            r["state"] = self.fault
        # dropped, by reason: these two, the rest to a full ring
        r["lost_fifo"] = self.lost_fifo
        r["lost_acquire"] = self.lost_acquire
        r["acq_errors"] = self.acq_errors
        r["error"] = self.error
        return r


class SafeGateway(DeviceGateway):
    """What the link drives in safe mode: identify, status, parameters and event files answer;
    nothing samples or runs the feature core (the code suspected of the crashes), so the
    constructor builds none of it."""

    def __init__(self, profile, store, snapshots, ticks_ms):
        self.profile = profile
        self.params = store
        self.snapshots = snapshots
        self.ticks_ms = ticks_ms
        self.clock_base = 0
        self.streaming = False
        self.reboot_wanted = False
        self.service = None
        self.windows = 0
        self.fault = "safe"
        self.quota = 0
        store.trial = self.trial_params          # a set committed in safe mode must run too

    def uptime_s(self):
        return self.ticks_ms() // 1000   # no samples in safe mode; the loop is short-lived

    def status(self):
        return {"state": "safe", "mode": -1, "score_q8": 0, "feature": -1, "zone": 0,
                "features": [], "windows": 0, "dropped": 0, "skipped": 0,
                "events": self.snapshots.next_id,
                "t_s": self.now_s(), "param_crc": self.params.crc()}

    def stream(self, on):
        self.streaming = False

    def raw_stream(self, on):
        return 0

    def apply_params(self, p):
        """A committed set is kept for the next normal boot; nothing runs it now."""

    def acknowledge(self):
        return False

    def learn(self, on):
        raise ValueError("safe mode: no sampling, so no learning (reboot to leave safe mode)")

    def capture(self):
        return b""

    def poll(self):
        pass

    def feed(self, src, frames):
        pass


class App:
    """The gateway on a board. machine: the machine module (or a stand-in); profile: a checked
    board profile; root: folder of the data files ("" for the filesystem root); link: a
    StreamLink (read_into, write); ticks_ms/ticks_us: time.ticks_ms/ticks_us; sensor: an
    opened driver to use instead of opening the one the profile names."""

    def __init__(self, machine, profile, root, link, ticks_ms, ticks_us=None, sensor=None):
        self.machine = machine
        self.profile = profile
        self.link = link
        self.ticks_ms = ticks_ms
        self.t0 = ticks_ms()
        self.t_data = self.t0
        self.healthy = False
        self.fresh = 0               # set by acquire() when frames arrived
        self.held = 0                # frames read into self.block and not yet fed
        self.drv = None
        self.acq_lost = 0            # frames acquire() read and could not feed (timer writes)
        self.acq_errors = 0          # exceptions acquire() caught, since start (saturates)
        self.acq_error = None        # the first of them, for status
        self.timer = None
        self.root = root
        self.boots = BootCounter(root + "/boots.txt", CRASH_LIMIT)
        self.latch = LatchFile(root + "/alarm.latch")   # survives flash, rollback, reboot, power
        self.safe = self.boots.start()
        # The watchdog starts before anything that could hang (sensor, files); it cannot be
        # stopped once started.
        self.wdt = machine.WDT(timeout=WDT_MS)
        led = profile["led_pin"]
        self.led = StatusLed(None if led is None else machine.Pin(led, machine.Pin.OUT, value=0))
        self._rx = bytearray(_RX_CHUNK)
        fs = profile["sample_rate_hz"]
        n = profile["window_n"]
        axes = profile["axes"]
        factory = mpack.packb(params_mod.factory(profile))
        store = ParamStore(root, profile["name"], fs, n, axes, factory, site_key(root),
                           gateway_id=gateway_id(machine))
        snaps = snapshot_ring(profile, root)   # sized once from the profile (board.capture_plan)
        if self.safe and store.source == "cur" and store.previous_version() is not None:
            # Crashing boots on a set that has a previous one: the set goes aside and the
            # previous set gets a fresh count; safe mode only if that one crashes too.
            store.quarantine()
            self.boots.clear()
            self.safe = self.boots.start()
        if self.safe:
            self.gw = SafeGateway(profile, store, snaps, ticks_ms)
        else:
            self.gw = self._gateway(store, snaps)
        self.service = Service(self.gw, link.write)
        self.gw.service = self.service
        if not self.safe:
            self._start_sensor(sensor, ticks_us)

    # ---- start-up ----
    def _gateway(self, store, snaps):
        """A running DeviceGateway on the committed set; a set the store accepts but the
        feature core or detector refuses, or that fails its trial run (param_check), is moved
        aside (params.bad) and the store boots the one before it, or the factory set."""
        while True:
            try:
                param_check.trial(store.params, self.profile)
                return DeviceGateway(self.profile, store, snaps, self.ticks_ms, self.latch)
            except Exception:
                if store.source == "factory":
                    raise
                store.quarantine()

    def _start_sensor(self, sensor, ticks_us):
        p = self.profile
        model = p["sensor"]["model"]
        mod = driver_module(model)
        if sensor is None and mod is not None:
            try:
                sensor = open_sensor(p, self.machine, ticks_us)
            except Exception:
                sensor = None    # chip absent or not answering: sensor fault, link still up
        if sensor is None or mod is None:
            self.gw.fault = "sensor_fault"
            return
        self.drv = sensor
        frames = mod.block_frames(p["fifo_watermark"])
        self.block = array.array('h', bytes(2 * p["axes"] * frames))
        # frames held in the block until it could not take another read: the gateway is fed
        # once per several FIFO reads where reads are small (ADXL345), at every read otherwise
        self.hold = frames - mod.read_frames(p["fifo_watermark"])
        period = p["fifo_watermark"] * 1000 // p["sample_rate_hz"]
        m = self.machine
        self.timer = m.Timer(_TIMER_ID.get(p["mcu"]["family"], -1))
        self.timer.init(mode=m.Timer.PERIODIC, period=period if period > 0 else 1,
                        callback=self._tick)

    # ---- acquisition (timer callback) ----
    def _tick(self, _timer):
        self.acquire()

    def acquire(self):
        """Drain the sensor FIFO into the read block, and feed the block to the gateway's ring
        once it could not take another read (self.hold); returns the frames read. Runs in the
        timer callback: allocation-free; a failing bus transfer moves nothing, and samples that
        stop for STALL_MS show as sensor_fault."""
        drv = self.drv
        if drv is None:
            return 0
        lost = 0
        try:
            k = drv.read_into(self.block, self.held)
            if k:
                self.fresh = 1
                self.held += k
                if self.held > self.hold:
                    lost = self.held    # what a failing feed loses
                    self.held = 0
                    self.gw.feed(self.block, lost)
            return k
        except Exception as e:
            # Never silent: the frames read and not fed (the held block, if the feed failed; a
            # failing read loses what the FIFO overrun count then shows) are counted, and the
            # first error is kept for status. Binding the exception allocates nothing: this may
            # run under the lock.
            self.acq_lost = sat_add(self.acq_lost, lost)
            self.acq_errors = sat_add(self.acq_errors, 1)
            if self.acq_error is None:
                self.acq_error = e
            return 0

    # ---- the main loop ----
    def state(self):
        """The state the LED shows: safe, sensor_fault, or the detector's state name."""
        if self.safe:
            return "safe"
        if self.gw.fault:
            return self.gw.fault
        return STATE_NAMES[self.gw.det.state]

    def step(self):
        """One pass of the main loop: link, one window (heap locked), its snapshot and stream,
        sample-flow check, boot counter, watchdog, LED."""
        now = self.ticks_ms()
        drv = self.drv
        if not self.safe and drv is not None:
            self._count_losses(drv, self.gw)  # before the link: status shows them at once
        self._serve()
        gw = self.gw
        if gw.reboot_wanted:
            self.reboot()
        if not self.safe and self.drv is not None:
            gw.quota = 1
            before = gw.windows
            gw.poll()
            if gw.windows != before:
                self.wdt.feed()      # once per window: a stuck window path resets the board
            self._check_flow(now)
        if self.safe or gw.fault:
            self.wdt.feed()          # no windows to pace it: the loop itself is what is guarded
        if not self.healthy and not self.safe and elapsed_ms(now, self.t0) >= HEALTHY_MS:
            self.boots.clear()
            self.healthy = True
        self.led.show(self.state(), now)

    def _count_losses(self, drv, gw):
        """Tell the gateway (and so the detector and status) of every frame lost upstream of
        the ring since the last pass, by reason, and of the first acquisition error."""
        lost = drv.gaps.take()                          # FIFO overruns the driver counted
        if lost:
            gw.lost_fifo = sat_add(gw.lost_fifo, lost)
            gw.lost_upstream(lost)
        lost = self.acq_lost                            # read and reset with no jump between:
        self.acq_lost = 0                               # the timer cannot split them
        if lost:
            gw.lost_acquire = sat_add(gw.lost_acquire, lost)
            gw.lost_upstream(lost)
        gw.acq_errors = self.acq_errors
        e = self.acq_error
        if e is not None and not gw.error:
            gw.error = "acquire: %s: %s" % (type(e).__name__, e)

    def _serve(self):
        k = self.link.read_into(self._rx)
        if k:
            self.service.receive(self._rx, k)
            gw = self.gw
            if not self.safe and not hasattr(gw, "det"):
                # A committed set that cannot be built left the gateway without a detector: run
                # the set before it, or the factory set, in a new gateway (keeping the clock).
                gw.params.quarantine()
                self.gw = self._gateway(gw.params, gw.snapshots)
                self.gw.clock_base = gw.clock_base
                self.gw.service = self.service
                self.service.gw = self.gw

    def _check_flow(self, now):
        gw = self.gw
        if self.fresh:
            self.fresh = 0
            self.t_data = now
            gw.fault = ""
        elif elapsed_ms(now, self.t_data) >= STALL_MS:
            gw.fault = "sensor_fault"

    def reboot(self):
        """Reset on request: not a crash, so the counter is cleared (in safe mode this is how
        a technician asks for normal running again)."""
        self.boots.clear()
        self.machine.reset()

    def run(self, sleep_ms):
        while True:
            self.step()
            sleep_ms(1)


def prepare(root=""):
    """For boot.py: room to report an exception raised in the timer callback; on a gateway that
    holds a site key, Ctrl-C is data from the first moment (no way into the REPL)."""
    micropython.alloc_emergency_exception_buf(128)
    if site_key(root):
        micropython.kbd_intr(-1)


def main(root="", board_file="/board.json", grace_ms=GRACE_MS):
    """For main.py: a start-up window in which Ctrl-C reaches the REPL (for mpremote and
    `edgevib deploy`), then the link takes the USB console and the gateway runs for good.
    With a site key there is no window and main() never returns to the REPL (the key and the
    sets would be readable there; docs/protocol.md, "Threat model")."""
    import machine
    import select
    import sys
    import time
    from firmware_py.run import board
    keyed = site_key(root) is not None
    if keyed:
        micropython.kbd_intr(-1)
    try:
        profile = board.load(board_file)
    except board.BoardError as e:
        print("edgevib: not starting:", e)       # no watchdog started
        while keyed:                             # keyed: never fall through to the REPL
            time.sleep_ms(1000)
        return                                   # unkeyed: stays in the REPL
    led = StatusLed(None if profile["led_pin"] is None
                    else machine.Pin(profile["led_pin"], machine.Pin.OUT, value=1))
    led.show("starting", 0)
    if not keyed:
        time.sleep_ms(grace_ms)
    micropython.kbd_intr(-1)         # frames are binary: byte 0x03 must not interrupt
    link = StreamLink(sys.stdin.buffer, sys.stdout.buffer, select)
    App(machine, profile, root, link, time.ticks_ms, time.ticks_us).run(time.sleep_ms)
