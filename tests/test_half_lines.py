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
N = 512        # samples a window: what the taps' triangles span (their noise's lean depends only
#                on the 1x in bins: half_lines._lean)


class _Clocked(hl.HalfLines):
    """The stage fed with a clock one second on per window (coarser than a real window's 0.16 s,
    which changes nothing but the time an average takes to go stale)."""

    now = 0

    def step(self, f, steady=True):
        self.push(f, steady, self.now)
        self.now += 1


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


def _noise_shares(x1_q8, every, w, c0):
    """Each cell's expected share of a block's noise (1 each for independent taps), from the taps'
    triangles themselves: the half order's tap sums 2 L samples about a window boundary under a
    triangle, L the fewest whole 0.5x periods (2 n / x1 samples) reaching n / 2 (half_taps' module
    comment), and the taps of neighbouring analysed windows, every x n samples apart, share the
    samples where their triangles overlap: on white noise their correlation is the overlap's sum
    of weight products over one triangle's sum of squares (the covariance of two linear
    combinations of independent samples, textbook), with the phase the half order turns by per
    window, which is the line's own turn (c0 cells). The block's Hann-weighted cells Y_c = sum_j
    w_j t_j e**(-2 pi i c j / b) then have E|Y_c|**2 = sum_j,j' w_j w_j' R(j - j') e**(...)
    (numpy, the whole covariance matrix)."""
    b = len(w)
    period = 2 * N / (x1_q8 / 256)
    L = int(round(math.ceil(N / 2 / period) * period))
    d = np.arange(-L, L)
    tri = L - np.abs(d + 0.5)
    g = every * N
    over = sum(tri[i] * tri[i - g] for i in range(g, 2 * L)) if g < 2 * L else 0.0
    rho = over / (tri * tri).sum()
    j = np.arange(b)
    R = np.eye(b, dtype=complex)
    R[j[1:], j[:-1]] = rho * np.exp(2j * np.pi * c0 / b)        # E[t_{j+1} conj(t_j)]
    R[j[:-1], j[1:]] = rho * np.exp(-2j * np.pi * c0 / b)
    out = np.empty(b)
    for c in range(b):
        v = w * np.exp(-2j * np.pi * c * j / b)
        out[c] = (v @ R @ v.conj()).real
    return out / (w * w).sum()


def _reference(block, x1_q8, every):
    """Prominence of one block in floats: numpy.fft.fft of the Hann-windowed taps (periodic Hann,
    as tables.hann), line cells within HALF_WIDTH of the place the line turns to, log2 of their
    mean power over their mean share of the noise (_noise_shares) against the same for the cells
    that are neither the line's nor within ALIAS_WIDTH of the whole orders' images, averaged over
    the three taps. Also the interval the integer pipeline can reach, from its floor shifts (see
    the test)."""
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
        share = _noise_shares(x1_q8, every, w, c0)
        nl, nf = share[line].sum(), share[floor].sum()
        vals.append(math.log2(P[line].sum() / nl) - math.log2(P[floor].sum() / nf))
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
        lo.append(math.log2(max(l_lo, 1) / nl) - math.log2(max(e + de - l_lo - s_lo, 1) / nf))
        hi.append(math.log2(max(l_hi, 1) / nl) - math.log2(max(e - de - l_hi - s_hi, 1) / nf))
    return np.mean(vals), np.mean(lo), np.mean(hi)


def _average_of(det, rows):
    for f in rows:
        det.step(f, True)
    return det.value[0]


def _blocks_apart(det, rows):
    """As _average_of, with a cut after every BLK windows (as between recordings): each block
    stands alone, where running on would also make the blocks that overlap them by half."""
    for i, f in enumerate(rows):
        det.step(f, True)
        if (i + 1) % hl.BLK == 0:
            det.cut()
    return det.value[0]


