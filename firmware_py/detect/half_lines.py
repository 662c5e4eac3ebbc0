"""Half-order lines over consecutive windows: the prominence the detector scores as F_HALF.

A looseness that lets a part lift and knock every other turn makes lines at 0.5x, 1.5x and 2.5x
(common practice). In one window they sit within 2 bins of the integer orders and far under one
bin's noise when they first show. Over a block of consecutive windows they do show: the complex
value at a half order, window after window, turns at the line's offset from the nearest bin's
centre (the phase advances 2 pi x offset x every per analysed window), so a second, short DFT
across the block splits that bin into `blk` cells and puts the line in one of them, while the
noise spreads over all (the resolution of one block of n x every x blk samples; common practice
in zoom analysis).

Per axis, the feature core's taps (firmware_py/dsp/half_taps.py: the complex values at 0.5x, 1.5x,
2.5x of the speed the shaft turned at between the windows before) of the windows the detector passes
as steady (running past the start-up hold-off, not running down) are collected; a window it does not
pass starts a new block, as does the second of two in a row at a speed beyond the steady tolerance
of the block's (a new speed). A window whose taps were mixed at a speed more than 1/32 off the
block's mean so far (DRIFT_SHIFT), a lone one beyond the tolerance among them, or that has none,
enters as zeros: its taps let the whole orders through (half_taps: their leakage goes with the
square of that error), and one such window should not cost the block. A lone one is common: a window
whose own 1x estimate slips by a bin unwraps the next window's mixing speed a bin off
(half_taps.mix_speed), and at 3.4 bins (the evaluation's RW-1 at its day duty) about one window in
ten did, so that a block restarted before it filled and a snapshot made none. A block with taps in
fewer than half its windows is dropped. Blocks overlap by half: a full block's second half starts
the next (the kept windows' speed taken as the block's mean), so a 10 s recording at 512 samples
makes two blocks and running without a gap one every BLK / 2 windows; under the Hann window across
the block two such blocks correlate 0.167 in amplitude, 0.03 in power (Welch's overlapped segments,
1967), so their prominences count as nearly independent. A full block gives, per half order, the
power of the cells around the line's expected place over that of the floor cells, each over its
cells' share of the noise (below), in log2; the three are averaged. The blocks' values are averaged
as an EWMA with weight 2**-SHIFT, one per operating speed: the floor around the lines differs
between speeds, so each axis keeps SLOTS averages, each for the speeds within the steady tolerance
of its first block's, and a block at a speed no slot holds restarts the one least recently fed. A
pump that changes duty between recordings (a snapshot at one speed, the next at another) so resumes
each speed's average where it left it, as its slow channel resumes each mode's. An average counts
once 2**SHIFT blocks have entered it; the value is that of the slot holding the window's own speed,
and UNSET (the detector holds the feature neutral) while that slot has fewer blocks or no slot holds
the speed. An average not fed for STALE_S of the detector's clock is not read, and its next block
starts it afresh: it tells of a machine as it was a day ago, and a looseness can have come, or been
mended, since. The slots do not depend on the trained modes, so training reads the values the device
will hold before it has fitted any.

Noise is not spread evenly over a block's cells once neighbouring taps share samples. A tap's
triangle reaches L samples each side of its boundary (half_taps.span: the fewest whole 0.5x
periods reaching n / 2, so n / 2 <= L <= n), and the next analysed window's tap is every x n
samples on: from a 1x of just over 4 bins (two periods, L near n) the two triangles overlap by most
of a window. On white noise two triangles of half-width L, g samples apart, correlate
rho = (2 - g / L)**3 / 4 for L <= g <= 2 L (the triangle's autocorrelation, textbook; 0.25 at
g = L, 0 from g = 2 L, so never when every > 1), and the shared samples' phase turns by the half
order per window, as the line's does. Across the block the noise so has the spectrum of a
first-order moving average: each cell's expected power is S0 + 2 rho S1 cos(2 pi (c - c0) / blk)
(S0 the Hann weights' squares summed, S1 their neighbours' products), highest at the line's own
place c0. Left as it is, a pump trimmed from just under to just over 4 bins would read as a line
growing by up to 0.7 octave (measured on a healthy harmonic series through the device's code).
So the line's and the floor's mean powers are each taken over their cells' expected share of the
noise (_lean, _share), which is the plain cell count when rho = 0.

The whole orders reach the taps only through the speed estimate's error (half_taps: a triangle
over two windows puts them on double zeros of its transform, so their leakage goes with the
square of that error), and across the block they turn a whole number of cycles per window from
each other, so every whole order's residue lands a whole multiple of x1 x every / 2 cycles per
window from the line: its nearest images sit +-ALIAS cells from it, ALIAS = (x1 x every / 2 mod 1)
x BLK, on the line itself at speeds near a multiple of 2 bins. The images' cells are left out of
the floor, so what is left of them does not lift it.

Integer-only; push() allocates nothing.

Scales: taps counts Q8 (|tap| < 2**27). Each tap's block is shifted so that its largest
component has its top bit at bit 13, then windowed (Hann, Q15): |t| <= 2**13 per component, and
each DFT term (Q15 twiddle) <= 2**14. A cell Y sums blk = 32 of them, |Y| <= sqrt(2) * 2**13 *
blk / 2 (the Hann weights sum to blk / 2) <= 2**17.5; its power is taken as (Y >> 6)**2 <= 2**23,
and the cells' sum (Parseval: blk * sum |t|**2 / 2**12, from e = sum(|t|**2 >> 7) <= 3/8 * blk *
2**20, as the Hann weights' squares sum to 3/8 blk) stays under 2**28, as does e * blk.
Prominence and its average: log2 Q8.

Entry points: footprint_bytes(axes); HalfLines(axes, pa, n, every, tol_q12, tab); push(f, steady,
now_s) once per window (now_s: the detector's clock, s); cut() when the next window will not follow
the last; rebase(d) when that clock moves back by d; value[a] (the window's); cell_kind(c, c0, d,
b), which cells of a block are the line's, the images' and the floor's (training's spread uses it).
"""
from array import array
from micropython import const

