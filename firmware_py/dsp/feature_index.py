# Layout and fixed-point scales of the feature vector: one block of fields per axis, axis-major.
# Every value is a small int (|v| < 2**30). Physical units come only at report time, through the
# calibration (host_tools/data/units.py on the host); the scale of each field is fixed here.
from micropython import const

F_MEAN = const(0)    # DC offset of the window, counts, Q8 (value / 256 = counts)
F_RMS = const(1)     # r.m.s. of the DC-removed window, counts, Q8
F_PEAK = const(2)    # max |x - mean| in the window, counts, Q8
F_CREST = const(3)   # crest factor peak / r.m.s., Q12 (sine: 1.414 -> 5793)
F_KURT = const(4)    # kurtosis m4 / m2**2 (Pearson, not excess), Q12 (Gaussian: 3.0 -> 12288)
F_CLIP = const(5)    # samples at or beyond the converter's full scale, count
F_VEL = const(6)     # velocity r.m.s. in the 10-1000 Hz band (band edges from the params), counts/s, Q16
F_STUCK = const(7)   # longest run of identical consecutive raw samples, samples
F_ZERO = const(8)    # longest run of consecutive raw samples exactly 0, samples
F_SPEED = const(9)   # shaft frequency (1x) estimate, Hz Q8; 0 = no estimate
F_SPEED_CONF = const(10)  # confidence of F_SPEED, Q8 (256 = all harmonic-sum power at the 1x family)
F_ORD_HALF = const(11)    # 0.5x line, log2 of its mean square, counts**2, Q8
F_ORD_1X = const(12)      # 1x, same
F_ORD_2X = const(13)      # 2x, same
F_ORD_3X = const(14)      # 3x, same
F_ORD_VANE = const(15)    # vane-pass order, same
F_ENV_BPFO = const(16)    # envelope-spectrum line at BPFO x speed, log2 Q8
F_ENV_BPFI = const(17)    # same at BPFI
F_ENV_BSF = const(18)     # same at BSF
F_ENV_FTF = const(19)     # same at FTF
F_BAND0 = const(20)  # first band power: log2 of the band's mean square in counts**2, Q8
N_FIXED = const(20)  # fields before the band powers

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