FIRST = hl.BLK + ((1 << hl.SHIFT) - 1) * (hl.BLK // 2)   # windows to the 8th block without a cut


@pytest.mark.parametrize("every,x1_q8,amp", [(1, 1664, 3000.0), (1, 1812, 400.0), (2, 1746, 2000.0), (1, 2072, 2000.0),
                                               (1, 1046, 2000.0)])
def test_block_prominence_matches_numpy(every, x1_q8, amp):
    # 2**SHIFT equal blocks, cut apart, make the average exactly the block's prominence (a sum of
    # equal values over 2**SHIFT); that value against the float reference, within the interval the floor
    # shifts allow, widened by the log2_q8 rounding (1 LSB, Q8, for each of the four logs), the
    # integer mean of three (< 1 LSB) and the cells' noise shares: the device's cosine, linear
    # between the block's table entries, is within (2 pi / BLK)**2 / 8 of the true one, times a lean
    # under 1/2, and its Q12 lean floors four times (4 / 4096): a share within 0.0034 of its own,
    # so each of the two sums of shares within that and their log2 ratio within 2 x 0.0034 / ln 2 =
    # 0.0098 (3 LSB)
    b = hl.BLK                 # 2072: the whole orders' images 1.5 cells from the lines, within them;
    #                            1046 (4.09 bins): neighbouring taps' noise correlates 0.23
    rng = np.random.default_rng(3)
    block = _taps(b, every, x1_q8, amp, 1500.0, rng, 1)
    rows = _rows(np.tile(block, (1 << hl.SHIFT, 1)), x1_q8)
    det = _Clocked(1, PA, N, every, 205, TAB)
    got = _blocks_apart(det, rows) / 256
    ref, lo, hi = _reference(block, x1_q8, every)
    assert lo - 8 / 256 <= got <= hi + 8 / 256, (got, ref, lo, hi)
    assert abs(got - ref) < 0.1


def test_line_is_looked_for_where_it_turns():
    # a line that turns by 2 pi x offset x 2 per window (one window in two analysed) stands out
    # only when the detector is told that time base: told every = 1, it looks in the wrong cells
    x1 = 1746                  # images 5.75 cells from the lines told every = 2, 13.1 told 1
    rng = np.random.default_rng(8)
    block = _taps(hl.BLK, 2, x1, 2000.0, 300.0, rng, 1 << hl.SHIFT)
    right = _average_of(_Clocked(1, PA, N, 2, 205, TAB), _rows(block, x1))
    wrong = _average_of(_Clocked(1, PA, N, 1, 205, TAB), _rows(block, x1))
    assert right > 4 * 256 and wrong < 256


def test_average_counts_from_eight_blocks_and_again_after_a_speed_move():
    x1 = 1812
    b = hl.BLK
    rng = np.random.default_rng(1)
    det = _Clocked(1, PA, N, 1, 205, TAB)                      # steady tolerance 5 %
    rows = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, 1 << hl.SHIFT), x1)[:FIRST]
    for f in rows[:-1]:
        det.step(f, True)
    assert det.value[0] == hl.UNSET                        # 8 blocks (overlapping by half) less one window
    det.step(rows[-1], True)
    assert det.value[0] != hl.UNSET
    moved = int(x1 * 1.2)                                  # a new operating speed: 20 % away
    near = int(x1 * 1.04)                                  # within the tolerance: the same one
    det.step(_rows(_taps(b, 1, near, 500.0, 500.0, rng, 1), near)[0], True)
    assert det.value[0] != hl.UNSET
    det.step(_rows(_taps(b, 1, moved, 500.0, 500.0, rng, 1), moved)[0], True)
    assert det.value[0] == hl.UNSET                        # from the first window there


