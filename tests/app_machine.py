# Stand-ins for what firmware_py/run/app.py takes from MicroPython: the machine module (Pin, SPI
# routed to a chip model from tests/chipmodels, a WDT that records feeds, a Timer the test
# fires, reset) and a serial link (a byte queue each way, polled through a select stand-in).
# Plain MicroPython-subset code: the guest tests import it too (staged beside chipmodels).
from chipmodels.bus import FakeSPI


class Reset(Exception):
    """machine.reset() was called: on a board it never returns."""


class StandInMachine:
    """chip: the chip model on the SPI bus; cs_pin: the GPIO number of its chip select.
    Records: pins (number -> Pin), wdts (each with .feeds), timers, resets."""

    def __init__(self, chip, cs_pin):
        self.chip = chip
        self.cs_pin = cs_pin
        self.spi = None
        self.pins = {}
        self.driven = []                  # (pin number, level) of every level driven, all pins
        self.wdts = []
        self.timers = []
        self.resets = 0
        machine = self

        class Pin:
            IN = 0
            OUT = 1

            def __init__(self, n, mode=-1, value=None):
                self.n = n
                self.level = 0
                self.levels = []          # every level driven, in order
                machine.pins[n] = self
                if value is not None:
                    self.value(value)

            def value(self, v=None):
                if self.n == machine.cs_pin and machine.spi is not None:
                    return machine.spi.cs.value(v)
                if v is None:
                    return self.level
                self.level = 1 if v else 0
                self.levels.append(self.level)
                machine.driven.append((self.n, self.level))
                return None

        class WDT:
            def __init__(self, id=0, timeout=5000):
                self.timeout = timeout
                self.feeds = 0
                machine.wdts.append(self)

            def feed(self):
                self.feeds += 1

        class Timer:
            ONE_SHOT = 0
            PERIODIC = 1

            def __init__(self, id=-1):
                self.id = id
                self.callback = None
                self.period = 0
                machine.timers.append(self)

            def init(self, mode=1, period=-1, callback=None):
                self.mode = mode
                self.period = period
                self.callback = callback

            def fire(self):
                """What the port's scheduler does when the period has passed."""
                self.callback(self)

        self.Pin = Pin
        self.WDT = WDT
        self.Timer = Timer

    def SPI(self, id, baudrate, polarity=0, phase=0, sck=None, mosi=None, miso=None):
        self.spi = FakeSPI(self.chip, baudrate, polarity, phase)
        return self.spi

    def reset(self):
        self.resets += 1
        raise Reset()


class StreamPair:
    """One end of a serial link: the test puts bytes in (send) and takes replies out (take)."""

    def __init__(self):
        self.rx = bytearray()
        self.tx = bytearray()

    def send(self, data):
        self.rx += data

    def take(self):
        out = bytes(self.tx)
        self.tx = bytearray()
        return out

    def readinto(self, buf):
        k = len(buf) if len(buf) <= len(self.rx) else len(self.rx)
        buf[0:k] = self.rx[0:k]
        self.rx = self.rx[k:]
        return k

    def write(self, data):
        self.tx += data
        return len(data)


class StandInSelect:
    """select.poll over StreamPair objects: readable while bytes wait."""
    POLLIN = 1

    def poll(self):
        return _Poll()


class _Poll:
    def __init__(self):
        self.objs = []

    def register(self, obj, mask=1):
        self.objs.append(obj)

    def poll(self, timeout=-1):
        return [(o, 1) for o in self.objs if len(o.rx)]
