import hmac

from hypothesis import given, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec.hmac_sha256 import digest_equal, hmac_sha256
from host_tools.twin.mpy_guest import run_guest


def test_rfc4231_case1():
    # RFC 4231 section 4.2, test case 1.
    assert hmac_sha256(b"\x0b" * 20, b"Hi There").hex() == (
        "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7")


def test_rfc4231_case2():
    # RFC 4231 section 4.3, test case 2.
    assert hmac_sha256(b"Jefe", b"what do ya want for nothing?").hex() == (
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843")


@given(st.binary(max_size=200), st.binary(max_size=500))
def test_agrees_with_cpython_hmac(key, msg):
    # Reference: CPython's hmac module; keys longer than the 64-byte block are hashed first.
    assert hmac_sha256(key, msg) == hmac.new(key, msg, "sha256").digest()


def test_digest_equal():
    a = bytes(range(32))
    assert digest_equal(a, bytes(a))
    assert not digest_equal(a, a[:-1] + b"\x00")
    assert not digest_equal(a, a[:31])


def test_same_on_micropython():
    res = run_guest("""
from firmware_py.codec.hmac_sha256 import hmac_sha256
emit(hmac_sha256(b'Jefe', b'what do ya want for nothing?').hex())
emit(hmac_sha256(bytes(100), b'x' * 300).hex())
""")
    assert res.out[0] == hmac.new(b"Jefe", b"what do ya want for nothing?", "sha256").hexdigest()
    assert res.out[1] == hmac.new(bytes(100), b"x" * 300, "sha256").hexdigest()
