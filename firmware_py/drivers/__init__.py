"""Accelerometer drivers: register access over machine.I2C / machine.SPI, the overrun
bookkeeping the drivers share, and the factory that opens the sensor a board profile names.
Everything a read touches is allocated in a constructor; reads allocate nothing, so a driver's
read_into() may run under micropython.heap_lock() or from a hard timer callback.

Entry points: I2CRegs, SPIRegs, GapCounter, unpack_words() (the viper FIFO decode both drivers
use), mean_frames(), open_sensor(), driver_module()."""
import micropython
from micropython import const

from firmware_py.viper_stand import ptr8, ptr16

_TICKS_MASK = const(0x3FFFFFFF)   # MicroPython ticks wrap at 2**30 (time.ticks_* docs)
_MAX_GAP_US = const(60_000_000)   # gaps longer than this are clamped: 16 * gap stays < 2**30
_COUNT_MAX = const(0x3FFFFFFF)    # counters saturate here, below the small-int limit 2**30


class I2CRegs:
    """Registers of the chip at 7-bit address `addr` on a machine.I2C (auto-increment reads)."""

    def __init__(self, i2c, addr):
        self._i2c = i2c
        self._addr = addr
        self._one = bytearray(1)

    def read_into(self, reg, buf):
        """Fill buf from consecutive registers starting at reg."""
        self._i2c.readfrom_mem_into(self._addr, reg, buf)

    def write(self, reg, value):
        """Write one byte (0..255) to reg."""
        self._one[0] = value
        self._i2c.writeto_mem(self._addr, reg, self._one)


class SPIRegs:
    """Registers over a machine.SPI with an active-low chip select `cs` (machine.Pin).

    The command byte is the register address OR-ed with read_flag on reads, and with multi_flag
    on reads of more than one byte (the ADXL345's MB bit; ST parts increment by CTRL3_C.IF_INC
    and use multi_flag 0).
    """

    def __init__(self, spi, cs, read_flag=0x80, multi_flag=0):
        self._spi = spi
        self._cs = cs
        self._read = read_flag
        self._multi = multi_flag
        self._cmd = bytearray(1)
        self._wr = bytearray(2)
        cs.value(1)

    def read_into(self, reg, buf):
        """Fill buf from consecutive registers starting at reg, in one chip-select frame."""
        cmd = self._cmd
        cmd[0] = reg | self._read | (self._multi if len(buf) > 1 else 0)
        cs = self._cs
        cs.value(0)
        self._spi.write(cmd)
        self._spi.readinto(buf)
        cs.value(1)

    def write(self, reg, value):
        """Write one byte (0..255) to reg."""
        wr = self._wr
        wr[0] = reg
        wr[1] = value
        cs = self._cs
        cs.value(0)
        self._spi.write(wr)
        cs.value(1)


class GapCounter:
    """Frames a chip produced that never reached us, estimated when its FIFO reports an overrun.

    The chip produces one frame every period_q4 / 16 us (Q4 microseconds). Between two status
    reads the host clock says how many frames were due; with the frames still in the FIFO and the
    frames taken out, the shortfall at an overrun is the number overwritten or dropped. The estimate
    is as good as the agreement of the two clocks (datasheet ODR tolerance times the gap).
    """

    def __init__(self, ticks_us, period_q4):
        self._ticks = ticks_us
        self._period_q4 = period_q4
        self._t = ticks_us()
        self._carry_q4 = 0          # Q4 us not yet worth a whole frame
        self._left = 0           # frames left in the FIFO after the previous read
        self.lost = 0            # frames lost since start (never reset; saturates at 2**30 - 1)
        self.overruns = 0        # status reads that showed an overrun, since start (saturates)
        self.unreported = 0      # frames lost since the application last took them (take())

    def restart(self, level):
        """Take the present moment and FIFO level as the new reference (after configuring)."""
        self._t = self._ticks()
        self._carry_q4 = 0
        self._left = level

    def account(self, level, overrun):
        """Call at each status read with the FIFO level (frames) and its overrun flag.

        Returns the frames lost since the previous call (0 without an overrun).
        """
        now = self._ticks()
        gap = (now - self._t) & _TICKS_MASK
        self._t = now
        if gap > _MAX_GAP_US:
            gap = _MAX_GAP_US
        q = gap * 16 + self._carry_q4
        due = q // self._period_q4
        self._carry_q4 = q - due * self._period_q4
        lost = 0
        if overrun:
            lost = self._left + due - level
            if lost < 0:
                lost = 0
            if lost > _COUNT_MAX:
                lost = _COUNT_MAX
            self.lost = _sat_add(self.lost, lost)
            self.unreported = _sat_add(self.unreported, lost)
            self.overruns = _sat_add(self.overruns, 1)
        self._left = level
        return lost

    def take(self):
        """Frames lost since the previous take() (the application tells the detector of them)."""
        v = self.unreported
        self.unreported = 0
        return v

    def taken(self, frames):
        """Record frames taken out of the FIFO since the last status read."""
        self._left -= frames


