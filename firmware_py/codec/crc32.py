"""CRC-32/ISO-HDLC (the IEEE 802.3 CRC): reflected polynomial 0xEDB88320, init and xorout
0xFFFFFFFF; check value of ASCII "123456789" is 0xCBF43926 (RevEng CRC catalogue).
A 32-bit register does not fit a MicroPython small int (|v| < 2**30), so the register is kept
as two 16-bit halves and the 256-entry table is split into low and high halves. No value ever
reaches 2**30 and nothing allocates after import.

Entry points: crc32_into(), crc32_ok(); crc32_start(), crc32_run(), crc32_end() for a CRC
over several pieces (a file written a part at a time)."""
from array import array
from micropython import const

_POLY_LO = const(0x8320)
_POLY_HI = const(0xEDB8)

_T_LO = array("H", bytes(512))
_T_HI = array("H", bytes(512))


def _build():
    for i in range(256):
        lo = i
        hi = 0
        for _ in range(8):
            carry = lo & 1
            lo = (lo >> 1) | ((hi & 1) << 15)
            hi >>= 1
            if carry:
                lo ^= _POLY_LO
                hi ^= _POLY_HI
        _T_LO[i] = lo
        _T_HI[i] = hi


_build()


def crc32_start(reg):
    """Reset a running CRC register reg (array('H', 2): low and high 16-bit halves)."""
    reg[0] = 0xFFFF
    reg[1] = 0xFFFF


def crc32_run(reg, buf, start, end):
    """Run the CRC register reg over buf[start:end]: a CRC over several pieces, in order."""
    lo = reg[0]
    hi = reg[1]
    tlo = _T_LO
    thi = _T_HI
    for i in range(start, end):
        x = (lo ^ buf[i]) & 0xFF
        lo = ((lo >> 8) | ((hi & 0xFF) << 8)) ^ tlo[x]
        hi = (hi >> 8) ^ thi[x]
    reg[0] = lo
    reg[1] = hi


def crc32_end(reg, out, pos):
    """Write the CRC-32 of everything run through reg, little-endian, into out[pos:pos+4]."""
    lo = reg[0] ^ 0xFFFF
    hi = reg[1] ^ 0xFFFF
    out[pos] = lo & 0xFF
    out[pos + 1] = lo >> 8
    out[pos + 2] = hi & 0xFF
    out[pos + 3] = hi >> 8


_reg = array("H", bytes(4))


def crc32_into(buf, start, end, out, pos):
    """CRC-32 of buf[start:end], written little-endian (as on the wire) into out[pos:pos+4]."""
    crc32_start(_reg)
    crc32_run(_reg, buf, start, end)
    crc32_end(_reg, out, pos)


_scratch = bytearray(4)


def crc32_ok(buf, start, end):
    """True if buf[end-4:end] holds the little-endian CRC-32 of buf[start:end-4]."""
    if end - start < 4:
        return False
    s = _scratch
    crc32_into(buf, start, end - 4, s, 0)
    return (s[0] == buf[end - 4] and s[1] == buf[end - 3]
            and s[2] == buf[end - 2] and s[3] == buf[end - 1])
