# Stand-ins for machine.I2C, machine.SPI and machine.Pin (the MicroPython "machine" module API:
# I2C.readfrom_mem_into / writeto_mem, SPI.write / readinto, Pin.value) that route each
# transaction to a chip model and let simulated time pass for the bytes on the wire.


class FakeI2C:
    """An I2C bus at freq Hz with one chip at 7-bit address addr. Each transfer costs 9 bits per
    byte: address + register, a repeated start and address for reads, then the data."""

    def __init__(self, chip, addr, freq):
        self.chip = chip
        self.addr = addr
        self._ns_per_bit = 1000000000 // freq

    def _check(self, addr):
        if addr != self.addr:
            raise OSError(19)                    # ENODEV, as MicroPython reports a NACK

    def readfrom_mem_into(self, addr, memaddr, buf):
        self._check(addr)
        chip = self.chip
        chip.i2c_start(memaddr)
        for i in range(len(buf)):
            buf[i] = chip.rd()
        chip.stop()
        chip.advance_ns((len(buf) + 3) * 9 * self._ns_per_bit)

    def writeto_mem(self, addr, memaddr, buf):
        self._check(addr)
        chip = self.chip
        chip.i2c_start(memaddr)
        for i in range(len(buf)):
            chip.wr(buf[i])
        chip.stop()
        chip.advance_ns((len(buf) + 2) * 9 * self._ns_per_bit)


class FakeSPI:
    """An SPI bus at baudrate Hz to one chip; its chip-select pin is cs (FakeCS)."""

    def __init__(self, chip, baudrate, polarity=0, phase=0):
        self.chip = chip
        self.baudrate = baudrate
        self.polarity = polarity
        self.phase = phase
        self._ns_per_byte = 8 * (1000000000 // baudrate)
        self.cs = FakeCS(self)
        self._selected = 0
        self._first = 0
        self._read = 0
        self._bytes = 0

    def _select(self):
        self._selected = 1
        self._first = 1
        self._bytes = 0

    def _deselect(self):
        if self._selected:
            self._selected = 0
            self.chip.stop()
            self.chip.advance_ns(self._bytes * self._ns_per_byte)

    def write(self, buf):
        if not self._selected:
            raise OSError(5)                     # bytes with CS high reach no chip
        chip = self.chip
        for i in range(len(buf)):
            self._bytes += 1
            if self._first:
                self._first = 0
                self._read = chip.spi_command(buf[i])
            elif not self._read:
                chip.wr(buf[i])

    def readinto(self, buf, write=0):
        if not self._selected or self._first or not self._read:
            raise OSError(5)                     # a read needs a read command first
        chip = self.chip
        for i in range(len(buf)):
            self._bytes += 1
            buf[i] = chip.rd()


class FakeCS:
    """The chip-select line, active low, as machine.Pin.value(v) drives it."""

    def __init__(self, spi):
        self._spi = spi
        self.level = 1

    def value(self, v=None):
        if v is None:
            return self.level
        if v and not self.level:
            self.level = 1
            self._spi._deselect()
        elif not v and self.level:
            self.level = 0
            self._spi._select()
        return None


class FakeMachine:
    """Enough of the machine module for drivers.open_sensor: SPI and I2C construct stand-ins on
    this chip; Pin(n, Pin.OUT, ...) returns the chip select of the last SPI made. Records the
    constructor arguments in self.calls. CPython only."""

    def __init__(self, chip, i2c_addr=0):
        self.chip = chip
        self.i2c_addr = i2c_addr
        self.calls = []
        self.spi = None
        machine = self

        class Pin:
            OUT = 1
            IN = 0

            def __new__(cls, n, mode=-1, value=None):
                machine.calls.append(("Pin", n, mode, value))
                if mode == 1 and machine.spi is not None:
                    if value is not None:
                        machine.spi.cs.value(value)
                    return machine.spi.cs
                return n
        self.Pin = Pin

    def SPI(self, id, baudrate, polarity=0, phase=0, sck=None, mosi=None, miso=None):
        self.calls.append(("SPI", id, baudrate, polarity, phase, sck, mosi, miso))
        self.spi = FakeSPI(self.chip, baudrate, polarity, phase)
        return self.spi

    def I2C(self, id, scl=None, sda=None, freq=400000):
        self.calls.append(("I2C", id, scl, sda, freq))
        return FakeI2C(self.chip, self.i2c_addr, freq)
