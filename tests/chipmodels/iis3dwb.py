# Register-level model of the STMicroelectronics IIS3DWB, from its datasheet (DS12569): register
# map and reset values, CTRL1_XL (XL_EN 101 = 26.667 kHz, FS_XL), CTRL3_C (SW_RESET, IF_INC),
# CTRL5_C (ST_XL self-test), FIFO_CTRL1..4 (watermark, BDR_XL, FIFO_MODE), FIFO_STATUS1/2
# (DIFF_FIFO, FIFO_WTM_IA, FIFO_OVR_IA, FIFO_FULL_IA, FIFO_OVR_LATCHED cleared on read) and the
# FIFO output (tag byte, six data bytes; with IF_INC the address rolls back from 0x7E to the tag,
# as ST's reference driver relies on in iis3dwb_fifo_out_multi_raw_get). SPI: bit 7 of the first
# byte is R/W (1 = read), bits 6:0 the address.
# Not modelled: temperature and timestamp batching, trigger FIFO modes and STOP_ON_WTM (rejected),
# filters, TAG_CNT/TAG_PARITY (read as 0), the sensor's noise and offsets (the signal is exact).
from chipmodels.base import BYPASS, FIFO, STREAM, ChipModel

PIN_CTRL = 0x02
FIFO_CTRL1 = 0x07
FIFO_CTRL2 = 0x08
FIFO_CTRL3 = 0x09
FIFO_CTRL4 = 0x0A
WHO_AM_I = 0x0F
CTRL1_XL = 0x10
CTRL3_C = 0x12
CTRL5_C = 0x14
FIFO_STATUS1 = 0x3A
FIFO_STATUS2 = 0x3B
FIFO_DATA_OUT_TAG = 0x78
FIFO_DATA_OUT_Z_H = 0x7E
_SENS_UG = (61, 488, 122, 244)     # FS_XL 00 2 g, 01 16 g, 10 4 g, 11 8 g: ug/LSB (Table 2)


class IIS3DWBModel(ChipModel):
    """st_mg: self-test output change per axis in mg (positive self-test; negative subtracts)."""

    def __init__(self, signal, st_mg=(1500, 1500, 1500)):
        ChipModel.__init__(self, signal, 512)
        self.st = st_mg
        self.regs = bytearray(128)
        self.writes = []
        self.word = bytearray(7)           # the FIFO output registers, tag first
        self.ovr_latched = 0
        self._addr = 0
        self._pos = 0
        self._reset_regs()

    def _reset_regs(self):
        for i in range(128):
            self.regs[i] = 0
        self.regs[PIN_CTRL] = 0x3F         # reset values: PIN_CTRL 00111111 (from memory),
        self.regs[WHO_AM_I] = 0x7B         # WHO_AM_I 0x7B,
        self.regs[CTRL3_C] = 0x04          # CTRL3_C IF_INC set
        self.reset_fifo()
        self.overrun = 0
        self.ovr_latched = 0

    # -- chip behaviour --
    def period_ns(self):
        return 37500 if self.regs[CTRL1_XL] >> 5 == 0b101 else 0   # 26.667 kHz

    def fifo_mode(self):
        mode = self.regs[FIFO_CTRL4] & 0x07
        if self.regs[FIFO_CTRL3] & 0x0F != 0b1010:
            return BYPASS                  # accelerometer not batched
        if mode == 0:
            return BYPASS
        if mode == 1:
            return FIFO
        if mode == 6:
            return STREAM                  # "continuous mode"
        raise ValueError("trigger FIFO modes not modelled")

    def _produce(self):
        before = self.dropped
        ChipModel._produce(self)
        if self.dropped != before and self.fifo_mode() != BYPASS:
            self.ovr_latched = 1

    def convert(self, axis, value):
        st = self.regs[CTRL5_C] & 0x03
        if st:
            d = self.st[axis] * 1000 // _SENS_UG[(self.regs[CTRL1_XL] >> 2) & 0x03]
            value += d if st == 1 else -d
        if value > 32767:
            return 32767
        if value < -32768:
            return -32768
        return value

    def _wtm(self):
        return self.regs[FIFO_CTRL1] | ((self.regs[FIFO_CTRL2] & 1) << 8)

    def _read_reg(self, reg):
        n = self.count
        if reg == FIFO_STATUS1:
            return n & 0xFF
        if reg == FIFO_STATUS2:
            wtm = self._wtm()
            v = (n >> 8) & 0x03
            if wtm and n >= wtm:
                v |= 0x80
            if self.overrun:
                v |= 0x40
            if n == self.cap:
                v |= 0x20
            if self.ovr_latched:
                v |= 0x08
            self.ovr_latched = 0           # "reset when this register is read"
            return v
        if reg == FIFO_DATA_OUT_TAG:
            if self.pop():
                self.overrun = 0
                self.word[0] = 0x02 << 3   # TAG_SENSOR = accelerometer
                for a in range(3):
                    v = self.latch[a] & 0xFFFF
                    self.word[1 + 2 * a] = v & 0xFF
                    self.word[2 + 2 * a] = v >> 8
            else:
                for i in range(7):
                    self.word[i] = 0
            return self.word[0]
        if FIFO_DATA_OUT_TAG < reg <= FIFO_DATA_OUT_Z_H:
            return self.word[reg - FIFO_DATA_OUT_TAG]
        return self.regs[reg]

    def _write_reg(self, reg, value):
        self.writes.append((reg, value))
        if reg == WHO_AM_I or FIFO_STATUS1 <= reg <= FIFO_STATUS2 or reg >= FIFO_DATA_OUT_TAG:
            return
        if reg == CTRL3_C and value & 0x01:
            self._reset_regs()             # SW_RESET restores the defaults and self-clears
            return
        if reg == FIFO_CTRL2 and value & 0x80:
            raise ValueError("STOP_ON_WTM not modelled")
        if reg == FIFO_CTRL4 and value & 0x07 == 0:
            self.reset_fifo()              # bypass mode empties the FIFO
        if reg == CTRL1_XL and value >> 5 == 0b101 and self.regs[CTRL1_XL] >> 5 != 0b101:
            self.k = 0
        self.regs[reg] = value

    # -- bus transactions --
    def _next(self):
        if self.regs[CTRL3_C] & 0x04:
            a = self._addr + 1
            if a > FIFO_DATA_OUT_Z_H:
                a = FIFO_DATA_OUT_TAG if self._addr == FIFO_DATA_OUT_Z_H else 0
            self._addr = a

    def start(self, reg, inc):
        self._addr = reg

    def rd(self):
        v = self._read_reg(self._addr)
        self._next()
        return v

    def wr(self, value):
        self._write_reg(self._addr, value)
        self._next()

    def stop(self):
        return None

    def spi_command(self, b):
        """First byte of an SPI frame: bit 7 R/W (1 = read), bits 6:0 address. Returns 1 for a read."""
        self.start(b & 0x7F, 1)
        return b >> 7
