"""HMAC-SHA256 (RFC 2104 construction over SHA-256; test vectors RFC 4231). MicroPython ships
hashlib.sha256 but no hmac module. Not on the per-window path: allocates freely.

Entry points: hmac_sha256(), digest_equal()."""
import hashlib

_BLOCK = 64   # SHA-256 block size in bytes (FIPS 180-4)


def hmac_sha256(key, msg):
    """HMAC-SHA256 of msg (bytes-like) under key (bytes-like); returns the 32-byte digest."""
    if len(key) > _BLOCK:
        key = hashlib.sha256(key).digest()
    ipad = bytearray(_BLOCK)
    opad = bytearray(_BLOCK)
    for i in range(_BLOCK):
        k = key[i] if i < len(key) else 0
        ipad[i] = k ^ 0x36
        opad[i] = k ^ 0x5C
    inner = hashlib.sha256(ipad)
    inner.update(msg)
    outer = hashlib.sha256(opad)
    outer.update(inner.digest())
    return outer.digest()


def digest_equal(a, b):
    """Compare two digests in time independent of where they differ (no early exit)."""
    if len(a) != len(b):
        return False
    d = 0
    for i in range(len(a)):
        d |= a[i] ^ b[i]
    return d == 0
