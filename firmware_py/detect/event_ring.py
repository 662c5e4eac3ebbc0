"""Fixed-size ring of detector events (state transitions), preallocated arrays, no allocation.
When the ring is full the oldest event is overwritten and `lost` counts it.

Entry points: CAP_MAX, footprint_bytes(), EventRing."""
from array import array
from micropython import const

# Most events a ring holds (det_event_n), in events of 7 ints (28 bytes each): 7 kB at most.
# The gateway reads only the newest event (for its capture) and the host's replay drains the
# ring after every window, so a longer ring buys no reader anything; 8 times the default of 32.
CAP_MAX = const(256)


def footprint_bytes(cap):
    """Heap bytes of the arrays of EventRing(cap): 7 ints an event (object headers are extra)."""
    return 7 * 4 * cap


class EventRing:
    """cap events; slot i holds t[i] (s), old[i], new[i] (states), reason[i], mode[i]
    (-1 none), feat[i] (flat feature index, -1 none), score_q8[i] (Q8 spreads).

    Drain: `i = ring.pop()` gives the oldest slot (or -1 if empty); read the arrays at i before
    the next put().
    """

    def __init__(self, cap):
        self.cap = cap
        z = bytes(4 * cap)
        self.t = array("i", z)
        self.old = array("i", z)
        self.new = array("i", z)
        self.reason = array("i", z)
        self.mode = array("i", z)
        self.feat = array("i", z)
        self.score_q8 = array("i", z)
        self.head = 0     # next slot to write
        self.count = 0    # events held
        self.lost = 0     # events overwritten unread (saturates)

    def put(self, t, old, new, reason, mode, feat, score_q8):
        i = self.head
        self.t[i] = t
        self.old[i] = old
        self.new[i] = new
        self.reason[i] = reason
        self.mode[i] = mode
        self.feat[i] = feat
        self.score_q8[i] = score_q8
        i += 1
        self.head = 0 if i == self.cap else i
        if self.count == self.cap:
            if self.lost < (1 << 29):
                self.lost += 1
        else:
            self.count += 1

    def pending(self):
        return self.count

    def pop(self):
        """Slot of the oldest unread event, marked read; -1 if none."""
        if self.count == 0:
            return -1
        i = self.head - self.count
        if i < 0:
            i += self.cap
        self.count -= 1
        return i
