"""Physics of a centrifugal pump's vibration as a MEMS accelerometer on its bearing housing sees it.

The building blocks of the invented scenarios (host_tools.data.demo_scenario,
host_tools.data.scenarios): each a small model with its source named, or marked as common practice
(a fact of the trade) or "from memory" (not confirmed against the primary document here).
Everything is in SI units, acceleration in m/s^2, time in s, frequency in Hz, floats, numpy.

Entry points
- Sensors: `Sensor`, `ADXL345`, `IIS3DWB`; `Sensor.quantise(a, rng)` adds the sensor's white
  noise and rounds and saturates to its ADC codes (int16 counts).
- Drive and shaft: `shaft_speed_hz(cmd_rpm, load, rated_slip)` (induction motor slip grows with
  load), `pump_load(speed_ratio, drift)` (affinity laws), `shaft_angle(fr_hz, fs_hz, theta0)`.
- Stateful sources, so that a long recording can be made chunk by chunk with no seam:
  `BandNoise` (filtered Gaussian noise at a known r.m.s.), `Resonator` (a structural mode),
  `Ar1Level` (a slowly wandering level), `ImpactTrain` (bearing defect impacts).
- Waveforms: `order_line(theta, order, amp, phase)`, `vane_pass(theta, vanes, amp, am, phase)`,
  `looseness(theta, amp, severity, phases)`, `bursts(rng, n, fs_hz, rate_hz, mean_s)`.
- Sensor faults on counts or acceleration: `dropouts`, `loose_mount`, `offset_step`.
- Measurements a vibration analyst makes, used for the ground truth ("clearly visible") and in
  tests: `line_amplitude`, `band_rms`, `iso_velocity_rms`, `envelope_line`.

This is advisory condition monitoring data, made up: no measurement from a real machine is in it.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

G_M_S2 = 9.80665  # standard gravity (CGPM 1901; common practice)


# --- sensors -----------------------------------------------------------------------------------

@dataclass(frozen=True)
class Sensor:
    """A MEMS accelerometer: output rate, counts per g, ADC code range, white noise density per
    axis (x, y, z) in ug/sqrt(Hz), and where the figures come from."""

    name: str
    fs_hz: float
    counts_per_g: float
    adc_min: int
    adc_max: int
    noise_ug_rthz: tuple[float, float, float]
    source: str

    @property
    def m_s2_per_count(self) -> float:
        return G_M_S2 / self.counts_per_g

    def noise_rms_m_s2(self) -> np.ndarray:
        """Per-axis r.m.s. of the white noise at the output: density x sqrt(fs/2), the one-sided
        bandwidth of a sampled white process (common practice)."""
        return np.asarray(self.noise_ug_rthz) * 1e-6 * G_M_S2 * math.sqrt(self.fs_hz / 2.0)

    def quantise(self, a_m_s2: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Counts (int16, frames x axes) of acceleration a (frames x axes, m/s^2): sensor noise
        added, rounded to the nearest code, saturated at the ADC's ends as the part does."""
        a = np.asarray(a_m_s2, dtype=np.float64)
        noise = rng.standard_normal(a.shape) * self.noise_rms_m_s2()[: a.shape[1]]
        return np.clip(np.rint((a + noise) / self.m_s2_per_count), self.adc_min, self.adc_max).astype(np.int16)


# ADXL345 full resolution at +-16 g: 3.9 mg/LSB (256 LSB/g), 13-bit codes, 3200 Hz maximum output
# rate (ADXL345 Data Sheet Rev. G, as in boards/pico_adxl345.json). Noise about
# 290 ug/sqrt(Hz) on x and y and 430 on z (datasheet noise table; from memory).
ADXL345 = Sensor("ADXL345-class", 3200.0, 256.0, -4096, 4095, (290.0, 290.0, 430.0),
                 "ADXL345 Data Sheet Rev. G: 3.9 mg/LSB full resolution, 3200 Hz ODR; noise density from memory")
# IIS3DWB at +-16 g: 0.488 mg/LSB (2049 LSB/g), 16-bit, 26.667 kHz output rate (ST DS12569, as in
# boards/esp32s3_iis3dwb.json and tests/chipmodels/iis3dwb.py); noise density 75 ug/sqrt(Hz)
# (datasheet typical; from memory).
IIS3DWB = Sensor("IIS3DWB-class", 26667.0, 2049.0, -32768, 32767, (75.0, 75.0, 75.0),
                 "ST DS12569 IIS3DWB: 0.488 mg/LSB at +-16 g, 26.667 kHz ODR; noise density from memory")


