"""Link frames: COBS( payload + CRC-32 of the payload, little-endian ), then one 00 delimiter.
The payload is one MessagePack value (see docs/protocol.md). The receiver collects bytes up to
the next 00 in a fixed buffer and decodes in place; garbage, bad CRCs and oversize frames are
dropped and it resynchronises on the next 00. Nothing here allocates after construction.

Entry points: wire_size(), encode(), Receiver."""
from micropython import const
from firmware_py.codec import cobs
from firmware_py.codec.crc32 import crc32_into, crc32_ok

_CRC_LEN = const(4)

# Results of Receiver.push besides a payload length (> 0):
NONE = const(0)          # no frame complete yet
ERR_COBS = const(-1)     # the block between delimiters is not valid COBS
ERR_CRC = const(-2)      # CRC-32 mismatch
ERR_SIZE = const(-3)     # more bytes than the buffer holds before the next 00
ERR_SHORT = const(-4)    # too short to hold a payload and its CRC


def wire_size(n):
    """Bytes on the wire for an n-byte payload: COBS of n + 4 CRC bytes, plus the 00."""
    return cobs.max_encoded(n + _CRC_LEN) + 1


def encode(buf, n, out):
    """Frame the payload buf[0:n] into out; return the frame length, delimiter included.

    buf must have 4 spare bytes after the payload (the CRC is written there, overwriting them);
    out must hold wire_size(n) bytes.
    """
    crc32_into(buf, 0, n, buf, n)
    k = cobs.encode(buf, n + _CRC_LEN, out)
    out[k] = 0
    return k + 1


class Receiver:
    """Accumulate wire bytes; push() returns a payload length when a good frame completes.

    The payload is then in self.buf[0:length] until the next push().
    """

    def __init__(self, max_payload):
        self.cap = cobs.max_encoded(max_payload + _CRC_LEN)
        self.buf = bytearray(self.cap)
        self.n = 0
        self.over = False    # the current frame overflowed; drop bytes until the next 00

    def push(self, b):
        if b != 0:
            if self.n < self.cap:
                self.buf[self.n] = b
                self.n += 1
            else:
                self.over = True
            return NONE
        n = self.n
        self.n = 0
        if self.over:
            self.over = False
            return ERR_SIZE
        if n == 0:
            return NONE          # back-to-back delimiters: an idle line, not an error
        k = cobs.decode(self.buf, n, self.buf, self.cap)
        if k < 0:
            return ERR_COBS
        if k <= _CRC_LEN:
            return ERR_SHORT
        if not crc32_ok(self.buf, 0, k):
            return ERR_CRC
        return k - _CRC_LEN
