"""STMicroelectronics IIS3DWB 3-axis wide-band vibration sensor: 26.667 kHz output data rate
(about 6 kHz bandwidth), +-2/4/8/16 g, 16-bit, 3 KB FIFO (512 words of tag + 6 data bytes),
SPI only. Register map and bit names: ST datasheet DS12569 "IIS3DWB", section "Register
mapping" and "Register description" (document number and revision Rev 6 from memory); the
same names as ST's reference driver iis3dwb_reg.h (github.com/STMicroelectronics/iis3dwb-pid).

Entry points: fs_code(), counts_per_g(), check_profile(), block_frames(), read_frames(),
footprint_bytes(), IIS3DWB."""
from micropython import const

from firmware_py.drivers import GapCounter, mean_frames, unpack_words

_FIFO_CTRL1 = const(0x07)        # WTM[7:0]
_FIFO_CTRL2 = const(0x08)        # bit 0 WTM8, bit 7 STOP_ON_WTM
_FIFO_CTRL3 = const(0x09)        # bits 3:0 BDR_XL (1010: batch accelerometer at 26667 Hz)
_FIFO_CTRL4 = const(0x0A)        # bits 2:0 FIFO_MODE (110: continuous)
_WHO_AM_I = const(0x0F)          # reads 0x7B
_CTRL1_XL = const(0x10)          # bits 7:5 XL_EN (101: on, 26667 Hz), bits 3:2 FS_XL
_CTRL3_C = const(0x12)           # bit 6 BDU, bit 2 IF_INC, bit 0 SW_RESET
_CTRL5_C = const(0x14)           # bits 1:0 ST_XL (01 positive self-test)
_FIFO_STATUS1 = const(0x3A)      # DIFF_FIFO[7:0]; FIFO_STATUS2 follows at 0x3B
_FIFO_DATA_OUT_TAG = const(0x78) # tag, then X_L X_H Y_L Y_H Z_L Z_H; auto-increment rolls back
                                 # to the tag, so one burst reads consecutive words (ST driver
                                 # iis3dwb_fifo_out_multi_raw_get reads 7 * num bytes this way)

_WHO_AM_I_VALUE = const(0x7B)
_XL_EN_26K7 = const(0xA0)        # XL_EN = 101
_BDR_XL_26K7 = const(0x0A)
_FIFO_MODE_CONTINUOUS = const(0x06)
_BDU = const(0x40)
_IF_INC = const(0x04)
_SW_RESET = const(0x01)
_ST_XL_POSITIVE = const(0x01)
_DIFF_FIFO_HI = const(0x03)      # FIFO_STATUS2 bits 1:0 = DIFF_FIFO[9:8]
_FIFO_OVR_IA = const(0x40)
_FIFO_OVR_LATCHED = const(0x08)  # cleared by reading FIFO_STATUS2
_TAG_XL = const(0x02)            # TAG_SENSOR (bits 7:3) of an accelerometer word
_WORD = const(7)
_PERIOD_Q4 = const(600)          # 37.5 us = 1 / 26667 Hz, Q4 us

FIFO_FRAMES = const(512)
# FS_XL code and sensitivity (ug/LSB, datasheet Table 2 "Mechanical characteristics", LA_So;
# the same factors as iis3dwb_from_fs*g_to_mg in ST's driver): 2 g 00 61, 16 g 01 488,
# 4 g 10 122, 8 g 11 244.
_FS_4G = const(0x02)
_SENS_4G_UG = const(122)
# Self-test output change limits, |mg|, at +-4 g: ST's reference procedure iis3dwb_self_test.c
# (MIN_ST_LIMIT_mg 800, MAX_ST_LIMIT_mg 3200), which also discards 100 ms after switching.
_ST_MIN_MG = const(800)
_ST_MAX_MG = const(3200)
_ST_FRAMES = const(32)
_ST_SETTLE_FRAMES = const(2667)  # 100 ms at 26667 Hz


def fs_code(range_g):
    """FS_XL bits for +-2, 4, 8 or 16 g, or -1."""
    if range_g == 2:
        return 0
    if range_g == 16:
        return 1
    if range_g == 4:
        return 2
    if range_g == 8:
        return 3
    return -1


def counts_per_g(range_g):
    """Nominal counts per g at a full scale: 1e6 / sensitivity in ug/LSB, rounded down (61 ug
    at +-2 g, doubling with each doubling of the range), or 0 for a range the part lacks."""
    sens = 61
    r = 2
    while r < range_g:
        sens <<= 1
        r <<= 1
    return 1_000_000 // sens if r == range_g else 0


def check_profile(sensor, rate_hz, watermark):
    """The reason this part cannot run the profile's sensor settings, or '' if it can."""
    if rate_hz != 26667:
        return "IIS3DWB runs at one output data rate, 26667 Hz"
    if fs_code(sensor["range_g"]) < 0:
        return "IIS3DWB range_g must be 2, 4, 8 or 16"
    if sensor["counts_per_g"] != counts_per_g(sensor["range_g"]):
        return "IIS3DWB at +-%d g has %d counts/g" % (sensor["range_g"],
                                                      counts_per_g(sensor["range_g"]))
    if sensor["adc_min"] != -32768 or sensor["adc_max"] != 32767:
        return "IIS3DWB output is 16-bit: adc_min -32768, adc_max 32767"
    if not 1 <= watermark < FIFO_FRAMES:
        return "IIS3DWB fifo_watermark must be 1 to 511 (512-word FIFO)"
    return ""


