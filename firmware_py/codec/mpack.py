"""A small MessagePack (msgpack.org specification) encoder and decoder for the types the link and
the parameter store use: nil, bool, int (every width), str, bin, array, map. No float, no ext:
device values are fixed-point ints. Ints take the smallest encoding, as the reference library
does. Maps are written with their keys sorted, so the same dict gives the same bytes on every
port (MicroPython dicts have no insertion order); keys must therefore be all str or all int.
The encoder writes into a caller-owned buffer; headers and small ints allocate nothing.

Entry points: MpackError, Writer, packb(), Reader, unpackb()."""
from array import array
from micropython import const

_MAX_DEPTH = const(16)   # nesting limit, so hostile input cannot exhaust the stack


class MpackError(ValueError):
    """Malformed, truncated or unsupported MessagePack, or an encoder buffer too small."""


class Writer:
    """Encode into buf[0:cap] (cap < 0: all of buf); self.pos counts the bytes written."""

    def __init__(self, buf, cap=-1):
        self.buf = buf
        self.cap = len(buf) if cap < 0 else cap
        self.pos = 0

    def reset(self):
        self.pos = 0

    def _room(self, k):
        if self.pos + k > self.cap:
            raise MpackError("mpack: encoder buffer full")

    def _byte(self, b):
        self._room(1)
        self.buf[self.pos] = b
        self.pos += 1

    def _be(self, tag, v, width):
        """Tag byte then v big-endian in width bytes (v already non-negative)."""
        self._room(1 + width)
        buf = self.buf
        p = self.pos
        buf[p] = tag
        p += width
        for _ in range(width):
            buf[p] = v & 0xFF
            v >>= 8
            p -= 1
        self.pos += 1 + width

    def nil(self):
        self._byte(0xC0)

    def boolean(self, v):
        self._byte(0xC3 if v else 0xC2)

    def integer(self, v):
        if v >= 0:
            if v < 0x80:
                self._byte(v)
            elif v < 0x100:
                self._be(0xCC, v, 1)
            elif v < 0x10000:
                self._be(0xCD, v, 2)
            elif v < 0x100000000:
                self._be(0xCE, v, 4)
            elif v < 0x10000000000000000:
                self._be(0xCF, v, 8)
            else:
                raise MpackError("mpack: int too large for 64 bits")
        elif v >= -32:
            self._byte(v & 0xFF)
        elif v >= -0x80:
            self._be(0xD0, v + 0x100, 1)
        elif v >= -0x8000:
            self._be(0xD1, v + 0x10000, 2)
        elif v >= -0x80000000:
            self._be(0xD2, v + 0x100000000, 4)
        elif v >= -0x8000000000000000:
            self._be(0xD3, v + 0x10000000000000000, 8)
        else:
            raise MpackError("mpack: int too small for 64 bits")

    def _head(self, n, fix, fixmax, tag8, tag16, tag32):
        """Length header: fix+n if n < fixmax, else the 8 (if tag8), 16 or 32-bit form."""
        if n < fixmax:
            self._byte(fix | n)
        elif tag8 and n < 0x100:
            self._be(tag8, n, 1)
        elif n < 0x10000:
            self._be(tag16, n, 2)
        else:
            self._be(tag32, n, 4)

    def raw(self, data, n):
        """Copy n bytes of already-encoded data (the body of a str or bin)."""
        self._room(n)
        p = self.pos
        self.buf[p:p + n] = data
        self.pos = p + n

    def string(self, s):
        b = s.encode()
        self._head(len(b), 0xA0, 32, 0xD9, 0xDA, 0xDB)
        self.raw(b, len(b))

    def binary(self, b):
        self._head(len(b), 0, 0, 0xC4, 0xC5, 0xC6)
        self.raw(b, len(b))

    def array_head(self, n):
        self._head(n, 0x90, 16, 0, 0xDC, 0xDD)

    def map_head(self, n):
        self._head(n, 0x80, 16, 0, 0xDE, 0xDF)

    def pack(self, obj):
        """Encode any nesting of None, bool, int, str, bytes-like, list/tuple/array, dict."""
        if obj is None:
            self.nil()
        elif obj is True or obj is False:
            self.boolean(obj)
        elif isinstance(obj, int):
            self.integer(obj)
        elif isinstance(obj, str):
            self.string(obj)
        elif isinstance(obj, (bytes, bytearray, memoryview)):
            self.binary(obj)
        elif isinstance(obj, (list, tuple, array)):
            self.array_head(len(obj))
            for x in obj:
                self.pack(x)
        elif isinstance(obj, dict):
            try:
                keys = sorted(obj)
            except TypeError:
                raise MpackError("mpack: map keys must be all str or all int")
            self.map_head(len(obj))
            for k in keys:
                self.pack(k)
                self.pack(obj[k])
        else:
            raise MpackError("mpack: cannot encode " + type(obj).__name__)


