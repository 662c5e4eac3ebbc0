"""Shaft-speed estimate (firmware_py/dsp/speed.py) against tones of known frequency made with
numpy: a lone tone across the whole range, and harmonic series with slip in white noise.
Tolerances are derived in the comments from the estimator's known bias for a Hann window, the
quantisation and the Cramer-Rao bound."""
import math

import numpy as np
import pytest

from firmware_py.dsp import feature_index as fi
from tests.feature_helpers import device_features

N, FS = 512, 3200
BIN = FS / N                       # 6.25 Hz
LO, HI = 20.0, 60.0                # speed range, Hz (3.2 to 9.6 bins)

# Bias of the Hann two-bin ratio estimator d = (2 a1 - a0) / (a1 + a0) for a lone tone
# (Grandke, IEEE Trans. Instrum. Meas. 32, 1983; from memory). The ratio a1/a0 = (1 + d)/(2 - d)
# is exact for the Hann kernel |W(d)| = sin(pi d) / (pi d (1 - d^2)) (textbook), so what is left:
# - the tone's image at -f, 2f >= 6 bins away: its kernel there is at most
#   1 / (pi * 6 * (6^2 - 1)) = 1.5e-3 of the line (Hann side lobes fall as 1/d^3). It moves a0 by
#   that share and a1 (>= 0.42 of the peak: |W(1/2)| / 2) by up to 3.6e-3: the ratio by <= 5.4e-3,
#   and d by dd/dratio = 3 / (1 + ratio)^2 <= 4/3 times that: 7.2e-3 bins;
# - quantisation: d rounded to 1/256 bin (2e-3), magnitudes with >= 14 bits (1e-4), F_SPEED
#   floored to 1/256 Hz (6e-4 bins); the finite-n kernel differs from the one above by
#   O((pi d / n)^2) = 2.5e-5 relative.
BIAS_BINS = 7.2e-3 + 2e-3 + 1e-4 + 6.3e-4       # 0.01 bins


def _speed(x, lo=LO, hi=HI, n=N, fs=FS):
    f, _ = device_features(x, n=n, fs=fs, speed=(round(lo * 256), round(hi * 256)))
    return f[:, fi.F_SPEED] / 256, f[:, fi.F_SPEED_CONF]


def test_lone_tone_within_a_hundredth_of_a_bin_across_the_range():
    # 300 tones from 20.5 to 59.5 Hz (3.3 to 9.5 bins), each its own window, two levels
    # (full scale and 300 counts: quantisation noise of the int16 samples, 1/12 count^2, leaves
    # the Cramer-Rao spread at 300 counts below 1e-4 bins). The issue asks for a tenth of a
    # bin; the derived bound is ten times tighter.
    t = np.arange(N) / FS
    fr = np.linspace(20.5, 59.5, 300)
    for amp in (20000, 300):
        x = np.concatenate([np.round(amp * np.sin(2 * np.pi * f * t + 0.7 * f)) for f in fr])
        est, conf = _speed(x.astype(np.int16))
        err = np.abs(est - fr) / BIN
        assert err.max() <= BIAS_BINS, (amp, err.max())
        assert err.max() < 0.1
        # a lone line: all power in the chosen family, so the confidence is near full
        assert conf.min() >= 240


# Below 3 bins the image at -f comes closer: bin k of the ratio lies at least 2f - 1 bins from it
# (k >= floor(f) >= f - 1), 4 bins at f = 2.5. Same steps as BIAS_BINS: its kernel there is at most
# 1 / (pi * 4 * (4^2 - 1)) = 5.3e-3 of the line, a1 moves by up to 5.3e-3 / 0.42 = 1.26e-2, the
# ratio by <= 1.79e-2 and d by 4/3 of that.
def _low_bias(dist_bins):
    return 4 / 3 * (1 / (math.pi * dist_bins * (dist_bins ** 2 - 1))) * (1 + 1 / 0.42) + 2e-3 + 1e-4 + 6.3e-4


LOW_BIAS_BINS = _low_bias(4)       # 0.027, from 2.5 bins
FLOOR_BIAS_BINS = _low_bias(3)     # 0.063, from the floor of 2 bins: the image 2f - 1 = 3 bins away


