# Register-level model of the Analog Devices ADXL345, from its data sheet (Rev. G): register
# map and reset values (Table 19), output data rates (Table 7), FIFO modes, watermark and overrun
# ("FIFO" section and INT_SOURCE/FIFO_CTL/FIFO_STATUS definitions), full resolution and range
# (DATA_FORMAT), self-test (an added output change while DATA_FORMAT.SELF_TEST is set),
# 4-wire SPI with R and MB bits and I2C with auto-increment ("Serial Communications").
# Not modelled: tap/activity/free-fall functions, trigger FIFO mode, left-justified data,
# low-power mode noise, and the sensor's noise and offsets (the signal is exact).
from chipmodels.base import BYPASS, ChipModel

DEVID = 0x00
BW_RATE = 0x2C
POWER_CTL = 0x2D
INT_SOURCE = 0x30
DATA_FORMAT = 0x31
DATAX0 = 0x32
DATAZ1 = 0x37
FIFO_CTL = 0x38
FIFO_STATUS = 0x39
_WRITABLE_LO = 0x1D      # THRESH_TAP .. FIFO_CTL are R/W, except the status registers
_READ_ONLY = (0x2B, INT_SOURCE)
I2C_ADDR = 0x53          # ALT ADDRESS pin low


class ADXL345Model(ChipModel):
    """st_lsb: self-test output change per axis in LSB at full resolution (3.9 mg/LSB)."""

    def __init__(self, signal, st_lsb=(400, -400, 600)):
        ChipModel.__init__(self, signal, 32)
        self.st = st_lsb
        self.regs = bytearray(64)
        self.regs[DEVID] = 0xE5                 # Table 19 reset values; INT_SOURCE is computed
        self.regs[BW_RATE] = 0x0A
        self.writes = []                        # (register, value) of every write, in order
        self._addr = 0
        self._inc = 0
        self._data_read = 0
        self._cmd = 0

    # -- chip behaviour --
    def period_ns(self):
        if not self.regs[POWER_CTL] & 0x08:
            return 0
        code = self.regs[BW_RATE] & 0x0F
        if code < 6:
            raise ValueError("rates below 6.25 Hz not modelled")
        return 312500 << (15 - code)            # 3200 Hz at code 0x0F, halving per step

    def fifo_mode(self):
        mode = self.regs[FIFO_CTL] >> 6
        if mode == 3:
            raise ValueError("trigger mode not modelled")
        return mode                             # FIFO_MODE 00, 01, 10 = BYPASS, FIFO, STREAM

    def convert(self, axis, value):
        fmt = self.regs[DATA_FORMAT]
        if fmt & 0x80:
            value += self.st[axis]
        r = fmt & 0x03
        if fmt & 0x08:
            lim = 512 << r                      # full resolution: 3.9 mg/LSB at every range
        else:
            value >>= r                         # 10 bits over the range
            lim = 512
        if value >= lim:
            return lim - 1
        if value < -lim:
            return -lim
        return value

    def _int_source(self):
        n = self.count
        wm = self.regs[FIFO_CTL] & 0x1F
        ready = self.fresh if self.fifo_mode() == BYPASS else (1 if n else 0)
        water = 1 if n >= wm else 0     # Samples = 0 sets it at once, in any mode (FIFO_CTL)
        return (ready << 7) | (water << 1) | self.overrun

    def _read_reg(self, reg):
        if reg == INT_SOURCE:
            return self._int_source()
        if reg == FIFO_STATUS:
            return self.count & 0x3F
        if DATAX0 <= reg <= DATAZ1:
            self._data_read = 1
            v = self.latch[(reg - DATAX0) >> 1] & 0xFFFF
            return v & 0xFF if (reg - DATAX0) & 1 == 0 else v >> 8
        return self.regs[reg] if reg < 64 else 0

    def _write_reg(self, reg, value):
        self.writes.append((reg, value))
        if reg < _WRITABLE_LO or reg > FIFO_CTL or reg in _READ_ONLY:
            return
        if reg == FIFO_CTL and value >> 6 == 0:
            self.reset_fifo()                   # bypass mode empties the FIFO
        if reg == POWER_CTL and value & 0x08 and not self.regs[POWER_CTL] & 0x08:
            self.k = 0                          # measurement starts
        self.regs[reg] = value

    # -- bus transactions --
    def start(self, reg, inc):
        self._addr = reg
        self._inc = inc
        self._data_read = 0
        if DATAX0 <= reg <= DATAZ1 and self.fifo_mode() != BYPASS and self.count:
            j = 3 * self.head                   # the oldest entry sits in the data registers
            for a in range(3):
                self.latch[a] = self.fifo[j + a]

    def rd(self):
        v = self._read_reg(self._addr)
        if self._inc:
            self._addr = (self._addr + 1) & 0x3F
        return v

    def wr(self, value):
        self._write_reg(self._addr, value)
        if self._inc:
            self._addr = (self._addr + 1) & 0x3F

    def stop(self):
        """End of a transaction: a read that touched the data registers pops the FIFO and clears
        the overrun flag ("the overrun bit is cleared by reading the FIFO contents")."""
        if self._data_read:
            if self.fifo_mode() == BYPASS:
                self.fresh = 0
            else:
                self.pop()
            self.overrun = 0
            self._data_read = 0

    def spi_command(self, b):
        """First byte of an SPI frame: bit 7 R (1 = read), bit 6 MB (multi-byte), bits 5:0 address.
        Returns 1 for a read."""
        self.start(b & 0x3F, (b >> 6) & 1)
        return b >> 7

    def i2c_start(self, reg):
        self.start(reg, 1)                      # I2C multi-byte transfers always increment
