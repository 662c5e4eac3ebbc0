"""Layout and fixed-point scales of the feature vector: one block of fields per axis, axis-major.
Every value is a small int (|v| < 2**30). Physical units come only at report time, through the
calibration (host_tools/data/units.py on the host); the scale of each field is fixed here.

Entry points: per_axis()."""
from micropython import const

F_MEAN = const(0)    # DC offset of the window, counts, Q8 (value / 256 = counts)
F_RMS = const(1)     # r.m.s. of the DC-removed window, counts, Q8
F_PEAK = const(2)    # max |x - mean| in the window, counts, Q8
F_CREST = const(3)   # crest factor peak / r.m.s., Q12 (sine: 1.414 -> 5793)
F_KURT = const(4)    # kurtosis m4 / m2**2 (Pearson, not excess), Q12 (Gaussian: 3.0 -> 12288)
F_CLIP = const(5)    # samples at or beyond the converter's full scale, count
F_VEL = const(6)     # velocity r.m.s. in the 10-1000 Hz band (band edges from the params), counts/s, Q16
F_BAND0 = const(7)   # first band power: log2 of the band's mean square in counts**2, Q8
N_FIXED = const(7)   # fields before the band powers

# Log2 value stored for a band with no power at all (log2 of zero); -64 in Q8.
LOG2_ZERO_Q8 = const(-16384)

Q_MEAN = const(8)
Q_RMS = const(8)
Q_PEAK = const(8)
Q_CREST = const(12)
Q_KURT = const(12)
Q_VEL = const(16)
Q_LOG2 = const(8)


def per_axis(n_bands):
    """Number of fields per axis for a parameter set with n_bands bands."""
    return N_FIXED + n_bands
