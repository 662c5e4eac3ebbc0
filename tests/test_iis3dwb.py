"""IIS3DWB driver against the register-level model (tests/chipmodels/iis3dwb.py).

Reference: ST datasheet DS12569 (IIS3DWB) register description (document number and revision
from memory); register and bit names agree with ST's reference driver iis3dwb_reg.h
(github.com/STMicroelectronics/iis3dwb-pid); self-test limits from ST's iis3dwb_self_test.c.
"""
from array import array

import pytest

from tests import chip_support  # noqa: F401  (puts chipmodels on the path)
import firmware_py  # noqa: F401
from chipmodels import iis3dwb as chip
from chipmodels.bus import FakeMachine, FakeSPI
from firmware_py.drivers import SPIRegs, open_sensor
from firmware_py.drivers.iis3dwb import IIS3DWB, counts_per_g

SIG = array('h', [((k * 91) % 20001) - 10000 for k in range(3 * 307)])


def make(signal=SIG, axes=3, watermark=128, range_g=16, **kw):
    m = chip.IIS3DWBModel(signal, **kw)
    bus = FakeSPI(m, 10_000_000, 1, 1)
    return m, IIS3DWB(SPIRegs(bus, bus.cs), axes, range_g, watermark, m.ticks_us)


def test_reset_values_and_device_id():
    m = chip.IIS3DWBModel(SIG)
    assert m.regs[chip.WHO_AM_I] == 0x7B            # WHO_AM_I (0Fh) = 7Bh
    assert m.regs[chip.CTRL3_C] == 0x04             # IF_INC set after reset
    assert m.regs[chip.CTRL1_XL] == 0 and m.period_ns() == 0   # accelerometer off at reset
    m.regs[chip.WHO_AM_I] = 0x6A
    bus = FakeSPI(m, 10_000_000, 1, 1)
    with pytest.raises(OSError):
        IIS3DWB(SPIRegs(bus, bus.cs), 3, 16, 128, m.ticks_us)


def test_configuration_lands_in_the_right_registers():
    m, _ = make(watermark=300)
    regs = [r for r, _ in m.writes]
    assert m.writes[0] == (chip.CTRL3_C, 0x01)      # SW_RESET first
    assert m.regs[chip.CTRL3_C] == 0x44             # BDU (bit 6) and IF_INC (bit 2)
    assert m.regs[chip.CTRL1_XL] == 0xA4            # XL_EN = 101 (26.667 kHz), FS_XL = 01 (16 g)
    assert m.regs[chip.FIFO_CTRL1] == 300 & 0xFF    # WTM[7:0]
    assert m.regs[chip.FIFO_CTRL2] == 300 >> 8      # WTM8 in bit 0, STOP_ON_WTM clear
    assert m.regs[chip.FIFO_CTRL3] == 0x0A          # BDR_XL = 1010, batch at 26667 Hz
    assert m.regs[chip.FIFO_CTRL4] == 0x06          # FIFO_MODE = 110, continuous
    assert regs.index(chip.FIFO_CTRL4) == len(regs) - 1
    assert m.period_ns() == 37_500                  # 26.667 kHz


@pytest.mark.parametrize("range_g, code, cpg", [(2, 0, 16393), (4, 2, 8196), (8, 3, 4098), (16, 1, 2049)])
def test_full_scale_codes_and_sensitivity(range_g, code, cpg):
    # FS_XL 00 2 g, 01 16 g, 10 4 g, 11 8 g; sensitivity 0.061/0.122/0.244/0.488 mg/LSB.
    m, _ = make(range_g=range_g)
    assert (m.regs[chip.CTRL1_XL] >> 2) & 3 == code
    assert counts_per_g(range_g) == cpg == int(1000 / (0.061 * range_g / 2))