@micropython.viper
def unpack_words(src, words: int, size: int, first: int, count: int, tag: int, out, i: int) -> int:
    """Decode a FIFO burst: for each of `words` words of `size` bytes in src (bytearray) whose
    tag (first byte >> 3) equals tag, or every word if tag < 0, the `count` little-endian
    two's-complement int16 samples from its byte `first` on go to out[i], out[i + 1], ...
    (array('h'), counts as the chip gives them). Returns the next i."""
    b = ptr8(src)
    o = ptr16(out)
    w = 0
    for _ in range(words):
        if tag < 0 or (b[w] >> 3) == tag:
            p = w + first
            for _ in range(count):
                o[i] = ((b[p] | (b[p + 1] << 8)) ^ 0x8000) - 0x8000    # sign-extend bit 15
                i += 1
                p += 2
        w += size
    return i


def _sat_add(a, b):
    """a + b held at _COUNT_MAX, never forming 2**30 (the rule of firmware_py/dsp/counters.py,
    which drivers may not import: rooms of one layer stay apart, docs/architecture.md)."""
    if b > _COUNT_MAX - a:
        return _COUNT_MAX
    return a + b


def mean_frames(drv, blk, sums, skip, count):
    """Per-axis mean of `count` frames from drv (all 3 axes) after dropping `skip` frames, into
    sums (3 ints), counts. blk: array('h') of at least drv's read block * 3. For self-tests."""
    axes = drv.axes
    drv.axes = 3
    for a in range(3):
        sums[a] = 0
    got = -skip
    while got < count:
        k = drv.read_into(blk)
        for j in range(k):
            if 0 <= got < count:
                for a in range(3):
                    sums[a] += blk[3 * j + a]
            got += 1
    for a in range(3):
        sums[a] //= count
    drv.axes = axes


def open_sensor(profile, machine, ticks_us=None):
    """Open the accelerometer a validated board profile names, through the given machine module.

    Returns the driver, configured and measuring. Raises OSError if the chip does not answer
    with its device ID, ValueError for a sensor this package has no driver for.
    """
    bus = profile["bus"]
    sensor = profile["sensor"]
    model = sensor["model"]
    pins = bus["pins"]
    if bus["type"] == "spi":
        spi = machine.SPI(bus["id"], baudrate=bus["frequency"], polarity=1, phase=1,
                          sck=machine.Pin(pins["sck"]), mosi=machine.Pin(pins["mosi"]),
                          miso=machine.Pin(pins["miso"]))
        cs = machine.Pin(pins["cs"], machine.Pin.OUT, value=1)
    else:
        i2c = machine.I2C(bus["id"], scl=machine.Pin(pins["scl"]), sda=machine.Pin(pins["sda"]),
                          freq=bus["frequency"])
    if model == "adxl345":
        from firmware_py.drivers import adxl345
        regs = SPIRegs(spi, cs, 0x80, 0x40) if bus["type"] == "spi" else I2CRegs(i2c, bus["addr"])
        return adxl345.ADXL345(regs, profile["axes"], sensor["range_g"],
                               profile["sample_rate_hz"], profile["fifo_watermark"], ticks_us)
    if model == "iis3dwb":
        from firmware_py.drivers import iis3dwb
        return iis3dwb.IIS3DWB(SPIRegs(spi, cs), profile["axes"], sensor["range_g"],
                               profile["fifo_watermark"], ticks_us)
    raise ValueError("no driver for sensor " + model)


def driver_module(model):
    """The driver module for a sensor model name, or None (the desk's virtual sensor)."""
    if model == "adxl345":
        from firmware_py.drivers import adxl345
        return adxl345
    if model == "iis3dwb":
        from firmware_py.drivers import iis3dwb
        return iis3dwb
    return None
