"""Commissioning check of one recording: is the sensor fitted, wired and set up right?

check_recording() runs the recording through the numpy twin of the device feature stage (the
exact device arithmetic) and judges, per axis, what a technician can act on after fitting a
sensor: sample rate, counts scale, DC offset (gravity included), clipping, flatline, noise floor,
the strongest spectral lines with their names (1x, 2x, 3x, vane pass and its sidebands), and the
ISO 10816-3 zone of velocity r.m.s. Each item gets a verdict in plain words, one of VERDICTS, and
a one-line explanation; the overall verdict is the worst of them.

Spectra: the twin's power spectra (Hann window, features.FeatureCore) are brought back to
physical units per window by FeatureTwin.mean_square_per_bin (mean square per bin, the scale of
the band powers: summed over a band it is the band's mean square) times m_s2_per_count**2. The
check averages these over windows.
Spectra and velocity come from the whole windows (a trailing part window is left out, as on the
device); offset, clipping and runs of identical samples from every sample.

The check is advisory: it is no machinery protection system, and an all-clear is no guarantee.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
from scipy import special

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.run import board
from firmware_py.detect import iso_zones
from firmware_py.dsp.feature_index import F_PEAK, F_VEL
from host_tools.data import units
from host_tools.data.files import DEFAULT_BOARD
from host_tools.data.lines import line_names
from host_tools.errors import EdgevibError
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.data.recording import Recording

VERDICTS = ("ok", "check", "problem")   # in rising order of concern
DEFAULT_N = 512
VEL_BAND_HZ = (10, 1000)   # broadband velocity band of ISO 10816-1 for machines above 600 r/min (from memory)
ISO_MIN_RPM = 600          # below this the ISO 10816-3 band starts at 2 Hz (from memory)
G_M_S2 = units.STANDARD_GRAVITY_M_S2
INT16_MIN, INT16_MAX = -32768, 32767   # full scale when no board says otherwise: the counts' own limits

# Zero-g offset a low-cost MEMS accelerometer may show: up to about 150 mg (datasheets of such
# parts quote tens of mg to about 150 mg; from memory). Beyond it the axis is tilted or drifting.
OFFSET_OK_M_S2 = 0.15 * G_M_S2
MEAN_NEAR_FULL_SCALE = 0.9        # a mean beyond 90 % of full scale leaves no room to vibrate
CLIP_PROBLEM_PCT = 0.1            # at or above this share of clipped samples the range is too small
FLAT_RUN_S = 0.010                # identical samples for 10 ms are not sensor noise
FEW_WINDOWS = 8                   # below this the averages are rough
SCALE_REL_TOL = 0.01              # counts scale against the board's sensitivity
NOISE_LOW, NOISE_HIGH = 0.5, 3.0  # measured / expected sensor noise density outside: check
# Without a sensor figure: MEMS accelerometers for this job have tens to a few hundred ug/sqrt(Hz)
# of their own noise (datasheets; from memory); a quietest part far above that is not the sensor.
NOISE_IMPLAUSIBLE_UG = 2000.0
LINE_PROMINENCE = 10.0            # a line stands 10 dB (power x 10) above the local median
LINE_CONTEXT_BINS = 12            # half-width of the local median around a candidate line
SPEED_REL_TOL = 0.02              # rpm from a drive may differ from the shaft by the slip (1-3 %; common practice)

ZONE_MEANING = {
    "A": "newly commissioned machines",
    "B": "acceptable for unrestricted long-term operation",
    "C": "not suitable for long-term continuous operation",
    "D": "severe enough to cause damage",
}


@dataclass(frozen=True)
class CheckSettings:
    """What the check compares against (a board profile, or the defaults without one).

    n: window length (samples); expected_rate_hz: the board's sample rate (None: no board);
    adc_min/adc_max: full-scale codes, counts; expected_m_s2_per_count: the board sensor's
    sensitivity (None: no board); zones_mm_s: A/B, B/C, C/D boundaries, mm/s r.m.s.
    """

    n: int = DEFAULT_N
    expected_rate_hz: float | None = None
    adc_min: int = INT16_MIN
    adc_max: int = INT16_MAX
    expected_m_s2_per_count: float | None = None
    board_name: str | None = None
    zones_mm_s: tuple[float, float, float] = (0.0, 0.0, 0.0)
    zones_source: str = ""

    def __post_init__(self) -> None:
        if not self.zones_source:   # default: the shared table, group 2 (15-300 kW), rigid
            bounds, source = iso_zone_bounds(2, "rigid")
            object.__setattr__(self, "zones_mm_s", bounds)
            object.__setattr__(self, "zones_source", source)


def iso_zone_bounds(group: int, foundation: str) -> tuple[tuple[float, float, float], str]:
    """Default ISO 10816-3 boundaries (mm/s) of a machine group and foundation, and their source."""
    key = (group, foundation)
    if key not in iso_zones.DEFAULT_BOUNDS_CMM:
        raise EdgevibError(f"no default ISO 10816-3 table for group {group}, {foundation} foundation")
    ab, bc, cd = (b / 100 for b in iso_zones.DEFAULT_BOUNDS_CMM[key])   # table: mm/s x 100
    return (ab, bc, cd), f"ISO 10816-3 group {group}, {foundation} foundation (default table, from memory)"


def settings_from_board(path: str | Path | None, **zones: Any) -> CheckSettings:
    """Settings from a board profile (window length, sample rate, full scale, sensitivity).

    path None: the desk board if it exists, else the defaults (n = 512, int16 full scale).
    zones: optional zones_mm_s and zones_source, passed through.
    """
    if path is None:
        if not DEFAULT_BOARD.is_file():
            return CheckSettings(**zones)
        path = DEFAULT_BOARD
    try:
        p = board.load(str(path))
    except board.BoardError as e:
        raise EdgevibError(f"board profile {e}") from None
    return settings_from_profile(p, **zones)


def settings_from_profile(p: dict, compare_board: bool = True, **zones: Any) -> CheckSettings:
    """Settings from a checked profile dict. compare_board False (a profile built from the
    recording itself): window and full scale only, no rate or scale to compare with."""
    s = p["sensor"]
    return CheckSettings(
        n=p["window_n"], expected_rate_hz=float(p["sample_rate_hz"]) if compare_board else None,
        adc_min=s["adc_min"], adc_max=s["adc_max"],
        expected_m_s2_per_count=G_M_S2 / s["counts_per_g"] if compare_board else None,
        board_name=p["name"] if compare_board else None, **zones)


@dataclass
class Item:
    """One judged item: axis None for the whole recording; value is already formatted."""

    name: str
    axis: str | None
    verdict: str
    value: str
    explanation: str
    data: dict[str, Any] = field(default_factory=dict)


@dataclass
class Line:
    """One spectral line: frequency (Hz, interpolated), level (acceleration r.m.s., m/s^2), the
    same as velocity r.m.s. (mm/s), order (multiple of shaft speed, None without rpm), name."""

    freq_hz: float
    level_m_s2: float
    velocity_mm_s: float
    order: float | None
    name: str


@dataclass
class AxisSpectrum:
    """Averaged spectrum of one axis.

    ms_per_bin: mean square per bin, (m/s^2)^2, averaged over the live windows (a band's sum is
    its mean square); floor_density: noise floor, (m/s^2)/sqrt(Hz); floor_ms_per_bin: the same as
    mean square per bin; lines: strongest first.
    """

    axis: str
    ms_per_bin: np.ndarray
    floor_density: float
    floor_ms_per_bin: float
    floor_band_hz: tuple[float, float]
    lines: list[Line]


@dataclass
class CheckResult:
    """Everything the check found: the items with verdicts, the averaged spectra (freq_hz: bin
    centres, Hz), the settings it judged against (with the full scale it actually used)."""

    recording: str
    sample_rate_hz: float
    n: int
    windows: int
    duration_s: float
    axes: tuple[str, ...]
    rpm: float | None
    vane_count: int | None
    settings: CheckSettings
    freq_hz: np.ndarray
    spectra: list[AxisSpectrum]
    items: list[Item]
    overall: str
    summary: str
    plant: str | None = None
    machine: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready form (spectra as lists)."""
        s = self.settings
        return {
            "recording": self.recording, "plant": self.plant, "machine": self.machine,
            "sample_rate_hz": self.sample_rate_hz, "window_n": self.n, "windows": self.windows,
            "duration_s": self.duration_s, "axes": list(self.axes), "rpm": self.rpm,
            "vane_count": self.vane_count, "board": s.board_name,
            "zones_mm_s": list(s.zones_mm_s), "zones_source": s.zones_source,
            "overall": self.overall, "summary": self.summary,
            "items": [{"name": i.name, "axis": i.axis, "verdict": i.verdict, "value": i.value,
                       "explanation": i.explanation, **i.data} for i in self.items],
            "lines": {sp.axis: [vars(ln).copy() for ln in sp.lines] for sp in self.spectra},
            "noise_floor": {sp.axis: {"density_m_s2_per_rthz": sp.floor_density,
                                      "density_ug_per_rthz": sp.floor_density / G_M_S2 * 1e6,
                                      "band_hz": list(sp.floor_band_hz)} for sp in self.spectra},
            "spectrum": {"freq_hz": self.freq_hz.tolist(),
                         "ms_per_bin_m2_s4": {sp.axis: sp.ms_per_bin.tolist() for sp in self.spectra}},
        }