@pytest.mark.parametrize("axes", [1, 3])
def test_watermark_bursts_return_the_models_samples_exactly(axes):
    m, d = make(axes=axes)
    out = array('h', [0] * (axes * 512))
    got = []
    for _ in range(30):
        m.advance_us(128 * 375 // 10)               # 128 frames at 37.5 us
        n = d.read_into(out)
        assert n % 128 == 0                          # whole watermark bursts only
        got.extend(out[:axes * n])
    frames = len(got) // axes
    assert frames >= 30 * 128 - 256
    assert got == [m.sample(k, a) for k in range(frames) for a in range(axes)]
    assert d.gaps.lost == 0 and m.dropped == 0


def test_fifo_status_flags():
    m, _ = make(watermark=100)
    m.advance_ns(99 * 37_500)
    assert m.count == 99 and m._read_reg(chip.FIFO_STATUS2) & 0x80 == 0
    m.advance_ns(37_500)
    assert m._read_reg(chip.FIFO_STATUS2) & 0x80     # FIFO_WTM_IA at level >= WTM
    m.advance_ns(500 * 37_500)
    s2 = m._read_reg(chip.FIFO_STATUS2)
    # DIFF_FIFO = 512 (bit 9 in FIFO_STATUS2 bit 1), FIFO_OVR_IA, FIFO_FULL_IA, OVR_LATCHED.
    assert m._read_reg(chip.FIFO_STATUS1) == 0 and s2 == 0x80 | 0x40 | 0x20 | 0x08 | 0x02
    assert m._read_reg(chip.FIFO_STATUS2) & 0x08 == 0   # latched bit cleared by the read
    assert m.dropped == 600 - 512


@pytest.mark.parametrize("stall_us", [25_000, 100_000])
def test_overrun_is_detected_and_lost_frames_counted(stall_us):
    m, d = make(axes=3)
    out = array('h', [0] * (3 * 512))
    m.advance_us(5000)
    first = d.read_into(out)
    m.advance_us(stall_us)
    n = d.read_into(out)
    assert m.dropped > 0 and d.gaps.overruns == 1
    k0 = first + m.dropped                      # continuous mode overwrote the oldest
    assert list(out[:3 * n]) == [m.sample(k, a) for k in range(k0, k0 + n) for a in range(3)]
    assert abs(d.gaps.lost - m.dropped) <= 1


def test_self_test_passes_with_in_range_deltas():
    still = array('h', [0, 0, 2049] * 4)
    m, d = make(signal=still, st_mg=(1500, 1200, 2500))
    passed, delta, limits = d.self_test()
    # Delta in mg at +-4 g (0.122 mg/LSB): the model's mg come back within one LSB of rounding.
    assert passed and limits == [800, 3200]
    assert all(abs(dm - st) <= 1 for dm, st in zip(delta, (1500, 1200, 2500)))
    assert m.regs[chip.CTRL5_C] == 0 and m.regs[chip.CTRL1_XL] == 0xA4   # restored


@pytest.mark.parametrize("st", [(500, 1500, 1500), (1500, 3500, 1500), (1500, 1500, 0)])
def test_self_test_fails_with_out_of_range_deltas(st):
    still = array('h', [0, 0, 2049] * 4)
    m, d = make(signal=still, st_mg=st)
    passed, delta, _ = d.self_test()
    assert not passed


def test_open_sensor_from_the_esp32s3_profile():
    from pathlib import Path
    from firmware_py.run import board
    p = board.load(str(Path(__file__).parent.parent / "boards" / "esp32s3_iis3dwb.json"))
    m = chip.IIS3DWBModel(SIG)
    mach = FakeMachine(m)
    d = open_sensor(p, mach, m.ticks_us)
    assert [c for c in mach.calls if c[0] == "SPI"] == [("SPI", 1, 10_000_000, 1, 1, 12, 11, 13)]
    m.advance_us(10_000)
    out = array('h', [0] * 512)
    assert d.read_into(out) == 256 and d.axes == 1


def test_model_fifo_mode_stops_when_full():
    # FIFO_MODE = 001: the FIFO stops collecting when full; the oldest frames are kept.
    m, _ = make()
    m._write_reg(chip.FIFO_CTRL4, 0x00)     # bypass empties it
    m._write_reg(chip.FIFO_CTRL4, 0x01)
    m.k = 0
    m.advance_ns(600 * 37_500)
    assert m.count == 512 and m.dropped == 88
    m.start(chip.FIFO_DATA_OUT_TAG, 1)
    assert m.rd() == 0x02 << 3               # TAG_SENSOR = accelerometer
    x = m.rd() | m.rd() << 8
    assert x == m.sample(0, 0) & 0xFFFF and m.count == 511