# --- drive, load and shaft ---------------------------------------------------------------------

def pump_load(speed_ratio: np.ndarray | float, drift: np.ndarray | float = 1.0) -> np.ndarray:
    """Shaft torque of a centrifugal pump as a fraction of rated: proportional to speed squared
    (affinity laws: head ~ n^2, torque ~ n^2; common practice), times a slow drift of the duty
    point (suction level, valve position)."""
    return np.asarray(speed_ratio, dtype=np.float64) ** 2 * drift


def shaft_speed_hz(cmd_rpm: np.ndarray | float, load: np.ndarray | float, rated_slip: float) -> np.ndarray:
    """Shaft frequency (Hz) of an induction motor whose synchronous speed is cmd_rpm: slip grows
    about linearly with torque below rated load, rated slip 1-3 % for standard motors (common
    practice). A drive without speed feedback leaves that slip in place."""
    return np.asarray(cmd_rpm, dtype=np.float64) / 60.0 * (1.0 - rated_slip * np.asarray(load))


def shaft_angle(fr_hz: np.ndarray, fs_hz: float, theta0: float = 0.0) -> np.ndarray:
    """Shaft angle (rad) at each sample, integrating the instantaneous shaft frequency fr_hz
    (per sample) from theta0 at the sample before the first."""
    return theta0 + 2.0 * np.pi * np.cumsum(fr_hz) / fs_hz


def order_line(theta: np.ndarray, order: float, amp: np.ndarray | float, phase: float = 0.0) -> np.ndarray:
    """A line at `order` x shaft speed: amp cos(order theta + phase) (peak amplitude amp)."""
    return amp * np.cos(order * theta + phase)


def vane_pass(theta: np.ndarray, vanes: int, amp: np.ndarray | float, am: float, phase: tuple[float, float]) -> np.ndarray:
    """Vane-pass pressure pulsation (vanes x shaft speed), amplitude-modulated at 1x by an
    impeller that is not perfectly symmetric, which puts sidebands at +-1x of relative level am/2
    (common practice)."""
    return amp * (1.0 + am * np.cos(theta + phase[0])) * np.cos(vanes * theta + phase[1])


def looseness(theta: np.ndarray, amp: np.ndarray | float, severity: float, phases: np.ndarray) -> np.ndarray:
    """Mechanical looseness (rotating or structural): a response truncated on one side (the part
    lifts and hits its stop), which makes a series of 1x harmonics, plus subharmonics at 0.5x,
    1.5x and 2.5x from the rattle occurring every other turn (common practice). amp: the 1x
    level the truncated motion starts from; severity 0..1 moves the stop closer and lets the
    subharmonics grow. Zero mean, so a clip does not shift the static offset."""
    if severity <= 0.0:
        return np.zeros_like(theta)
    u = np.cos(theta + phases[0])
    stop = 1.0 - 0.8 * severity               # truncation level, fraction of the 1x amplitude
    trunc = np.minimum(u, stop) - u           # what the stop removes: a flat top, rich in harmonics
    trunc -= _mean_truncation(stop)
    half = (np.cos(0.5 * theta + phases[1]) + 0.6 * np.cos(1.5 * theta + phases[2])
            + 0.4 * np.cos(2.5 * theta + phases[3]))
    return amp * (2.0 * trunc + 0.5 * severity * half)


def _mean_truncation(stop: float) -> float:
    """Mean of min(cos x, stop) - cos x over a turn (so the truncated part has zero mean)."""
    a = math.acos(max(-1.0, min(1.0, stop)))
    return (stop * a - math.sin(a)) / math.pi


# --- stateful sources --------------------------------------------------------------------------

class BandNoise:
    """Gaussian noise band-limited by a Butterworth band-pass, unit r.m.s. times `rms`, made chunk
    by chunk with the filter state carried over (no seam). The r.m.s. is set from the filter's
    noise gain (the sum of its squared impulse response), not per chunk, so levels stay right
    for any chunk length."""

    def __init__(self, lo_hz: float, hi_hz: float, fs_hz: float, channels: int, rng: np.random.Generator,
                 order: int = 4):
        self.sos, self.gain = _band_design(lo_hz, hi_hz, fs_hz, order)
        self.zi = np.zeros((self.sos.shape[0], 2, channels))
        self.rng = rng
        self.channels = channels
        self.next(int(10 * fs_hz / max(lo_hz, 1.0)))  # settle the filter: a stationary start

    def next(self, n: int) -> np.ndarray:
        """n frames x channels of unit-r.m.s. band noise."""
        y, self.zi = signal.sosfilt(self.sos, self.rng.standard_normal((n, self.channels)), axis=0, zi=self.zi)
        return y * self.gain


