import binascii
import random

from hypothesis import given, settings, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec import cobs
from firmware_py.link import frames
from host_tools.twin.mpy_guest import run_guest


def frame(payload: bytes) -> bytes:
    buf = bytearray(payload) + bytearray(4)
    out = bytearray(frames.wire_size(len(payload)))
    return bytes(out[:frames.encode(buf, len(payload), out)])


def feed(rx, data):
    got = []
    for b in data:
        k = rx.push(b)
        if k > 0:
            got.append(bytes(rx.buf[:k]))
        elif k < 0:
            got.append(k)
    return got


def test_layout_is_cobs_of_payload_and_crc_le():
    p = b"\x82\xa3seq\x01\xa3cmd\xa6status"
    # Independent construction: CRC-32 from binascii, then the COBS examples' rules.
    body = p + binascii.crc32(p).to_bytes(4, "little")
    out = bytearray(cobs.max_encoded(len(body)))
    expect = bytes(out[:cobs.encode(body, len(body), out)]) + b"\x00"
    assert frame(p) == expect
    assert frame(p).count(0) == 1


@given(st.lists(st.binary(min_size=1, max_size=300), max_size=8))
def test_stream_of_frames(payloads):
    rx = frames.Receiver(300)
    assert feed(rx, b"".join(frame(p) for p in payloads)) == payloads


@settings(max_examples=300)
@given(st.binary(max_size=200), st.binary(min_size=1, max_size=100))
def test_resync_after_garbage(garbage, payload):
    rx = frames.Receiver(200)
    got = feed(rx, garbage + b"\x00" + frame(payload))
    assert got[-1] == payload
    assert all(isinstance(g, int) and g < 0 for g in got[:-1])


def test_oversize_rejected_then_next_frame_ok():
    rx = frames.Receiver(64)
    got = feed(rx, frame(bytes(range(1, 200))) + frame(b"ok"))
    assert got == [frames.ERR_SIZE, b"ok"]


def test_bad_crc_and_short_and_idle():
    rx = frames.Receiver(64)
    f = bytearray(frame(b"hello"))
    f[2] ^= 0x40
    assert feed(rx, bytes(f)) == [frames.ERR_CRC]
    assert feed(rx, b"\x00\x00\x00") == []                     # idle delimiters
    assert feed(rx, b"\x03\x01\x02\x00") == [frames.ERR_SHORT]


def test_fuzz_random_and_mutated_frames():
    # Seeded mutation fuzzing: flips, drops, inserts and splices of valid frames; a frame is
    # accepted only when it is byte-for-byte a sent payload (CRC-32 catches the rest).
    rng = random.Random(20261201)
    rx = frames.Receiver(256)
    sent = [bytes(rng.randrange(256) for _ in range(rng.randrange(1, 200))) for _ in range(50)]
    tried = accepted_wrong = 0
    for _ in range(4000):
        f = bytearray(frame(rng.choice(sent)))
        op = rng.randrange(4)
        i = rng.randrange(len(f))
        if op == 0:
            f[i] ^= 1 << rng.randrange(8)
        elif op == 1:
            del f[i]
        elif op == 2:
            f.insert(i, rng.randrange(256))
        else:
            f = f[:i] + bytearray(frame(rng.choice(sent)))
        tried += 1
        for g in feed(rx, bytes(f) + b"\x00"):
            if isinstance(g, bytes) and g not in sent:
                accepted_wrong += 1
    print(f"frame parser fuzz: {tried} mutated frames, {accepted_wrong} wrong accepts")
    assert accepted_wrong == 0


def test_receiver_allocation_free_on_micropython():
    f = frame(bytes(range(1, 120)))
    res = run_guest(f"""
from firmware_py.link import frames
rx = frames.Receiver(128)
f = bytes({list(f)!r})
def run():
    k = 0
    for b in f:
        k = rx.push(b)
    return k
emit(locked(run))
out = bytearray(frames.wire_size(119))
buf = bytearray(123)
buf[0:119] = bytes(range(1, 120))
emit(locked(lambda: frames.encode(buf, 119, out)))
emit(list(out[:frames.wire_size(119)]))
""")
    assert res.out[0] == [True, 119], "receiving a frame allocated under heap_lock"
    assert res.out[1] == [True, len(f)]
    assert bytes(res.out[2][:len(f)]) == f
