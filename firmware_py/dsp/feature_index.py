"""Layout and fixed-point scales of the feature vector: one block of fields per axis, axis-major.
Every value is a small int (|v| < 2**30). Physical units come only at report time, through the
calibration (host_tools/data/units.py on the host); the scale of each field is fixed here.
docs/fixed-point.md derives each bound.

Entry points: per_axis()."""
from micropython import const

F_MEAN = const(0)    # DC offset of the window, counts, Q8 (value / 256 = counts)
F_RMS = const(1)     # r.m.s. of the DC-removed window, counts, Q8
F_PEAK = const(2)    # max |x - mean| in the window, counts, Q8
F_CREST = const(3)   # crest factor peak / r.m.s., Q12 (sine: 1.414 -> 5793)
F_KURT = const(4)    # kurtosis m4 / m2**2 (Pearson, not excess), Q12 (Gaussian: 3.0 -> 12288)
F_CLIP = const(5)    # samples at or beyond the converter's full scale, count
F_VEL = const(6)     # velocity r.m.s. in the 10-1000 Hz band (band edges from the params), counts/s, Q16
F_STUCK = const(7)   # longest run of identical consecutive raw samples (any value), samples (1..n)
F_ZERO = const(8)    # longest run of consecutive raw samples exactly 0, samples (0..n)
# Shaft frequency (1x), Hz Q8, within the set's speed range: the harmonic sum over 1x..3x of the
# power spectrum picks the family, each harmonic's peak is interpolated between bins (Hann
# two-bin ratio) and the three are combined by least squares (firmware_py/dsp/speed.py).
# 0 = no estimate (speed range off in the set, flat window, or no power in the range).
F_SPEED = const(9)
# Confidence of F_SPEED, Q8, 0..256: the power of the chosen family (the 3-bin main lobes at the
# 1x, 2x and 3x peaks) over all power in the bins the search could reach (from one bin below the
# lowest 1x candidate to three above the highest 3x one), times 256. 256: nothing but the family
# there; white noise alone reads about 9 bins' share of that span.
F_SPEED_CONF = const(10)
# Order amplitudes: log2 of the mean square (counts**2), Q8, of the line at order x F_SPEED: the
# two bins that bracket it, with the part of the Hann main lobe they miss restored (the window's
# scalloping loss), so a tone of amplitude A reads log2(A**2 / 2) and a line 3 bins away adds
# nothing. Same scale as the band powers (firmware_py/dsp/orders.py).
F_ORD_HALF = const(11)   # 0.5x
F_ORD_1X = const(12)     # 1x
F_ORD_2X = const(13)     # 2x
F_ORD_3X = const(14)     # 3x
F_ORD_VANE = const(15)   # vane pass, fc_vane x 1x (LOG2_ZERO_Q8 when the set has no vane count)
# Squared-envelope spectrum lines of the band fc_env_band at the bearing defect orders
# fc_bear_q12 x F_SPEED (firmware_py/dsp/envelope.py). Reference: the squared envelope's own mean
# (its DC). Value = log2(mean square of the line / mean**2), Q8: a squared envelope
# mean * (1 + mu cos(2 pi f t)) reads log2(mu**2 / 2) at f (mu = 1: -256). Independent of the
# signal level and the band's gain. LOG2_ZERO_Q8 when the set has no band or no bearing.
F_ENV_BPFO = const(16)   # outer-race ball pass
F_ENV_BPFI = const(17)   # inner-race ball pass
F_ENV_BSF = const(18)    # ball spin (1x BSF: the line at 2x BSF is read by nothing here)
F_ENV_FTF = const(19)    # cage (fundamental train)
# Half-order taps (firmware_py/dsp/half_taps.py): the window's complex spectrum at the bins
# nearest 0.5x, 1.5x and 2.5x of its own 1x estimate, for the detector to follow over consecutive
# windows (firmware_py/detect/half_lines.py). Value = X[k] * 2**8 with X[k] the DFT of the
# Hann-windowed (Q15 table), mean-removed counts divided by n/2, so counts Q8 whatever the
# window's gain; |value| <= 2**24. All 0 when the window has no 1x estimate.
F_TAP_X1 = const(20)     # the 1x the taps were placed by, bins Q8 (0: no taps)
F_TAP_RE = const(21)     # re, im of the 0.5x tap; 1.5x at +2, 2.5x at +4
# Half-order prominence, log2 Q8 (1.0 = 256): over a block of consecutive steady windows, the
# power of the 0.5x, 1.5x and 2.5x lines against the floor around them, averaged over blocks. The
# detector writes it from its own state (firmware_py/detect/half_lines.py); in the feature
# vector the core leaves LOG2_ZERO_Q8 (the window alone does not know it).
F_HALF = const(27)
F_BAND0 = const(28)  # first band power: log2 of the band's mean square in counts**2, Q8
N_FIXED = const(28)  # fields before the band powers

# Log2 value stored for a band with no power at all (log2 of zero); -64 in Q8.
LOG2_ZERO_Q8 = const(-16384)

Q_MEAN = const(8)
Q_RMS = const(8)
Q_PEAK = const(8)
Q_CREST = const(12)
Q_KURT = const(12)
Q_VEL = const(16)
Q_LOG2 = const(8)
Q_SPEED = const(8)
Q_SPEED_CONF = const(8)


def per_axis(n_bands):
    """Number of fields per axis for a parameter set with n_bands bands."""
    return N_FIXED + n_bands