def block_frames(watermark):
    """Frames of the caller's read buffer: the whole words-in-blocks part of a full FIFO."""
    return FIFO_FRAMES - FIFO_FRAMES % watermark


def read_frames(watermark):
    """The most frames one read_into can bring: the whole read block (bursts are large enough
    to feed as they come)."""
    return block_frames(watermark)


def footprint_bytes(watermark, axes):
    """Heap bytes of the driver's buffers plus the caller's read block (array('h'))."""
    return _WORD * watermark + 2 + 1 + 2 + 2 * axes * block_frames(watermark)


class IIS3DWB:
    """The chip behind `regs` (an SPIRegs), measuring `axes` axes (x, y, z first) at range_g,
    its FIFO in continuous mode read in bursts of `watermark` words.

    Samples are counts (range_g / 32768 g each). ticks_us: the host clock used to size gaps after
    an overrun (time.ticks_us by default).
    """

    def __init__(self, regs, axes, range_g, watermark, ticks_us=None):
        if ticks_us is None:
            import time
            ticks_us = time.ticks_us
        self._regs = regs
        self.axes = axes
        self._wm = watermark
        self._blk = bytearray(_WORD * watermark)
        self._status = bytearray(2)
        self._one = bytearray(1)
        regs.read_into(_WHO_AM_I, self._one)
        if self._one[0] != _WHO_AM_I_VALUE:
            raise OSError("IIS3DWB not found: WHO_AM_I is not 0x7B")
        fs = fs_code(range_g)
        if fs < 0 or not 1 <= watermark < FIFO_FRAMES:
            raise ValueError("IIS3DWB cannot run this range or watermark")
        regs.write(_CTRL3_C, _SW_RESET)
        self._one[0] = _SW_RESET
        while self._one[0] & _SW_RESET:
            regs.read_into(_CTRL3_C, self._one)
        regs.write(_CTRL3_C, _BDU | _IF_INC)
        self._ctrl1 = _XL_EN_26K7 | (fs << 2)
        regs.write(_CTRL1_XL, self._ctrl1)
        regs.write(_FIFO_CTRL1, watermark & 0xFF)
        regs.write(_FIFO_CTRL2, watermark >> 8)
        regs.write(_FIFO_CTRL3, _BDR_XL_26K7)
        regs.write(_FIFO_CTRL4, _FIFO_MODE_CONTINUOUS)
        self.gaps = GapCounter(ticks_us, _PERIOD_Q4)
        self.gaps.restart(0)

    def read_into(self, out, at=0):
        """Move whole watermark-sized bursts of FIFO words into out (array('h'), frames * axes
        interleaved counts) from frame `at` on, at most len(out) // axes - at frames. Returns the number of frames; frames
        lost to an overrun since the last call are added to self.gaps.lost. Allocates nothing."""
        regs = self._regs
        st = self._status
        regs.read_into(_FIFO_STATUS1, st)
        level = st[0] | ((st[1] & _DIFF_FIFO_HI) << 8)
        self.gaps.account(level, st[1] & (_FIFO_OVR_LATCHED | _FIFO_OVR_IA))
        blk = self._blk
        wm = self._wm
        axes = self.axes
        room = len(out) // axes - at
        i = at * axes
        got = 0
        while level >= wm and got + wm <= room:
            regs.read_into(_FIFO_DATA_OUT_TAG, blk)
            i = unpack_words(blk, wm, _WORD, 1, axes, _TAG_XL, out, i)   # accelerometer words
            level -= wm
            got += wm
        self.gaps.taken(got)
        return i // axes - at

    def self_test(self):
        """Run the positive self-test at +-4 g as ST's reference procedure does: mean of 32 frames
        with ST_XL = 01 minus the mean without, each after 100 ms settling, per axis in mg.

        Returns (passed, [dx, dy, dz] mg, [lo, hi] |mg|). Allocates (not for the sampling loop).
        """
        import array
        blk = array.array('h', [0] * (3 * block_frames(self._wm)))
        off = [0, 0, 0]
        on = [0, 0, 0]
        regs = self._regs
        regs.write(_CTRL1_XL, _XL_EN_26K7 | (_FS_4G << 2))
        mean_frames(self, blk, off, _ST_SETTLE_FRAMES, _ST_FRAMES)
        regs.write(_CTRL5_C, _ST_XL_POSITIVE)
        mean_frames(self, blk, on, _ST_SETTLE_FRAMES, _ST_FRAMES)
        regs.write(_CTRL5_C, 0)
        regs.write(_CTRL1_XL, self._ctrl1)
        delta = [(on[a] - off[a]) * _SENS_4G_UG // 1000 for a in range(3)]
        passed = all(_ST_MIN_MG <= abs(d) <= _ST_MAX_MG for d in delta)
        return passed, delta, [_ST_MIN_MG, _ST_MAX_MG]
