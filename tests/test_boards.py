"""Board profiles (boards/*.json) and their loader (firmware_py/run/board.py), on CPython and on
MicroPython (the device reads them with its json module)."""
import array
import copy
import json
from pathlib import Path

import pytest

import firmware_py  # noqa: F401
from firmware_py.run import board
from firmware_py.detect import detector, event_ring
from firmware_py.detect.alarm import SPAN_MAX
from firmware_py.detect.modes import DMAX, KMAX
from firmware_py.dsp import feature_index as fi, features, ring
from firmware_py.drivers import adxl345, iis3dwb

BOARDS = Path(__file__).parent.parent / "boards"
NAMES = sorted(p.stem for p in BOARDS.glob("*.json"))


def profile(name):
    return json.loads((BOARDS / (name + ".json")).read_text())


def test_the_required_boards_are_there():
    families = {profile(n)["mcu"]["family"] for n in NAMES}
    assert {"rp2040", "esp32s3", "host"} <= families and "desk" in NAMES


@pytest.mark.parametrize("name", NAMES)
def test_every_profile_loads_and_fits_its_budget(name):
    p = board.load(str(BOARDS / (name + ".json")))
    assert p["name"] == name
    need = board.memory_need(p)
    assert need <= p["heap_budget_bytes"]
    assert p["window_n"] & (p["window_n"] - 1) == 0 and p["ring_windows"] >= 2


def test_desk_profile_is_what_the_virtual_gateway_expects():
    p = board.load(str(BOARDS / "desk.json"))
    assert p["sample_rate_hz"] == 3200 and p["window_n"] == 512 and p["axes"] in (1, 3)
    assert p["bus"]["type"] == "none" and p["sensor"]["model"] == "virtual"


def test_memory_need_is_the_feature_core_the_driver_buffers_and_the_detector():
    p = profile("pico_adxl345")
    core = features.footprint_bytes(p["window_n"], p["axes"], p["ring_windows"], p["n_bands"])
    drv = adxl345.footprint_bytes(p["fifo_watermark"], p["axes"])
    det = detector.footprint_bytes(p["axes"])
    # headers: 1024 bytes for the buffers' and the detector's own allowance (measured below)
    assert board.memory_need(p) == core + drv + det + 1024 + board.DETECTOR_OBJECTS
    # The driver's share: the raw bytes of a 32-frame FIFO drain (6 per frame) with a view of
    # each frame (about 16 bytes) in a list (4 bytes an item), command and write bytes, and a
    # read block of three axes (the profile keeps x, y and z) for 128 frames held plus one
    # 32-frame FIFO read.
    assert p["axes"] == 3 and drv == 32 * (6 + 16 + 4) + 3 + 2 * 3 * (128 + 32)
    assert iis3dwb.footprint_bytes(256, 1) == 7 * 256 + 5 + 2 * 512


def test_memory_need_follows_the_feature_core(monkeypatch):
    p = profile("desk")
    monkeypatch.setattr(features, "footprint_bytes", lambda n, axes, ring, bands: 10 ** 6)
    # the virtual sensor's block of 3 axes x 16 frames of int16, the detector and the headers
    need = 10 ** 6 + 2 * 3 * 16 + detector.footprint_bytes(3) + 1024 + board.DETECTOR_OBJECTS
    with pytest.raises(board.BoardError, match="needs %d bytes of heap, more than "
                                                "heap_budget_bytes 262144" % need):
        board.check(p)


def test_a_profile_over_its_budget_is_refused_with_the_numbers():
    p = profile("esp32s3_iis3dwb")
    p["ring_windows"] = 20
    need = board.memory_need(p)
    with pytest.raises(board.BoardError) as e:
        board.check(p)
    assert str(need) in str(e.value) and str(p["heap_budget_bytes"]) in str(e.value)


def _set(path, value):
    def edit(p):
        d = p
        for k in path[:-1]:
            d = d[k]
        if value is KeyError:
            del d[path[-1]]
        else:
            d[path[-1]] = value
    return edit