@functools.lru_cache(maxsize=32)
def _band_design(lo_hz: float, hi_hz: float, fs_hz: float, order: int) -> tuple[np.ndarray, float]:
    """Second-order sections of the band-pass and the gain that makes its output unit r.m.s. for
    unit white noise in (1 / sqrt of the impulse response's energy, run until it has died out)."""
    sos = signal.butter(order, [lo_hz, hi_hz], btype="bandpass", fs=fs_hz, output="sos")
    imp = np.zeros(int(20 * fs_hz / max(lo_hz, 1.0)) + 4096)
    imp[0] = 1.0
    return sos, 1.0 / math.sqrt(float(np.sum(signal.sosfilt(sos, imp) ** 2)))


class Resonator:
    """A lightly damped structural mode (two-pole resonator at f_hz, quality factor q), filtering
    chunk by chunk with state. The numerator sin(w) makes a unit impulse ring with a first peak
    near 1, so an impact's amplitude reads as the peak of its ring-down (m/s^2)."""

    def __init__(self, f_hz: float, q: float, fs_hz: float):
        w = 2.0 * np.pi * f_hz / fs_hz
        r = math.exp(-w / (2.0 * q))
        self.b = np.array([math.sin(w)])
        self.a = np.array([1.0, -2.0 * r * math.cos(w), r * r])
        self.zi = np.zeros(2)

    def next(self, x: np.ndarray) -> np.ndarray:
        y, self.zi = signal.lfilter(self.b, self.a, x, zi=self.zi)
        return y


class Ar1Level:
    """A slowly wandering relative level, 1 + spread * z, where z is a unit-variance AR(1)
    process per sample: z[k] = rho z[k-1] + sqrt(1 - rho^2) e[k], rho = exp(-1 / (tau_s fs_hz)),
    so its autocorrelation at lag k is rho^k (Box and Jenkins; common practice). Stationary from
    the first sample (z starts from its stationary distribution)."""

    def __init__(self, tau_s: float, spread: float, fs_hz: float, rng: np.random.Generator):
        self.rho = math.exp(-1.0 / (tau_s * fs_hz))
        self.spread = spread
        self.rng = rng
        self.z = float(rng.standard_normal())

    def next(self, n: int) -> np.ndarray:
        """The level at the next n samples (dimensionless, about 1)."""
        z = ar1(self.rng, n, self.rho, self.z)
        self.z = float(z[-1])
        return 1.0 + self.spread * z


def ar1(rng: np.random.Generator, n: int, rho: float, z0: float) -> np.ndarray:
    """n samples of a unit-variance AR(1) process continuing from z0 (the sample before)."""
    e = rng.standard_normal(n) * math.sqrt(1.0 - rho * rho)
    z, _ = signal.lfilter([1.0], [1.0, -rho], e, zi=[rho * z0])
    return z


class ImpactTrain:
    """Impacts of a local bearing defect: one each time a rolling element passes it, that is
    `order` impacts per shaft turn (order from host_tools.data.bearing.defect_orders), slowed by
    the rolling elements' slip (1-2 %, Randall and Antoni, MSSP 25, 2011) and jittered at random
    by a fraction of a period (the same source: the randomness is what makes envelope analysis
    necessary). The pass count is carried from chunk to chunk, and a chunk's angles may start
    whole turns away from where the last one ended (a caller that wraps the angle)."""

    def __init__(self, order: float, slip: float, jitter: float, rng: np.random.Generator):
        self.per_rad = order * (1.0 - slip) / (2.0 * np.pi)
        self.jitter = jitter
        self.rng = rng
        self.passes = float(rng.uniform(0.0, 1.0))   # fraction of a pass done before the start
        self.theta_last: float | None = None

    def next(self, theta: np.ndarray, amp: np.ndarray) -> np.ndarray:
        """Impulses (m/s^2 at the impact, one sample each) over the shaft angles theta; amp per
        sample is the mean impact size (each impact varies +-20 %, common practice)."""
        # the step from the last chunk's end to this chunk's start, less any whole turns between
        step = 0.0 if self.theta_last is None else math.remainder(theta[0] - self.theta_last, 2.0 * np.pi)
        passes = self.passes + self.per_rad * (theta - theta[0] + step)
        k = np.arange(math.floor(self.passes) + 1, math.floor(passes[-1]) + 1)
        at = np.searchsorted(passes, k + self.jitter * self.rng.standard_normal(len(k)))
        at = at[(at >= 0) & (at < len(theta))]
        out = np.zeros(len(theta))
        out[at] = amp[at] * (1.0 + 0.2 * self.rng.standard_normal(len(at)))
        self.passes = float(passes[-1])
        self.theta_last = float(theta[-1])
        return out


