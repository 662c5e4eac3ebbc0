"""Analog Devices ADXL345 3-axis accelerometer: full resolution (3.9 mg/LSB, 256 LSB/g typ.),
up to 3200 Hz output data rate, 32-level FIFO in stream mode drained at its watermark.
Register map and bit names: ADXL345 Data Sheet, Rev. G, Table 19 "Register Map" and the
"Register Definitions" section (revision letter from memory).

Entry points: rate_code(), range_code(), check_profile(), block_frames(), read_frames(),
footprint_bytes(), frame_slots(), ADXL345."""
from micropython import const

from firmware_py.drivers import GapCounter, mean_frames, unpack_words

_DEVID = const(0x00)          # reads 0xE5
_DEVID_VALUE = const(0xE5)
_BW_RATE = const(0x2C)        # bit 4 LOW_POWER, bits 3:0 Rate (Table 7: 0x0F = 3200 Hz)
_POWER_CTL = const(0x2D)      # bit 3 Measure
_INT_SOURCE = const(0x30)     # bit 1 Watermark, bit 0 Overrun
_DATA_FORMAT = const(0x31)    # bit 7 SELF_TEST, bit 3 FULL_RES, bits 1:0 Range
_DATAX0 = const(0x32)         # DATAX0..DATAZ1: six bytes, little-endian two's complement
_FIFO_CTL = const(0x38)       # bits 7:6 FIFO_MODE, bits 4:0 Samples (watermark)
_FIFO_STATUS = const(0x39)    # bits 5:0 Entries

_MEASURE = const(0x08)
_SELF_TEST = const(0x80)
_FULL_RES = const(0x08)
_OVERRUN = const(0x01)
_ENTRIES_MASK = const(0x3F)
_FIFO_MODE_STREAM = const(0x80)   # FIFO_MODE = 10
_RATE_3200 = const(0x0F)

FIFO_FRAMES = const(32)
# Frames the application may hold before it feeds them to the gateway (40 ms at 3200 Hz): one
# feed per 8 or 9 FIFO reads instead of one per read, because each feed's calls cost as much as
# copying about 200 counts (edgevib bench, on the unix MicroPython with viper).
_HOLD_FRAMES = const(128)
# Self-test output change limits in LSB at 3.9 mg/LSB (full resolution), VS = 2.5 V: Table 15
# (X 50..540, Y -540..-50, Z 75..875). At VS = 3.3 V Table 14 scales X and Y by 1.77 and Z by
# 1.47; in hundredths below. Table numbers and factors from memory.
_ST_X_MIN = const(50)
_ST_X_MAX = const(540)
_ST_Z_MIN = const(75)
_ST_Z_MAX = const(875)
_VS33_XY_PCT = const(177)
_VS33_Z_PCT = const(147)
_ST_FRAMES = const(32)


def rate_code(rate_hz):
    """BW_RATE Rate code for an output data rate in Hz (Table 7: 3200 >> k Hz is code 0x0F - k;
    whole-hertz rates only, 3200 down to 25 Hz, code 0x08), or -1 if the part has no such rate."""
    code = _RATE_3200
    r = 3200
    while code >= 0x08:
        if r == rate_hz:
            return code
        r >>= 1
        code -= 1
    return -1


def range_code(range_g):
    """DATA_FORMAT Range bits for +-2, 4, 8 or 16 g (00, 01, 10, 11), or -1."""
    for code in range(4):
        if range_g == 2 << code:
            return code
    return -1


def check_profile(sensor, rate_hz, watermark):
    """The reason this part cannot run the profile's sensor settings, or '' if it can."""
    if rate_code(rate_hz) < 0:
        return "ADXL345 has no %d Hz output data rate (3200, 1600, ... 25 Hz)" % rate_hz
    if range_code(sensor["range_g"]) < 0:
        return "ADXL345 range_g must be 2, 4, 8 or 16"
    full = 256 * sensor["range_g"]
    if sensor["counts_per_g"] != 256 or sensor["adc_max"] != full - 1 or sensor["adc_min"] != -full:
        return "ADXL345 in full resolution: 256 counts/g, adc_min -256 * range_g, adc_max 256 * range_g - 1"
    if not 1 <= watermark < FIFO_FRAMES:
        return "ADXL345 fifo_watermark must be 1 to 31 (32-level FIFO)"
    return ""


def block_frames(watermark):
    """Frames of the caller's read block: _HOLD_FRAMES held for one feed plus the whole FIFO, so
    one read can always drain it (read_frames)."""
    return _HOLD_FRAMES + FIFO_FRAMES


def read_frames(watermark):
    """The most frames one read_into can bring: the whole FIFO."""
    return FIFO_FRAMES


def footprint_bytes(watermark, axes):
    """Heap bytes of the driver's buffers (frame_slots: the raw bytes and, at about 16 bytes
    each, their views and list; command and write bytes) plus the caller's read block
    (array('h'))."""
    return 6 * FIFO_FRAMES + 16 * FIFO_FRAMES + 4 * FIFO_FRAMES + 3 + 2 * axes * block_frames(watermark)