BAD = [
    (("window_n",), 1000, "power of two"),
    (("window_n",), 32, "window_n must be an integer from 64"),
    (("ring_windows",), 1, "ring_windows"),
    (("axes",), 4, "axes"),
    (("axes",), True, "axes"),                      # JSON true is not an integer
    (("n_bands",), 0, "n_bands"),
    (("sample_rate_hz",), KeyError, "sample_rate_hz"),
    (("sample_rate_hz",), 3000, "no 3000 Hz"),      # ADXL345 Table 7 has no 3000 Hz
    (("fifo_watermark",), 32, "1 to 31"),           # 32-level FIFO
    (("mcu", "family"), "stm32", "mcu.family"),
    (("mcu", "clock_hz"), 0, "mcu.clock_hz"),
    (("bus", "type"), "uart", "bus.type"),
    (("bus", "pins", "cs"), KeyError, "bus.pins.cs"),
    (("sensor", "model"), "mma8451", "no driver"),
    (("sensor", "counts_per_g"), 512, "does not match"),
    (("sensor", "adc_min"), -2048, "does not match"),
    (("led_pin",), "GP25", "led_pin"),
    (("heap_budget_bytes",), 20000, "more than heap_budget_bytes"),
    (("analyse_every",), 0, "analyse_every must be an integer from 1 to 64"),
    (("analyse_every",), 65, "analyse_every must be an integer from 1 to 64"),
    (("analyse_every",), KeyError, "analyse_every"),
    (("analyse_every",), 12.5, "analyse_every"),
    # 13 windows of 1024 at 3200 Hz: 4160 ms between analysed windows, watchdog fed too seldom
    (("analyse_every",), 13, "4160 ms of samples, over 4000 ms"),
    # 5 s of captures: 16 windows of 6144 bytes, more than the 55 446 bytes the budget leaves
    (("capture_ms",), 5000, "event captures of 5000 ms need 98304 bytes of RAM, more than the 55286"),
    (("capture_ms",), KeyError, "capture_ms"),
    (("flash_free_bytes",), 100_000, "holds 0 event captures of 50180 bytes; at least 2 must fit"),
]


@pytest.mark.parametrize("path, value, reason", BAD, ids=[".".join(b[0]) + "=" + repr(b[1]) for b in BAD])
def test_malformed_profiles_are_refused_with_the_reason(path, value, reason):
    p = copy.deepcopy(profile("pico_adxl345"))
    _set(path, value)(p)
    with pytest.raises(board.BoardError, match=reason):
        board.check(p)


def test_analysed_windows_come_often_enough_for_the_watchdog():
    from firmware_py.run import app
    # The application feeds the watchdog once per analysed window: at the longest gap the
    # profile check allows, that is still every half watchdog period or sooner.
    assert 2 * board.MAX_CYCLE_MS <= app.WDT_MS
    p = profile("pico_adxl345")
    p["analyse_every"] = 12                                 # 12 x 320 ms = 3840 ms: allowed
    board.check(p)


def test_iis3dwb_specific_checks():
    p = profile("esp32s3_iis3dwb")
    p["sample_rate_hz"] = 3200
    with pytest.raises(board.BoardError, match="26667"):
        board.check(p)
    p = profile("esp32s3_iis3dwb")
    p["sensor"]["counts_per_g"] = 2048
    with pytest.raises(board.BoardError, match="2049 counts/g"):
        board.check(p)


def test_load_names_the_file(tmp_path):
    bad = tmp_path / "x.json"
    bad.write_text("{not json")
    with pytest.raises(board.BoardError, match="x.json: not valid JSON"):
        board.load(str(bad))
    with pytest.raises(board.BoardError, match="cannot read"):
        board.load(str(tmp_path / "missing.json"))
    p = profile("desk")
    p["axes"] = 0
    bad.write_text(json.dumps(p))
    with pytest.raises(board.BoardError, match="x.json: axes"):
        board.load(str(bad))


def test_profiles_load_on_micropython():
    from host_tools.twin.mpy_guest import run_guest
    texts = {n: (BOARDS / (n + ".json")).read_text() for n in NAMES}
    bad = []
    for path, value in ((("window_n",), 1000), (("axes",), 4), (("bus", "type"), "uart")):
        p = profile("pico_adxl345")
        _set(path, value)(p)
        bad.append(json.dumps(p))
    body = """
import json
from firmware_py.run import board
texts = %r
for name in sorted(texts):
    p = board.check(json.loads(texts[name]))
    emit([name, board.memory_need(p)])
for text in %r:
    try:
        board.check(json.loads(text))
        emit("accepted")
    except board.BoardError as e:
        emit(str(e))
""" % (texts, bad)
    res = run_guest(body)
    assert res.out[:len(NAMES)] == [[n, board.memory_need(profile(n))] for n in NAMES]
    # The same reasons as on CPython, formatted by MicroPython.
    expect = []
    for text in bad:
        with pytest.raises(board.BoardError) as e:
            board.check(json.loads(text))
        expect.append(str(e.value))
    assert res.out[len(NAMES):] == expect
    assert "power of two" in expect[0] and "not 4" in expect[1] and "spi, i2c, none" in expect[2]


