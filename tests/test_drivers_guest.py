"""The drivers' read paths on both real MicroPythons (tests/engines.py): allocation-free
under heap_lock with the chip models behind the bus, samples exact, overrun counted; and their
cost per FIFO block in guest fuel (deterministic), with a minimal bus so the models' own cost
is left out."""
import pytest

from tests import chip_support
from tests.engines import ENGINES
from host_tools.twin.mpy_guest import run_guest

chip_support.stage_models_in_guest()

_SETUP = """
from array import array
import firmware_py
from chipmodels.bus import FakeSPI
from firmware_py.drivers import SPIRegs
sig = array('h', [((k * 37) % 2001) - 1000 for k in range(303)])
"""

_ADXL = _SETUP + """
from chipmodels.adxl345 import ADXL345Model
from firmware_py.drivers.adxl345 import ADXL345
m = ADXL345Model(sig)
bus = FakeSPI(m, 5000000, 1, 1)
d = ADXL345(SPIRegs(bus, bus.cs, 0x80, 0x40), 3, 16, 3200, 16, m.ticks_us)
out = array('h', [0] * 96)
BLOCK_US = 5000
"""

_IIS = _SETUP + """
from chipmodels.iis3dwb import IIS3DWBModel
from firmware_py.drivers.iis3dwb import IIS3DWB
m = IIS3DWBModel(sig)
bus = FakeSPI(m, 10000000, 1, 1)
d = IIS3DWB(SPIRegs(bus, bus.cs), 3, 16, 128, m.ticks_us)
out = array('h', [0] * 1536)
BLOCK_US = 4800
"""

_RUN = """
def rd():
    return d.read_into(out)
k = 0
ok_all = True
exact = True
for step in range(12):
    m.advance_us(BLOCK_US if step != 6 else 40000)     # step 6: the host stalls, FIFO overruns
    ok, n = locked(rd)
    ok_all = ok_all and ok
    if step == 6:
        k += m.dropped          # after the stall the FIFO holds the newest frames
    for j in range(n):
        for a in range(3):
            exact = exact and out[3 * j + a] == m.sample(k + j, a)
    k += n
emit([ok_all, exact, k, m.dropped, d.gaps.lost, d.gaps.overruns])
"""


@ENGINES
@pytest.mark.parametrize("setup", [_ADXL, _IIS], ids=["adxl345", "iis3dwb"])
def test_read_path_allocates_nothing_and_is_exact_on_micropython(setup, run):
    res = run(setup + _RUN)
    ok, exact, frames, dropped, lost, overruns = res.out[0]
    assert ok, "read_into allocated under heap_lock"
    assert exact and frames > 0
    assert dropped > 0 and overruns == 1 and abs(lost - dropped) <= 1


# A minimal bus: status reads report a fixed FIFO level, data reads leave the buffer as it is
# (prefilled with valid frames), chip select does nothing: what remains is the driver's own cost.
_MIN_BUS = """
from array import array
import firmware_py
from firmware_py.drivers import SPIRegs, GapCounter
class Pin:
    def value(self, v=None):
        return 1
class Bus:
    def __init__(self, s0, s1):
        self.s0 = s0
        self.s1 = s1
    def write(self, buf):
        pass
    def readinto(self, buf, write=0):
        n = len(buf)
        if n <= 2:
            buf[0] = self.s0
            if n == 2:
                buf[1] = self.s1
def ticks():
    return 0
"""

_MIN_ADXL = _MIN_BUS + """
from firmware_py.drivers import adxl345
class Quiet(adxl345.ADXL345):
    def __init__(self, regs):
        self._regs = regs
        self.axes = 3
        self._raw, self._slots = adxl345.frame_slots()
        self._one = bytearray(1)
        self.gaps = GapCounter(ticks, 5000)
bus = Bus(16, 0)                     # FIFO_STATUS Entries = 16, INT_SOURCE without overrun
d = Quiet(SPIRegs(bus, Pin(), 0x80, 0x40))
out = array('h', [0] * 96)
"""

_MIN_IIS = _MIN_BUS + """
from firmware_py.drivers import iis3dwb
class Quiet(iis3dwb.IIS3DWB):
    def __init__(self, regs, wm):
        self._regs = regs
        self.axes = AXES
        self._wm = wm
        self._blk = bytearray(b'\\x10\\x01\\x00\\x02\\x00\\x03\\x00' * wm)   # accelerometer words
        self._status = bytearray(2)
        self.gaps = GapCounter(ticks, 600)
bus = Bus(0, 1)                      # DIFF_FIFO = 256: two bursts of 128
d = Quiet(SPIRegs(bus, Pin()), 128)
out = array('h', [0] * 768)
"""
_MIN_IIS3 = "AXES = 3\n" + _MIN_IIS
_MIN_IIS1 = "AXES = 1\n" + _MIN_IIS


def _fuel(setup, reads):
    body = setup + """
for _ in range(%d):
    n = d.read_into(out)
emit(n)
""" % reads
    res = run_guest(body)
    return res.fuel, res.out[0]


# What the Python stand-ins themselves cost per transaction (two Pin.value, write, readinto):
# C functions on a board, so subtracted to leave the driver's own share.
_STUB_ONLY = _MIN_BUS + """
pin = Pin()
bus = Bus(0, 0)
cmd = bytearray(1)
buf = bytearray(6)
for _ in range(%d):
    pin.value(0)
    bus.write(cmd)
    bus.readinto(buf)
    pin.value(1)
emit(0)
"""


@pytest.mark.parametrize("setup, frames, transactions",
                         [(_MIN_ADXL, 16, 18), (_MIN_IIS3, 256, 3), (_MIN_IIS1, 256, 3)],
                         ids=["adxl345-3axes", "iis3dwb-3axes", "iis3dwb-1axis"])
def test_read_cost_per_fifo_block(setup, frames, transactions, record_property):
    f1, n1 = _fuel(setup, 1)
    f5, n5 = _fuel(setup, 5)
    assert n1 == n5 == frames
    per_read = (f5 - f1) // 4
    stub = (run_guest(_STUB_ONLY % (5 * transactions)).fuel
            - run_guest(_STUB_ONLY % transactions).fuel) // 4
    own = per_read - stub
    record_property("fuel_per_read", per_read)
    record_property("fuel_per_read_driver_only", own)
    print("fuel per read of %d frames: %d with stand-ins, %d driver only (%d per frame)"
          % (frames, per_read, own, own // frames))
    # The decode is per sample: a read costs more than its transactions' stand-in calls.
    assert 0 < stub < per_read and own > frames * 3
