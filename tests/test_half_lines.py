"""The half-order prominence (firmware_py/detect/half_lines.py) against numpy.fft.fft of the same
taps, its block and average rules, and the same bits without allocation on a real MicroPython.
Tolerances are derived from the integer pipeline's floor shifts (stated beside each)."""
import json
import math
import textwrap
from array import array

import numpy as np
import pytest

from firmware_py.detect import half_lines as hl
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.tables import log2_table
from host_tools.twin.mpy_guest import run_guest

PA = fi.per_axis(0)
TAB = log2_table()


def _rows(taps, x1_q8):
    """Feature rows of one axis carrying taps (windows, 3) complex and the 1x x1_q8 (bins Q8)."""
    rows = []
    for t in taps:
        f = array("i", bytes(4 * PA))
        f[fi.F_TAP_X1] = x1_q8
        for i in range(3):
            f[fi.F_TAP_RE + 2 * i] = int(t[i].real)
            f[fi.F_TAP_RE + 2 * i + 1] = int(t[i].imag)
        rows.append(f)
    return rows


def _taps(b, every, x1_q8, amp, noise, rng, blocks):
    """blocks x b windows of taps: per half order a line at its true place (odd/2 x 1x, offset
    from its tap's bin), turning by 2 pi x offset x every per analysed window, plus complex
    Gaussian noise of r.m.s. `noise` per component; integer, as the feature core writes them."""
    j = np.arange(blocks * b)
    out = np.zeros((len(j), 3), complex)
    for i, odd in enumerate((1, 3, 5)):
        off = odd * x1_q8 / 512 - ((odd * x1_q8 + 256) >> 9)
        out[:, i] = amp * np.exp(2j * np.pi * (off * every * j + 0.3 * i))
    out += noise * (rng.standard_normal(out.shape) + 1j * rng.standard_normal(out.shape))
    return np.round(out.real) + 1j * np.round(out.imag)


def _images(x1_q8, every, b):
    """Cells from each half-order line to the whole orders' nearest images: each whole order turns
    a whole multiple of x1 x every / 2 cycles per window from the line (k x1 - odd x1 / 2), so
    modulo one cycle, times the block, taken around the circle."""
    d = (x1_q8 * every / 512) % 1 * b
    return min(d, b - d)


