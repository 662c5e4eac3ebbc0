"""ADXL345 driver against the register-level model (tests/chipmodels/adxl345.py).

Reference: Analog Devices ADXL345 Data Sheet, Rev. G (revision letter from memory): Table 19
register map and reset values, Table 7 output data rates, the FIFO section, DATA_FORMAT and the
self-test tables 14 and 15.
"""
from array import array

import pytest

from tests import chip_support  # noqa: F401  (puts chipmodels on the path)
import firmware_py  # noqa: F401  (installs the micropython stand-in)
from chipmodels import adxl345 as chip
from chipmodels.base import FIFO, STREAM
from chipmodels.bus import FakeI2C, FakeMachine, FakeSPI
from firmware_py.drivers import I2CRegs, SPIRegs, open_sensor
from firmware_py.drivers.adxl345 import ADXL345

SIG = array('h', [((k * 37) % 2001) - 1000 for k in range(3 * 101)])


def make(signal=SIG, axes=3, watermark=16, spi=True, rate=3200, **kw):
    m = chip.ADXL345Model(signal, **kw)
    if spi:
        bus = FakeSPI(m, 5_000_000, 1, 1)
        regs = SPIRegs(bus, bus.cs, 0x80, 0x40)
    else:
        regs = I2CRegs(FakeI2C(m, chip.I2C_ADDR, 400_000), chip.I2C_ADDR)
    return m, ADXL345(regs, axes, 16, rate, watermark, m.ticks_us)


def test_reset_values_and_device_id():
    m = chip.ADXL345Model(SIG)
    # Table 19: DEVID 0xE5 (345 octal), BW_RATE 0x0A (100 Hz), INT_SOURCE 0x02, others 0.
    assert m.regs[chip.DEVID] == 0xE5
    assert m.regs[chip.BW_RATE] == 0x0A
    assert m._read_reg(chip.INT_SOURCE) == 0x02
    assert all(m.regs[r] == 0 for r in range(0x1D, 0x3A) if r not in (chip.BW_RATE,))
    m.regs[chip.DEVID] = 0xE6
    bus = FakeSPI(m, 5_000_000, 1, 1)
    with pytest.raises(OSError):
        ADXL345(SPIRegs(bus, bus.cs, 0x80, 0x40), 3, 16, 3200, 16, m.ticks_us)


def test_configuration_lands_in_the_right_registers():
    m, _ = make()
    w = m.writes
    # Standby first (POWER_CTL = 0), measure last (POWER_CTL bit 3, Measure) - datasheet advice
    # to configure in standby.
    assert w[0] == (chip.POWER_CTL, 0x00) and w[-1] == (chip.POWER_CTL, 0x08)
    # DATA_FORMAT: FULL_RES (bit 3) and Range 11 (+-16 g) = 0x0B.
    assert m.regs[chip.DATA_FORMAT] == 0x0B
    # BW_RATE: Rate 1111 = 3200 Hz (Table 7), LOW_POWER (bit 4) clear.
    assert m.regs[chip.BW_RATE] == 0x0F
    # FIFO_CTL: FIFO_MODE 10 (stream), Samples = watermark 16.
    assert m.regs[chip.FIFO_CTL] == 0x80 | 16
    assert m.period_ns() == 312_500       # 3200 Hz