def worst(verdicts: list[str]) -> str:
    return max(verdicts, key=VERDICTS.index, default="ok")


def check_recording(rec: Recording, settings: CheckSettings, rpm: float | None = None,
                    vane_count: int | None = None, max_lines: int = 8) -> CheckResult:
    """Judge one recording. rpm / vane_count override the sidecar's (None: use the sidecar's)."""
    rpm = rec.rpm if rpm is None else rpm
    vane_count = rec.vane_count if vane_count is None else vane_count
    n, n_axes = settings.n, rec.counts.shape[1]
    if not 1 <= n_axes <= 3:
        raise EdgevibError(f"{rec.path}: the check handles 1 to 3 axes, the file holds {n_axes}")
    if rec.n_frames < n:
        raise EdgevibError(f"{rec.path}: {rec.n_frames} frames is shorter than one window of {n} samples")
    if not _scale_matches(rec, settings):
        # another sensor or range than the board's: its full-scale codes are unknown here
        settings = replace(settings, adc_min=INT16_MIN, adc_max=INT16_MAX)
    fs = int(round(rec.sample_rate_hz))
    try:
        twin = FeatureTwin(TwinConfig(n, fs, settings.adc_min, settings.adc_max, (), *VEL_BAND_HZ), n_axes)
    except ValueError as e:
        raise EdgevibError(f"{rec.path}: cannot analyse at {fs} Hz with {n}-sample windows ({e})") from None
    feats, power = twin.features(rec.counts, keep_power=True)
    ms_all = twin.mean_square_per_bin(feats, power) * rec.m_s2_per_count ** 2   # (m/s^2)^2
    per, windows = twin.per, feats.shape[0]
    df = fs / n
    freq = np.arange(n // 2 + 1) * df

    items = [_rate_item(rec, settings), _scale_item(rec, settings), _length_item(rec, windows, n)]
    means = rec.counts.astype(np.float64).mean(axis=0) * rec.m_s2_per_count
    spectra = []
    for a, name in enumerate(rec.axes):
        fa = feats[:, a * per:(a + 1) * per]
        peak = fa[:, F_PEAK] >> 8                     # counts (F_PEAK is Q8)
        live = peak > 0
        if live.any():
            ms_w = ms_all[live, a]
            ms = ms_w.mean(axis=0)
            floor_ms, band = _noise_floor(ms_w, df)
        else:
            ms, floor_ms, band = np.zeros(len(freq)), 0.0, (0.0, 0.0)
        density = math.sqrt(floor_ms / df)   # power normalisation: noise reads its PSD x df per bin
        lines = _lines(ms, df, rpm, vane_count, max_lines)
        spectra.append(AxisSpectrum(name, ms, density, floor_ms, band, lines))
        vel = units.velocity_mm_s(float(np.median(fa[live, F_VEL])), rec.m_s2_per_count) if live.any() else 0.0
        items += [
            _offset_item(name, means[a], rec.m_s2_per_count, settings),
            _clip_item(name, rec.counts[:, a], settings),
            _flat_item(name, rec.counts[:, a], int((~live).sum()), windows, fs),
            _noise_item(name, density, band, _expected_noise(rec, a)),
            _lines_item(name, lines, rpm),
            _zone_item(name, vel, rpm, live.any(), settings),
        ]
    if n_axes == 3:
        items.insert(3, _gravity_item(means))
    overall = worst([i.verdict for i in items])
    counts = {v: sum(i.verdict == v for i in items) for v in VERDICTS}
    if overall == "ok":
        summary = "every item looks right for a fitted sensor"
    else:
        summary = f"{counts['problem']} item(s) need action, {counts['check']} to look at"
    return CheckResult(str(rec.path), rec.sample_rate_hz, n, windows, rec.duration_s, rec.axes, rpm,
                       vane_count, settings, freq, spectra, items, overall, summary,
                       plant=rec.plant, machine=rec.machine)


# --- spectra -------------------------------------------------------------------------------------

def lowest_bin(df: float) -> int:
    """First bin the check looks at: above the DC leakage of the Hann window (bins 0 and 1) and
    at or above the velocity band's lower edge."""
    return max(2, math.ceil(VEL_BAND_HZ[0] / df))


def _noise_floor(ms_w: np.ndarray, df: float) -> tuple[float, tuple[float, float]]:
    """Noise floor as mean square per bin, from the quietest part of the spectrum.

    ms_w: mean square per bin of each live window. The quietest part is the block (1/16 of the
    spectrum, at least 8 bins) with the lowest median, so a line inside a block does not lift it.
    Choosing the lowest of many noisy blocks would bias the level low, so the block is chosen on
    the even windows and measured on the odd ones (independent data; a single window does both,
    which reads low, and the length item asks for a longer recording then). For
    noise, each bin of a window's power-normalised periodogram is exponentially distributed about
    its mean, so the average of W windows is gamma distributed with shape W and its median sits at
    gammaincinv(W, 1/2) / W of the mean (common practice); the median is corrected by that factor.
    Returns (mean square per bin, (lo_hz, hi_hz) of the block)."""
    k0, m = lowest_bin(df), ms_w.shape[1] - 1
    width = min(max(8, (m - k0) // 16), max(1, m - k0))
    pick = ms_w[0::2].mean(axis=0)
    meas = ms_w[1::2] if len(ms_w) > 1 else ms_w
    starts = range(k0, m - width + 1, max(1, width // 2))
    at = min(starts, key=lambda k: float(np.median(pick[k:k + width])))
    w = len(meas)
    level = float(np.median(meas.mean(axis=0)[at:at + width])) / (float(special.gammaincinv(w, 0.5)) / w)
    return level, (at * df, (at + width) * df)


def _lines(ms: np.ndarray, df: float, rpm: float | None, vanes: int | None, max_lines: int) -> list[Line]:
    """The strongest lines: local maxima standing LINE_PROMINENCE above the median around them,
    at least 3 bins apart (the Hann main lobe spans +-2 bins). Level: r.m.s. from the power of the
    3 bins around the peak (a tone on a bin puts all but 0.1 % there, one half-way between two
    bins 98 %). Frequency: bin plus the Hann two-bin interpolation delta = (2r - 1) / (r + 1),
    r = |X[k+1]| / |X[k]| toward the larger neighbour (Grandke's estimator; from memory)."""
    k0, m = lowest_bin(df), len(ms) - 1
    cand = []
    for k in range(max(k0, 1), m):
        if not (ms[k] >= ms[k - 1] and ms[k] > ms[k + 1] and ms[k] > 0):
            continue
        lo, hi = max(k0, k - LINE_CONTEXT_BINS), min(m, k + LINE_CONTEXT_BINS + 1)
        around = np.concatenate((ms[lo:max(lo, k - 2)], ms[k + 3:hi]))
        if around.size and ms[k] >= LINE_PROMINENCE * np.median(around):
            cand.append(k)
    cand.sort(key=lambda k: -ms[k])
    chosen: list[int] = []
    for k in cand:
        if all(abs(k - j) >= 3 for j in chosen):
            chosen.append(k)
        if len(chosen) == max_lines:
            break
    out = []
    for k in chosen:
        side = 1 if ms[k + 1] >= ms[k - 1] else -1
        r = math.sqrt(ms[k + side] / ms[k])
        f = (k + side * (2 * r - 1) / (r + 1)) * df
        level = math.sqrt(float(ms[k - 1:k + 2].sum()))
        order = f / (rpm / 60.0) if rpm else None
        out.append(Line(f, level, level / (2 * math.pi * f) * 1000.0, order, _name(f, rpm, vanes, df)))
    return out


def _name(f: float, rpm: float | None, vanes: int | None, df: float) -> str:
    """Name of a line at f Hz: the nearest nameable order within half a bin (the interpolated
    frequency of a steady line is good to about a tenth of a bin) or the speed tolerance, if
    larger; else "unidentified" (a whole bin would reach the neighbouring orders of a slow shaft,
    and a bearing line between them would take their name). Without rpm, "rpm unknown"."""
    if not rpm:
        return "rpm unknown"
    f1 = rpm / 60.0
    best, name = math.inf, "unidentified"
    for order, label in line_names(rpm, vanes).items():
        d = abs(f - order * f1)
        if d <= max(0.5 * df, SPEED_REL_TOL * order * f1) and d < best:
            best, name = d, label
    return name


# --- items ---------------------------------------------------------------------------------------

def _rate_item(rec: Recording, s: CheckSettings) -> Item:
    src = "sidecar" if rec.sidecar.get("sample_rate_hz") is not None else "file header"
    value = f"{rec.sample_rate_hz:g} Hz"
    data = {"sample_rate_hz": rec.sample_rate_hz, "expected_hz": s.expected_rate_hz}
    if s.expected_rate_hz is None:
        return Item("sample rate", None, "ok", value, f"from the {src}; no board profile to compare with", data)
    if math.isclose(rec.sample_rate_hz, s.expected_rate_hz, rel_tol=1e-6):
        return Item("sample rate", None, "ok", value, f"from the {src}, as board {s.board_name} expects", data)
    return Item("sample rate", None, "problem", value,
                f"board {s.board_name} runs at {s.expected_rate_hz:g} Hz: set the sensor's output data rate to match",
                data)


def _scale_matches(rec: Recording, s: CheckSettings) -> bool:
    """True when the recording's counts scale is the board sensor's (or there is no board)."""
    e = s.expected_m_s2_per_count
    return e is None or abs(rec.m_s2_per_count / e - 1.0) <= SCALE_REL_TOL


def _scale_item(rec: Recording, s: CheckSettings) -> Item:
    value = f"{rec.m_s2_per_count * 1000:.4g} mm/s^2 per count"
    data = {"m_s2_per_count": rec.m_s2_per_count, "expected_m_s2_per_count": s.expected_m_s2_per_count}
    if s.expected_m_s2_per_count is None:
        return Item("counts scale", None, "ok", value, "no board profile to compare with", data)
    if _scale_matches(rec, s):
        return Item("counts scale", None, "ok", value, f"matches the sensitivity of board {s.board_name}", data)
    rel = rec.m_s2_per_count / s.expected_m_s2_per_count - 1.0
    return Item("counts scale", None, "check", value,
                f"board {s.board_name} expects {s.expected_m_s2_per_count * 1000:.4g} ({rel:+.0%}): "
                "wrong range setting or sidecar scale; clipping judged at the int16 limits", data)


def _length_item(rec: Recording, windows: int, n: int) -> Item:
    value = f"{rec.duration_s:.1f} s, {windows} windows"
    data = {"duration_s": rec.duration_s, "windows": windows}
    if windows >= FEW_WINDOWS:
        return Item("length", None, "ok", value, f"enough windows of {n} samples to average", data)
    need = FEW_WINDOWS * n / rec.sample_rate_hz
    return Item("length", None, "check", value, f"few windows, the averages are rough: record at least {need:.1f} s", data)


def _gravity_item(means: np.ndarray) -> Item:
    g = float(np.sqrt((means ** 2).sum()))
    value = f"{g:.2f} m/s^2"
    data = {"gravity_m_s2": g}
    if abs(g - G_M_S2) <= OFFSET_OK_M_S2:
        return Item("gravity", None, "ok", value,
                    f"the three axes' means add up to about 1 g ({G_M_S2:.2f} m/s^2): scale and axes agree", data)
    return Item("gravity", None, "check", value,
                f"the axes' means should add up to 1 g ({G_M_S2:.2f} m/s^2): check the counts scale, "
                "the range setting, or a dead axis", data)


def _offset_item(axis: str, mean: float, scale: float, s: CheckSettings) -> Item:
    counts = mean / scale
    value = f"{mean:+.2f} m/s^2 ({counts:+.0f} counts)"
    data = {"mean_m_s2": mean, "mean_counts": counts}
    full = min(-s.adc_min, s.adc_max)
    if abs(counts) >= MEAN_NEAR_FULL_SCALE * full:
        return Item("DC offset", axis, "problem", value,
                    "near full scale: no room left to vibrate; sensor fault or wrong range", data)
    if abs(mean) <= OFFSET_OK_M_S2:
        return Item("DC offset", axis, "ok", value, "within the zero-g offset of a MEMS sensor", data)
    if abs(abs(mean) - G_M_S2) <= OFFSET_OK_M_S2:
        return Item("DC offset", axis, "ok", value,
                    f"gravity ({G_M_S2:.2f} m/s^2 = 1 g): this axis is vertical, which is fine", data)
    tilt = math.degrees(math.acos(min(1.0, abs(mean) / G_M_S2))) if abs(mean) < G_M_S2 else 0.0
    why = (f"neither 0 nor 1 g: tilted by about {tilt:.0f} degrees from vertical, or offset drift"
           if tilt else "more than 1 g at rest: check the counts scale")
    return Item("DC offset", axis, "check", value, why, data)


def _clip_item(axis: str, x: np.ndarray, s: CheckSettings) -> Item:
    clipped = int(((x >= s.adc_max) | (x <= s.adc_min)).sum())
    pct = 100.0 * clipped / len(x)
    value = f"{pct:.3g} % ({clipped} samples)"
    data = {"clipped_samples": clipped, "clipped_pct": pct, "full_scale_counts": [s.adc_min, s.adc_max]}
    if clipped == 0:
        return Item("clipping", axis, "ok", value, f"no sample at full scale ({s.adc_min}..{s.adc_max} counts)", data)
    if pct < CLIP_PROBLEM_PCT:
        return Item("clipping", axis, "check", value,
                    "a few samples at full scale: knocks while fitting or a loose cable; record again", data)
    return Item("clipping", axis, "problem", value,
                "the sensor saturates: choose a larger range or check the cable", data)


def longest_run(x: np.ndarray) -> int:
    """Length of the longest run of identical consecutive samples."""
    if len(x) == 0:
        return 0
    edges = np.flatnonzero(np.diff(x)) + 1
    bounds = np.concatenate(([0], edges, [len(x)]))
    return int(np.diff(bounds).max())


def _flat_item(axis: str, x: np.ndarray, flat_windows: int, windows: int, fs: float) -> Item:
    run = longest_run(x)
    limit = max(2, int(round(FLAT_RUN_S * fs)))
    value = f"{flat_windows} of {windows} windows flat; longest run {run / fs * 1000:.0f} ms"
    data = {"flat_windows": flat_windows, "longest_run_samples": run}
    if flat_windows:
        return Item("flatline", axis, "problem", value,
                    "windows with no variation at all: stuck sensor output, broken cable or dead axis", data)
    if run >= limit:
        return Item("flatline", axis, "check", value,
                    f"identical samples for {FLAT_RUN_S * 1000:.0f} ms or longer: dropouts (loose connector) "
                    "or a signal below one count", data)
    return Item("flatline", axis, "ok", value, "the output moves all the time", data)


def _expected_noise(rec: Recording, axis: int) -> float | None:
    """Sensor noise density from the sidecar key sensor_noise_ug_rthz (one number, or one per
    axis), in (m/s^2)/sqrt(Hz); None when the sidecar does not give it."""
    v = rec.sidecar.get("sensor_noise_ug_rthz")
    if isinstance(v, list):
        v = v[axis] if axis < len(v) else None
    if isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0:
        return float(v) * 1e-6 * G_M_S2
    return None


def _noise_item(axis: str, density: float, band: tuple[float, float], expected: float | None) -> Item:
    ug = density / G_M_S2 * 1e6
    value = f"{ug:.0f} ug/sqrt(Hz) ({density:.3g} m/s^2/sqrt(Hz))"
    where = f"quietest part {band[0]:.0f}-{band[1]:.0f} Hz"
    data = {"noise_density_m_s2_per_rthz": density, "expected_m_s2_per_rthz": expected}
    if density == 0.0:
        return Item("noise floor", axis, "problem", value, "no noise at all: the output does not move", data)
    if expected is None and ug > NOISE_IMPLAUSIBLE_UG:
        return Item("noise floor", axis, "check", value,
                    f"{where}: far above a MEMS sensor's own noise: spikes, impacts or interference "
                    "lift the whole spectrum", data)
    if expected is None:
        return Item("noise floor", axis, "ok", value,
                    f"{where}; no sensor_noise_ug_rthz in the sidecar to compare with", data)
    ratio = density / expected
    if ratio < NOISE_LOW:
        return Item("noise floor", axis, "check", value,
                    f"{where}: {ratio:.2f} x the sensor's figure, quieter than the sensor can be: "
                    "check the scale and the sensor model", data)
    if ratio > NOISE_HIGH:
        return Item("noise floor", axis, "check", value,
                    f"{where}: {ratio:.1f} x the sensor's figure: interference on the cable, poor "
                    "mounting, or machine noise across the band", data)
    return Item("noise floor", axis, "ok", value, f"{where}: {ratio:.1f} x the sensor's figure", data)


def _lines_item(axis: str, lines: list[Line], rpm: float | None) -> Item:
    if not lines:
        return Item("lines", axis, "ok", "none", "no line stands out of the noise", {})
    top = lines[0]
    value = f"{len(lines)}; strongest {top.freq_hz:.1f} Hz {top.level_m_s2:.3g} m/s^2"
    if not rpm:
        return Item("lines", axis, "ok", value, "no rpm in the sidecar (or rpm 0): lines not named", {})
    named = sum(ln.name != "unidentified" for ln in lines)
    if top.name == "unidentified":
        return Item("lines", axis, "check", value,
                    "the strongest line is no running-speed or vane-pass multiple: a resonance, a "
                    "bearing, a neighbouring machine, or a wrong rpm", {})
    return Item("lines", axis, "ok", value, f"strongest is {top.name}; {named} of {len(lines)} named", {})


def _zone_item(axis: str, vel: float, rpm: float | None, live: bool, s: CheckSettings) -> Item:
    z = iso_zones.ZONE_NAMES[iso_zones.zone_of(vel, s.zones_mm_s)]
    value = f"{vel:.2f} mm/s, zone {z}"
    data = {"velocity_rms_mm_s": vel, "zone": z}
    lo, hi = VEL_BAND_HZ
    if not live:
        return Item("ISO zone", axis, "problem", value, "no live window to measure velocity in", data)
    if rpm == 0:
        return Item("ISO zone", axis, "ok", value, "machine stopped (rpm 0): the zone says nothing", data)
    note = ""
    if rpm is not None and rpm < ISO_MIN_RPM:
        note = f"; below {ISO_MIN_RPM} r/min the standard's band starts at 2 Hz, not {lo} Hz"
    verdict = {"A": "ok", "B": "ok", "C": "check", "D": "problem"}[z]
    return Item("ISO zone", axis, verdict, value,
                f"velocity r.m.s. {lo}-{hi} Hz, median over windows: {ZONE_MEANING[z]}{note}", data)