from firmware_py.dsp import feature_index as fi
from firmware_py.dsp import tables
from firmware_py.dsp.fixmath import log2_q8, msb
from firmware_py.dsp.half_taps import ODDS, X1_MIN, X1_MAX, span

UNSET = const(-16384)          # no average yet (LOG2_ZERO_Q8)
SHIFT = const(3)               # EWMA weight 2**-3 per block; counts from 8 blocks
SLOTS = const(8)               # speeds kept per axis (as many as a set's modes, modes.KMAX)
X1_LIM = const(1 << 20)        # a 1x beyond any window (bins Q8 < n / 2 * 256 <= 2**19)
TAP_LIM = const(1 << 27)       # half_taps' bound
# Analysed windows per block (5.1 s at 512 samples and 3200 Hz). Fewer would leave little floor:
# the line's 7 cells and the two leakage images' 5 each take 17, and the floor wants as many.
BLK = const(32)
HALF_WIDTH = const(3)          # cells each side of the line: the Hann main lobe (2) and 1 for the
#                                error of the block's mean speed
ALIAS_WIDTH = const(2)         # cells each side of a whole order's image: the Hann main lobe
# An average this old (s of the detector's clock: running and the gaps between recordings) is
# started afresh: a water pump's duties follow the day's demand (common practice), so a duty not
# run within a day is not part of the current routine
STALE_S = const(86400)
# A window's taps mixed at a 1x more than 2**-DRIFT_SHIFT off the block's mean so far enter the
# block as zeros (module docstring)
DRIFT_SHIFT = const(5)
CLOCK_MIN = const(-(1 << 28))  # the oldest time a slot keeps through rebase(), s


