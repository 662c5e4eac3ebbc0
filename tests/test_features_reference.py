"""The feature core against textbook identities, numpy/scipy references and the band-limit
response. Each tolerance is derived from the quantisation it covers (stated beside it)."""
import math

import numpy as np
import scipy.stats
from numpy.testing import assert_allclose

from firmware_py.dsp import feature_index as fi
from host_tools.data import units
from tests.feature_helpers import device_features, tone

N, FS = 512, 3200


def test_sine_identities():
    # a = A sin(2 pi f t): a_rms = A/sqrt(2), crest factor sqrt(2), kurtosis 1.5 (textbook
    # identities for a sinusoid; exact over whole periods: 100 Hz is 16 periods in 512 samples).
    A = 20000
    f, _ = device_features(tone(100, A))
    rms = f[0, fi.F_RMS] / 256
    # tolerance: the rounded sine deviates by <= 0.5 count per sample, so rms within 0.5 count
    assert abs(rms - A / math.sqrt(2)) <= 0.5 + 1 / 256
    assert abs(f[0, fi.F_CREST] / 4096 - math.sqrt(2)) < 2e-3   # peak is a sample, <= 0.5 count off
    assert abs(f[0, fi.F_KURT] / 4096 - 1.5) < 2e-3


def test_velocity_of_one_g_at_100_hz_is_11_04_mm_s():
    # 1 g peak (9.80665 m/s^2, ISO 80000-3 standard gravity) at 100 Hz: v_rms = A/(2 pi f sqrt 2)
    # = 11.04 mm/s (textbook identity). Sensor: 16384 counts per g.
    counts_per_g = 16384
    scale = units.STANDARD_GRAVITY_M_S2 / counts_per_g
    f, _ = device_features(tone(100, counts_per_g))
    v = units.velocity_mm_s(f[0, fi.F_VEL], scale)
    exact = units.STANDARD_GRAVITY_M_S2 / (2 * math.pi * 100 * math.sqrt(2)) * 1000
    assert abs(exact - 11.04) < 0.005
    # tolerance: the Hann main lobe puts 1/6 of the tone's power in each neighbouring bin, weighted
    # by (16/15)^2 and (16/17)^2 instead of 1: ((1 + (16/15)^2/4 + (16/17)^2/4) / 1.5)**0.5 - 1
    lobe = math.sqrt((1 + (16 / 15) ** 2 / 4 + (16 / 17) ** 2 / 4) / 1.5) - 1
    assert abs(v / exact - 1) <= lobe + 1e-3
    assert abs(units.accel_m_s2(f[0, fi.F_RMS], scale) - units.STANDARD_GRAVITY_M_S2 / math.sqrt(2)) < 1e-3


def test_gaussian_noise_kurtosis_and_rms_against_scipy():
    rng = np.random.default_rng(3)
    x = np.clip(np.round(rng.normal(0, 3000, N * 40)), -32768, 32767).astype(np.int16)
    f, _ = device_features(x)
    w = x.reshape(40, N).astype(float)
    ref_k = scipy.stats.kurtosis(w, axis=1, fisher=False)
    ref_rms = w.std(axis=1)
    # Derived bound: sum of squares floors lose < n units of y*y/2**(L-1), sum of fourth powers
    # loses <= (r + 1/4)/2**L + 1 per sample (r rounded y*y/2**14); the integer mean is within 1/2
    # count of the true one. Relative: rms 0.5*e2, kurtosis e4 + 2*e2, plus Q12 output step.
    y = w - np.round(w.mean(axis=1, keepdims=True))
    scale = 2.0 ** (13 - np.floor(np.log2(np.abs(y).max(axis=1, keepdims=True))))
    yy = (y * scale) ** 2
    e2 = N / (yy / 2 ** 8).sum(axis=1)
    e4 = ((yy / 2**14 + 0.25) / 2**9 + 1).sum(axis=1) / ((yy / 2**14) ** 2 / 2**9).sum(axis=1)
    dc = 6 * (0.5 / ref_rms) ** 2
    assert np.all(np.abs(f[:, fi.F_KURT] / 4096 / ref_k - 1) <= e4 + 2 * e2 + dc + 1 / 4096)
    assert np.all(np.abs(f[:, fi.F_RMS] / 256 / ref_rms - 1) <= 0.5 * e2 + dc + 2**-13)
    # Gaussian kurtosis is 3 (textbook): the mean over 40 windows of 512 is within sampling error
    # (standard error of sample kurtosis ~ sqrt(24/n) per window, so sqrt(24/512/40) overall)
    assert abs(f[:, fi.F_KURT].mean() / 4096 - 3) < 3 * math.sqrt(24 / N / 40)


