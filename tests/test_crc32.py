import binascii

from hypothesis import given, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec import crc32
from host_tools.twin.mpy_guest import run_guest


def value(data: bytes) -> int:
    out = bytearray(4)
    crc32.crc32_into(data, 0, len(data), out, 0)
    return int.from_bytes(out, "little")


def test_check_value():
    # CRC-32/ISO-HDLC check value of ASCII "123456789" (RevEng CRC catalogue).
    assert value(b"123456789") == 0xCBF43926


def test_table_halves_small():
    # Every stored entry is a 16-bit half, so nothing near 2**30 is ever held.
    assert max(crc32._T_LO) < 1 << 16 and max(crc32._T_HI) < 1 << 16


@given(st.binary(max_size=2000))
def test_agrees_with_binascii(data):
    # Reference: CPython's binascii.crc32 (zlib's CRC-32, same parameters).
    assert value(data) == binascii.crc32(data)


@given(st.binary(max_size=200), st.binary(max_size=20), st.binary(max_size=20))
def test_sub_range_and_ok(mid, pre, post):
    buf = bytearray(pre + mid + post + bytes(4))
    s, e = len(pre), len(pre) + len(mid)
    crc32.crc32_into(buf, s, e, buf, len(buf) - 4)
    assert int.from_bytes(buf[-4:], "little") == binascii.crc32(mid)
    framed = bytearray(mid + binascii.crc32(mid).to_bytes(4, "little"))
    assert crc32.crc32_ok(framed, 0, len(framed))
    framed[0 if mid else -1] ^= 0x01
    assert not crc32.crc32_ok(framed, 0, len(framed))


def test_allocation_free_and_same_on_micropython():
    data = bytes(range(256)) * 4
    res = run_guest("""
from firmware_py.codec import crc32
data = bytearray(bytes(range(256)) * 4)
out = bytearray(4)
n = len(data)
emit(locked(lambda: crc32.crc32_into(data, 0, n, out, 0)))
emit(list(out))
emit(locked(lambda: crc32.crc32_ok(data, 0, n)))
""")
    assert res.out[0] == [True, None], "crc32_into allocated under heap_lock"
    assert bytes(res.out[1]) == binascii.crc32(data).to_bytes(4, "little")
    assert res.out[2][0] is True