def test_each_speed_keeps_its_own_average():
    # a pump that changes duty between snapshots: the average of one speed resumes after visits
    # to others (its value comes back exactly), and a speed is forgotten only when it is the one
    # fed longest ago and a new speed needs its slot; speeds are told apart by the steady tolerance
    b = hl.BLK
    rng = np.random.default_rng(5)
    det = _Clocked(1, PA, N, 1, 205, TAB)                      # steady tolerance 5 %
    x1 = 1812
    home = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, (1 << hl.SHIFT) + 2), x1)
    v = _average_of(det, home[:(1 << hl.SHIFT) * b])
    assert v != hl.UNSET

    def visit(y):
        return _average_of(det, _rows(_taps(b, 1, y, 500.0, 500.0, rng, 1), y))

    away = [2000, 2250, 2500, 2800, 3100, 3450, 3800, 4200]     # each over 5 % from the others
    assert len(away) == hl.SLOTS
    for y in away[:-1]:
        assert visit(y) == hl.UNSET                            # one block: no average yet
    det.step(home[-1], True)
    assert det.value[0] == v                                   # resumed where it was left
    v2 = _average_of(det, home[(1 << hl.SHIFT) * b:-b])        # one more block: now the freshest
    assert v2 != hl.UNSET
    visit(away[-1])                                            # every slot taken: the stalest goes
    det.step(home[-1], True)
    assert det.value[0] == v2
    for y in (4600, 5100, 5600, 6200, 6800, 7500, 8300, 9200):
        visit(y)
    det.step(home[-1], True)
    assert det.value[0] == hl.UNSET                            # now it was the stalest


def test_a_gap_or_an_unsteady_window_restarts_the_block():
    x1 = 1812
    b = hl.BLK
    rng = np.random.default_rng(2)
    rows = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, 1), x1)
    det = _Clocked(1, PA, N, 1, 205, TAB)
    for f in rows[:-1]:
        det.step(f, True)
    det.cut()
    det.step(rows[-1], True)
    for f in rows[:-2]:
        det.step(f, False if f is rows[5] else True)
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


@pytest.mark.parametrize("x1_q8", [1664, 1812])
def test_whole_orders_leaking_into_the_taps_leave_the_prominence_alone(x1_q8):
    # A healthy pump's 1x, 2x and 3x leak into the half orders' taps through the window's side
    # lobes, 30 dB over one cell's noise here. Their images are left out of the floor, so the
    # prominence stays where noise alone puts it: the mean of 8 blocks' log2 ratio of two sums of
    # exponential powers, whose spread per block is at most modes_fit.half_block_spread (Gamma
    # moments of the Hann cells' sums, Isserlis' theorem and the log of a Gamma(k) variable's
    # variance trigamma(k), textbook properties; checked on noise in test_modes_fit), over 8
    # blocks; 4 standard deviations either side (a normal tail of 6e-5). Left in the floor, the
    # same leakage would pull it far under: the check that fails without the images' exclusion.
    from host_tools.fit.modes_fit import half_block_spread
    b = hl.BLK                 # images away from the lines (on them, only the taps' nulls help:
    assert _images(x1_q8, 1, b) > hl.HALF_WIDTH + hl.ALIAS_WIDTH   # test_orders_envelope)
    rng = np.random.default_rng(11)
    noise = 300.0
    taps = _taps(b, 1, x1_q8, 0.0, noise, rng, 1 << hl.SHIFT)
    lead = noise * math.sqrt(2) * math.sqrt(b * 3 / 8) * 10 ** (30 / 20) / (b / 2)   # 30 dB over a cell
    taps = taps + np.round(_whole_orders(b, 1, x1_q8, lead, 1 << hl.SHIFT))
    got = _average_of(_Clocked(1, PA, N, 1, 205, TAB), _rows(taps, x1_q8)) / 256
    sd = half_block_spread() / math.sqrt(1 << hl.SHIFT)
    assert abs(got) < 4 * sd, (got, sd)


