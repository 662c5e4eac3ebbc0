"""Board profiles (boards/*.json): what hardware the gateway runs on and how its memory is sized.
load() reads one on the device with the json module, checks every field and refuses, with the
reason, a profile that is malformed or whose buffers cannot fit its heap budget. Start-up only:
it allocates freely. All values are integers (no floats needed to read or check a profile).

Event captures (firmware_py/store/snapshots.py) are sized here too, once, from the profile:
capture_plan() turns `capture_ms` into whole windows before and after the trigger, checks
their RAM against what heap_budget_bytes leaves after memory_need(), and keeps as many
captures on flash as half of `flash_free_bytes` holds (at most CAPTURE_SLOTS_MAX; the other
half stays for the parameter files, the state files and the filesystem's own blocks).

Entry points: BoardError, check(), memory_need(), capture_plan(), snapshot_ring(), load()."""
from micropython import const

_FAMILIES = ("rp2040", "esp32s3", "host")
_BUSES = ("spi", "i2c", "none")
_BUS_PINS = {"spi": ("sck", "mosi", "miso", "cs"), "i2c": ("scl", "sda"), "none": ()}
_MIN_N = const(64)
_MAX_N = const(8192)
_MAX_BANDS = const(32)
_HEADERS = const(1024)   # object headers of the buffers, about 16 bytes each, on top of payloads
# The detector's objects on top of its array payloads (detector.footprint_bytes), in bytes: a
# 16-byte header for each of its arrays and instances (one GC block of a 32-bit port), payloads
# rounded up to whole blocks, and the instances' attribute tables (8 bytes a slot; the Detector's
# hundred-odd attributes take 127 slots; its half-order stage's a dozen more). tests/test_boards.py
# counts 3174 bytes for the largest set on 3 axes and measures that within 2 blocks on MicroPython;
# the rest is margin for the collector's stale pointers and a few attributes more.
DETECTOR_OBJECTS = const(3584)
_MAX_EVERY = const(64)
# The application feeds its 8 s watchdog once per analysed window (app.WDT_MS), so analysed
# windows must come at least twice that often.
MAX_CYCLE_MS = const(4000)
CAPTURE_SLOTS_MAX = const(8)   # captures kept on flash at most (oldest overwritten)
_CAPTURE_MIN_SLOTS = const(2)  # fewer and one capture being written could leave none to pull


class BoardError(ValueError):
    """A profile the gateway refuses; the message says which field and why."""


def _section(d, key):
    v = d.get(key)
    if type(v) is not dict:
        raise BoardError(key + " must be an object")
    return v


def _int(d, key, lo, hi, where=""):
    v = d.get(key)
    if type(v) is not int or not lo <= v <= hi:
        raise BoardError("%s%s must be an integer from %d to %d, not %r" % (where, key, lo, hi, v))
    return v


def _text(d, key, choices=None, where=""):
    v = d.get(key)
    if type(v) is not str or not v or (choices is not None and v not in choices):
        if choices is None:
            raise BoardError("%s%s must be a non-empty string" % (where, key))
        raise BoardError("%s%s must be one of %s, not %r" % (where, key, ", ".join(choices), v))
    return v


def _check_bus(bus):
    kind = _text(bus, "type", _BUSES, "bus.")
    _int(bus, "id", 0, 7, "bus.")
    pins = _section(bus, "pins")
    for name in _BUS_PINS[kind]:
        _int(pins, name, 0, 63, "bus.pins.")
    if kind == "i2c":
        _int(bus, "addr", 0x08, 0x77, "bus.")
    if kind != "none":
        _int(bus, "frequency", 1, 80_000_000, "bus.")


def _check_sensor(s):
    _text(s, "model", None, "sensor.")
    range_g = _int(s, "range_g", 1, 400, "sensor.")
    lo = _int(s, "adc_min", -(1 << 24), -1, "sensor.")
    hi = _int(s, "adc_max", 1, 1 << 24, "sensor.")
    cpg = _int(s, "counts_per_g", 1, 1 << 20, "sensor.")
    # Full scale and sensitivity must agree: range_g * counts_per_g = adc_max + 1, within 2 %.
    span = range_g * cpg
    if 50 * abs(span - (hi + 1)) > span or -lo - 1 > hi or hi > -lo:
        raise BoardError("sensor: range_g * counts_per_g (%d) does not match adc_min..adc_max "
                         "(%d..%d)" % (span, lo, hi))


