"""Signed commands on a gateway that holds a site key (docs/protocol.md, "Signed commands").

Entry points:
  SIGNED                the commands that change state or reveal raw data
  message(cmd, nonce, req) -> bytes   what a signature covers (host and device build it alike)
  Auth(key).check(cmd, req)           raise AuthError unless req carries a valid signature
  Auth.nonce                          the challenge the next signed command must name (str)

A signature is HMAC-SHA256(key, message) with message
  "edgevib cmd <cmd> <nonce>" + " <name>=<value>" for every argument but seq, cmd and sig,
  in sorted name order; ints in decimal, bools as true/false, str as is, bytes in lower-case hex.
The nonce is 8 random bytes (hex), drawn at start-up and again after every accepted signed
command, so a captured command is refused the second time and after a reboot. Not per-window
code: allocates.
"""
from binascii import hexlify

from firmware_py.codec.hmac_sha256 import hmac_sha256, digest_equal

SIGNED = ("reboot", "clock", "learn", "ack", "stream", "raw", "capture", "event_read")
_SKIP = ("seq", "cmd", "sig")


class AuthError(Exception):
    """A signed command was refused; str() is the reason."""


def _text(v):
    if v is True:
        return "true"
    if v is False:
        return "false"
    if isinstance(v, int):
        return "%d" % v
    if isinstance(v, str):
        return v
    if isinstance(v, bytes):             # MessagePack bin arrives as bytes
        return hexlify(v).decode()
    raise AuthError("a signed command's arguments are ints, bools, str or bytes")


def message(cmd, nonce, req):
    """The bytes a signature covers for command cmd with challenge nonce and arguments req."""
    parts = ["edgevib cmd", cmd, nonce]
    for k in sorted([k for k in req if k not in _SKIP]):
        parts.append(k + "=" + _text(req[k]))
    return " ".join(parts).encode()


def _fresh():
    try:
        from os import urandom
        b = urandom(8)
    except (ImportError, OSError):   # a port without os.urandom, or no entropy source there
        import random
        b = bytes([random.getrandbits(8) for _ in range(8)])
    return hexlify(b).decode()


class Auth:
    """key: the site key (bytes) or None (then nothing needs signing)."""

    def __init__(self, key):
        self.key = key
        self.nonce = _fresh() if key else ""     # unkeyed: no challenge, no entropy needed

    def check(self, cmd, req):
        """Nothing if cmd needs no signature or req's sig is right; the nonce then changes."""
        if not self.key or cmd not in SIGNED:
            return
        sig = req.get("sig")
        if not isinstance(sig, bytes):
            raise AuthError("%s needs a signature from the site key on this gateway" % cmd)
        if not digest_equal(hmac_sha256(self.key, message(cmd, self.nonce, req)), sig):
            raise AuthError("signature of %s does not match (wrong key, or a stale or replayed "
                            "command)" % cmd)
        self.nonce = _fresh()