@pytest.mark.parametrize("f_lo, f_hi, search_hi, bound", [
    # 2.51 to 3.3 bins, searched 15.7-30 Hz: a 4-pole motor on a drive at 35 Hz turns at about 17 Hz
    (15.7, 20.5, 30.0, LOW_BIAS_BINS),
    # 2.0 to 2.51 bins, searched 12.5-25 Hz: a 6-pole motor at 40 Hz turns at about 13 Hz; the 1x
    # peak search is cut to start at bin 1 there (dsp/speed.py)
    (12.5, 15.7, 25.0, FLOOR_BIAS_BINS),
], ids=["from-2.5-bins", "from-2-bins"])
def test_lone_tone_below_three_bins_within_the_derived_bound(f_lo, f_hi, search_hi, bound):
    # 100 tones across the span, each its own window; still inside the tenth of a bin
    t = np.arange(N) / FS
    fr = np.linspace(f_lo, f_hi, 100)
    x = np.concatenate([np.round(20000 * np.sin(2 * np.pi * f * t + 0.7 * f)) for f in fr])
    est, conf = _speed(x.astype(np.int16), lo=f_lo, hi=search_hi)
    err = np.abs(est - fr) / BIN
    assert err.max() <= bound, err.max()
    assert bound < 0.1
    assert conf.min() >= 240


def test_harmonic_series_with_slip_in_noise_within_half_a_per_cent():
    # A pump's 1x, 2x, 3x (3000, 1500, 1000 counts) at a speed that changes from window to
    # window (42-58 Hz: slip and set-point changes), random phases, white noise of 250 counts.
    # Bound: bias (above, for 1x; 2x and 3x enter divided by h) plus the noise spread. The
    # Cramer-Rao bound of frequency for a tone in white noise (Rife and Boorstyn, IEEE Trans. Inf.
    # Theory 20, 1974) is var(f) = 12 / ((2 pi)^2 SNR n^3) cycles/sample, n^2 times that in bins;
    # combining harmonics, 1 / sum(h^2 / var_h). An estimator from two bins of a Hann-windowed
    # spectrum is less efficient: allow 4x the variance (2x the spread; common practice for
    # interpolated DFT estimators is 1.5-4x, from memory) and 5 spreads, for 200 windows.
    rng = np.random.default_rng(7)
    t = np.arange(N) / FS
    amps, sigma = np.array([3000.0, 1500.0, 1000.0]), 250.0
    fr = rng.uniform(42, 58, 200)
    x = np.concatenate([
        sum(a * np.sin(2 * np.pi * h * f * t + rng.uniform(0, 2 * np.pi)) for h, a in zip((1, 2, 3), amps))
        + rng.normal(0, sigma, N) for f in fr])
    est, conf = _speed(np.round(x).astype(np.int16), lo=40, hi=60)
    snr = amps ** 2 / 2 / sigma ** 2
    crlb_bins = math.sqrt(12 / (2 * math.pi) ** 2 / N / np.sum(np.array([1, 4, 9]) * snr))
    bound_bins = BIAS_BINS + 5 * 2 * crlb_bins
    err = np.abs(est - fr)
    assert np.all(err / BIN <= bound_bins), (err.max() / BIN, bound_bins)
    # the requirement: 0.5 % of the speed (the bound above is under it at 42 Hz)
    assert bound_bins * BIN < 0.005 * 42
    assert np.all(err / fr <= 0.005)
    assert conf.min() > 200


def test_weak_1x_with_strong_2x_and_3x_finds_1x():
    # misalignment-like spectrum: 2x and 3x ten times 1x in amplitude; the harmonic sum must
    # still name the 1x inside the range (a single-peak search would take 2x or 3x, outside it)
    t = np.arange(N) / FS
    f = 47.3
    x = 300 * np.sin(2 * np.pi * f * t) + 3000 * np.sin(2 * np.pi * 2 * f * t + 1) \
        + 3000 * np.sin(2 * np.pi * 3 * f * t + 2)
    est, _ = _speed(np.round(x).astype(np.int16), lo=40, hi=60)
    assert abs(est[0] - f) / BIN <= BIAS_BINS + 1e-3


def test_no_estimate_when_the_range_is_off_or_the_window_flat():
    t = np.arange(N) / FS
    x = np.round(3000 * np.sin(2 * np.pi * 47.3 * t)).astype(np.int16)
    f, _ = device_features(x)                            # no speed range in the set
    assert f[0, fi.F_SPEED] == 0 and f[0, fi.F_SPEED_CONF] == 0
    assert np.all(f[0, fi.F_ORD_HALF:fi.F_ENV_FTF + 1] == fi.LOG2_ZERO_Q8)
    est, conf = _speed(np.full(N, 123, dtype=np.int16))
    assert est[0] == 0 and conf[0] == 0


def test_white_noise_gives_a_low_confidence():
    # white noise spreads its power evenly over the 1..3x span: the family's lobes (9 bins)
    # hold about 9 / (span bins) of it; here the span runs from bin 0 to 32, so well below a half
    rng = np.random.default_rng(3)
    x = np.round(rng.normal(0, 2000, N * 20)).astype(np.int16)
    _, conf = _speed(x)
    assert np.median(conf) < 128
