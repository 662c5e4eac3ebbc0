# Order amplitudes of one window: the power around 0.5x, 1x, 2x, 3x and the vane-pass order of
# the estimated shaft speed, in integers, allocation-free.
#
# Entry point: OrderReader(m, vane, p).run(f1_q8, c_q8, f, off) writes F_ORD_HALF..F_ORD_VANE.
#
# Leakage: a tone at position x (bins) spreads over the Hann main lobe, the bins with |k - x| < 2:
# the 4 bins floor(x)-1 .. floor(x)+2. They hold the whole tone for x on a bin and 99.9 % of it
# at half a bin (1.4987 of 1.5, the periodic Hann window's equivalent noise bandwidth in bins,
# common practice; the same 1.5 as HANN_ENBW_BINS in host_tools/data/lines.py). Their sum,
# scaled like a band power (4/3 * 2**-2u: Hann power normalisation, which divides by that 1.5
# and doubles for one side), is the tone's mean square A**2 / 2 in counts**2.
#
# Scales: p[k] <= 2**28 (fft.spectrum), a 4-bin sum < 2**30; f1_q8: 1x in bins Q8 (speed.py);
# output log2 of counts**2, Q8, as the band powers. Two orders closer than 4 bins share bins:
# 0.5x is clean of 1x only from 1x >= HALF_CLEAR_BINS (docs/fixed-point.md).
from micropython import const

from firmware_py.dsp.feature_index import (
    F_ORD_1X, F_ORD_2X, F_ORD_3X, F_ORD_HALF, F_ORD_VANE, LOG2_ZERO_Q8)
from firmware_py.dsp.fft import power_sum
from firmware_py.dsp.fixmath import log2_q8

# The lowest 1x (bins) whose 0.5x read lies clear of the 1x's main lobe: the read's top bin,
# floor(f/2) + 2, must lie 2 bins or more under f, which holds for every f >= 7 (at 6 <= f < 7
# it is bin 5, 1 to 2 bins under f). Training scores the 0.5x line only from there.
HALF_CLEAR_BINS = const(7)


def check_vane(n, fs_hz, vane, hi_q8):
    """Raise ValueError with the reason if the vane-pass order cannot be read."""
    if vane < 0 or vane > 64:
        raise ValueError("vane count must be 0 (none) to 64")
    # vane * top speed in bins, plus the lobe's 2 bins, within the spectrum (start-up ints)
    if vane and hi_q8 and (vane * hi_q8 * n) // (256 * fs_hz) + 2 > n >> 1:
        raise ValueError("vane pass at the top speed lies beyond fs/2")


class OrderReader:
    """Main-lobe power at the orders of the 1x estimate, from the power spectrum p."""

    def __init__(self, vane, p, log2_q15):
        self.vane = vane
        self.p = p
        self.log2_q15 = log2_q15

    def run(self, f1_q8, c, f, off):
        """f1_q8: 1x in bins Q8 (0: none); c: log2 Q8 turning a bin sum into counts**2 (the
        band powers' log2(4/3) - 512u)."""
        if f1_q8 == 0:
            f[off + F_ORD_HALF] = LOG2_ZERO_Q8
            f[off + F_ORD_1X] = LOG2_ZERO_Q8
            f[off + F_ORD_2X] = LOG2_ZERO_Q8
            f[off + F_ORD_3X] = LOG2_ZERO_Q8
            f[off + F_ORD_VANE] = LOG2_ZERO_Q8
            return
        f[off + F_ORD_HALF] = self._lobe(f1_q8 >> 1, c)
        f[off + F_ORD_1X] = self._lobe(f1_q8, c)
        f[off + F_ORD_2X] = self._lobe(2 * f1_q8, c)
        f[off + F_ORD_3X] = self._lobe(3 * f1_q8, c)
        f[off + F_ORD_VANE] = self._lobe(self.vane * f1_q8, c) if self.vane else LOG2_ZERO_Q8

    def _lobe(self, x_q8, c):
        """log2 Q8 of the mean square in the Hann main lobe around x_q8 (bins Q8)."""
        k = x_q8 >> 8
        s = power_sum(self.p, k - 1, k + 3)      # viper on the boards (fft.power_sum)
        return log2_q8(s, self.log2_q15) + c if s > 0 else LOG2_ZERO_Q8