def check(p):
    """Return the profile p (a dict parsed from JSON) if the gateway can run it, else raise
    BoardError with the reason."""
    if type(p) is not dict:
        raise BoardError("a profile is a JSON object")
    name = _text(p, "name")
    mcu = _section(p, "mcu")
    family = _text(mcu, "family", _FAMILIES, "mcu.")
    _int(mcu, "clock_hz", 0 if family == "host" else 1, 1_000_000_000, "mcu.")
    _check_bus(_section(p, "bus"))
    sensor = _section(p, "sensor")
    _check_sensor(sensor)
    rate = _int(p, "sample_rate_hz", 1, 100_000)
    n = _int(p, "window_n", _MIN_N, _MAX_N)
    if n & (n - 1):
        raise BoardError("window_n must be a power of two, not %d" % n)
    _int(p, "ring_windows", 2, 64)
    every = _int(p, "analyse_every", 1, _MAX_EVERY)
    wm = _int(p, "fifo_watermark", 1, 4096)
    _int(p, "axes", 1, 3)
    _int(p, "heap_budget_bytes", 1024, 1 << 26)
    led = p.get("led_pin")
    if led is not None:
        _int(p, "led_pin", 0, 63)
    _int(p, "n_bands", 1, _MAX_BANDS)
    _int(p, "capture_ms", 1, 60_000)
    _int(p, "flash_free_bytes", 0, 1 << 30)
    from firmware_py.drivers import driver_module
    drv = driver_module(sensor["model"])
    if drv is None and sensor["model"] != "virtual":
        raise BoardError("sensor.model %r has no driver" % sensor["model"])
    if drv is not None:
        why = drv.check_profile(sensor, rate, wm)
        if why:
            raise BoardError(why)
        if p["bus"]["type"] == "none":
            raise BoardError("sensor %s needs a bus" % sensor["model"])
    elif wm > n:
        raise BoardError("fifo_watermark must not exceed window_n")
    if every * n * 1000 > MAX_CYCLE_MS * rate:
        raise BoardError("analyse_every * window_n is %d ms of samples, over %d ms between "
                         "analysed windows (the watchdog is fed once per analysed window)"
                         % (every * n * 1000 // rate, MAX_CYCLE_MS))
    need = memory_need(p)
    if need > p["heap_budget_bytes"]:
        raise BoardError("%s needs %d bytes of heap, more than heap_budget_bytes %d"
                         % (name, need, p["heap_budget_bytes"]))
    capture_plan(p)
    return p


def memory_need(p):
    """Heap bytes the gateway allocates for this (checked) profile at start: the feature core's
    buffers (features.footprint_bytes), the driver's bus buffer and read block, the detector's
    arrays for the largest parameter set (detector.footprint_bytes), and allowances for object
    headers (_HEADERS for the buffers, DETECTOR_OBJECTS for the detector's objects)."""
    from firmware_py.detect import detector
    from firmware_py.dsp import features
    from firmware_py.drivers import driver_module
    axes = p["axes"]
    need = features.footprint_bytes(p["window_n"], axes, p["ring_windows"], p["n_bands"])
    drv = driver_module(p["sensor"]["model"])
    if drv is not None:
        need += drv.footprint_bytes(p["fifo_watermark"], axes)
    else:
        need += 2 * axes * p["fifo_watermark"]      # the virtual sensor's block
    return need + detector.footprint_bytes(axes) + _HEADERS + DETECTOR_OBJECTS


def capture_plan(p):
    """(pre, post, slots) for the event captures of profile p: windows kept before the trigger
    (the trigger window included), windows recorded after it, and captures kept on flash.
    capture_ms becomes whole windows (rounded up), the larger half before the trigger; their
    RAM (2 * axes * window_n bytes a window) must fit what heap_budget_bytes leaves after
    memory_need(p), and at least 2 capture files must fit half of flash_free_bytes; BoardError
    with the reason otherwise."""
    from firmware_py.store.snapshots import file_bytes, ram_bytes
    n = p["window_n"]
    axes = p["axes"]
    fs = p["sample_rate_hz"]
    total = (p["capture_ms"] * fs + 1000 * n - 1) // (1000 * n)      # whole windows, rounded up
    post = total // 2
    pre = total - post
    ram = ram_bytes(axes, n, total)
    room = p["heap_budget_bytes"] - memory_need(p)
    if ram > room:
        raise BoardError("event captures of %d ms need %d bytes of RAM, more than the %d that "
                         "heap_budget_bytes leaves" % (p["capture_ms"], ram, room))
    slots = (p["flash_free_bytes"] // 2) // file_bytes(axes, n, total)
    if slots < _CAPTURE_MIN_SLOTS:
        raise BoardError("half of flash_free_bytes %d holds %d event captures of %d bytes; at "
                         "least %d must fit" % (p["flash_free_bytes"], slots,
                                                file_bytes(axes, n, total), _CAPTURE_MIN_SLOTS))
    return pre, post, min(slots, CAPTURE_SLOTS_MAX)


def snapshot_ring(p, root):
    """The event captures' SnapshotRing for checked profile p, its files under root."""
    from firmware_py.store.snapshots import SnapshotRing
    pre, post, slots = capture_plan(p)
    return SnapshotRing(root, slots, p["sample_rate_hz"], p["window_n"], p["axes"], pre, post)


def load(path):
    """Read, check and return the profile at path; BoardError (with the path) if refused."""
    import json
    try:
        with open(path) as f:
            p = json.load(f)
    except OSError as e:
        raise BoardError("%s: cannot read (%s)" % (path, e))
    except ValueError:
        raise BoardError("%s: not valid JSON" % path)
    try:
        return check(p)
    except BoardError as e:
        raise BoardError("%s: %s" % (path, e))
