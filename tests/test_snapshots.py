"""Event captures (firmware_py/store/snapshots.py): the windows before and after a trigger, in
RAM then in a ring of files; decoded independently (msgpack, binascii.crc32, array/numpy), and
a power cut at every step of writing one leaves only whole captures listed."""
import binascii
import os
import shutil
from array import array

import msgpack
import numpy as np
import pytest

import firmware_py  # noqa: F401
from firmware_py.store import snapshots
from firmware_py.store.snapshots import SnapshotRing, parse
from tests.captures import EXTRA, save_capture

N, AXES = 64, 3
PRE, POST = 3, 2


def window(seed):
    return array("h", [((i * 37 + seed * 101) % 65536) - 32768 for i in range(N * AXES)])


def ring(root, slots=4, pre=PRE, post=POST):
    return SnapshotRing(str(root), slots, 3200, N, AXES, pre, post)


def frames(*seeds):
    """The windows' counts as frames x axes (each window axis-major), in time order."""
    return np.concatenate([np.asarray(window(s)).reshape(AXES, N).T for s in seeds])


def test_a_capture_holds_the_windows_before_and_after_the_trigger(tmp_path):
    r = ring(tmp_path)
    for s in range(1, 6):                              # 5 windows: the last PRE are kept
        r.keep(window(s), 0)
    sid = r.trigger("alert", 1_780_000_000, [1, -2, 3000], EXTRA)
    assert sid == 0 and r.forming()
    for s in (6, 7):
        r.work()                                       # nothing to write before the stretch ends
        r.keep(window(s), 0)
    assert r.list() == []
    steps = 0
    while r.forming():
        r.work()
        steps += 1
    assert steps == 1 + PRE + POST + 1                 # header, one window per step, CRC + rename
    [e] = r.list()
    assert e["id"] == 0 and e["kind"] == "alert" and e["t"] == 1_780_000_000
    img = r.read(0, 0, e["size"])
    assert len(img) == e["size"] == (tmp_path / "ev0.bin").stat().st_size
    meta, raw = parse(img)
    assert (meta["pre"], meta["post"], meta["features"]) == (PRE, POST, [1, -2, 3000])
    assert all(meta[k] == v for k, v in EXTRA.items())
    # Independent decoding: the header with msgpack, the CRC with binascii (ISO-HDLC CRC-32,
    # the RevEng catalogue's), the samples with numpy (this host is little-endian, like every
    # target board): windows 3, 4, 5 led to the trigger (5 raised it), 6 and 7 followed.
    unpacker = msgpack.Unpacker(raw=False)
    unpacker.feed(img[:-4])
    head = next(unpacker)
    assert head["kind"] == "alert" and head["n"] == N and head["axes"] == AXES
    assert int.from_bytes(img[-4:], "little") == binascii.crc32(img[:-4])
    got = np.frombuffer(raw, "<i2").reshape(PRE + POST, AXES, N).transpose(0, 2, 1).reshape(-1, AXES)
    assert np.array_equal(got, frames(3, 4, 5, 6, 7))


def test_a_gap_restarts_the_history_and_ends_the_stretch(tmp_path):
    r = ring(tmp_path)
    for s, gap in ((1, 0), (2, 0), (3, 512), (4, 0)):  # frames lost before window 3
        r.keep(window(s), gap)
    r.trigger("alarm", 5, [0], EXTRA)
    r.keep(window(5), 0)
    r.keep(window(6), 7)                               # lost before 6: the stretch ends at 5
    while r.forming():
        r.work()
    meta, raw = parse(r.read(0, 0, r.size(0)))
    assert (meta["pre"], meta["post"]) == (2, 1)       # never spliced across a gap
    got = np.frombuffer(raw, "<i2").reshape(3, AXES, N).transpose(0, 2, 1).reshape(-1, AXES)
    assert np.array_equal(got, frames(3, 4, 5))


def test_an_event_while_a_capture_forms_gets_none_of_its_own(tmp_path):
    r = ring(tmp_path)
    r.keep(window(1), 0)
    assert r.trigger("alert", 1, [0], EXTRA) == 0
    assert r.trigger("alarm", 2, [0], EXTRA) == -1 and r.busy == 1
    for s in (2, 3):
        r.keep(window(s), 0)
    while r.forming():
        r.work()
    assert [e["id"] for e in r.list()] == [0] and r.next_id == 1