def bursts(rng: np.random.Generator, n: int, fs_hz: float, rate_hz: float, mean_s: float) -> np.ndarray:
    """A 0/1 gate of random bursts: starts as a Poisson process (rate_hz), lengths exponential
    with mean mean_s (collapsing vapour bubbles in cavitation come in such bursts; common
    practice)."""
    gate = np.zeros(n + 1)
    starts = rng.integers(0, n, rng.poisson(rate_hz * n / fs_hz)) if n else np.zeros(0, int)
    ends = np.minimum(starts + (rng.exponential(mean_s, len(starts)) * fs_hz).astype(int) + 1, n)
    np.add.at(gate, starts, 1.0)
    np.add.at(gate, ends, -1.0)
    return (np.cumsum(gate[:n]) > 0).astype(np.float64)


# --- sensor faults -----------------------------------------------------------------------------

def dropouts(counts: np.ndarray, rng: np.random.Generator, n_runs: int, len_lo: int = 4, len_hi: int = 400) -> list[tuple[int, int, str]]:
    """Short dropouts of the sensor link, overwriting counts in place: n_runs runs, lengths
    log-uniform from len_lo to len_hi samples, each either all zeros (a read that returned an
    empty frame) or the last good frame repeated (a driver that re-reads a stale register). All
    axes at once: one read fetches the whole frame. Returns [(start, stop, "zero"|"hold")]."""
    n = len(counts)
    out = []
    for _ in range(n_runs):
        length = int(round(math.exp(rng.uniform(math.log(len_lo), math.log(len_hi)))))
        i = int(rng.integers(1, max(2, n - length)))
        j = min(n, i + length)
        if rng.random() < 0.5:
            counts[i:j] = 0
            out.append((i, j, "zero"))
        else:
            counts[i:j] = counts[i - 1]
            out.append((i, j, "hold"))
    return out


def _mount_sos(mount_hz: float, q: float, fs_hz: float) -> np.ndarray:
    """The mount as a digital filter: a single-degree-of-freedom system driven at its base (the
    sensor's mass on the contact's stiffness and damping), H(s) = (w s / q + w**2) /
    (s**2 + w s / q + w**2), |H| = sqrt(1 + (r / q)**2) / sqrt((1 - r**2)**2 + (r / q)**2),
    r = f / mount_hz (base excitation; common practice, vibration texts' transmissibility curves);
    by the bilinear transform, its frequency warped to meet mount_hz exactly."""
    w = 2.0 * fs_hz * math.tan(math.pi * mount_hz / fs_hz)
    b, a = signal.bilinear([w / q, w * w], [1.0, w / q, w * w], fs=fs_hz)
    return signal.tf2sos(b, a)


def loose_mount(a_m_s2: np.ndarray, fs_hz: float, rng: np.random.Generator, spikes_per_s: float,
                mount_hz: float = 250.0, spike_m_s2: float = 60.0, q: float = 4.0) -> np.ndarray:
    """A sensor whose mount has worked loose (a magnet base or stud not seated, or a cable that
    moves): the sensor now sits on a soft contact, a spring under its mass, so the housing's
    motion reaches it through that mount's resonance at mount_hz (quality factor q): amplified
    near it, lost above it (_mount_sos; the mounted resonance of a loose fixing falls from kHz to
    hundreds of Hz, common practice for mounting methods), and the sensor rattles on
    its seat, giving sharp spikes of a few g on one axis. Returns a new array (frames x axes,
    m/s^2)."""
    sos = _mount_sos(mount_hz, q, fs_hz)
    out = signal.sosfilt(sos, a_m_s2 - a_m_s2.mean(0), axis=0) + a_m_s2.mean(0)
    n = len(out)
    at = rng.integers(0, max(1, n - 8), rng.poisson(spikes_per_s * n / fs_hz))
    pulse = np.sin(np.pi * np.arange(1, 6) / 6.0)            # a 5-sample half-sine knock
    for i in at:
        ax = int(rng.integers(0, out.shape[1]))
        out[i:i + 5, ax] += spike_m_s2 * rng.uniform(0.5, 1.0) * rng.choice([-1.0, 1.0]) * pulse[: n - i]
    return out