def _doc_rows(section):
    """{profile: [cells]} of the table in docs/boards.md under "## <section>"."""
    text = (Path(__file__).parent.parent / "docs" / "boards.md").read_text()
    part = text.split("## " + section, 1)[1].split("\n## ", 1)[0]
    rows = {}
    for line in part.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if line.startswith("| ") and cells[0] in NAMES:
            rows[cells[0]] = [c.replace(" ", "") for c in cells[1:]]
    return rows


@pytest.mark.parametrize("name", NAMES)
def test_event_captures_last_2_s_fit_ram_and_flash_and_match_the_docs(name):
    from firmware_py.store.snapshots import file_bytes, ram_bytes
    p = board.load(str(BOARDS / (name + ".json")))
    pre, post, slots = board.capture_plan(p)
    n, fs, axes = p["window_n"], p["sample_rate_hz"], p["axes"]
    # issue 11: at least 2 s in all, the windows that led to the event the larger part
    assert (pre + post) * n >= 2 * fs and pre >= post >= 1 and p["capture_ms"] >= 2000
    ram = ram_bytes(axes, n, pre + post)
    assert ram == 2 * axes * n * (pre + post)                      # int16 counts, every axis
    assert board.memory_need(p) + ram <= p["heap_budget_bytes"]
    per_file = file_bytes(axes, n, pre + post)
    fit = p["flash_free_bytes"] // 2 // per_file
    assert 2 <= slots == min(fit, board.CAPTURE_SLOTS_MAX)
    assert _doc_rows("Event captures")[name] == [f"{round(pre * n / fs, 3):g}", f"{round(post * n / fs, 3):g}", str(ram), str(per_file),
                                     str(fit), str(slots)], "update docs/boards.md, Event captures"


def _guest_heap(setup: str, construct: str) -> int:
    """Heap bytes (gc.mem_alloc around it, collected before and after) that the expression
    `construct` keeps on the WASI MicroPython, after the statements `setup`. The result's name
    is bound before the first reading: naming a new global after it would grow the module's own
    table."""
    from host_tools.twin.mpy_guest import run_guest
    body = setup + """
import gc
def build():
    return """ + construct + """
r = None
gc.collect()
a0 = gc.mem_alloc()
r = build()
gc.collect()
emit(gc.mem_alloc() - a0)
"""
    return run_guest(body).out[0]


def test_the_pico_capture_buffer_takes_what_the_plan_says_on_micropython():
    """Heap the Pico's SnapshotRing takes on the WASI MicroPython (gc.mem_alloc around its
    construction): the capture buffer's payload, the 1024-byte header writer, and at most 1024
    bytes of object headers and bookkeeping (the allowance board.memory_need makes for the
    core's headers); with the core's need it stays inside the profile's heap budget."""
    from firmware_py.store.snapshots import META_CAP, ram_bytes
    p = profile("pico_adxl345")
    pre, post, slots = board.capture_plan(p)
    heap = _guest_heap("from firmware_py.store.snapshots import SnapshotRing",
                       f"SnapshotRing('/nonexistent-edgevib', {slots}, {p['sample_rate_hz']}, {p['window_n']}, "
                       f"{p['axes']}, {pre}, {post})")
    payload = ram_bytes(p["axes"], p["window_n"], pre + post) + META_CAP
    assert payload <= heap <= payload + 1024, (payload, heap)
    assert board.memory_need(p) + heap <= p["heap_budget_bytes"]


@pytest.mark.parametrize("name", NAMES)
def test_the_memory_budget_table_matches_the_code(name):
    from firmware_py.store.snapshots import ram_bytes
    p = board.load(str(BOARDS / (name + ".json")))
    n, axes = p["window_n"], p["axes"]
    core = features.footprint_bytes(n, axes, p["ring_windows"], p["n_bands"])
    det = detector.footprint_bytes(axes)
    headers = 1024 + board.DETECTOR_OBJECTS
    need = board.memory_need(p)
    pre, post, _ = board.capture_plan(p)
    captures = ram_bytes(axes, n, pre + post)
    spare = p["heap_budget_bytes"] - need - captures
    cells = [ring.footprint_bytes(axes, n, p["ring_windows"]), core, need - core - det - headers,
             det, headers, need, captures, p["heap_budget_bytes"], spare]
    assert _doc_rows("Memory budget")[name] == [str(c) for c in cells], "update docs/boards.md, Memory budget"


