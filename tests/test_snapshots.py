import binascii
from array import array

import msgpack
import pytest

import firmware_py  # noqa: F401
from firmware_py.store import snapshots
from firmware_py.store.snapshots import SnapshotRing, parse

N, AXES = 64, 3


def window(seed):
    return array("h", [((i * 37 + seed * 101) % 65536) - 32768 for i in range(N * AXES)])


def ring(root, slots=4):
    return SnapshotRing(str(root), slots, 3200, N, AXES)


def test_save_list_read_back(tmp_path):
    r = ring(tmp_path)
    raw = window(1)
    sid = r.save("alert", 1_780_000_000, [1, -2, 3000], raw)
    assert sid == 0
    [e] = r.list()
    assert e["id"] == 0 and e["kind"] == "alert" and e["t"] == 1_780_000_000
    img = r.read(0, 0, e["size"])
    assert len(img) == e["size"]
    meta, got = parse(img)
    assert meta["features"] == [1, -2, 3000] and meta["n"] == N and meta["axes"] == AXES
    # Independent decoding: the header with msgpack, the CRC with binascii, the samples with
    # array('h') (this host is little-endian, like every target board).
    assert array("h", got).tolist() == raw.tolist()
    unpacker = msgpack.Unpacker(raw=False)
    unpacker.feed(img[:-4])
    assert next(unpacker)["kind"] == "alert"
    assert int.from_bytes(img[-4:], "little") == binascii.crc32(img[:-4])


def test_ring_overwrites_oldest_and_ids_survive_restart(tmp_path):
    r = ring(tmp_path, slots=3)
    for k in range(5):
        r.save("alarm" if k % 2 else "alert", 100 + k, [k], window(k))
    assert [e["id"] for e in r.list()] == [2, 3, 4]
    assert r.read(1, 0, 10) is None                 # overwritten
    again = ring(tmp_path, slots=3)
    assert again.next_id == 5
    assert again.save("alert", 200, [9], window(9)) == 5
    assert [e["id"] for e in again.list()] == [3, 4, 5]
    meta, raw = parse(again.read(4, 0, again.size(4)))
    assert meta["t"] == 104 and array("h", raw).tolist() == window(4).tolist()


def test_damaged_file_is_skipped(tmp_path):
    r = ring(tmp_path)
    r.save("alert", 1, [1], window(1))
    r.save("alert", 2, [2], window(2))
    p = tmp_path / "ev1.bin"
    data = bytearray(p.read_bytes())
    data[len(data) // 2] ^= 0x10
    p.write_bytes(bytes(data))
    assert [e["id"] for e in r.list()] == [0]
    with pytest.raises(ValueError, match="CRC"):
        parse(bytes(data))


def test_reads_in_chunks(tmp_path):
    r = ring(tmp_path)
    r.save("alarm", 5, list(range(40)), window(3))
    size = r.size(0)
    parts = b"".join(r.read(0, off, 100) for off in range(0, size, 100))
    assert parts == (tmp_path / "ev0.bin").read_bytes()
    assert snapshots.parse(parts)[0]["kind"] == "alarm"


def test_cut_while_saving_loses_only_that_snapshot(tmp_path):
    r = ring(tmp_path)
    r.save("alert", 1, [1], window(1))
    img = (tmp_path / "ev0.bin").read_bytes()
    for cut in range(0, len(img), 97):
        (tmp_path / "ev.tmp").write_bytes(img[:cut])          # a save cut before its rename
        (tmp_path / "ev1.bin").write_bytes(img[:cut])         # or a slot file torn on FAT
        assert [e["id"] for e in ring(tmp_path).list()] == [0]
    again = ring(tmp_path)
    assert again.save("alarm", 2, [2], window(2)) == 1
    assert [e["id"] for e in again.list()] == [0, 1]


def test_parse_on_micropython(tmp_path):
    from host_tools.twin.mpy_guest import run_guest
    r = ring(tmp_path)
    r.save("alarm", 77, [5, -6], window(2))
    img = (tmp_path / "ev0.bin").read_bytes()
    res = run_guest(f"""
from firmware_py.store.snapshots import parse
from array import array
meta, raw = parse(bytes.fromhex({img.hex()!r}))
emit([meta['kind'], meta['t'], meta['features'], list(array('h', raw))[:5], len(raw)])
""")
    assert res.out[0] == ["alarm", 77, [5, -6], window(2).tolist()[:5], N * AXES * 2]