def offset_step(counts: np.ndarray, start: int, offset_counts: int, adc_min: int, adc_max: int,
                axis: int = 0) -> None:
    """A DC offset step from frame `start` on one axis (a damaged cable or a sensor pushed out of
    its range), saturating at the ADC's ends as the part does: the signal clips at the rail or
    sits flat on it. Overwrites counts in place."""
    c = counts[start:, axis].astype(np.int32) + int(offset_counts)
    counts[start:, axis] = np.clip(c, adc_min, adc_max).astype(counts.dtype)


# --- measurements ------------------------------------------------------------------------------

def line_amplitude(x: np.ndarray, fs_hz: float, f0_hz: float, half_width_hz: float) -> float:
    """Peak amplitude of a line near f0_hz in x, from the power of the Hann-windowed spectrum
    within half_width_hz of f0 (leakage included). For x = A cos(2 pi f t) the one-sided bins hold
    N A^2 sum(w^2) / 4 in total (Parseval with a window; common practice), so
    A = sqrt(4 S / (N sum w^2)). half_width_hz must cover the main lobe (2 bins for Hann)."""
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    w = np.hanning(n)
    spec = np.abs(np.fft.rfft((x - x.mean()) * w)) ** 2
    f = np.fft.rfftfreq(n, 1.0 / fs_hz)
    s = float(spec[np.abs(f - f0_hz) <= half_width_hz].sum())
    return math.sqrt(4.0 * s / (n * float(np.sum(w * w))))


def band_rms(x: np.ndarray, fs_hz: float, lo_hz: float, hi_hz: float) -> float:
    """r.m.s. of x in the band [lo_hz, hi_hz] from its spectrum (rectangular window, Parseval)."""
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    spec = np.abs(np.fft.rfft(x - x.mean())) ** 2
    f = np.fft.rfftfreq(n, 1.0 / fs_hz)
    k = (f >= lo_hz) & (f <= hi_hz)
    wgt = np.where((f[k] == 0) | (f[k] == fs_hz / 2), 1.0, 2.0)  # one-sided bins count twice
    return math.sqrt(float(np.sum(spec[k] * wgt)) / (n * n))


def iso_velocity_rms(a_m_s2: np.ndarray, fs_hz: float, lo_hz: float = 10.0, hi_hz: float = 1000.0) -> float:
    """Broadband velocity r.m.s. (m/s) over lo_hz..hi_hz, the ISO 10816/20816 quantity
    (over 10-1000 Hz for machines above 600 r/min), by integrating in the frequency domain: V(f) = A(f) / (j 2 pi f) (common practice),
    with brick-wall band edges rather than the ISO 2954 Butterworth shapes."""
    a = np.asarray(a_m_s2, dtype=np.float64)
    n = len(a)
    spec = np.fft.rfft(a - a.mean())
    f = np.fft.rfftfreq(n, 1.0 / fs_hz)
    k = (f >= lo_hz) & (f <= hi_hz) & (f > 0)
    v2 = np.abs(spec[k]) ** 2 / (2.0 * np.pi * f[k]) ** 2
    wgt = np.where(f[k] == fs_hz / 2, 1.0, 2.0)
    return math.sqrt(float(np.sum(v2 * wgt)) / (n * n))


def envelope_line(x: np.ndarray, fs_hz: float, band_hz: tuple[float, float], f0_hz: float, half_width_hz: float) -> float:
    """Amplitude of the line at f0_hz in the envelope spectrum of x band-passed to band_hz: the
    textbook bearing diagnosis (Randall and Antoni, MSSP 25, 2011): band-pass around the
    resonance the impacts excite, |analytic signal| (scipy.signal.hilbert), then its spectrum."""
    sos = signal.butter(4, band_hz, btype="bandpass", fs=fs_hz, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, np.asarray(x, dtype=np.float64))))
    return line_amplitude(env, fs_hz, f0_hz, half_width_hz)
