"""COBS, Consistent Overhead Byte Stuffing (S. Cheshire and M. Baker, "Consistent Overhead Byte
Stuffing", SIGCOMM 1997 / IEEE/ACM Trans. Networking 1999). Removes every 00 from a block so a
single 00 can delimit frames on the wire; the delimiter itself is the framer's job, not ours.
Both functions work on caller-owned buffers and allocate nothing.

Entry points: max_encoded(), encode(), decode()."""
from micropython import const

_MAX_RUN = const(0xFF)   # a code byte of FF means "254 data bytes follow, no implied zero"

ERR_MALFORMED = const(-1)  # a zero inside the block, or a code byte pointing past the end
ERR_FULL = const(-2)       # the decoded block does not fit the destination


def max_encoded(n):
    """Worst-case encoded size of n bytes: n + ceil(n / 254), and 1 for the empty block."""
    return n + (n + 253) // 254 + (1 if n == 0 else 0)


def encode(src, n, dst):
    """Encode src[0:n] into dst (which must hold max_encoded(n) bytes); return the encoded length.

    The output contains no 00 byte and no trailing delimiter.
    """
    code_at = 0      # where the pending code byte goes
    code = 1         # 1 + data bytes in the current run
    o = 1
    for i in range(n):
        b = src[i]
        if b == 0:
            dst[code_at] = code
            code_at = o
            o += 1
            code = 1
        else:
            dst[o] = b
            o += 1
            code += 1
            # A full run closes with FF; open a new one only if data follows, so 254 non-zero
            # bytes encode as FF + data with no trailing 01.
            if code == _MAX_RUN and i + 1 < n:
                dst[code_at] = code
                code_at = o
                o += 1
                code = 1
    dst[code_at] = code
    return o


def decode(src, n, dst, cap):
    """Decode the block src[0:n] into dst[0:cap]; return the decoded length or a negative ERR_.

    Safe in place (dst may be src): the write position never passes the read position.
    """
    i = 0
    o = 0
    while i < n:
        code = src[i]
        if code == 0 or i + code > n:
            return ERR_MALFORMED
        i += 1
        end = i + code - 1
        if o + code - 1 > cap:
            return ERR_FULL
        while i < end:
            b = src[i]
            if b == 0:
                return ERR_MALFORMED
            dst[o] = b
            o += 1
            i += 1
        if code != _MAX_RUN and i < n:
            if o >= cap:
                return ERR_FULL
            dst[o] = 0
            o += 1
    return o