def _reference(block, x1_q8, every):
    """Prominence of one block in floats: numpy.fft.fft of the Hann-windowed taps (periodic Hann,
    as tables.hann), line cells within HALF_WIDTH of the place the line turns to, log2 of their
    mean power over the mean of the cells that are neither the line's nor within ALIAS_WIDTH of
    the whole orders' images, averaged over the three taps. Also the interval the integer
    pipeline can reach, from its floor shifts (see the test)."""
    b = len(block)
    im = _images(x1_q8, every, b)
    w = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(b) / b)
    vals, lo, hi = [], [], []
    for i, odd in enumerate((1, 3, 5)):
        t = block[:, i]
        top = max(np.abs(t.real).max(), np.abs(t.imag).max())
        sh = int(top).bit_length() - 1 - 13
        tn = t / 2.0 ** sh                                   # the device's normalisation, exactly
        Y = np.fft.fft(tn * w)
        off = odd * (x1_q8 // 1) / 512 - ((odd * x1_q8 + 256) >> 9)
        c0 = (off * every * b) % b
        d = np.abs((np.arange(b) - c0 + b / 2) % b - b / 2)
        line = d <= hl.HALF_WIDTH
        side = ~line & ((np.abs((np.arange(b) - c0 - im + b / 2) % b - b / 2) <= hl.ALIAS_WIDTH)
                        | (np.abs((np.arange(b) - c0 + im + b / 2) % b - b / 2) <= hl.ALIAS_WIDTH))
        floor = ~line & ~side
        P = np.abs(Y) ** 2 / 2 ** 12
        vals.append(math.log2(P[line].mean() / P[floor].mean()))
        # Floor errors: the shift and the Hann product each floor a component (< 1 LSB each, so
        # |dt| < 2 per component); each DFT term floors once per component (< 1 per term), and
        # the shifted taps move a cell by < 2 * 2 * b through the unit twiddles: |dY| < 5 b per
        # component, then (Y >> 6) adds < 1, so |dY'| < 5 b / 64 + 1 per component, |.| times
        # sqrt(2) in magnitude. The energy sum floors |t|**2 >> 7 (< 1 per term) and the taps'
        # error moves |t|**2 by < 2 |t| |dt| * 2; scaled by b / 32 like the cells.
        ey = math.sqrt(2) * (5 * b / 64 + 1)
        a = np.sqrt(P[line])
        l_lo, l_hi = (np.maximum(a - ey, 0) ** 2).sum(), ((a + ey) ** 2).sum()
        s_ = np.sqrt(P[side])
        s_lo, s_hi = (np.maximum(s_ - ey, 0) ** 2).sum(), ((s_ + ey) ** 2).sum()
        e = (np.abs(tn * w) ** 2).sum() / 2 ** 7 * b / 32
        de = (b + (4 * np.sqrt(2) * np.abs(tn * w)).sum() / 2 ** 7) * b / 32 + 1
        nl, nf = line.sum(), floor.sum()
        lo.append(math.log2(max(l_lo, 1) / nl) - math.log2(max(e + de - l_lo - s_lo, 1) / nf))
        hi.append(math.log2(max(l_hi, 1) / nl) - math.log2(max(e - de - l_hi - s_hi, 1) / nf))
    return np.mean(vals), np.mean(lo), np.mean(hi)


def _average_of(det, rows):
    for f in rows:
        det.push(f, True)
    return det.value[0]


@pytest.mark.parametrize("every,x1_q8,amp", [(1, 1152, 3000.0), (1, 1300, 400.0), (2, 1234, 2000.0), (1, 1000, 2000.0)])
def test_block_prominence_matches_numpy(every, x1_q8, amp):
    # 2**SHIFT equal blocks make the average exactly the block's prominence (a sum of equal values
    # over 2**SHIFT); that value against the float reference, within the interval the floor
    # shifts allow, widened by the log2_q8 rounding (1 LSB, Q8, for each of the four logs) and the
    # integer mean of three (< 1 LSB)
    b = hl.BLK                 # 1000: the whole orders' images 1.5 cells from the lines, within them
    rng = np.random.default_rng(3)
    block = _taps(b, every, x1_q8, amp, 1500.0, rng, 1)
    rows = _rows(np.tile(block, (1 << hl.SHIFT, 1)), x1_q8)
    det = hl.HalfLines(1, PA, every, 205, TAB)
    got = _average_of(det, rows) / 256
    ref, lo, hi = _reference(block, x1_q8, every)
    assert lo - 5 / 256 <= got <= hi + 5 / 256, (got, ref, lo, hi)
    assert abs(got - ref) < 0.1


def test_line_is_looked_for_where_it_turns():
    # a line that turns by 2 pi x offset x 2 per window (one window in two analysed) stands out
    # only when the detector is told that time base: told every = 1, it looks in the wrong cells
    x1 = 1234                  # images 5.75 cells from the lines told every = 2, 11.1 told 1
    rng = np.random.default_rng(8)
    block = _taps(hl.BLK, 2, x1, 2000.0, 300.0, rng, 1 << hl.SHIFT)
    right = _average_of(hl.HalfLines(1, PA, 2, 205, TAB), _rows(block, x1))
    wrong = _average_of(hl.HalfLines(1, PA, 1, 205, TAB), _rows(block, x1))
    assert right > 4 * 256 and wrong < 256


def test_average_counts_from_eight_blocks_and_again_after_a_speed_move():
    x1 = 1300
    b = hl.BLK
    rng = np.random.default_rng(1)
    det = hl.HalfLines(1, PA, 1, 205, TAB)                      # steady tolerance 5 %
    rows = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, 1 << hl.SHIFT), x1)
    for f in rows[:-1]:
        det.push(f, True)
    assert det.value[0] == hl.UNSET                        # 8 blocks less one window
    det.push(rows[-1], True)
    assert det.value[0] != hl.UNSET
    moved = int(x1 * 1.2)                                  # a new operating speed: 20 % away
    near = int(x1 * 1.04)                                  # within the tolerance: the same one
    det.push(_rows(_taps(b, 1, near, 500.0, 500.0, rng, 1), near)[0], True)
    assert det.value[0] != hl.UNSET
    det.push(_rows(_taps(b, 1, moved, 500.0, 500.0, rng, 1), moved)[0], True)
    assert det.value[0] == hl.UNSET                        # from the first window there


