import msgpack
import pytest
from hypothesis import given, settings, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec import mpack
from host_tools.twin.mpy_guest import run_guest

# Every int width of the MessagePack specification: edges of fixint, uint8..uint64, negative
# fixint and int8..int64 (msgpack.org spec, "int format family").
EDGES = [0, 127, 128, 255, 256, 65535, 65536, 2**32 - 1, 2**32, 2**64 - 1,
         -1, -32, -33, -128, -129, -32768, -32769, -2**31, -2**31 - 1, -2**63]

scalars = (st.none() | st.booleans() | st.integers(-2**63, 2**64 - 1) | st.sampled_from(EDGES)
           | st.text(max_size=300) | st.binary(max_size=300))


def _canonical(v):
    """What our encoder writes: maps with sorted keys, tuples as arrays."""
    if isinstance(v, dict):
        return {k: _canonical(v[k]) for k in sorted(v)}
    if isinstance(v, (list, tuple)):
        return [_canonical(x) for x in v]
    return v


def nested(keys):
    return st.recursive(scalars, lambda c: st.lists(c, max_size=20)
                        | st.dictionaries(keys, c, max_size=20), max_leaves=60)


values = nested(st.text(max_size=20)) | nested(st.integers(-2**40, 2**40))


@settings(max_examples=200)
@given(values)
def test_ours_equals_reference_bytes(v):
    # Reference: the msgpack library; with sorted keys and bin type its output is the spec's
    # smallest encoding, so our bytes must be identical, and each side must read the other's.
    ours = mpack.packb(v, cap=1 << 16)
    ref = msgpack.packb(_canonical(v), use_bin_type=True)
    assert ours == ref
    assert msgpack.unpackb(ours, raw=False, strict_map_key=False) == _canonical(v)
    assert mpack.unpackb(ref) == _canonical(v)


@settings(max_examples=100)
@given(values)
def test_reads_reference_in_any_key_order(v):
    # msgpack writes dicts in insertion order; we must read any order.
    assert mpack.unpackb(msgpack.packb(v, use_bin_type=True)) == _canonical(v)


def test_width_boundaries_exact():
    for v in EDGES:
        assert mpack.packb(v) == msgpack.packb(v), v
    # Lengths just past each fix/8/16-bit form (spec: fixstr 31, str8 255, str16 65535).
    for n in (15, 16, 31, 32, 255, 256, 65535, 65536):
        for v in ("x" * n, b"y" * n, [1] * n, {i: None for i in range(n)}):
            ref = msgpack.packb(v, use_bin_type=True)
            assert mpack.packb(v, cap=1 << 20) == ref
            assert mpack.unpackb(ref) == v


@given(values.filter(lambda v: mpack.packb(v, cap=1 << 16) != b""))
def test_truncated_rejected(v):
    data = mpack.packb(v, cap=1 << 16)
    for cut in range(len(data)):
        with pytest.raises(mpack.MpackError):
            mpack.unpackb(data[:cut])


def test_malformed_rejected_with_reason():
    for bad, why in [(b"\xc1", "unsupported"), (b"\xca\x00\x00\x00\x00", "float"),
                     (b"\xa2\xff\xfe", "UTF-8"), (b"\x81\x90\x01", "key"),
                     (b"\x91" * 40 + b"\x01", "nesting"), (b"\xdd\xff\xff\xff\xff", "truncated"),
                     (b"\x01\x02", "trailing")]:
        with pytest.raises(mpack.MpackError, match=why):
            mpack.unpackb(bad)


@given(st.binary(max_size=64))
def test_random_bytes_never_raise_other_errors(junk):
    try:
        mpack.unpackb(junk)
    except mpack.MpackError:
        pass


def test_encoder_buffer_full():
    w = mpack.Writer(bytearray(4))
    with pytest.raises(mpack.MpackError, match="full"):
        w.pack("hello")


def test_micropython_same_bytes_and_small_ints_allocation_free():
    v = {"seq": 7, "cmd": "status", "ints": EDGES, "b": b"\x00\xff", "n": None, "t": True,
         "m": {"z": [1, [2, [3]]], "a": -5}}
    ref = msgpack.packb(_canonical(v), use_bin_type=True)
    res = run_guest(f"""
from firmware_py.codec import mpack
v = {v!r}
emit(list(mpack.packb(v)))
emit(mpack.unpackb(bytes({list(ref)!r})) == v)
w = mpack.Writer(bytearray(64))
def small():
    w.reset()
    w.map_head(2)
    w.integer(-5)
    w.integer(1000)
    w.integer(-20000)
    w.boolean(True)
    w.nil()
    w.array_head(3)
    return w.pos
emit(locked(small))
""")
    assert bytes(res.out[0]) == ref
    assert res.out[1] is True
    assert res.out[2][0] is True, "headers and small ints allocated under heap_lock"
