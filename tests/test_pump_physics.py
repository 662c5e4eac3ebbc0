"""The physics of the invented scenarios against outside references: numpy's FFT, scipy's Hilbert
transform, the kinematic bearing formulas, the AR(1) autocorrelation, the velocity of a sine."""
import math

import numpy as np
import pytest
from scipy import signal

from host_tools.data import pump_physics as ph
from host_tools.data.bearing import BEARING_6205, defect_orders

FS = 3200.0


def test_vane_pass_sidebands_follow_the_product_to_sum_identity():
    # (1 + m cos a) cos(N a) = cos(N a) + m/2 cos((N+1) a) + m/2 cos((N-1) a) (trigonometric
    # identity). On a whole number of turns at exact bins, numpy.fft.rfft gives each line's
    # amplitude to float rounding: 2 |X_k| / n.
    n, fr = 3200, 25.0                                   # 25 turns in 1 s: every line on a bin
    theta = 2 * np.pi * fr * np.arange(n) / FS
    x = ph.vane_pass(theta, 6, 0.3, 0.6, (0.0, 0.0))
    amp = 2 * np.abs(np.fft.rfft(x)) / n
    k = lambda f: int(round(f))                          # 1 Hz bins
    assert amp[k(6 * fr)] == pytest.approx(0.3, rel=1e-9)
    assert amp[k(7 * fr)] == pytest.approx(0.09, rel=1e-9)
    assert amp[k(5 * fr)] == pytest.approx(0.09, rel=1e-9)


def test_line_amplitude_of_an_off_bin_sine():
    # Hann window: energy beyond +-3 bins of the kernel is below 1e-3 of the total (sidelobes
    # -31 dB falling 18 dB/octave; F. J. Harris, Proc. IEEE 66, 1978), so the amplitude from the
    # main-lobe power is within sqrt(1 - 1e-3) of the truth: 0.05 %, 1e-3 allowed.
    n = 8192
    t = np.arange(n) / FS
    for f0 in (49.37, 123.9, 611.2):
        x = 0.7 * np.cos(2 * np.pi * f0 * t + 0.3)
        assert ph.line_amplitude(x, FS, f0, 3 * FS / n) == pytest.approx(0.7, rel=1e-3)


def test_iso_velocity_of_a_sine_is_a_over_2_pi_f():
    # v = a / (2 pi f) for a sine (integration; common practice); r.m.s. = peak / sqrt(2). A whole
    # number of cycles puts the line on one bin, so the only error is float rounding.
    n = 6400
    t = np.arange(n) / FS
    for f0, a in ((25.0, 1.0), (80.0, 3.0), (500.0, 10.0)):
        v = ph.iso_velocity_rms(a * np.sin(2 * np.pi * f0 * t), FS)
        assert v == pytest.approx(a / (2 * np.pi * f0) / math.sqrt(2), rel=1e-9)
    # outside 10-1000 Hz nothing counts
    assert ph.iso_velocity_rms(np.sin(2 * np.pi * 1200.0 * t), FS) < 1e-9


def test_band_rms_parseval():
    # A sine's r.m.s. is peak / sqrt(2) (Parseval; common practice), whole cycles: float rounding.
    t = np.arange(3200) / FS
    x = 2.0 * np.sin(2 * np.pi * 300.0 * t) + 1.0 * np.sin(2 * np.pi * 1200.0 * t)
    assert ph.band_rms(x, FS, 1000.0, 1500.0) == pytest.approx(1.0 / math.sqrt(2), rel=1e-9)


def test_impacts_at_bpfo_and_envelope_line():
    # Kinematic BPFO of the 6205 (n = 9, d = 7.94 mm, D = 39.04 mm, phi = 0): (n/2)(1 - d/D) per
    # turn (rolling-bearing literature; common practice), less the rolling elements' slip.
    order = 9 / 2 * (1 - 7.94 / 39.04)
    assert defect_orders(BEARING_6205).bpfo == pytest.approx(order, rel=1e-12)
    fr, slip, dur = 24.5, 0.012, 8.0
    n = int(dur * FS)
    theta = 2 * np.pi * fr * np.arange(1, n + 1) / FS
    train = ph.ImpactTrain(order, slip, 0.02, np.random.default_rng(1))
    imp = train.next(theta, np.full(n, 10.0))
    expect = order * (1 - slip) * fr * dur
    # The count of passes crossed is within one of the expected (jitter moves times, not counts).
    assert abs(np.count_nonzero(imp) - expect) <= 1.0 + 1e-9
    # Ring a 1150 Hz mode and look for the line with scipy.signal.hilbert (Randall and Antoni,
    # MSSP 25, 2011): the envelope's strongest line in 20-300 Hz is BPFO within one 0.125 Hz bin.
    x = ph.Resonator(1150.0, 14.0, FS).next(imp) + 0.05 * np.random.default_rng(2).standard_normal(n)
    sos = signal.butter(4, [850.0, 1450.0], btype="bandpass", fs=FS, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x)))
    spec = np.abs(np.fft.rfft((env - env.mean()) * np.hanning(n)))
    f = np.fft.rfftfreq(n, 1 / FS)
    band = (f > 20) & (f < 300)
    f_peak = f[band][np.argmax(spec[band])]
    assert abs(f_peak - order * (1 - slip) * fr) <= FS / n