def test_ring_overwrites_oldest_and_ids_survive_restart(tmp_path):
    r = ring(tmp_path, slots=3, post=0)
    for k in range(5):
        save_capture(r, "alarm" if k % 2 else "alert", 100 + k, [k], window(k))
    assert [e["id"] for e in r.list()] == [2, 3, 4]
    assert r.read(1, 0, 10) is None and r.size(1) is None      # overwritten
    again = ring(tmp_path, slots=3, post=0)
    assert again.next_id == 5
    assert save_capture(again, "alert", 200, [9], window(9)) == 5
    assert [e["id"] for e in again.list()] == [3, 4, 5]
    meta, raw = parse(again.read(4, 0, again.size(4)))
    assert meta["t"] == 104 and array("h", raw).tolist() == window(4).tolist()


def test_reads_in_chunks(tmp_path):
    r = ring(tmp_path)
    save_capture(r, "alarm", 5, list(range(40)), *(window(s) for s in range(3)), after=(window(3), window(4)))
    size = r.size(0)
    parts = b"".join(r.read(0, off, 100) for off in range(0, size, 100))
    assert parts == (tmp_path / "ev0.bin").read_bytes()
    assert snapshots.parse(parts)[0]["kind"] == "alarm"


def test_a_damaged_capture_is_caught_by_its_crc_and_a_short_one_is_not_listed(tmp_path):
    r = ring(tmp_path, post=0)
    save_capture(r, "alert", 1, [1], window(1))
    save_capture(r, "alert", 2, [2], window(2))
    p = tmp_path / "ev1.bin"
    data = bytearray(p.read_bytes())
    data[len(data) // 2] ^= 0x10
    with pytest.raises(ValueError, match="CRC"):
        parse(bytes(data))
    p.write_bytes(bytes(data[:-1]))                    # torn: one byte short of its header's length
    assert [e["id"] for e in ring(tmp_path, post=0).list()] == [0]


class PowerCut(Exception):
    pass


def _steps(r):
    """Run work() to the end of the capture, yielding after each call."""
    while r.forming():
        r.work()
        yield


@pytest.mark.parametrize("fs_op", [None, "remove", "rename"])
def test_a_power_cut_at_any_step_of_writing_leaves_only_whole_captures(tmp_path, monkeypatch, fs_op):
    """Like the latch's test (tests/test_alarm_latch.py): the power goes after each step of
    writing capture 4 (header, each window, CRC and close) or inside the last step, before the
    old slot file is removed or before ev.tmp is renamed. A board that starts on those files
    lists the old captures and the new one only if it is whole: never a half capture."""
    state = tmp_path / "state"
    state.mkdir()
    r = ring(state, slots=4, pre=2, post=1)
    for k in range(4):                                  # slots full: capture 4 replaces 0
        save_capture(r, "alert", k, [k], window(k), window(k + 1), after=(window(k + 2),))
    before = {e["id"] for e in r.list()}
    assert before == {0, 1, 2, 3}
    r.keep(window(10), 0)
    r.keep(window(11), 0)
    r.trigger("alarm", 99, [7], EXTRA)
    r.keep(window(12), 0)
    outcomes = set()
    cut_at = 0

    def cut_here():
        nonlocal cut_at
        cut_at += 1
        img = tmp_path / f"cut{cut_at}"
        shutil.copytree(state, img)
        return img

    def check(img):
        """What a board starting on the files at img sees."""
        got = ring(img, slots=4, pre=2, post=1)
        ids = {e["id"] for e in got.list()}
        for i in ids:
            parse(got.read(i, 0, got.size(i)))          # every listed capture is whole (CRC)
        assert not (img / "ev.tmp").exists()            # cleaned up or recovered at start
        outcomes.add(frozenset(ids))

    if fs_op is None:
        for _ in _steps(r):
            if r._k >= 0:
                r._f.flush()                            # what reached the flash so far
            check(cut_here())
    else:
        real = getattr(os, fs_op)

        def cut(*a):
            if str(a[0]).endswith("ev0.bin") or str(a[0]).endswith("ev.tmp"):
                raise PowerCut(fs_op)
            return real(*a)
        monkeypatch.setattr(snapshots.os, fs_op, cut)
        with pytest.raises(PowerCut):
            for _ in _steps(r):
                pass
        monkeypatch.setattr(snapshots.os, fs_op, real)
        check(cut_here())
    old, new = frozenset(before), frozenset({1, 2, 3, 4})
    assert outcomes <= {old, old - {0}, new}
    if fs_op is None:
        assert outcomes == {old, new}                   # before the rename: old; after: new
    else:
        assert outcomes == {new}                        # a whole ev.tmp is moved into its slot


def test_keep_allocates_nothing_and_parse_runs_on_micropython(tmp_path):
    """keep() under heap_lock on the WASI MicroPython, and the capture it forms parsed there."""
    from host_tools.twin.mpy_guest import run_guest
    r = ring(tmp_path, post=0)
    save_capture(r, "alarm", 77, [5, -6], window(2))
    img = (tmp_path / "ev0.bin").read_bytes()
    res = run_guest(f"""
from array import array
from firmware_py.store.snapshots import SnapshotRing, parse
r = SnapshotRing('/nonexistent-edgevib', 2, 3200, {N}, {AXES}, {PRE}, {POST})
w = array('h', range({N * AXES}))
def keep():
    r.keep(w, 0)
    return 0
ok = True
for k in range({PRE + 1}):
    ok = locked(keep)[0] and ok
r.trigger('alert', 1, [0], {{}})
for k in range({POST + 1}):
    ok = locked(keep)[0] and ok
meta, raw = parse(bytes.fromhex({img.hex()!r}))
emit([ok, r.got, meta['kind'], meta['t'], meta['features'], list(array('h', raw))[:5], len(raw)])
""")
    assert res.out[0] == [True, POST, "alarm", 77, [5, -6], window(2).tolist()[:5], N * AXES * 2]


def test_the_largest_header_a_profile_allows_fits_the_header_buffer():
    """The header map with every field at its widest (3 axes, 32 bands: the most a profile
    allows, firmware_py/run/board.py; every int 5 bytes in MessagePack) fits META_CAP, so
    writing a capture can never fail for its header; sized by the msgpack library too."""
    from firmware_py.codec import mpack
    from firmware_py.dsp import feature_index as fi
    per = fi.per_axis(32)
    m = {"id": 2 ** 29, "t": 2 ** 32 - 1, "kind": "alarm", "fs_hz": 100_000, "n": 8192, "axes": 3,
         "features": [-2 ** 30] * (3 * per), "reason": 20, "feature": 3 * per - 1, "score_q8": 2 ** 29,
         "mode": 7, "pre": 60_000, "post": 60_000}
    w = mpack.Writer(bytearray(snapshots.META_CAP))
    w.pack(m)                                           # raises if it does not fit
    assert w.pos == len(msgpack.packb(m)) <= snapshots.META_CAP


def test_keep_runs_as_viper_on_the_unix_port_allocation_free_and_exact():
    """The same windows through keep() on the unix MicroPython with viper (scatter16 compiled),
    each under heap_lock: the buffer holds exactly what CPython's run holds."""
    from host_tools.twin.mpy_unix import run_unix
    seeds = range(6)
    res = run_unix(f"""
from array import array
import micropython
from firmware_py.store.snapshots import SnapshotRing
r = SnapshotRing('/nonexistent-edgevib', 2, 3200, {N}, {AXES}, {PRE}, {POST})
ok = True
for s in {list(seeds)!r}:
    w = array('h', [((i * 37 + s * 101) % 65536) - 32768 for i in range({N * AXES})])
    micropython.heap_lock()
    try:
        r.keep(w, 0)
    except MemoryError:
        ok = False
    micropython.heap_unlock()
    if s == {PRE}:
        r.trigger('alert', 1, [0], {{}})
emit([ok, list(r.buf)])
""")
    ok, buf = res.out[0]
    here = ring("/nonexistent-edgevib")
    for s in seeds:
        here.keep(window(s), 0)
        if s == PRE:
            here.trigger("alert", 1, [0], {})
    assert (here.have, here.got) == (PRE, POST)            # a whole capture formed
    assert ok and buf == here.buf.tolist()