def test_a_gap_or_an_unsteady_window_restarts_the_block():
    x1 = 1300
    b = hl.BLK
    rng = np.random.default_rng(2)
    rows = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, 1), x1)
    det = hl.HalfLines(1, PA, 1, 205, TAB)
    for f in rows[:-1]:
        det.push(f, True)
    det.cut()
    det.push(rows[-1], True)
    for f in rows[:-2]:
        det.push(f, False if f is rows[5] else True)
    assert det.cnt[0] == 0                                 # no block was closed


def _whole_orders(b, every, x1_q8, amp, blocks):
    """The taps a healthy pump's whole orders leave: per tap, the two whole orders each side of
    its half order (k x1 for k = (odd -+ 1) / 2), each leaking into the tap's bin at amp and
    turning at its own offset from that bin."""
    j = np.arange(blocks * b)
    out = np.zeros((len(j), 3), complex)
    for i, odd in enumerate((1, 3, 5)):
        k0 = (odd * x1_q8 + 256) >> 9
        for k in ((odd - 1) // 2, (odd + 1) // 2):
            out[:, i] += amp * np.exp(2j * np.pi * ((k * x1_q8 / 256 - k0) * every * j + 0.7 * k))
    return out


@pytest.mark.parametrize("x1_q8", [1152, 1300])
def test_whole_orders_leaking_into_the_taps_leave_the_prominence_alone(x1_q8):
    # A healthy pump's 1x, 2x and 3x leak into the half orders' taps through the window's side
    # lobes, 30 dB over one cell's noise here. Their images are left out of the floor, so the
    # prominence stays where noise alone puts it: the mean of 8 blocks' log2 ratio of two means
    # of exponential powers, whose spread per tap is at most sqrt(trigamma(7 / 1.5)) / ln 2 (the
    # line's 7 cells over the Hann window's ENBW of 1.5 cells, Harris, Proc. IEEE 66, 1978; the
    # log of a Gamma(k) variable has variance trigamma(k), a textbook property), over 3 taps and
    # 8 blocks; 4 standard deviations either side (a normal tail of 6e-5). Left in the floor, the
    # same leakage would pull it far under: the check that fails without the images' exclusion.
    from scipy import special
    b = hl.BLK                 # images away from the lines (on them, only the taps' nulls help:
    assert _images(x1_q8, 1, b) > hl.HALF_WIDTH + hl.ALIAS_WIDTH   # test_orders_envelope)
    rng = np.random.default_rng(11)
    noise = 300.0
    taps = _taps(b, 1, x1_q8, 0.0, noise, rng, 1 << hl.SHIFT)
    lead = noise * math.sqrt(2) * math.sqrt(b * 3 / 8) * 10 ** (30 / 20) / (b / 2)   # 30 dB over a cell
    taps = taps + np.round(_whole_orders(b, 1, x1_q8, lead, 1 << hl.SHIFT))
    got = _average_of(hl.HalfLines(1, PA, 1, 205, TAB), _rows(taps, x1_q8)) / 256
    sd = math.sqrt(float(special.polygamma(1, (2 * hl.HALF_WIDTH + 1) / 1.5))) / math.log(2) / math.sqrt(3 * (1 << hl.SHIFT))
    assert abs(got) < 4 * sd, (got, sd)


SCENARIO = """
from array import array
from firmware_py.detect.half_lines import HalfLines
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.tables import log2_table

PA = fi.per_axis(0)
AXES = 2
NW = 720
h = HalfLines(AXES, PA, 1, 205, log2_table())
seed = [99]
def rnd(a):
    seed[0] = (seed[0] * 1103515245 + 12345) & 0x7FFFFFFF
    return (seed[0] >> 8) % (2 * a) - a
feats = array("i", bytes(4 * AXES * PA * NW))
for w in range(NW):
    for a in range(AXES):
        b = (w * AXES + a) * PA
        # read blocks, then a speed move to one whose whole orders' images sit on the line, then a third
        feats[b + fi.F_TAP_X1] = 1152 if w < 320 else 1000 if w < 420 else 1300
        for i in range(6):
            feats[b + fi.F_TAP_RE + i] = rnd((1 << 24) if w % 97 == 0 else 3000)
out = array("i", bytes(4 * AXES * NW))
f = array("i", bytes(4 * AXES * PA))

def run_all():
    for w in range(NW):
        for j in range(AXES * PA):
            f[j] = feats[w * AXES * PA + j]
        if w == 250:
            h.cut()
        h.push(f, w % 150 != 0)
        for a in range(AXES):
            out[w * AXES + a] = h.value[a]
    return 0

ok, _ = locked(run_all)
emit([ok, list(out)])
"""


def test_same_bits_and_no_allocation_on_micropython():
    # every path of push() and the block's close under the guest's heap lock, against CPython
    guest = run_guest(SCENARIO).out[0]
    host = []
    exec(textwrap.dedent(SCENARIO), {"emit": lambda v: host.append(json.loads(json.dumps(v))),
                                     "locked": lambda fn: (True, fn())})
    assert guest[0] is True
    assert guest[1] == host[0][1]
    assert any(v != hl.UNSET for v in host[0][1])          # averages were made


def _leak_on_line(f_hz, n=512, fs=3200.0, b=32):
    """numpy alone: a lone 1x tone at f_hz (no half-order line at all; white noise 60 dB down),
    Hann windows of n, the rfft bin nearest 0.5x followed over b windows, Hann across them, its
    fft. Returns the mean power of the cells within HALF_WIDTH of where a 0.5x line would turn
    to, over the others' (log2), and over the tone's own peak cell, the 1x bin followed the same
    way (dB)."""
    rng = np.random.default_rng(4)
    t = np.arange(n * b) / fs
    x = np.cos(2 * np.pi * f_hz * t) + 1e-3 * rng.standard_normal(len(t))
    w = np.hanning(n + 1)[:n]
    X = np.fft.rfft(x.reshape(b, n) * w, axis=1)
    wb = np.hanning(b + 1)[:b]
    half = 0.5 * f_hz * n / fs
    k = int(round(half))
    Y = np.abs(np.fft.fft(X[:, k] * wb)) ** 2
    tone = (np.abs(np.fft.fft(X[:, int(round(2 * half))] * wb)) ** 2).max()
    d = np.abs((np.arange(b) - (half - k) * b + b / 2) % b - b / 2)
    line = d <= hl.HALF_WIDTH
    return math.log2(Y[line].mean() / Y[~line].mean()), 10 * math.log10(Y[line].mean() / tone)


def test_half_orders_are_set_aside_where_the_whole_orders_leak_onto_them():
    # training's rule (modes_fit.half_aside) against numpy, with no device code: where it sets the
    # prominence aside, a healthy pump's 1x alone puts more than -40 dB of itself into the 0.5x
    # line's cells at some speed of the mode; where it scores it, the 1x either turns elsewhere
    # (its cells stay under the floor around them) or, more than 3 bins away, leaks under -40 dB
    # (the Hann window's side lobes beyond its first, -31.5 dB one: Harris, Proc. IEEE 66, 1978)
    from host_tools.fit import modes_fit
    p = {"n": 512, "fs_hz": 3200, "det_bands": 0, "det_feat": [fi.F_HALF]}
    for lo, hi, why in ((23.4, 25.4, "aside"), (12.5, 13.5, "aside"), (19.7, 21.3, "elsewhere"),
                        (16.4, 17.8, "elsewhere"), (47.3, 51.3, "far")):
        assert bool(modes_fit.half_aside(p, lo, hi, 1)) == (why == "aside")
        got = [_leak_on_line(f) for f in np.linspace(lo, hi, 9)]
        if why == "aside":
            assert max(db for _, db in got) > -40
        elif why == "elsewhere":
            assert max(r for r, _ in got) < 0
        else:
            assert max(db for _, db in got) < -40