def frame_slots():
    """The raw bytes of one FIFO drain (6 per frame, DATAX0..DATAZ1) and a memoryview of each
    frame's 6 bytes in it, made once: a read fills the frames one transaction each and decodes
    them in one call (a slice made per read would allocate)."""
    raw = bytearray(6 * FIFO_FRAMES)
    mv = memoryview(raw)
    return raw, [mv[6 * j:6 * j + 6] for j in range(FIFO_FRAMES)]


class ADXL345:
    """The chip behind `regs` (an I2CRegs or SPIRegs), measuring `axes` axes (x, y, z first)
    at range_g full resolution and rate_hz, its FIFO in stream mode with `watermark` samples.

    Samples are counts at 256 LSB/g (3.9 mg/LSB typ.). ticks_us: the host clock used to size gaps
    after an overrun (time.ticks_us by default).
    """

    def __init__(self, regs, axes, range_g, rate_hz, watermark, ticks_us=None):
        if ticks_us is None:
            import time
            ticks_us = time.ticks_us
        self._regs = regs
        self.axes = axes
        self._raw, self._slots = frame_slots()
        self._one = bytearray(1)
        if self._read8(_DEVID) != _DEVID_VALUE:
            raise OSError("ADXL345 not found: DEVID is not 0xE5")
        rc = rate_code(rate_hz)
        rng = range_code(range_g)
        if rc < 0 or rng < 0 or not 1 <= watermark < FIFO_FRAMES:
            raise ValueError("ADXL345 cannot run this rate, range or watermark")
        self._format = _FULL_RES | rng
        regs.write(_POWER_CTL, 0)                 # standby while configuring (datasheet advice)
        regs.write(_DATA_FORMAT, self._format)
        regs.write(_BW_RATE, rc)
        regs.write(_FIFO_CTL, 0)                  # bypass clears the FIFO
        regs.write(_FIFO_CTL, _FIFO_MODE_STREAM | watermark)
        regs.write(_POWER_CTL, _MEASURE)
        self.gaps = GapCounter(ticks_us, 5000 << (_RATE_3200 - rc))   # Q4 us: 312.5 us at 3200 Hz
        self.gaps.restart(0)

    def _read8(self, reg):
        self._regs.read_into(reg, self._one)
        return self._one[0]

    def read_into(self, out, at=0):
        """Move the FIFO's frames into out (array('h'), frames * axes interleaved counts) from
        frame `at` on, at most len(out) // axes - at frames. Returns the number of frames; frames
        lost to an overrun since the last call are added to self.gaps.lost (self.gaps.overruns
        counts the events). Allocates nothing."""
        regs = self._regs
        slots = self._slots
        level = self._read8(_FIFO_STATUS) & _ENTRIES_MASK
        self.gaps.account(level, self._read8(_INT_SOURCE) & _OVERRUN)
        axes = self.axes
        n = len(out) // axes - at
        if n > FIFO_FRAMES:
            n = FIFO_FRAMES         # the slots hold one drain (Entries may read 33: FIFO + output)
        if level < n:
            n = level
        for j in range(n):
            # One frame per transaction: the FIFO pops when a read of the data registers ends
            # ("Retrieving Data from FIFO"), and reading past DATAZ1 reaches FIFO_CTL.
            regs.read_into(_DATAX0, slots[j])
        unpack_words(self._raw, n, 6, 0, axes, -1, out, at * axes)    # x, y, z little-endian
        self.gaps.taken(n)
        return n

    def self_test(self):
        """Run the self-test (datasheet "Self-Test" section; procedure from memory): the mean of
        32 frames with SELF_TEST set minus the mean without, per axis, in LSB at 3.9 mg/LSB, at
        the configured rate. Limits: Table 15 scaled to VS = 3.3 V by Table 14.

        Returns (passed, [dx, dy, dz], [[lo, hi] per axis]). Allocates (not for the sampling loop);
        frames lost meanwhile are counted as usual.
        """
        import array
        blk = array.array('h', [0] * (3 * FIFO_FRAMES))
        off = [0, 0, 0]
        on = [0, 0, 0]
        self._regs.write(_DATA_FORMAT, _FULL_RES | 0x03)          # +-16 g full resolution
        mean_frames(self, blk, off, FIFO_FRAMES, _ST_FRAMES)      # drop what the FIFO held
        self._regs.write(_DATA_FORMAT, _FULL_RES | 0x03 | _SELF_TEST)
        mean_frames(self, blk, on, FIFO_FRAMES, _ST_FRAMES)       # and let the output settle
        self._regs.write(_DATA_FORMAT, self._format)
        xy_lo = _ST_X_MIN * _VS33_XY_PCT // 100
        xy_hi = _ST_X_MAX * _VS33_XY_PCT // 100
        limits = [[xy_lo, xy_hi], [-xy_hi, -xy_lo],
                  [_ST_Z_MIN * _VS33_Z_PCT // 100, _ST_Z_MAX * _VS33_Z_PCT // 100]]
        delta = [on[a] - off[a] for a in range(3)]
        passed = all(limits[a][0] <= delta[a] <= limits[a][1] for a in range(3))
        return passed, delta, limits
