import math

from hypothesis import given, settings, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec import cobs
from host_tools.twin.mpy_guest import run_guest


def enc(data: bytes) -> bytes:
    out = bytearray(cobs.max_encoded(len(data)))
    return bytes(out[:cobs.encode(data, len(data), out)])


def dec(data: bytes, cap: int = 4096):
    out = bytearray(cap)
    k = cobs.decode(data, len(data), out, cap)
    return k if k < 0 else bytes(out[:k])


# Worked examples of COBS (Cheshire and Baker, "Consistent Overhead Byte Stuffing", 1999).
def test_worked_examples():
    assert enc(b"\x00") == bytes.fromhex("0101")
    assert enc(b"\x00\x00") == bytes.fromhex("010101")
    assert enc(b"") == bytes.fromhex("01")
    assert enc(bytes.fromhex("11220033")) == bytes.fromhex("0311220233")
    run = bytes(range(1, 255))                       # 254 non-zero bytes
    assert enc(run) == b"\xff" + run                 # no trailing 01


def test_full_run_then_zero_and_longer_runs():
    # Same paper: a full run is closed by FF, the next block carries the rest.
    run = bytes(range(1, 255))
    assert enc(run + b"\x00") == b"\xff" + run + b"\x01\x01"
    assert enc(run + b"\x07") == b"\xff" + run + b"\x02\x07"


@settings(max_examples=400)
@given(st.binary(max_size=1200))
def test_round_trip_and_overhead(data):
    e = enc(data)
    assert 0 not in e
    # Overhead bound of the paper: at most ceil(N/254) bytes (one byte for the empty block).
    assert len(e) - len(data) <= max(1, math.ceil(len(data) / 254))
    assert dec(e) == data


@given(st.binary(max_size=600))
def test_decode_in_place(data):
    e = bytearray(enc(data))
    k = cobs.decode(e, len(e), e, len(e))
    assert bytes(e[:k]) == data


def test_malformed_rejected():
    assert dec(b"\x05\x11\x22") == cobs.ERR_MALFORMED      # code points past the end
    assert dec(b"\x03\x11\x00\x22") == cobs.ERR_MALFORMED  # a zero inside the block
    assert dec(b"\x00") == cobs.ERR_MALFORMED
    assert dec(enc(bytes(50)), cap=10) == cobs.ERR_FULL


@given(st.binary(max_size=300))
def test_decode_never_raises(junk):
    r = dec(junk)
    assert isinstance(r, (int, bytes))


def test_encode_allocation_free_on_micropython():
    res = run_guest("""
from firmware_py.codec import cobs
src = bytearray(bytes(range(256)) * 3)
dst = bytearray(cobs.max_encoded(len(src)))
n = len(src)
emit(locked(lambda: cobs.encode(src, n, dst)))
emit(list(dst[:8]))
""")
    ok, k = res.out[0]
    assert ok, "cobs.encode allocated under heap_lock"
    src = bytes(range(256)) * 3
    assert k == len(enc(src)) and res.out[1] == list(enc(src)[:8])