SCENARIO = """
from array import array
from firmware_py.detect.half_lines import HalfLines
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.tables import log2_table

PA = fi.per_axis(0)
AXES = 2
NW = 1120
# after three phases, ten speeds 40 windows each (more than SLOTS: the stalest slot is taken)
CYCLE = (1000, 1560, 1720, 1900, 2100, 2320, 2560, 2820, 3100, 3420)
h = HalfLines(AXES, PA, 512, 1, 205, log2_table())
seed = [99]
def rnd(a):
    seed[0] = (seed[0] * 1103515245 + 12345) & 0x7FFFFFFF
    return (seed[0] >> 8) % (2 * a) - a
feats = array("i", bytes(4 * AXES * PA * NW))
for w in range(NW):
    for a in range(AXES):
        b = (w * AXES + a) * PA
        # read blocks, then a speed move to one whose whole orders lie within 3 bins (its blocks are
        # dropped), then a third
        feats[b + fi.F_TAP_X1] = 1664 if w < 320 else 1000 if w < 420 else 1812 if w < 720 else CYCLE[(w - 720) // 40]
        for i in range(6):
            feats[b + fi.F_TAP_RE + i] = rnd((1 << 24) if w % 97 == 0 else 3000)
out = array("i", bytes(4 * AXES * NW))
f = array("i", bytes(4 * AXES * PA))
clock = [CLOCK0]

def run_all():
    for w in range(NW):
        for j in range(AXES * PA):
            f[j] = feats[w * AXES * PA + j]
        if w == 250:
            h.cut()
        # the clock as the detector keeps it: a day and a second skipped at window 300 (the
        # first phase's average goes stale and its next block starts it again), and moved back
        # by 2**28 past 2**29
        clock[0] += 86402 if w == 300 else 1
        if clock[0] >= 1 << 29:
            clock[0] -= 1 << 28
            h.rebase(1 << 28)
        h.push(f, w % 150 != 0, clock[0])
        for a in range(AXES):
            out[w * AXES + a] = h.value[a]
    return 0

ok, _ = locked(run_all)
emit([ok, list(out)])
"""


def _host_run(clock0):
    host = []
    exec(textwrap.dedent(SCENARIO.replace("CLOCK0", str(clock0))),
         {"emit": lambda v: host.append(json.loads(json.dumps(v))), "locked": lambda fn: (True, fn())})
    return host[0][1]


def test_same_bits_and_no_allocation_on_micropython():
    # every path of push() and the block's close under the guest's heap lock, against CPython;
    # the clock is started so that it moves back at window 700
    start = (1 << 29) - 86402 - 700
    guest = run_guest(SCENARIO.replace("CLOCK0", str(start))).out[0]
    host = _host_run(start)
    assert guest[0] is True
    assert guest[1] == host
    assert any(v != hl.UNSET for v in host)                # averages were made
    # moving the clock back changes no value: the same run from 0, where it never moves back
    assert _host_run(0) == host
    # the jump of a day and a second at window 300: the average of its speed (1664, read since
    # its 8th block at window 246) is not read from the next steady window (301: window 300 is
    # not steady, and an unsteady window leaves the value as it was)
    at = [host[w * 2] for w in (298, 299, 301, 302)]
    assert at[0] != hl.UNSET and at[1] == at[0] and at[2] == hl.UNSET and at[3] == hl.UNSET, at


def test_an_average_a_day_old_is_not_read_and_starts_again():
    # STALE_S of the detector's clock without a block: the average is not read, and the next block
    # at its speed starts it afresh, so that 8 new blocks give what they give a new stage
    b = hl.BLK
    rng = np.random.default_rng(6)
    x1 = 1812
    old = _rows(_taps(b, 1, x1, 3000.0, 500.0, rng, 1 << hl.SHIFT), x1)   # a strong line
    new = _rows(_taps(b, 1, x1, 0.0, 500.0, rng, 1 << hl.SHIFT), x1)      # none
    det = _Clocked(1, PA, N, 1, 205, TAB)
    v_old = _average_of(det, old)
    det.cut()                                        # a day unrun
    det.now += hl.STALE_S - 1                        # its last block closed one second before
    new = new[:FIRST]
    det.step(new[0])
    assert det.value[0] == v_old                     # exactly STALE_S old: still read
    det.step(new[1])
    assert det.value[0] == hl.UNSET                  # older: not read
    for f in new[2:-1]:
        det.step(f)
    assert det.value[0] == hl.UNSET                  # 8 blocks (overlapping) less one window since
    det.step(new[-1])
    assert det.value[0] == _average_of(_Clocked(1, PA, N, 1, 205, TAB), new)
    assert det.value[0] < v_old - 256                # the old line's average is gone


