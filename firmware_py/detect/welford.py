"""Running mean and population variance of many integer channels, Welford's method in exact
integer form: allocation-free and with no growing sums, so a large constant offset costs no
precision (the update works on differences from the running mean only).

Entry points: footprint_bytes(), Welford."""
from array import array
from micropython import const

IN_LIM = const(8191)     # inputs must satisfy |x| <= IN_LIM, so |x - mean| < 2**14
N_MAX = const(65535)     # count saturates here: further samples are ignored
_FQ = const(14)          # fraction bits used for the remainders of the mean


def footprint_bytes(ch):
    """Heap bytes of the arrays of Welford(ch): 5 ints a channel (object headers are extra)."""
    return 5 * 4 * ch


class Welford:
    """ch independent channels; channel j has count n[j], mean and population variance.

    Per channel, exactly: mean = mi + mr / n (0 <= mr < n). The variance is held as
    vi + vr / n (0 <= vr < n) in input units squared, with an error of about one unit squared
    (each update rounds the cross term to the nearest unit). Every intermediate is < 2**30 for
    |x| <= IN_LIM and n <= N_MAX.
    """

    def __init__(self, ch):
        self.ch = ch
        self.n = array("i", bytes(4 * ch))
        self.mi = array("i", bytes(4 * ch))
        self.mr = array("i", bytes(4 * ch))
        self.vi = array("i", bytes(4 * ch))
        self.vr = array("i", bytes(4 * ch))

    def reset(self):
        for j in range(self.ch):
            self.n[j] = 0
            self.mi[j] = 0
            self.mr[j] = 0
            self.vi[j] = 0
            self.vr[j] = 0

    def add(self, j, x):
        """Add sample x (|x| <= IN_LIM, input units) to channel j."""
        n = self.n[j]
        if n >= N_MAX:
            return
        if n == 0:
            self.n[j] = 1
            self.mi[j] = x
            return
        mi = self.mi[j]
        mr = self.mr[j]
        fo = (mr << _FQ) // n             # old mean's fraction, Q14
        n += 1
        a = x - mi                        # x - old mean = a - fo / 2**14
        t = mr + a                        # n * new mean = n * mi + t
        mi += t // n
        mr = t % n
        fn = (mr << _FQ) // n             # new mean's fraction, Q14
        b = x - mi                        # x - new mean = b - fn / 2**14
        # (a - fo')(b - fn') with the cross terms in Q14, rounded to whole units squared
        cross = a * fn + b * fo - ((fo * fn) >> _FQ)
        p = a * b - ((cross + (1 << (_FQ - 1))) >> _FQ)
        # n * var_new = (n - 1) * var_old + p = n * vi + (vr + p - vi)
        t = self.vr[j] + p - self.vi[j]
        self.vi[j] += t // n
        self.vr[j] = t % n
        self.n[j] = n
        self.mi[j] = mi
        self.mr[j] = mr

    def mean_q(self, j, q):
        """Mean of channel j with q fraction bits (floor); q <= 12."""
        n = self.n[j]
        if n == 0:
            return 0
        return (self.mi[j] << q) + (self.mr[j] << q) // n

    def var(self, j):
        """Population variance of channel j, input units squared (floor)."""
        return self.vi[j]
