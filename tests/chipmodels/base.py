# What both chip models share: simulated time, an output data rate clock, a FIFO of xyz frames
# and a signal source. Chip-specific register behaviour lives in the subclasses.
from array import array

BYPASS = 0      # FIFO not used: the output registers hold the newest frame
FIFO = 1        # FIFO fills, then refuses new frames
STREAM = 2      # FIFO keeps the newest frames, overwriting the oldest


class ChipModel:
    """signal: array('h') of interleaved x, y, z frames, repeated forever; the chip turns frame
    k of it into output counts with convert(). fifo_frames: FIFO depth in frames."""

    def __init__(self, signal, fifo_frames):
        self.signal = signal
        self.sig_frames = len(signal) // 3
        self.cap = fifo_frames
        self.fifo = array('h', [0] * (3 * fifo_frames))
        self.latch = array('h', [0, 0, 0])     # the output registers
        self.now_us = 0
        self._ns = 0            # ns of simulated time below one us
        self._odr_ns = 0        # ns since the last output frame
        self.reset_fifo()
        self.k = 0              # frames produced since the chip started measuring
        self.dropped = 0        # frames lost by the FIFO (overwritten or refused), since start
        self.overrun = 0        # overrun flag as the chip holds it
        self.fresh = 0          # bypass mode: output registers not read since last update

    def reset_fifo(self):
        self.head = 0
        self.count = 0

    # -- time --
    def ticks_us(self):
        """The host clock of the simulation, wrapping as MicroPython's ticks do (2**30)."""
        return self.now_us & 0x3FFFFFFF

    def advance_ns(self, ns):
        """Let ns (< 2**30) nanoseconds pass: the chip produces its frames meanwhile."""
        t = self._ns + ns
        self.now_us += t // 1000
        self._ns = t % 1000
        period = self.period_ns()
        if period == 0:
            self._odr_ns = 0
            return
        acc = self._odr_ns + ns
        while acc >= period:
            acc -= period
            self._produce()
        self._odr_ns = acc

    def advance_us(self, us):
        while us > 1000000:
            self.advance_ns(1000000000)
            us -= 1000000
        self.advance_ns(us * 1000)

    # -- frames --
    def sample(self, k, axis):
        """Output counts of frame k on an axis under the present settings."""
        return self.convert(axis, self.signal[(k % self.sig_frames) * 3 + axis])

    def _produce(self):
        k = self.k
        self.k = k + 1
        mode = self.fifo_mode()
        if mode == BYPASS:
            if self.fresh:
                self.overrun = 1
                self.dropped += 1
            for a in range(3):
                self.latch[a] = self.sample(k, a)
            self.fresh = 1
            return
        if self.count == self.cap:
            self.overrun = 1
            self.dropped += 1
            if mode == FIFO:
                return
            self.head = (self.head + 1) % self.cap
            self.count -= 1
        j = 3 * ((self.head + self.count) % self.cap)
        for a in range(3):
            self.fifo[j + a] = self.sample(k, a)
        self.count += 1

    def pop(self):
        """Move the oldest FIFO frame to the output registers (nothing if the FIFO is empty)."""
        if self.count == 0:
            return 0
        j = 3 * self.head
        for a in range(3):
            self.latch[a] = self.fifo[j + a]
        self.head = (self.head + 1) % self.cap
        self.count -= 1
        return 1

    # -- chip-specific --
    def period_ns(self):
        """Output data period in ns, 0 while not measuring."""
        raise NotImplementedError

    def fifo_mode(self):
        raise NotImplementedError

    def convert(self, axis, value):
        raise NotImplementedError