def packb(obj, cap=4096):
    """Encode obj into a new bytes object (convenience for tests and rare paths; allocates)."""
    w = Writer(bytearray(cap))
    w.pack(obj)
    return bytes(w.buf[:w.pos])


class Reader:
    """Decode from buf[start:end]; self.pos is the next byte to read."""

    def __init__(self, buf, start=0, end=-1):
        self.buf = buf
        self.pos = start
        self.end = len(buf) if end < 0 else end

    def _take(self, k):
        p = self.pos
        if p + k > self.end:
            raise MpackError("mpack: truncated at byte %d (need %d more)" % (p, p + k - self.end))
        self.pos = p + k
        return p

    def _uint(self, width):
        p = self._take(width)
        buf = self.buf
        v = 0
        for i in range(p, p + width):
            v = (v << 8) | buf[i]
        return v

    def _sint(self, width):
        v = self._uint(width)
        top = 1 << (8 * width - 1)
        return v - 2 * top if v >= top else v

    def _bytes(self, n):
        p = self._take(n)
        return bytes(self.buf[p:p + n])

    def _count(self, n, depth):
        # Every element takes at least one byte: refuse counts the input cannot hold before
        # building anything for them.
        if n > self.end - self.pos:
            raise MpackError("mpack: truncated at byte %d (count %d)" % (self.pos, n))
        if depth >= _MAX_DEPTH:
            raise MpackError("mpack: nesting deeper than %d" % _MAX_DEPTH)

    def unpack(self, depth=0):
        """Decode one value and return it (str -> str, bin -> bytes, array -> list)."""
        t = self.buf[self._take(1)]
        if t < 0x80:
            return t
        if t >= 0xE0:
            return t - 0x100
        if t < 0x90:
            return self._map(t & 0x0F, depth)
        if t < 0xA0:
            return self._array(t & 0x0F, depth)
        if t < 0xC0:
            return self._str(t & 0x1F)
        if t == 0xC0:
            return None
        if t == 0xC2:
            return False
        if t == 0xC3:
            return True
        if 0xC4 <= t <= 0xC6:
            return self._bytes(self._uint(1 << (t - 0xC4)))
        if 0xCC <= t <= 0xCF:
            return self._uint(1 << (t - 0xCC))
        if 0xD0 <= t <= 0xD3:
            return self._sint(1 << (t - 0xD0))
        if 0xD9 <= t <= 0xDB:
            return self._str(self._uint(1 << (t - 0xD9)))
        if t == 0xDC or t == 0xDD:
            return self._array(self._uint(2 if t == 0xDC else 4), depth)
        if t == 0xDE or t == 0xDF:
            return self._map(self._uint(2 if t == 0xDE else 4), depth)
        if 0xCA <= t <= 0xCB:
            raise MpackError("mpack: float at byte %d: not supported on the device" % (self.pos - 1))
        raise MpackError("mpack: unsupported type byte 0x%02x at byte %d" % (t, self.pos - 1))

    def _str(self, n):
        b = self._bytes(n)
        try:
            return str(b, "utf-8")
        except UnicodeError:
            raise MpackError("mpack: str is not valid UTF-8")

    def _array(self, n, depth):
        self._count(n, depth)
        out = []
        for _ in range(n):
            out.append(self.unpack(depth + 1))
        return out

    def _map(self, n, depth):
        self._count(n, depth)
        out = {}
        for _ in range(n):
            k = self.unpack(depth + 1)
            if isinstance(k, (list, dict)):
                raise MpackError("mpack: map key must be a scalar")
            out[k] = self.unpack(depth + 1)
        return out


def unpackb(buf, start=0, end=-1):
    """Decode exactly one value filling buf[start:end]; trailing bytes are an error."""
    r = Reader(buf, start, end)
    v = r.unpack()
    if r.pos != r.end:
        raise MpackError("mpack: %d trailing bytes after the value" % (r.end - r.pos))
    return v