def footprint_bytes(axes):
    """Heap bytes of a HalfLines' arrays on `axes` axes (payloads, as __init__ makes them): the
    taps of one block per axis (6 ints a window), 5 ints of state per axis and 4 per slot, the
    scratch of one tap's block (2 ints a window), the block's twiddles (2 x (BLK / 2 + 1) ints)
    and Hann window (BLK halfwords)."""
    return (4 * axes * 6 * BLK + 4 * (5 + 4 * SLOTS) * axes + 4 * 2 * BLK + 4 * 2 * (BLK // 2 + 1)
            + 2 * BLK)


class HalfLines:
    """See the module docstring. n: samples a window; every: the board's analyse_every; tol_q12:
    the steady speed tolerance (det_speed_tol_q12); tab: tables.log2_table() (the detector's
    own)."""

    def __init__(self, axes, pa, n, every, tol_q12, tab):
        self.axes = axes
        self.pa = pa
        self.n = n
        self.every = every
        self.tol_q12 = tol_q12
        b = self.blk = BLK
        self.cos_q15, self.sin_q15 = tables.twiddles(b)
        self.hann_q15 = tables.hann(b, self.cos_q15)
        self.tap = array("i", bytes(4 * axes * 6 * b))   # per axis, window, tap: re, im
        self.nb = array("i", bytes(4 * axes))             # windows in the axis's block
        self.x1 = array("i", bytes(4 * axes))             # sum of the block's 1x, bins Q8
        self.nx = array("i", bytes(4 * axes))             # windows in that sum
        self.far = array("i", bytes(4 * axes))            # 1: the last window's 1x was beyond
        #                                                   the steady tolerance of the block's
        ns = axes * SLOTS                                 # slot k = a * SLOTS + s
        self.acc = array("i", bytes(4 * ns))              # EWMA << SHIFT (a sum while filling)
        self.cnt = array("i", bytes(4 * ns))              # blocks in the average, to 2**SHIFT; 0: free
        self.ref = array("i", bytes(4 * ns))              # 1x of the slot's first block, bins Q8
        self.fed = array("i", bytes(4 * ns))              # clock when last fed, s (>= CLOCK_MIN)
        self.value = array("i", [UNSET] * axes)
        self.tr = array("i", bytes(4 * b))                # scratch: one tap's windowed block
        self.ti = array("i", bytes(4 * b))
        self.tab = tab

    def cut(self):
        """The next window does not follow the last: every open block starts again."""
        for a in range(self.axes):
            self.nb[a] = 0

    def rebase(self, d):
        """The clock moved back by d seconds: so do the slots' times (kept >= CLOCK_MIN, which
        is older than STALE_S for any clock the detector keeps)."""
        for k in range(self.axes * SLOTS):
            v = self.fed[k] - d
            self.fed[k] = v if v > CLOCK_MIN else CLOCK_MIN

    def push(self, f, steady, now_s):
        """One window's features f; steady: the detector has it running past the start-up
        hold-off and not running down (its own steadiness verdict aside: the block checks the
        taps' speeds); now_s: the detector's clock (s, < 2**29)."""
        pa = self.pa
        for a in range(self.axes):
            o = a * pa
            x1 = f[o + fi.F_TAP_X1]
            if not steady or not 0 <= x1 < X1_LIM or not self._sane(f, o):
                self.nb[a] = 0
                continue
            j = self.nb[a]
            c = self.nx[a] if j else 0
            m = self.x1[a] // c if c else x1       # the block's mean 1x so far
            far = x1 > 0 and c > 0 and not self._near(x1, m)
            if far and self.far[a]:
                j = 0                              # a second in a row: another speed, a block
                c = 0                              # of its own
                m = x1
                far = False
            self.far[a] = 1 if far else 0
            if j == 0:
                self.x1[a] = 0
                self.nx[a] = 0
            use = not far and x1 > 0 and -(m >> DRIFT_SHIFT) <= x1 - m <= m >> DRIFT_SHIFT
            t = (a * self.blk + j) * 6
            for i in range(6):
                self.tap[t + i] = f[o + fi.F_TAP_RE + i] if use else 0
            if use:
                self.x1[a] += x1
                self.nx[a] = c + 1
            j += 1
            if j == self.blk:
                if self.nx[a] >= self.blk >> 1:
                    self._close(a, now_s)
                j = self._keep_half(a)
            self.nb[a] = j
            if x1:
                k = self._slot(a, x1)
                self.value[a] = (self.acc[k] >> SHIFT if k >= 0 and self.cnt[k] >= 1 << SHIFT
                                 and now_s - self.fed[k] <= STALE_S else UNSET)

    def _keep_half(self, a):
        """After a full block of axis a: its second half becomes the next block's first (blocks
        overlap by half, so a short recording makes two), the block's mean 1x standing for the
        kept windows' (those with taps: a zero-filled window is all zeros). Returns the windows
        kept."""
        b = self.blk
        h = b >> 1
        base = a * b * 6
        n = 0
        for j in range(h):
            t = base + 6 * j
            s = t + 6 * h
            on = 0
            for i in range(6):
                v = self.tap[s + i]
                self.tap[t + i] = v
                if v:
                    on = 1
            n += on
        c = self.nx[a]
        self.x1[a] = (self.x1[a] // c) * n if c else 0
        self.nx[a] = n
        return h

    def _slot(self, a, x1):
        """The slot k of axis a whose speed is nearest x1 (bins Q8) within the steady tolerance,
        or -1."""
        best = -1
        gap = X1_LIM
        for k in range(a * SLOTS, (a + 1) * SLOTS):
            if self.cnt[k] > 0 and self._near(x1, self.ref[k]):
                e = x1 - self.ref[k]
                e = e if e >= 0 else -e
                if e < gap:
                    gap = e
                    best = k
        return best

    def _near(self, x1, r):
        """x1 within the steady tolerance of r (both bins Q8; tol_q12 * r < 2**12 * 2**20 =
        2**32, so r is split first, exact to 1/4096 bin)."""
        tol = self.tol_q12 * (r >> 12) + ((self.tol_q12 * (r & 4095)) >> 12)
        return -tol <= x1 - r <= tol

    def _stalest(self, a):
        """A free slot of axis a, else the one fed longest ago (the first of equals)."""
        best = a * SLOTS
        for k in range(a * SLOTS, (a + 1) * SLOTS):
            if self.cnt[k] == 0:
                return k
            if self.fed[k] < self.fed[best]:
                best = k
        return best

    @staticmethod
    def _sane(f, o):
        """The taps within their bound (half_taps: |tap| < 2**27), as the core writes them."""
        for i in range(6):
            v = f[o + fi.F_TAP_RE + i]
            if v > TAP_LIM or v < -TAP_LIM:
                return False
        return True

    def _close(self, a, now_s):
        """A full block of axis a, at clock now_s: its prominence enters the average."""
        b = self.blk
        x1 = self.x1[a] // self.nx[a]              # the block's mean 1x, bins Q8 (< 2**20)
        # the whole orders' nearest images: ALIAS Q8 cells each side of the line (x1 * every
        # mod 2 bins, Q8, times b / 2), the same for the three taps (module docstring)
        d = (b >> 1) * ((x1 * self.every) % 512)
        lean = self._lean(a, x1)
        s = 0
        for i in range(3):
            s += self._prominence(a, i, x1, d, lean)
        p = s // 3
        k = self._slot(a, x1)
        if k < 0:
            k = self._stalest(a)
            self.cnt[k] = 0                        # an average of another speed says nothing here
        elif now_s - self.fed[k] > STALE_S:
            self.cnt[k] = 0                        # nor does one of a day ago
        c = self.cnt[k]
        if c == 0:
            self.ref[k] = x1
            self.acc[k] = p
            c = 1
        elif c < 1 << SHIFT:
            self.acc[k] += p                       # the first 2**SHIFT blocks: a plain sum
            c += 1
        else:
            self.acc[k] += p - (self.acc[k] >> SHIFT)
        self.cnt[k] = c
        self.fed[k] = now_s

    def _prominence(self, a, i, x1, d, lean):
        """log2 Q8 of the line's cells' power (within HALF_WIDTH of its place) over what noise
        alone would put there, relative to the same for the floor cells, for tap i of axis a's
        block; x1: the block's mean 1x (bins Q8); d: the whole orders' images' distance from the
        line, Q8 cells; lean: the noise's lean towards the line (_lean, Q12). Each cell's share of
        the noise is _share(): 2**15 for every cell when lean = 0, and the value is then the ratio
        of the two mean powers. Only the line's and the images' cells are transformed; the
        floor's total is the block's energy less theirs (Parseval: the cells' powers sum to blk
        times the samples' ones), which is what the floor needs."""
        b = self.blk
        tap = self.tap
        base = a * b * 6 + 2 * i
        top = 0
        for j in range(b):
            v = tap[base + 6 * j]
            w = tap[base + 6 * j + 1]
            v = v if v >= 0 else -v
            w = w if w >= 0 else -w
            if v > top:
                top = v
            if w > top:
                top = w
        if top == 0:
            return 0
        sh = msb(top) - 13                         # the largest component's top bit to bit 13
        tr = self.tr
        ti = self.ti
        hw = self.hann_q15
        e = 0
        for j in range(b):
            v = tap[base + 6 * j]
            w = tap[base + 6 * j + 1]
            if sh >= 0:
                v >>= sh
                w >>= sh
            else:
                v <<= -sh
                w <<= -sh
            v = (v * hw[j]) >> 15                  # |.| <= 2**13
            w = (w * hw[j]) >> 15
            tr[j] = v
            ti[j] = w
            e += (v * v + w * w) >> 7              # <= 2**20 each; summed <= 3/8 blk 2**20
        # where the line turns to: its place in bins (Q8) modulo one bin, as whole bins turn
        # whole cycles per window; in cycles per analysed window, times the block length, Q8
        # cells, modulo the block
        off_q8 = ((ODDS[i] * x1) >> 1) & 255
        c0 = (off_q8 * self.every * b) % (b << 8)
        ct = self.cos_q15
        st = self.sin_q15
        h = b >> 1
        line = 0
        gl = 0
        side = 0
        gf = 0
        for c in range(b):
            kind = cell_kind(c, c0, d, b)
            if kind == 0:
                gf += self._share(c, c0, lean)
                continue
            yr = 0
            yi = 0
            for j in range(b):
                k = (c * j) % b                    # e**(-2 pi i k / b)
                if k <= h:
                    cr = ct[k]
                    ci = -st[k]
                else:
                    cr = ct[b - k]
                    ci = st[b - k]
                yr += (tr[j] * cr - ti[j] * ci) >> 15
                yi += (tr[j] * ci + ti[j] * cr) >> 15
            yr >>= 6                               # |Y| <= 2**13.5 * b / 2: now <= 2**11.6
            yi >>= 6
            if kind == 1:
                line += yr * yr + yi * yi
                gl += self._share(c, c0, lean)
            else:
                side += yr * yr + yi * yi
        rest = (e * b) >> 5                        # sum of all cells' (Y >> 6)**2: e * 2**7 * b / 2**12
        rest -= line + side
        if line <= 0:
            line = 1
        if rest <= 0:
            rest = 1
        t = self.tab
        return (log2_q8(line, t) - log2_q8(gl, t)) - (log2_q8(rest, t) - log2_q8(gf, t))

    def _lean(self, a, x1):
        """How far the noise of axis a's block leans towards the line's cells, Q12: 2 rho S1 / S0
        (module docstring), rho the correlation of neighbouring taps' noise at a 1x of
        x1 (bins Q8), S0 the sum of the Hann weights' squares over the windows with taps, S1 that
        of neighbouring ones' products (a zero-filled window has no noise to share); 0 to 2048.
        Hann weights are taken Q9 (<= 512): S0, S1 <= 32 * 2**18, and rho (<= 1024) times
        S1 >> 6 stays under 2**28."""
        n = self.n
        if not X1_MIN <= x1 < X1_MAX:
            return 0
        L = span(x1, n)
        g = self.every * n                         # samples between neighbouring taps' centres
        if g >= 2 * L:
            return 0
        t = 8192 - (g << 12) // L                  # 2 - g / L, Q12 (n >= L: <= 4096; g < 2 L
        #                                            <= 2 * 8192, the board's largest window, so
        #                                            g << 12 < 2**26)
        rho = ((((t * t) >> 12) * t) >> 12) >> 2   # (2 - g / L)**3 / 4, Q12
        b = self.blk
        tap = self.tap
        hw = self.hann_q15
        base = a * b * 6
        s0 = 0
        s1 = 0
        w0 = 0
        for j in range(b):
            o = base + 6 * j
            w = 0
            for i in range(6):
                if tap[o + i]:
                    w = hw[j] >> 6
            s0 += w * w
            s1 += w * w0
            w0 = w
        s0 >>= 6
        return (2 * rho * (s1 >> 6)) // s0 if s0 else 0

    def _share(self, c, c0, k):
        """Cell c's expected share of the block's noise, 2**15 when the taps' noise is
        independent: 2**15 (1 + k cos(2 pi (c - c0) / blk)), k Q12 the lean (_lean), c0 the line's
        place (Q8 cells); the cosine interpolated linearly in the block's own table (within
        (2 pi / blk)**2 / 8 = 0.005 at blk = 32). <= 1.5 * 2**15 a cell."""
        v = _dist((c << 8) - c0, self.blk)         # 0 .. blk * 128: the table's 0 .. pi
        i = v >> 8
        f = v & 255
        ct = self.cos_q15
        cs = ct[i] + (((ct[i + 1] - ct[i]) * f) >> 8) if f else ct[i]
        return 32768 + ((k * cs) >> 12)


def cell_kind(c, c0, d, b):
    """What cell c of a block of b holds, for a line at c0 and the whole orders' images at c0 +- d
    (Q8 cells): 1 the line (within HALF_WIDTH), 2 an image (within ALIAS_WIDTH), 0 the floor."""
    if _dist((c << 8) - c0, b) <= HALF_WIDTH << 8:
        return 1
    if (_dist((c << 8) - c0 - d, b) <= ALIAS_WIDTH << 8
            or _dist((c << 8) - c0 + d, b) <= ALIAS_WIDTH << 8):
        return 2
    return 0


def _dist(v, b):
    """|v| Q8 cells taken around a circle of b cells (|v| < 2 * b * 256)."""
    v = v % (b << 8)
    return (b << 8) - v if v > b << 7 else v
