# Order amplitudes of one window: the power around 0.5x, 1x, 2x, 3x and the vane-pass order of
# the estimated shaft speed, in integers, allocation-free.
#
# Entry point: OrderReader(m, vane, p).run(f1_q8, c_q8, f, off) writes F_ORD_HALF..F_ORD_VANE.
#
# Read: a tone at position x (bins) spreads over the Hann main lobe, the bins with |k - x| < 2,
# 1.5 bins' worth of power (the periodic Hann window's equivalent noise bandwidth, common
# practice; HANN_ENBW_BINS in host_tools/data/lines.py). Only the two bins that bracket it,
# floor(x) and floor(x) + 1, are read, and the part of the lobe they hold is restored from the
# window's kernel (scallop_q8: + 15 to 67 Q8, the scalloping loss; Harris, "On the use
# of windows for harmonic analysis with the discrete Fourier transform", Proc. IEEE 66, 1978).
# Why not the whole lobe: the lines of a slow shaft lie 2 to 4 bins apart, and a 4-bin read
# reaches into the neighbouring line's main lobe. On a weak axis the 2x read was then mostly the
# 1x's leakage, which swings with the fraction of a bin the speed sits at (docs/evaluation.md,
# "Order lines read clear of their neighbours"). The two bracketing bins lie at least D - 1 bins
# from a line D bins away, so they are clear of its main lobe for D >= 3, and for 2x next to a 1x
# of 2.5 bins or more. The sum, scaled like a band power (4/3 * 2**-2u: Hann power normalisation,
# which divides by that 1.5 and doubles for one side), is the tone's mean square A**2 / 2 in
# counts**2.
#
# Scales: p[k] <= 2**28 (fft.spectrum), a 2-bin sum < 2**29; f1_q8: 1x in bins Q8 (speed.py);
# output log2 of counts**2, Q8, as the band powers. 0.5x is clean of 1x only from 1x >=
# HALF_CLEAR_BINS (docs/fixed-point.md).
from micropython import const

from firmware_py.dsp.feature_index import (
    F_ORD_1X, F_ORD_2X, F_ORD_3X, F_ORD_HALF, F_ORD_VANE, LOG2_ZERO_Q8)
from firmware_py.dsp.fft import power_sum
from firmware_py.dsp.fixmath import log2_q8

# The lowest 1x (bins) whose 0.5x read lies clear of the 1x's main lobe: the read's top bin,
# floor(f/2) + 1, must lie 2 bins or more under f, which holds for every f >= 5 (at 4 <= f < 5
# it is bin 3, 1 to 2 bins under f). Training scores the 0.5x line only from there.
HALF_CLEAR_BINS = const(5)

# The scalloping loss of the two-bin read: 256 log2(1.5 / (W(d)**2 + W(1 - d)**2)), with d the
# line's fraction of a bin above the lower bin and W the Hann kernel sin(pi d) / (pi d (1 - d**2))
# (Harris 1978; 1.5 bins is the lobe's whole power). It depends on d only through
# e = d (1 - d) and is a quadratic in e to within 0.019 LSB: coefficients least-squares fitted to
# the formula at the 256 values of d, Q16 (tests/test_orders_envelope.py checks it).
_SC0 = const(4412599)
_SC1 = const(-222)
_SC2 = const(48)


def scallop_q8(d):
    """log2 Q8 to add to the two bins' power for a line d/256 of a bin above the lower one
    (0 <= d < 256): 67 on a bin, 15 at half a bin. e = d (256 - d) <= 2**14 (Q16), e**2 < 2**29.
    Integer ops only, so numpy arrays of d give the same values (the host twin)."""
    e = d * (256 - d)
    return (_SC0 + _SC1 * e + _SC2 * ((e * e) >> 16) + 32768) >> 16


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
        """log2 Q8 of the mean square in the Hann main lobe around x_q8 (bins Q8), from the two
        bins that bracket it."""
        k = x_q8 >> 8
        s = power_sum(self.p, k, k + 2)          # viper on the boards (fft.power_sum)
        return log2_q8(s, self.log2_q15) + c + scallop_q8(x_q8 & 255) if s > 0 else LOG2_ZERO_Q8
