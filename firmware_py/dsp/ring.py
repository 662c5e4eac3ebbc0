"""Sample ring: per-axis int16 counts, fed in blocks as a sensor FIFO delivers them.

The ring holds a whole number of windows ("slots"), so a window never wraps and each slot has a
memoryview made once at start: the feature stage reads it with no copy and no allocation.
Samples that arrive while the ring is full of unprocessed windows are counted as dropped, never
written over data still waiting: the loss is always visible (dropped counters).

Entry points: SampleRing (push, ready, window, copy_window, release), gather16() (the viper copy
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
        self.data = [array.array('h', bytes(2 * self.cap)) for _ in range(axes)]
        self.views = [[memoryview(d)[s * n:(s + 1) * n] for s in range(slots)] for d in self.data]
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
        w = self.w
        end = w
        for a in range(axes):          # each axis from its place in the interleaved frames
            end = gather16(self.data[a], src, first * axes + a, axes, take, w, self.cap)
        self.w = end
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
        gather16(dst, self.views[axis][self.r], 0, 1, self.n, off, len(dst))

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
def gather16(d, src, i: int, step: int, take: int, w: int, cap: int) -> int:
    """Copy take int16 counts src[i], src[i + step], ... to d[w], d[w + 1], ..., w wrapping to 0
    at cap; returns the next w. Counts are copied as 16-bit patterns (no arithmetic on them)."""
    dp = ptr16(d)
    sp = ptr16(src)
    for _ in range(take):
        dp[w] = sp[i]
        i += step
        w += 1
        if w == cap:
            w = 0
    return w
