"""Order amplitudes (firmware_py/dsp/orders.py) against numpy.fft.rfft of the same windowed
samples, and the squared-envelope lines (firmware_py/dsp/envelope.py) against scipy.signal.hilbert
of the band-passed signal, on simulated bearing impacts at a known BPFO ringing a resonance.
Each tolerance is derived from the fixed-point error bounds of the FFT (stated beside it)."""
import array
import math
import types

import numpy as np
import scipy.signal

from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.features import FeatureCore
from host_tools.data.bearing import BEARING_6205, orders_q12
from tests.feature_helpers import device_features
from tests.test_features_reference import _bound_per_component

N, FS = 512, 3200
M = N // 2
BIN = FS / N
VANE = 6


def _normalised(x, fc):
    """The device's normalised window y = (x - integer mean) * 2**u and its Hann table (float)."""
    mean = (int(x.astype(np.int64).sum()) + N // 2) >> (N.bit_length() - 1)
    pk = max(int(x.max()) - mean, mean - int(x.min()))
    u = 13 - (pk.bit_length() - 1)
    assert u >= 0                    # peaks below 2**14: y is x - mean scaled exactly
    return (x.astype(float) - mean) * 2.0 ** u, u, np.array(fc.hann_q15) / 32768


# --- order amplitudes -----------------------------------------------------------------------

def _pump(f1, rng, noise=200.0):
    t = np.arange(N) / FS
    x = (4000 * np.sin(2 * np.pi * f1 * t + 0.3) + 300 * np.sin(2 * np.pi * 0.5 * f1 * t + 1.1)
         + 1500 * np.sin(2 * np.pi * 2 * f1 * t + 2.0) + 700 * np.sin(2 * np.pi * 3 * f1 * t + 0.4)
         + 900 * np.sin(2 * np.pi * VANE * f1 * t + 2.9) + rng.normal(0, noise, N))
    return np.round(x).astype(np.int16)


def _clear_of_bin_edges(f1):
    # every order's position at least 0.15 bin from a bin edge: the estimate (within 0.01 bin of
    # f1, test_speed_estimate) then picks the same 2 bins as the reference below
    return all(0.15 < (o * f1 / BIN) % 1 < 0.85 for o in (0.5, 1, 2, 3, VANE))


def _hann_kernel_sq(d):
    """|W(d)|**2 of the Hann window's spectral kernel, W(0) = 1: W(d) = sinc(d) / (1 - d**2)
    (Harris, "On the use of windows for harmonic analysis with the discrete Fourier transform",
    Proc. IEEE 66, 1978; numpy.sinc is sin(pi d) / (pi d)), W(1) = 1/2."""
    d = np.asarray(d, dtype=float)
    near_one = np.isclose(np.abs(d), 1.0)
    w = np.sinc(d) / np.where(near_one, 1.0, 1.0 - d * d)
    return np.where(near_one, 0.25, w * w)


def test_scalloping_loss_is_the_hann_kernel():
    # orders.scallop_q8 against the formula in floating point: 256 log2(1.5 / (W(d/256)**2 +
    # W(1 - d/256)**2)), where 1.5 bins is the periodic Hann window's equivalent noise bandwidth
    # (Harris 1978, Table 1). Tolerance: half an LSB of rounding plus the quadratic's stated fit
    # error (0.019 LSB, orders.py).
    from firmware_py.dsp.orders import scallop_q8
    d = np.arange(256)
    ref = 256 * np.log2(1.5 / (_hann_kernel_sq(d / 256) + _hann_kernel_sq(1 - d / 256)))
    got = np.array([scallop_q8(int(v)) for v in d])
    assert np.abs(got - ref).max() <= 0.5 + 0.019
    assert (scallop_q8(d) == got).all()                  # numpy arrays, as the host twin uses it
    # the 2-bin read holds 1.25 of 1.5 on a bin, 1.441 of 1.5 at half a bin (Harris 1978: the
    # Hann window's scalloping loss is 1.42 dB, the two-bin sum's far less)
    assert scallop_q8(0) == 67 and scallop_q8(128) == 15


def test_order_amplitudes_against_numpy_rfft():
    rng = np.random.default_rng(4)
    speeds = [f for f in np.arange(41.0, 59.0, 0.37) if _clear_of_bin_edges(f)][:12]
    assert len(speeds) >= 8
    e_comp = math.sqrt(2) * _bound_per_component(M)      # |X| error bound, LSB of the device's X
    for f1 in speeds:
        x = _pump(f1, rng)
        f, fc = device_features(x, speed=(40 * 256, 60 * 256), vane=VANE)
        y, u, hann = _normalised(x, fc)
        X = np.abs(np.fft.rfft(y * hann)) / M              # the device's X scale (fft.py)
        f1_est = f[0, fi.F_SPEED] / 256 / BIN              # where the device placed its read, bins
        for field, o in ((fi.F_ORD_HALF, 0.5), (fi.F_ORD_1X, 1), (fi.F_ORD_2X, 2),
                         (fi.F_ORD_3X, 3), (fi.F_ORD_VANE, VANE)):
            pos = o * f1_est
            k = int(pos)
            pair = X[k:k + 2]
            # mean square in counts^2: sum |X|^2 * 4/3 * 2**-2u (Hann power normalisation,
            # 2 / ENBW with ENBW = 1.5 bins for the periodic Hann window, common practice), over
            # the part of the main lobe the two bins hold (Harris 1978)
            held = (_hann_kernel_sq(pos - k) + _hann_kernel_sq(k + 1 - pos)) / 1.5
            scale = 4 / 3 * 2.0 ** (-2 * u) / held
            lo = np.sum(np.maximum(pair - e_comp, 0) ** 2) * scale
            hi = np.sum((pair + e_comp) ** 2) * scale
            got = f[0, field] / 256
            # log2_q8 is within 1 LSB, and so is its log2(4/3) constant; the scalloping term is
            # rounded to Q8 (0.52 LSB with its fit, test above) and the device places the read at
            # its own Q8 fraction of a bin, which o * f1_est gives to 2**-8 bin (f1_est is Hz
            # floored to Q8 by the device), where the term moves by at most 0.86 LSB: 4 LSB in all
            assert math.log2(lo) - 4 / 256 <= got <= math.log2(hi) + 4 / 256, (f1, field)


def test_order_amplitude_reads_a_tone_mean_square():
    # a sine of amplitude A has mean square A^2/2 (textbook). The two bracketing bins hold
    # W(d)**2 + W(1 - d)**2 of the lobe's 1.5 (Harris 1978), which orders.scallop_q8 restores to
    # within 0.52 LSB; it is read at the estimate's fraction of a bin, within 0.01 bin of the tone
    # (test_speed_estimate), where it moves by at most 0.86 LSB per 1/256 bin (2.2 LSB per 0.01
    # bin). Plus the FFT's bound on a 2**13 line (about 1e-3 octave) and 2 LSB of log2_q8 and
    # its constant.
    t = np.arange(N) / FS
    for f1 in (43.1, 47.77, 52.5, 57.02):
        A = 6000
        x = np.round(A * np.sin(2 * np.pi * f1 * t + 0.5)).astype(np.int16)
        f, _ = device_features(x, speed=(40 * 256, 60 * 256))
        assert abs(f[0, fi.F_ORD_1X] / 256 - math.log2(A * A / 2)) <= (0.52 + 2.2 + 2) / 256 + 1e-3


def test_order_read_is_clear_of_the_neighbouring_line():
    # A slow shaft: 1x at 2.5 to 3 bins, 20 dB over its 2x (an axis where the 2x is weak). The 2x
    # read's two bins lie more than 2 bins from the 1x, outside its Hann main lobe. Bound, in the
    # device's X scale (|rfft(y * hann)| / (n/2), y = counts * 2**u): each tone A sin reads
    # A 2**u / 2 |W(k - x)| in bin k (Hann coherent gain 1/2), plus its image at -x; the 2x's own
    # bins a_k, everything else at most e_k: the 1x and the images by the kernel (Harris 1978),
    # the FFT's worst case (test_features_reference) and the int16 rounding of the samples (half
    # a count, summed under the window: 2**u / 2). The read divides the pair's power by the part
    # of the lobe it holds at the device's own estimate (orders.scallop_q8), as here.
    t = np.arange(N) / FS
    a1, a2 = 600.0, 60.0
    e_fft = math.sqrt(2) * _bound_per_component(M)
    for f_bins in (2.55, 2.7, 2.85, 2.95):
        f1 = f_bins * BIN
        x = np.round(a1 * np.sin(2 * np.pi * f1 * t + 0.2) + a2 * np.sin(2 * np.pi * 2 * f1 * t + 0.7)).astype(np.int16)
        f, fc = device_features(x, speed=(int(2 * BIN * 256), int(4 * BIN * 256)))
        y, u, hann = _normalised(x, fc)
        pos = 2 * f[0, fi.F_SPEED] / 256 / BIN
        assert abs(pos - 2 * f_bins) < 0.05                 # the read sits at the 2x
        k = np.array([int(pos), int(pos) + 1])
        g = 2.0 ** u / 2
        own = g * a2 * np.sqrt(_hann_kernel_sq(k - 2 * f_bins))
        rest = (g * (a1 * (np.sqrt(_hann_kernel_sq(k - f_bins)) + np.sqrt(_hann_kernel_sq(k + f_bins)))
                     + a2 * np.sqrt(_hann_kernel_sq(k + 2 * f_bins))) + e_fft + g)
        held = (_hann_kernel_sq(pos - k[0]) + _hann_kernel_sq(k[1] - pos)) / 1.5
        scale = 4 / 3 * 2.0 ** (-2 * u) / held
        lo = np.sum(np.maximum(own - rest, 0) ** 2) * scale
        hi = np.sum((own + rest) ** 2) * scale
        got = f[0, fi.F_ORD_2X] / 256
        # log2_q8 and its constant 1 LSB each, the scalloping term's rounding 0.52, and the
        # device reading it at its own position, floored to 1/256 bin, where pos (from the Hz Q8
        # estimate) may differ by up to 1/256 + 2/(256 * 6.25) bin: 0.86 LSB per 1/256 bin (the
        # term's steepest step, test above), 1.2 LSB; 3.7 LSB in all
        assert math.log2(lo) - 4 / 256 <= got <= math.log2(hi) + 4 / 256, f_bins
        # the 2x's mean square a2**2 / 2 lies inside that bound
        assert math.log2(lo) <= math.log2(a2 * a2 / 2) <= math.log2(hi)
        # the whole lobe (the 4 bins |k - x| < 2) reaches into the 1x's: numpy reads it several
        # times the 2x's power there
        X = np.abs(np.fft.rfft(y * hann)) / M
        j = int(pos)
        assert np.sum(X[j - 1:j + 3] ** 2) * 4 / 3 * 2.0 ** (-2 * u) > 3 * a2 * a2 / 2, f_bins


def _spectrum_only_core():
    """A FeatureCore with a speed range (so the spectrum stage keeps X for the half-order taps and
    the envelope) whose envelope stage does not run (so X stays in buf)."""
    fc = FeatureCore(N, 1, FS, -32768, 32767, speed_lo_q8=20 * 256, speed_hi_q8=60 * 256)
    fc.env = types.SimpleNamespace(on=False, run=lambda *args: None)
    return fc


def test_spectrum_buffer_holds_the_complex_spectrum():
    # fft.spectrum leaves X itself in the FFT buffer (packed: X[0], X[m] real in slots 0 and 1)
    # when the envelope needs it: against numpy.fft.rfft, within the per-component bound
    rng = np.random.default_rng(5)
    x = np.round(rng.normal(0, 3000, N)).astype(np.int16)
    fc = _spectrum_only_core()
    fc.ring.push(array.array("h", x.tobytes()), N)
    fc.process()
    y, _, hann = _normalised(x, fc)
    X = np.fft.rfft(y * hann) / M
    b = np.array(fc.buf, dtype=float)
    got = b[0::2] + 1j * b[1::2]
    bound = _bound_per_component(M)
    assert np.abs(got[1:].real - X[1:M].real).max() <= bound
    assert np.abs(got[1:].imag - X[1:M].imag).max() <= bound
    assert abs(b[0] - X[0].real) <= bound and abs(b[1] - X[M].real) <= bound


# --- squared-envelope spectrum ----------------------------------------------------------------

BAND = (128, 192)                    # 800-1200 Hz, around the 1000 Hz resonance below
BEAR = orders_q12(BEARING_6205)      # BPFO 3.585, BPFI 5.415, BSF 2.357, FTF 0.398 orders


def _bearing_impacts(f1, windows, rng, slip=0.01):
    """Outer-race impacts at BPFO = 3.585 x f1 (6205, kinematic formula), each ringing a 1000 Hz
    resonance (2 ms decay), jittered by 1 % of the period (slip, Randall and Antoni: 1-2 %), on
    top of 1x..3x and white noise."""
    t = np.arange(N * windows) / FS
    x = (2000 * np.sin(2 * np.pi * f1 * t) + 700 * np.sin(2 * np.pi * 2 * f1 * t + 1)
         + 400 * np.sin(2 * np.pi * 3 * f1 * t + 2))
    period = 1 / (BEAR[0] / 4096 * f1)
    for k in range(int(t[-1] / period) + 1):
        tk = k * period + rng.normal(0, slip * period)
        on = t >= tk
        x[on] += 6000 * np.exp(-(t[on] - tk) / 0.002) * np.sin(2 * np.pi * 1000 * (t[on] - tk))
    x += rng.normal(0, 300, x.size)
    return np.clip(np.round(x), -32768, 32767).astype(np.int16)


def _device_spectrum(x):
    """The device's own spectrum X (complex, k = 0..m-1; packed X[m] dropped) of window x, from a
    core whose envelope stage does not run (fft.spectrum leaves X in the FFT buffer)."""
    fc = _spectrum_only_core()
    fc.ring.push(array.array("h", x.tobytes()), N)
    fc.process()
    b = np.array(fc.buf, dtype=float)
    return b[0::2] + 1j * b[1::2], fc


def _reference_lines(X, fc, f1_bins):
    """The envelope fields from scipy, on the device's spectrum X: band-pass in the frequency
    domain, scipy.signal.hilbert, |.|^2 at every second sample, e2's mean removed as the device
    does (mean * w^2, envelope.py step 3), FFT, the 6 bins within 3 of each line.

    Also returns, in the device's units (so the error model below speaks in its LSB): eq, the
    line sums, the r.m.s. of |z|, and the shift w of the squared envelope."""
    Xb = np.zeros(M + 1, dtype=complex)
    Xb[BAND[0]:BAND[1]] = X[BAND[0]:BAND[1]]
    # |z_dev(t)| = 2**v |z_a(2t)|: the cfft of the band (X = DFT / m) divides by m once more,
    # and z_a = (2/n) sum over the band of DFT e^(j 2 pi k t / n) (envelope.py, step 1)
    v = 13 - (int(max(np.abs(Xb.real).max(), np.abs(Xb.imag).max())).bit_length() - 1)
    z = scipy.signal.hilbert(np.fft.irfft(Xb, N))[::2] * 2.0 ** v
    s = np.abs(z) ** 2
    w = int(s.max()).bit_length() - 1 - 12
    s = s * 2.0 ** -w
    h = np.array(fc.hann_q15[0::2], dtype=np.int64) >> 1
    w2 = ((h * h) >> 14) / 2 ** 14                      # the device's w^2 (Q14 table, exact)
    eq = s.sum() / w2.sum()
    D = np.fft.fft(s - eq * w2) / M
    vals, sums = [], []
    for o in BEAR:
        k = int(math.floor(o / 4096 * f1_bins))
        ks = np.arange(max(k - 2, 0), k + 4)
        sums.append(np.sum(np.abs(D[ks]) ** 2))
        vals.append(math.log2(sums[-1] * 256 / 35 / eq ** 2))
    return np.array(vals), eq, np.array(sums), float(np.sqrt(np.mean(s * 2.0 ** w))), w


def test_envelope_lines_against_scipy_hilbert_on_bearing_impacts():
    # The envelope stage's own arithmetic against scipy, from the same integer spectrum X (the
    # FFT that made X is checked against numpy in test_features_reference). Error model, in the
    # device's LSB (floor errors uniform and independent, as usual for quantisation noise):
    # - an M-point cfft with exact inputs: each radix-4 stage adds a floor of (sum >> 2)
    #   (variance 5/64, bias 3/8) and three twiddle-product floors divided by 4 (3/12/16), the Q15
    #   twiddle rounding (<= 2**-16 of 23171: 0.35 LSB, variance < 0.01): 0.1 per stage; each later
    #   stage quarters what came before, so sigma^2 <= 0.1 * 4/3 and sigma_c <= 0.37 per component;
    #   the biases (3/8 + 3/8 per stage, the last stage's dominating) <= 0.75 per component;
    # - s = |z|^2 then moves by 2 Re(conj(z) e): r.m.s. 2 |z|_rms (sqrt2 sigma_c + 0.75 sqrt2),
    #   scaled by 2**-w, plus the floor to s' (1/12) and d's rounding of eq w^2 (1/12);
    # - D = DFT(d) / M averages M such errors: sigma_d / sqrt(M), plus the second cfft's own 0.37;
    # - eq = mean(s') / mean(w^2): sigma_s' / sqrt(M) / (3/8) and its rounding (1/2).
    # A line's 6 complex bins are 12 components: the norm of their error has mean sqrt(12) sigma_D
    # and spread below sigma_D (a chi distribution), so sqrt(12) sigma_D + 5 sigma_D bounds it.
    rng = np.random.default_rng(2)
    sig_c, bias_c = math.sqrt(0.1 * 4 / 3), 0.75
    checked = 0
    for f1 in (26.1, 27.3, 29.3, 31.1, 33.4, 34.2):
        x = _bearing_impacts(f1, 1, rng)
        f, _ = device_features(x, speed=(25 * 256, 35 * 256), env_band=BAND, bear_q12=BEAR)
        f1_bins = f[0, fi.F_SPEED] / 256 / BIN
        # a line position on a bin edge could make the reference sum other bins than the device
        if any(min((o / 4096 * f1_bins) % 1, 1 - (o / 4096 * f1_bins) % 1) < 0.02 for o in BEAR):
            continue
        X, fc = _device_spectrum(x)
        ref, eq, sums, z_rms, w = _reference_lines(X, fc, f1_bins)
        sig_s = 2 * z_rms * math.sqrt(2) * (sig_c + bias_c) * 2.0 ** -w
        sig_d = math.sqrt(sig_s ** 2 + 2 / 12)
        sig_D = math.sqrt(sig_d ** 2 / M + sig_c ** 2)
        e_root = (math.sqrt(12) + 5) * sig_D
        e_eq = 5 * sig_s / math.sqrt(M) / (3 / 8) + 0.5
        root = np.sqrt(sums)
        lo = 2 * np.log2(np.maximum(root - e_root, 1e-9) / root) - 2 * math.log2(1 + e_eq / eq)
        hi = 2 * np.log2((root + e_root) / root) - 2 * math.log2(1 - e_eq / eq)
        q = 3 / 256                                  # log2_q8 of the sum and of eq (twice): 1 LSB each
        got = f[0, fi.F_ENV_BPFO:fi.F_ENV_FTF + 1] / 256
        assert np.all(got >= ref + lo - q) and np.all(got <= ref + hi + q), (f1, got - ref, lo, hi)
        # the physics: the outer-race line stands far above the other defect lines (the impacts
        # modulate the squared envelope almost fully: mu^2 / 2 near 1, 0 octaves)
        assert got[0] > -1 and got[0] - got[1:].max() > 4
        checked += 1
    assert checked >= 4


def test_envelope_fields_empty_without_band_or_bearing():
    rng = np.random.default_rng(3)
    x = _bearing_impacts(29.3, 1, rng)
    for kw in (dict(env_band=BAND), dict(bear_q12=BEAR), {}):
        f, _ = device_features(x, speed=(25 * 256, 35 * 256), **kw)
        assert np.all(f[0, fi.F_ENV_BPFO:fi.F_ENV_FTF + 1] == fi.LOG2_ZERO_Q8)