def _bound_per_component(m):
    """Worst-case error of one real component of X (in LSB) through the fixed-point FFT.

    Window floor: <= 1 per input component. Radix-2 stage (u +- x)/2, floored: E -> E + 1.
    Radix-4 stage (a + B + C + D)/4 floored, each twiddle product w*x with |w| <= 1 spreading an
    input error over both components (x sqrt 2), one floor (1) and the Q15 rounding of w
    (|x| * 2 * 2**-16 <= 0.71): E -> (E + 3*(sqrt2*E + 1.71))/4 + 1. Split: E -> (E + 1) +
    (sqrt2*(E + 1) + 1.71).
    """
    e = 1.0
    stages = int(math.log2(m))
    if stages % 2:
        e, stages = e + 1, stages - 1
    for _ in range(stages // 2):
        e = (e + 3 * (math.sqrt(2) * e + 1.71)) / 4 + 1
    return (e + 1) + (math.sqrt(2) * (e + 1) + 1.71)


def test_power_spectrum_against_numpy_rfft():
    """p[k] = |X[k]|^2 with X = rfft(windowed normalised samples) / (n/2), within the derived
    worst-case bound per component (sqrt 2 of it in magnitude)."""
    rng = np.random.default_rng(11)
    for n in (64, 512, 2048):
        x = np.clip(np.round(rng.normal(0, 2500, n) + 900 * np.sin(np.arange(n) * 0.3)),
                    -32768, 32767).astype(np.int16)
        _, fc = device_features(x, n=n)
        p = np.array(fc.p, dtype=float)
        mean = (int(x.astype(np.int64).sum()) + n // 2) >> (n.bit_length() - 1)
        pk = max(int(x.max()) - mean, mean - int(x.min()))
        y = (x.astype(float) - mean) * 2.0 ** (13 - (pk.bit_length() - 1))
        X = np.fft.rfft(y * np.array(fc.hann_q15) / 32768) / (n // 2)
        err = np.abs(np.sqrt(p) - np.abs(X))
        assert err.max() <= math.sqrt(2) * _bound_per_component(n // 2), (n, err.max())
        # typical error is far below the worst case: total SNR
        snr_db = 10 * np.log10(np.sum(np.abs(X) ** 2) / np.sum(err**2))
        assert snr_db > 30


def _vel_ratio(f_hz, amp=12000, windows=8):
    """Measured velocity / unweighted v = A/(2 pi f sqrt 2), averaged over windows (phases vary)."""
    f, _ = device_features(tone(f_hz, amp, windows=windows, phase=0.3))
    v = f[:, fi.F_VEL].mean() / 65536
    return v / (amp / (2 * math.pi * f_hz * math.sqrt(2)))


def _butterworth(f):
    # third-order Butterworth high-pass at 10 Hz and low-pass at 1000 Hz (ISO 2954 band limits,
    # from a summary of the standard); ISO 10816-1 broadband range 10-1000 Hz (from memory)
    return math.sqrt((f / 10) ** 6 / (1 + (f / 10) ** 6) / (1 + (f / 1000) ** 6))


def test_band_limits_pass_20_100_500_hz_within_a_few_per_cent():
    # Resolution: n = 512 at 3200 Hz gives 6.25 Hz bins, so the 10 Hz edge falls at bin 1.6 and a
    # 20 Hz tone spreads over bins 2-4 whose 1/f^2 weights differ by a factor of 4: that leakage,
    # not the filter, sets the few per cent. Slow machines (1x below ~20 Hz) need a longer window.
    for f_hz in (20, 100, 500):
        r = _vel_ratio(f_hz)
        assert abs(r / _butterworth(f_hz) - 1) < 0.04, (f_hz, r)


def test_out_of_band_tones_are_attenuated_as_the_response_says():
    r5 = _vel_ratio(5)
    # 5 Hz (0.8 bin) leaks into bins 1-2, whose weights pass more than |H(5 Hz)| = 0.124; it is
    # still far below its unweighted velocity.
    assert r5 < 0.25
    assert r5 > _butterworth(5)
    r1500 = _vel_ratio(1500)
    # 1500 Hz is bin 240 exactly: the filter's 0.284, plus the fixed-point noise floor seen
    # through the large low-frequency weights (a few per cent of this small value).
    assert abs(r1500 / _butterworth(1500) - 1) < 0.06, r1500


def test_mean_clipping_and_band_power():
    x = tone(100, 2000, dc=-1234.0)
    x[100:110] = 32767
    f, _ = device_features(x, bands=((14, 19), (40, 60)))
    assert abs(f[0, fi.F_MEAN] / 256 - x.astype(float).mean()) <= 1 / 256
    assert f[0, fi.F_CLIP] == 10
    # band power (log2 of counts^2, Q8) against the same quantity from numpy: one-sided power of
    # the Hann-windowed window, normalised by n * sum(w^2) (common practice in spectral analysis)
    w = np.hanning(513)[:-1]
    X = np.fft.rfft((x - np.round(x.mean())) * w)
    ps = 2 * np.abs(X) ** 2 / (512 * np.sum(w**2))
    ref = np.log2(ps[14:19].sum())
    assert abs(f[0, fi.F_BAND0] / 256 - ref) < 0.02