# Heap bytes of MicroPython's objects beyond array payloads, on a 32-bit port (the WASI build is
# one), from the MicroPython source (py/mpconfig.h, py/objarray.h, py/objtype.h, py/map.c, read
# in its repository at a revision older than the guest's 1.27). Probes on the guest agreed to the
# byte: arrays, instances of 1 to 13 attributes, ModeModel, Welford, EventRing, Alarm, Detector.
_BLOCK = 16     # the collector allocates whole blocks of 4 words (MICROPY_BYTES_PER_GC_BLOCK)
_OBJ = 16       # an array (base, typecode, len, items: py/objarray.h) or an instance (base and
#                 its attribute map of 3 words: py/objtype.h) is one block; board._HEADERS counts
#                 the same 16 bytes an object
_SLOT = 8       # an attribute table slot holds a key and a value
# the sizes an attribute table takes (py/map.c, hash_allocation_sizes): it grows to the next one
# only when it is full
_TABLE = (0, 2, 4, 6, 8, 10, 12, 17, 23, 29, 37, 47, 59, 73, 97, 127, 167, 223, 293)
# The collector is conservative: a stale pointer left on the stack can keep a temporary of the
# construction alive, or free during it one that was alive before. Probes of the detector here
# measured from 16 bytes under the count to 32 over it as the code around the construction
# changed, and 64 bytes of a freed detector still held; 8 blocks cover that.
_STALE = 8 * _BLOCK


def _whole_blocks(b):
    return -(-b // _BLOCK) * _BLOCK


def _object_bytes(obj, seen):
    """Heap bytes beyond array payloads that instance obj and every array and firmware instance
    its attributes hold take on a 32-bit MicroPython: each object's block, the rest of each
    array's last block, each instance's attribute table in whole blocks."""
    slots = next(t for t in _TABLE if t >= len(vars(obj)))
    total = _OBJ + _whole_blocks(_SLOT * slots)
    for v in vars(obj).values():
        if id(v) in seen:
            continue
        if isinstance(v, (array.array, bytearray)):
            seen.add(id(v))
            b = len(v) * (v.itemsize if isinstance(v, array.array) else 1)
            total += _OBJ + _whole_blocks(b) - b
        elif type(v).__module__.startswith("firmware_py."):
            seen.add(id(v))
            total += _object_bytes(v, seen)
    return total


def _largest_detector_set(axes):
    """A parameter set at every limit the Detector accepts: DMAX scored features, KMAX modes with
    centroids, spreads and operating points, the longest evidence span and event ring; on
    default_params' time base (512 samples at 3200 Hz: 160 ms windows)."""
    p = detector.default_params(axes, 16, 1 << 16)
    d, k = DMAX, KMAX
    nf = axes * fi.per_axis(16)
    p.update(det_feat=[j % nf for j in range(d)], det_base_mean_q4=[0] * d,
             det_base_sd_q4=[256] * d, det_sgain_q8=[256] * d, det_follow_q8=[256] * d, det_modes=k,
             det_mode_c_q8=[0] * (k * d), det_mode_s_q8=[256] * (k * d),
             det_op_speed_q8=[256, 512] * k, det_op_load_q8=[0, 256] * k, det_op_seen_q8=[256, 512] * k,
             det_persist_ms=SPAN_MAX * 160, det_event_n=event_ring.CAP_MAX)
    return p


@pytest.mark.parametrize("axes", sorted({profile(n)["axes"] for n in NAMES}))
def test_the_detector_takes_what_its_footprint_says_on_micropython(axes):
    """Heap a Detector built from the largest set takes on the WASI MicroPython (gc.mem_alloc
    around its construction): its array payloads (detector.footprint_bytes), plus the headers,
    block rounding and attribute tables counted from the objects it holds and what the
    collector's stale pointers may add, which board.memory_need allows for in DETECTOR_OBJECTS."""
    p = _largest_detector_set(axes)
    det = detector.Detector(p)
    assert (det.d, det.model.k, det.alarm.ev.span, det.events.cap) == (DMAX, KMAX, SPAN_MAX,
                                                                      event_ring.CAP_MAX)
    with pytest.raises(ValueError, match="det_persist_ms spans more than"):
        detector.Detector(dict(p, det_persist_ms=(SPAN_MAX + 1) * 160))
    heap = _guest_heap(f"import json\nfrom firmware_py.detect.detector import Detector\np = json.loads({json.dumps(p)!r})",
                       "Detector(p)")
    payload = detector.footprint_bytes(axes)
    objects = _object_bytes(det, set())
    assert payload <= heap <= payload + objects + _STALE, (payload, objects, heap)
    assert objects + _STALE <= board.DETECTOR_OBJECTS