def test_impact_train_continues_across_chunks():
    # Made in two chunks or one, the impacts agree (the pass count is carried over), also when the
    # second chunk's angles are wrapped by whole turns, as the evaluation histories' generator
    # wraps them at two turns between chunks.
    theta = 2 * np.pi * 20.0 * np.arange(1, 32001) / FS
    one = ph.ImpactTrain(3.58, 0.0, 0.0, np.random.default_rng(5)).next(theta, np.ones(len(theta)))
    for wrap in (0.0, 4 * np.pi * np.floor(theta[12344] / (4 * np.pi))):
        b = ph.ImpactTrain(3.58, 0.0, 0.0, np.random.default_rng(5))
        two = np.r_[b.next(theta[:12345], np.ones(12345)),
                    b.next(theta[12345:] - wrap, np.ones(len(theta) - 12345))]
        np.testing.assert_array_equal(np.flatnonzero(one), np.flatnonzero(two))


def test_ar1_autocorrelation_is_rho_to_the_k():
    # AR(1): r_k = rho^k (Box and Jenkins; common practice). Standard error of the sample
    # autocorrelation of an AR(1) by Bartlett's formula:
    #   var(r_k) = (1/N) [ (1 + rho^2)(1 - rho^(2k)) / (1 - rho^2) - 2 k rho^(2k) ];
    # allowed: 4 standard errors (two-sided chance of a false failure about 6e-5 per lag).
    rho, n = 0.95, 200_000
    z = ph.ar1(np.random.default_rng(11), n, rho, 0.0)
    zc = z - z.mean()
    c0 = np.dot(zc, zc) / n
    assert c0 == pytest.approx(1.0, abs=4 * math.sqrt(2 * (1 + rho**2) / (1 - rho**2) / n))  # variance of the sample variance of an AR(1)
    for k in (1, 5, 20, 60):
        r = np.dot(zc[:-k], zc[k:]) / n / c0
        se = math.sqrt(((1 + rho**2) * (1 - rho ** (2 * k)) / (1 - rho**2) - 2 * k * rho ** (2 * k)) / n)
        assert abs(r - rho**k) < 4 * se, k


def test_level_time_constant():
    # Ar1Level at fs with tau: rho per sample exp(-1 / (tau fs)), so rho^(tau fs) = 1/e.
    lv = ph.Ar1Level(20.0, 0.08, 100.0, np.random.default_rng(3))
    assert lv.rho ** (20.0 * 100.0) == pytest.approx(math.exp(-1), rel=1e-12)
    x = lv.next(400_000)                                 # 4000 s = 200 time constants
    # spread 0.08: sd of the level; relative error of a sample sd over M = 100 independent time
    # constants is about 1/sqrt(2 M) x sqrt(2) for a correlated AR(1) (~0.1): 4 x that allowed.
    assert np.std(x) == pytest.approx(0.08, rel=0.4)
    assert np.mean(x) == pytest.approx(1.0, abs=4 * 0.08 * math.sqrt(2 * 20.0 / 4000.0))


def test_band_noise_is_unit_rms_and_band_limited_across_chunks():
    # r.m.s. from the filter's noise gain: the sample variance of N samples with correlation time
    # ~ 1/B (B = 990 Hz) has relative sd about sqrt(2 / (N B / fs)) ~ 0.5 % at N = 320 000; 3 %
    # allowed for the filter's longer tail at 10 Hz.
    src = ph.BandNoise(10.0, 1000.0, FS, 1, np.random.default_rng(7))
    x = np.concatenate([src.next(32_000) for _ in range(10)])[:, 0]
    assert np.std(x) == pytest.approx(1.0, rel=0.03)
    f, p = signal.welch(x, FS, nperseg=4096)             # scipy's Welch estimate
    assert p[(f > 1400)].mean() < 1e-3 * p[(f > 100) & (f < 900)].mean()


def test_quantise_noise_and_saturation():
    # Output noise: the sensor's density x sqrt(fs/2) (datasheet figure, from memory) plus the
    # rounding's LSB^2/12 (uniform quantisation noise; Widrow, common practice). Sample variance of
    # N = 96 000 normal samples has relative sd sqrt(2/N) = 0.46 %; 2 % allowed on the sd.
    s = ph.ADXL345
    c = s.quantise(np.zeros((96_000, 3)), np.random.default_rng(9))
    expect = np.sqrt((s.noise_rms_m_s2() / s.m_s2_per_count) ** 2 + 1 / 12)
    np.testing.assert_allclose(c.std(0), expect, rtol=0.02)
    big = s.quantise(np.full((10, 3), 40 * ph.G_M_S2), np.random.default_rng(0))
    assert np.all(big == s.adc_max) and big.dtype == np.int16
    # 3.9 mg per count at full resolution (ADXL345 data sheet)
    assert s.m_s2_per_count / ph.G_M_S2 == pytest.approx(3.9e-3, rel=0.005)


