"""Sample ring: per-axis int16 counts, fed in blocks as a sensor FIFO delivers them.

The ring holds a whole number of windows ("slots"), so a window never wraps and each slot has a
memoryview made once at start: the feature stage reads it with no copy and no allocation.
Samples that arrive while the ring is full of unprocessed windows are counted as dropped, never
written over data still waiting: the loss is always visible (dropped counters).

Entry points: SampleRing (push, ready, window, copy_window, release), scatter16() (the viper copy
loop both use), footprint_bytes()."""
import array

import micropython

from firmware_py.dsp.counters import sat_add
from firmware_py.viper_stand import ptr16


class SampleRing:
    def __init__(self, axes, n, slots):
        if slots < 2:
            raise ValueError("ring needs at least 2 window slots")
        self.axes = axes
        self.n = n
        self.slots = slots
        self.cap = n * slots                       # frames
        # one array, axis after axis (each axis's cap counts from index a * cap), so one viper
        # call spreads a block of interleaved frames over every axis
        self.data = array.array('h', bytes(2 * axes * self.cap))
        mv = memoryview(self.data)
        self.views = [[mv[(a * slots + s) * n:(a * slots + s + 1) * n] for s in range(slots)]
                      for a in range(axes)]
        self.w = 0            # next frame to write
        self.r = 0            # slot of the oldest unprocessed window
        self.filled = 0       # frames written and not yet released
        self.dropped = 0      # frames lost to a full ring, since start (saturates at 2**30 - 1)

    @micropython.native
    def push(self, src, frames, first=0):
        """Append `frames` interleaved frames from src (array('h')), from its frame `first` on.

        Returns the number of frames dropped by this call (also added to self.dropped).
        """
        room = self.cap - self.filled
        take = frames if frames <= room else room
        axes = self.axes
        self.w = scatter16(self.data, src, first * axes, axes, take, self.w, self.cap)
        self.filled += take
        lost = frames - take
        if lost:
            self.dropped = sat_add(self.dropped, lost)
        return lost

    def ready(self):
        """True when a full window waits in the oldest slot."""
        return self.filled >= self.n

    def window(self, axis):
        """The oldest waiting window of one axis, as a memoryview of n counts (no copy)."""
        return self.views[axis][self.r]

    def copy_window(self, axis, dst, off):
        """Copy the oldest waiting window of one axis into dst (array('h')) from index off on,
        with no slice (a slice of a memoryview allocates on MicroPython before 1.26)."""
        scatter16(dst, self.views[axis][self.r], 0, 1, self.n, off, len(dst))

    def release(self):
        """Free the oldest window's slot for new samples."""
        self.filled -= self.n
        self.r += 1
        if self.r == self.slots:
            self.r = 0


def footprint_bytes(axes, n, slots):
    """Heap bytes of the ring's sample storage (the arrays; object headers are extra)."""
    return 2 * axes * n * slots


@micropython.viper
def scatter16(d, src, i: int, axes: int, take: int, w: int, cap: int) -> int:
    """Spread take <= cap frames of `axes` interleaved int16 counts, from src[i] on, over the
    axes' planes of d: count a of a frame to d[a * cap + w], w counting up from w and wrapping to
    0 at cap; returns the next w. Counts are copied as 16-bit patterns (no arithmetic on them).
    With axes 1 it is a plain copy into a circular buffer of cap counts."""
    dp = ptr16(d)
    sp = ptr16(src)
    for a in range(axes):           # axis by axis: the inner loop only loads, stores and counts
        base = a * cap
        end = base + cap
        o = base + w
        j = i + a
        for _ in range(take):
            dp[o] = sp[j]
            j += axes
            o += 1
            if o == end:
                o = base
    w += take
    if w >= cap:
        w -= cap
    return w