def _slipped_and_zeroed(off, period, seed):
    """The average of 8 blocks' taps (x1 = 1812, a line over noise) with every period-th window's
    taps said to be mixed at off (bins Q8), and that of the same taps with those windows zeroed by
    hand, each through a fresh stage at a 10 % steady tolerance."""
    x1 = 1812
    rng = np.random.default_rng(seed)
    taps = _taps(hl.BLK, 1, x1, 800.0, 500.0, rng, 1 << hl.SHIFT)
    odd = np.arange(len(taps)) % period == period - 1
    mixed = _rows(taps, x1)
    for w in np.flatnonzero(odd):
        mixed[w][fi.F_TAP_X1] = off
    zeroed = _rows(np.where(odd[:, None], 0, taps), x1)
    return (_average_of(_Clocked(1, PA, N, 1, 410, TAB), mixed),
            _average_of(_Clocked(1, PA, N, 1, 410, TAB), zeroed))


def test_taps_mixed_at_an_outlying_speed_enter_as_zeros():
    # a window whose taps were mixed at a 1x more than 1/32 off the block's mean so far (within
    # the steady tolerance, so no new block) counts as a zero in the block, and its 1x stays out
    # of the block's mean: the same average as the block with those taps zeroed by hand; a block
    # of more such windows than good ones gives none
    b = hl.BLK
    x1, off = 1812, 1812 + 1812 // 16                      # 6 % off: beyond 1/32, within 10 %
    got, ref = _slipped_and_zeroed(off, 4, 7)
    assert got != hl.UNSET and got == ref
    mostly = _rows(_taps(b, 1, x1, 800.0, 500.0, np.random.default_rng(7), 1 << hl.SHIFT), x1)
    for w in range(len(mostly)):
        if w % b >= b // 2 - 1:
            mostly[w][fi.F_TAP_X1] = off
    det = _Clocked(1, PA, N, 1, 410, TAB)
    assert _average_of(det, mostly) == hl.UNSET and max(det.cnt) == 0


def test_a_lone_window_at_another_speed_enters_as_zeros():
    # the speed estimate's own slip: one window in 11 whose taps were mixed 30 % off the block's
    # 1x (beyond the 10 % tolerance) counts as a zero in the block, as by hand, and does not
    # restart it (restarted, no block would ever fill: the average would stay unset)
    got, ref = _slipped_and_zeroed(1812 * 7 // 10, 11, 9)
    assert got != hl.UNSET and got == ref


def test_two_windows_in_a_row_at_another_speed_start_a_block_of_their_own():
    # a real change of speed: its first window enters the old block as zeros, the second starts
    # a block, so the new speed's average is that of a fresh stage fed from the second window on
    b = hl.BLK
    x1, moved = 1812, 1812 * 6 // 5                        # 20 % away: beyond the 10 % tolerance
    rng = np.random.default_rng(10)
    home = _rows(_taps(b, 1, x1, 500.0, 500.0, rng, 1 << hl.SHIFT), x1)[:FIRST]
    away = _rows(_taps(b, 1, moved, 800.0, 500.0, rng, (1 << hl.SHIFT) + 1), moved)[:FIRST + 1]
    det = _Clocked(1, PA, N, 1, 410, TAB)
    assert _average_of(det, home) != hl.UNSET
    assert _average_of(det, away[:-1]) == hl.UNSET            # from the second window: 8 blocks less one window
    got = _average_of(det, away[-1:])
    assert got != hl.UNSET and got == _average_of(_Clocked(1, PA, N, 1, 410, TAB), away[1:])
