"""Sample ring: per-axis int16 counts, fed in blocks as a sensor FIFO delivers them.

The ring holds a whole number of windows ("slots"), so a window never wraps and each slot has a
memoryview made once at start: the feature stage reads it with no copy and no allocation.
Samples that arrive while the ring is full of unprocessed windows are counted as dropped, never
written over data still waiting: the loss is always visible (dropped counters).

Entry points: SampleRing, footprint_bytes()."""
import array

from firmware_py.dsp.counters import sat_add


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

    def push(self, src, frames, first=0):
        """Append `frames` interleaved frames from src (array('h')), from its frame `first` on.

        Returns the number of frames dropped by this call (also added to self.dropped).
        """
        room = self.cap - self.filled
        take = frames if frames <= room else room
        w = self.w
        cap = self.cap
        axes = self.axes
        if axes == 1:
            d = self.data[0]
            for i in range(first, first + take):
                d[w] = src[i]
                w += 1
                if w == cap:
                    w = 0
        else:
            i = first * axes
            for _ in range(take):
                for a in range(axes):
                    self.data[a][w] = src[i]
                    i += 1
                w += 1
                if w == cap:
                    w = 0
        self.w = w
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

    def release(self):
        """Free the oldest window's slot for new samples."""
        self.filled -= self.n
        self.r += 1
        if self.r == self.slots:
            self.r = 0


def footprint_bytes(axes, n, slots):
    """Heap bytes of the ring's sample storage (the arrays; object headers are extra)."""
    return 2 * axes * n * slots