def test_looseness_has_subharmonics_and_harmonics_and_no_offset():
    n = 6400                                             # 2 s at 25 Hz: 50 turns, 25 at 0.5x
    theta = 2 * np.pi * 25.0 * np.arange(n) / FS
    x = ph.looseness(theta, 1.0, 0.8, np.zeros(4))
    amp = 2 * np.abs(np.fft.rfft(x)) / n                 # 0.5 Hz bins, whole cycles
    assert abs(x.mean()) < 1e-3                          # the analytic mean removed (1e-3: sampling of the flat top)
    at = lambda order: amp[int(round(order * 25.0 / 0.5))]
    assert at(0.5) > 0.1 and at(1.5) > 0.05
    assert at(2.0) > 0.05 and at(3.0) > 0.02            # a truncated cosine: a series of harmonics
    assert np.all(ph.looseness(theta, 1.0, 0.0, np.zeros(4)) == 0)


def test_dropouts_write_zero_or_held_runs():
    rng = np.random.default_rng(4)
    for _ in range(8):
        c = np.arange(3000 * 3, dtype=np.int16).reshape(3000, 3)
        (i, j, how), = ph.dropouts(c, rng, 1)
        assert 4 <= j - i <= 400
        want = 0 if how == "zero" else None
        seg = c[i:j]
        assert np.all(seg == (want if want is not None else seg[0]))


def test_offset_step_saturates_at_the_rail():
    c = np.zeros((100, 3), np.int16)
    c[:, 0] = np.arange(100) % 7 - 3
    ph.offset_step(c, 50, 4094, -4096, 4095, axis=0)
    assert np.all(c[:50, 0] == np.arange(50) % 7 - 3)
    assert c[50:, 0].max() == 4095 and np.all(c[50:, 1:] == 0)


def test_loose_mount_transmits_as_a_base_driven_resonance():
    # Reference: the transmissibility of a single-degree-of-freedom system driven at its base,
    # |T| = sqrt(1 + (r/Q)**2) / sqrt((1 - r**2)**2 + (r/Q)**2), r = f / f_n (vibration texts'
    # isolator curves; common practice), at the frequency the bilinear transform maps f to,
    # f_a = f_n tan(pi f / fs) / tan(pi f_n / fs) (bilinear transform with pre-warping at f_n;
    # Oppenheim and Schafer, Discrete-Time Signal Processing). Measured: the response of the
    # mount to white noise, H1 = Pxy / Pxx (scipy.signal.csd, welch). The system is noise-free and
    # linear, so H1 differs from the truth only by leakage, of order (df / B)**2 for bins of
    # df = 0.78 Hz against a half-power width B = f_n / Q >= 25 Hz: under 0.1 %; checked to 1 %.
    from scipy import signal
    rng = np.random.default_rng(9)
    x = rng.standard_normal((3200 * 60, 1))
    for fn, q in ((150.0, 6.0), (400.0, 3.0)):
        y = ph.loose_mount(x, FS, rng, spikes_per_s=0.0, mount_hz=fn, q=q)
        f, pxy = signal.csd(x[:, 0], y[:, 0], fs=FS, nperseg=4096)
        _, pxx = signal.welch(x[:, 0], fs=FS, nperseg=4096)
        sel = (f >= 20.0) & (f <= 1200.0)
        fa = fn * np.tan(np.pi * f[sel] / FS) / np.tan(np.pi * fn / FS)
        r = fa / fn
        t = np.sqrt((1 + (r / q) ** 2) / ((1 - r ** 2) ** 2 + (r / q) ** 2))
        assert np.allclose(np.abs(pxy[sel] / pxx[sel]), t, rtol=0.01), (fn, q)
        # amplified at the mount's resonance, lost well above it (the loose sensor's signature)
        assert t[np.argmin(np.abs(f[sel] - fn))] > 0.9 * q and t[-1] < 0.5


def test_loose_mount_knocks_on_one_axis_at_the_rate_asked():
    # Knocks arrive as a Poisson process: in 60 s at 4 per second, 240 expected; the count is
    # accepted inside Poisson's central 99.9 % (scipy.stats.poisson). Each is a 5-sample pulse of
    # 0.5-1 times spike_m_s2 on one axis only.
    from scipy import stats
    rng = np.random.default_rng(10)
    a = np.zeros((3200 * 60, 3))
    y = ph.loose_mount(a, FS, rng, spikes_per_s=4.0, mount_hz=250.0, spike_m_s2=40.0, q=4.0)
    hit = np.abs(y) > 1e-9
    starts = np.flatnonzero(hit.any(1) & ~np.r_[False, hit.any(1)[:-1]])
    lo, hi = stats.poisson.ppf([0.0005, 0.9995], 240)
    assert lo <= len(starts) <= hi
    assert np.mean(hit.sum(1)[hit.any(1)] == 1) > 0.95        # one axis at a time (overlaps aside)
    assert 20.0 < np.abs(y).max() <= 40.0