# 3200 Hz over SPI at 5 MHz; over I2C at 400 kHz a frame read takes about 200 us, too close to
# the 312 us frame period (the data sheet recommends SPI for the top rates), so 800 Hz there.
@pytest.mark.parametrize("spi, rate", [(True, 3200), (False, 800)])
def test_watermark_reads_return_the_models_samples_exactly(spi, rate):
    m, d = make(spi=spi, rate=rate)
    assert m.period_ns() * rate == 10 ** 9
    out = array('h', [0] * (3 * 32))
    got = []
    for _ in range(40):
        m.advance_us(16 * 1_000_000 // rate)     # one watermark of frames (16)
        n = d.read_into(out)
        got.extend(out[:3 * n])
    frames = len(got) // 3
    assert frames >= 40 * 16 - 32           # all but what is still in the FIFO
    expect = [m.sample(k, a) for k in range(frames) for a in range(3)]
    assert got == expect
    assert d.gaps.lost == 0 and m.dropped == 0


def test_one_axis_keeps_x_only():
    m, d = make(axes=1)
    out = array('h', [0] * 32)
    m.advance_us(5000)
    n = d.read_into(out)
    assert n == 16 and list(out[:n]) == [m.sample(k, 0) for k in range(n)]


@pytest.mark.parametrize("stall_us", [11_000, 30_000, 250_000])
def test_overrun_is_detected_and_lost_frames_counted(stall_us):
    m, d = make()
    out = array('h', [0] * (3 * 32))
    m.advance_us(5000)
    first = d.read_into(out)
    m.advance_us(stall_us)                  # the host falls behind: the 32-level FIFO overflows
    n = d.read_into(out)
    assert m.dropped > 0 and d.gaps.overruns == 1
    # The frames read after the gap are the newest 32 the stream-mode FIFO kept.
    k0 = first + m.dropped
    assert list(out[:3 * n]) == [m.sample(k, a) for k in range(k0, k0 + n) for a in range(3)]
    # The host-clock estimate matches the model's own count within one frame (phase of the ODR).
    assert abs(d.gaps.lost - m.dropped) <= 1


def test_model_fifo_modes():
    # FIFO section: FIFO mode stops collecting when full; stream mode keeps the newest 32;
    # the watermark bit (INT_SOURCE bit 1) follows Entries >= Samples; overrun is bit 0.
    for mode, code in ((FIFO, 0x40), (STREAM, 0x80)):
        m = chip.ADXL345Model(SIG)
        m._write_reg(chip.BW_RATE, 0x0F)
        m._write_reg(chip.FIFO_CTL, code | 10)
        m._write_reg(chip.POWER_CTL, 0x08)
        m.advance_ns(9 * 312_500)
        assert m.count == 9 and m._int_source() & 0x03 == 0x00
        m.advance_ns(312_500)
        assert m._int_source() & 0x03 == 0x02
        m.advance_ns(30 * 312_500)
        assert m.count == 32 and m._int_source() & 0x01 and m.dropped == 8
        m.start(chip.DATAX0, 1)
        x = m.rd() | m.rd() << 8
        m.stop()
        first = 0 if mode == FIFO else 8
        assert x == m.sample(first, 0) & 0xFFFF and m.count == 31


def test_self_test_passes_with_in_range_deltas():
    still = array('h', [0, 0, 256] * 4)    # at rest, 1 g on z (256 LSB/g)
    m, d = make(signal=still, st_lsb=(400, -400, 600))
    passed, delta, limits = d.self_test()
    assert passed and delta == [400, -400, 600]
    # Table 15 at VS = 2.5 V scaled by Table 14 to 3.3 V (factors 1.77 x/y, 1.47 z).
    assert limits == [[50 * 177 // 100, 540 * 177 // 100], [-(540 * 177 // 100), -(50 * 177 // 100)],
                      [75 * 147 // 100, 875 * 147 // 100]]
    assert m.regs[chip.DATA_FORMAT] == 0x0B     # self-test bit cleared again


@pytest.mark.parametrize("st", [(20, -400, 600), (400, -2000, 600), (400, -400, 0)])
def test_self_test_fails_with_out_of_range_deltas(st):
    still = array('h', [0, 0, 256] * 4)
    m, d = make(signal=still, st_lsb=st)
    passed, delta, _ = d.self_test()
    assert not passed and delta == list(st)


def test_open_sensor_from_the_pico_profile():
    from firmware_py.run import board
    from pathlib import Path
    p = board.load(str(Path(__file__).parent.parent / "boards" / "pico_adxl345.json"))
    m = chip.ADXL345Model(SIG)
    mach = FakeMachine(m)
    d = open_sensor(p, mach, m.ticks_us)
    # SPI: CPOL = 1, CPHA = 1 (data sheet "SPI" section), 5 MHz maximum clock.
    assert [c for c in mach.calls if c[0] == "SPI"] == [("SPI", 0, 5_000_000, 1, 1, 18, 19, 16)]
    assert m.regs[chip.FIFO_CTL] == 0x80 | p["fifo_watermark"]
    m.advance_us(5000)
    out = array('h', [0] * 96)
    assert d.read_into(out) == 16


def test_model_bypass_mode_overrun():
    # INT_SOURCE Overrun in bypass mode: "set when new data replaces unread data"; reading the
    # data registers clears it, and DATA_READY (bit 7) follows fresh data.
    m = chip.ADXL345Model(SIG)
    m._write_reg(chip.BW_RATE, 0x0F)
    m._write_reg(chip.POWER_CTL, 0x08)
    m.advance_ns(312_500)
    assert m._int_source() & 0x81 == 0x80
    m.advance_ns(312_500)
    assert m._int_source() & 0x01 and m.dropped == 1
    m.start(chip.DATAX0, 1)
    x = m.rd() | m.rd() << 8
    m.stop()
    assert x == m.sample(1, 0) & 0xFFFF and m._int_source() & 0x81 == 0


def test_open_sensor_on_i2c():
    import copy
    import json
    from pathlib import Path
    from firmware_py.run import board
    p = json.loads((Path(__file__).parent.parent / "boards" / "pico_adxl345.json").read_text())
    p = copy.deepcopy(p)
    p["bus"] = {"type": "i2c", "id": 0, "pins": {"scl": 5, "sda": 4}, "frequency": 400_000,
                "addr": chip.I2C_ADDR}
    p["sample_rate_hz"] = 800
    p["axes"] = 3                     # the I2C read path of all three axes
    board.check(p)
    m = chip.ADXL345Model(SIG)
    mach = FakeMachine(m, chip.I2C_ADDR)
    d = open_sensor(p, mach, m.ticks_us)
    assert [c for c in mach.calls if c[0] == "I2C"] == [("I2C", 0, 5, 4, 400_000)]
    assert m.regs[chip.BW_RATE] == 0x0D          # Table 7: 800 Hz
    m.advance_us(20_000)
    out = array('h', [0] * 96)
    assert d.read_into(out) == 16
    assert list(out[:48]) == [m.sample(k, a) for k in range(16) for a in range(3)]
