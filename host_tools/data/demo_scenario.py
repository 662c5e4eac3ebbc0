"""The demo scenario: invented accelerometer data from two pumps, with seeded faults.

INVENTED DEMO DATA. "Brackwater pumping station" and its pumps "P-101" and "P-102" are fictional;
no measurement from any real machine went into this. The signals are made from simple physics so
that the tools have something realistic to work on, and so that the faults are known exactly.

Each pump carries one triaxial MEMS accelerometer on its drive-end bearing housing, sampled at
3200 Hz. Axes: x radial horizontal, y axial, z radial vertical (z reads +1 g of gravity). The
sensor is ADXL345-like, as on the Pico board profile (boards/pico_adxl345.json): +-16 g full
resolution, 256 counts per g (3.9 mg per count, M_S2_PER_COUNT in m/s^2 per count), codes
-4096..4095 where it saturates as a real one would.

What a snapshot contains (amplitudes are peak m/s^2 at the top speed, 1480 r/min, where forces
scale with the square of speed below the first critical speed; common practice):
- 1x imbalance (radial, a rotating force: x and z in quadrature);
- 2x misalignment (strongest axially);
- vane pass (vane count x shaft speed), amplitude-modulated at 1x, giving sidebands at +-1x;
- broadband flow noise (10-1000 Hz), level with the square of speed;
- a housing resonance (P-101 1100 Hz, P-102 1250 Hz; below the 1600 Hz Nyquist limit) rung by
  impacts of a bearing outer-race defect at BPFO from the 6205 geometry, with about 1 % slip and
  random jitter of each impact time;
- sensor noise (white, 290-430 ug/sqrt(Hz)), per-axis offsets and a slow daily drift of them.

The operating story (six weeks of gateway snapshots, 10 s every 2 hours, plus one at every stop and
restart, t0_s in Unix seconds from an invented start date; 10 s, not less, so that a snapshot holds
more steady running than the settling after a speed change, as the evaluation histories' do):
- a variable-speed drive moves each pump between 1480, 1180 and 890 r/min with the daily demand,
  with stops of a few hours and restarts (ramps of 150 r/min per second);
- P-101: a loose sensor cable (flatline dropouts and full-scale spikes) on days 11.3-13.6, then
  from day 20 a developing bearing outer-race defect whose impacts grow exponentially to the end;
- P-102: a cavitation episode on days 25.5-28 (low suction level): bursts of broadband noise above
  400 Hz and a raised flow-noise level, strong at 1480 r/min, weaker at 1180, none at 890.
The first 7 days of both pumps are healthy and form the training set; the rest is the field set.
Continuous running (stretch_s; `make demo` asks for it): on each day one stretch of steady top
speed with no seeded fault, as a gateway records on request, written as gap-free files of a
minute (STRETCH_FILE_S) that replay joins sample by sample. Over a stretch the level of each
source wanders slowly (AR(1), WANDER_TAU_S) with the spread that snapshots show between them, so
the held-out running in training holds independent stretches to state a false-alert rate from,
and the field's healthy running can be set beside it (docs/detector.md, the false-alert rate).

Deterministic: one seed fixes the whole scenario; each snapshot, and each continuous stretch,
draws from its own generator seeded by (seed, pump, time), so any of them can be made alone and
comes out the same.

Entry points: PumpSpec, Fault, Snapshot, Scenario, build_scenario(), synthesize(), stretch_counts(),
snapshot_sidecar(), snapshot_set(), write_scenario(), ground_truth().
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np
from scipy import signal

from host_tools.data import pump_physics as ph
from host_tools.data.bearing import BEARING_6205, BearingGeometry, defect_orders
from host_tools.data.recording import gap_free_groups, write_wav

FS_HZ = 3200
G_M_S2 = ph.G_M_S2
COUNTS_PER_G = int(ph.ADXL345.counts_per_g)  # ADXL345 full resolution (pump_physics.ADXL345)
M_S2_PER_COUNT = ph.ADXL345.m_s2_per_count
ADC_MIN, ADC_MAX = ph.ADXL345.adc_min, ph.ADXL345.adc_max  # +-16 g in 13 bits
AXES = ("x", "y", "z")
PLANT = "Brackwater pumping station"
DEFAULT_SEED = 2026
DAYS = 42
TRAINING_DAYS = 7
SNAPSHOT_S = 10.0
SNAPSHOT_INTERVAL_S = 7200.0
STRETCH_FILE_S = 60.0     # a continuous stretch is written as gap-free files of a minute
OPERATING_RPM = (1480.0, 1180.0, 890.0)
TOP_RPM = OPERATING_RPM[0]
RAMP_RPM_PER_S = 150.0
START_T0_S = datetime(2026, 3, 2, tzinfo=timezone.utc).timestamp()  # invented start date
BEARING_SLIP = 0.01  # rolling elements lag the kinematic rate by about 1 % (common practice)
# Noise density per axis (x, y, z), ug/sqrt(Hz): the ADXL345's (pump_physics.ADXL345, from memory).
SENSOR_NOISE_UG_RTHZ = ph.ADXL345.noise_ug_rthz
_DAY_S = 86400.0
# Continuous running (make demo): the levels of 1x, 2x, vane pass and flow noise wander slowly,
# AR(1) with these time constants (s); their spread is the snapshots' (5 %)
WANDER_TAU_S = (30.0, 60.0, 45.0, 20.0)


@dataclass(frozen=True)
class PumpSpec:
    """One invented pump. Amplitudes: peak m/s^2 at TOP_RPM; resonance in Hz."""

    name: str
    vane_count: int
    resonance_hz: float
    resonance_q: float
    imbalance_m_s2: float
    misalignment_m_s2: float
    vane_pass_m_s2: float
    flow_noise_rms_m_s2: float
    offsets_m_s2: tuple[float, float, float]  # sensor zero-g offset per axis
    bearing: BearingGeometry = BEARING_6205
    stop_days: tuple[float, ...] = ()  # days (from the start) when the pump is stopped for a few hours
    site: str = PLANT


PUMPS = (
    # Stop days fixed per pump so the training week holds stops and restarts of both.
    PumpSpec("P-101", 6, 1100.0, 15.0, 0.25, 0.10, 0.35, 0.08, (0.12, -0.08, 0.20), stop_days=(3.4, 15.6, 27.3, 38.5)),
    PumpSpec("P-102", 7, 1250.0, 18.0, 0.30, 0.14, 0.28, 0.07, (-0.05, 0.10, -0.15), stop_days=(1.6, 5.5, 19.4, 33.6)),
)


@dataclass(frozen=True)
class Fault:
    """A seeded fault: what, where, and the t0_s range it spans (Unix seconds)."""

    pump: str
    kind: str  # "loose_cable", "bearing_outer_race", "cavitation"
    start_t0_s: float
    end_t0_s: float
    description: str

    def severity(self, t: float) -> float:
        """0 outside the fault; inside, 0..1 (growth shape per kind)."""
        if not self.start_t0_s <= t <= self.end_t0_s:
            return 0.0
        s = (t - self.start_t0_s) / (self.end_t0_s - self.start_t0_s)
        if self.kind == "bearing_outer_race":
            return math.expm1(5.0 * s) / math.expm1(5.0)  # slow start, fast end
        if self.kind == "cavitation":
            return min(1.0, 8.0 * s, 8.0 * (1.0 - s))  # eases in and out over about 8 hours
        return 1.0


@dataclass(frozen=True)
class Snapshot:
    """One recording to make: which pump, start time (Unix s), length (s), why it was taken."""

    pump: str
    t0_s: float
    duration_s: float = SNAPSHOT_S
    trigger: str = "periodic"  # "periodic", "stop" or "start"


@dataclass
class Scenario:
    """The whole invented story: speed profiles, faults and the snapshot schedule."""

    seed: int
    start_t0_s: float
    end_t0_s: float
    training_end_t0_s: float
    pumps: dict[str, PumpSpec]
    faults: tuple[Fault, ...]
    snapshots: tuple[Snapshot, ...]
    stops: dict[str, list[tuple[float, float]]]  # pump -> [(stop t, restart t)], Unix s
    _speed_bp: dict[str, tuple[np.ndarray, np.ndarray]] = field(repr=False, default_factory=dict)

    def speed_rpm(self, pump: str, t: np.ndarray) -> np.ndarray:
        """Drive speed (r/min) of `pump` at Unix times t (piecewise linear: steps and ramps)."""
        bt, br = self._speed_bp[pump]
        return np.interp(t, bt, br)

    def fault_severity(self, pump: str, kind: str, t: float) -> float:
        return max((f.severity(t) for f in self.faults if f.pump == pump and f.kind == kind), default=0.0)


# The seeded faults: (pump, kind, first day, last day or None for the scenario's end, description).
FAULT_PLAN = (
    ("P-101", "loose_cable", 11.3, 13.6, "sensor cable connector loose: dropouts and spikes"),
    ("P-101", "bearing_outer_race", 20.0, None, "drive-end bearing outer-race defect, growing"),
    ("P-102", "cavitation", 25.5, 28.0, "low suction level: cavitation at high flow"),
)


def build_scenario(seed: int = DEFAULT_SEED, days: float = DAYS, training_days: float = TRAINING_DAYS,
                   interval_s: float = SNAPSHOT_INTERVAL_S, pumps: tuple[PumpSpec, ...] = PUMPS,
                   fault_plan: tuple = FAULT_PLAN, stretch_s: tuple[float, float] = (0.0, 0.0)) -> Scenario:
    """Plan the scenario (speeds, stops, faults, snapshot times); cheap, no signals yet.
    pumps and fault_plan: the demo's two pumps by default (host_tools.data.demo_fleet gives more).
    stretch_s: seconds of continuous running recorded on each training day and each field day
    (_stretches; 0: snapshots only)."""
    rng = np.random.default_rng([seed, 0])
    t_start = START_T0_S
    t_end = t_start + days * _DAY_S

    def d(day: float) -> float:
        return t_start + day * _DAY_S
    faults = tuple(
        f for f in (Fault(pump, kind, d(a), d(days if b is None else b), text) for pump, kind, a, b, text in fault_plan)
        if f.start_t0_s < t_end
    )
    speed_bp, stops, snaps = {}, {}, []
    for p in pumps:
        hours = int(days * 24)
        target = _hourly_speeds(rng, hours, stop_days=[x for x in p.stop_days if x < days - 0.5])
        bt, br, pump_stops = _profile(t_start, target)
        speed_bp[p.name] = (bt, br)
        stops[p.name] = pump_stops
        n = int((t_end - t_start - 1200.0 - SNAPSHOT_S) // interval_s) + 1
        snaps += [Snapshot(p.name, t_start + 1200.0 + i * interval_s) for i in range(n)]
        for t_stop, t_go in pump_stops:
            snaps.append(Snapshot(p.name, t_stop - 1.0, trigger="stop"))
            if t_go < t_end - SNAPSHOT_S:
                snaps.append(Snapshot(p.name, t_go - 1.0, trigger="start"))
    sc = Scenario(seed, t_start, t_end, d(training_days), {p.name: p for p in pumps}, faults, (), stops, speed_bp)
    spans = [(p.name, a, b) for p in pumps for a, b in _stretches(sc, p.name, stretch_s)]
    snaps = [s for s in snaps if not any(s.pump == q and s.t0_s < b and s.t0_s + s.duration_s > a for q, a, b in spans)]
    for pump, a, b in spans:
        total, per = int(round((b - a) * FS_HZ)), int(round(STRETCH_FILE_S * FS_HZ))  # whole samples: files join exactly
        snaps += [Snapshot(pump, a + k / FS_HZ, min(per, total - k) / FS_HZ, "continuous") for k in range(0, total, per)]
    snaps.sort(key=lambda s: (s.pump, s.t0_s))
    sc.snapshots = tuple(snaps)
    return sc


def _stretches(sc: Scenario, pump: str, stretch_s: tuple[float, float]) -> list[tuple[float, float]]:
    """One continuous stretch a day (from, to; Unix s): stretch_s[0] s on a training day,
    stretch_s[1] on a field day, from 5 min past the first hour that keeps the top speed
    throughout (steady 2 min before, 1 min after: scored running, as a gateway would record it on
    request) with no seeded fault anywhere in it, and wholly in training or in the field."""
    out = []
    for day in range(int(math.ceil((sc.end_t0_s - sc.start_t0_s) / _DAY_S))):
        t_day = sc.start_t0_s + day * _DAY_S
        length = stretch_s[0] if t_day < sc.training_end_t0_s else stretch_s[1]
        for hour in range(24) if length > 0 else ():
            a = t_day + hour * 3600.0 + 300.0
            b = a + length
            steady = np.all(sc.speed_rpm(pump, np.arange(a - 120.0, b + 61.0)) == TOP_RPM)
            faulty = any(f.pump == pump and f.start_t0_s <= b and a <= f.end_t0_s for f in sc.faults)
            if steady and not faulty and b <= sc.end_t0_s and (b <= sc.training_end_t0_s or a >= sc.training_end_t0_s):
                out.append((a, b))
                break
    return out


def _hourly_speeds(rng: np.random.Generator, hours: int, stop_days: list[float]) -> np.ndarray:
    """Target speed (r/min) for each hour: the daily demand pattern, random deviations, stops."""
    by_hour = np.array([2] * 6 + [1] * 4 + [0] * 8 + [1] * 4 + [2] * 2)  # index into OPERATING_RPM
    op = by_hour[np.arange(hours) % 24]
    shift = rng.random(hours) < 0.15  # demand differs from the usual pattern this hour
    op = np.where(shift, np.clip(op + rng.choice([-1, 1], hours), 0, 2), op)
    rpm = np.asarray(OPERATING_RPM)[op]
    for day in stop_days:
        h0 = int(day * 24)
        rpm[h0:h0 + int(rng.integers(3, 7))] = 0.0
    return rpm


def _profile(t_start: float, hourly: np.ndarray) -> tuple[np.ndarray, np.ndarray, list[tuple[float, float]]]:
    """Breakpoints of the speed profile (changes on the hour, linear ramps) and the stop list."""
    bt, br, stops = [t_start], [hourly[0]], []
    stop_t = t_start  # a profile that begins stopped was stopped from the start
    for h in range(1, len(hourly)):
        old, new = hourly[h - 1], hourly[h]
        if new == old:
            continue
        t = t_start + h * 3600.0
        bt += [t, t + abs(new - old) / RAMP_RPM_PER_S]
        br += [old, new]
        if new == 0.0:
            stop_t = t
        elif old == 0.0:
            stops.append((stop_t, t))
    if hourly[-1] == 0.0:
        stops.append((stop_t, t_start + len(hourly) * 3600.0))
    return np.array(bt), np.array(br), stops


# --- signals -----------------------------------------------------------------------------------

_FLOW_SOS = signal.butter(4, [10.0, 1000.0], btype="bandpass", fs=FS_HZ, output="sos")
_CAV_SOS = signal.butter(4, [400.0, 1500.0], btype="bandpass", fs=FS_HZ, output="sos")
# Per-axis gains (x, y, z) of each source at the sensor.
_GAIN_1X = np.array([1.0, 0.2, 0.8])
_GAIN_2X = np.array([0.4, 1.0, 0.3])
_GAIN_VANE = np.array([0.7, 0.5, 0.6])
_GAIN_RES = np.array([0.6, 0.3, 1.0])
_BEARING_END_M_S2 = 25.0  # peak of one impact's ring-down at full defect severity, TOP_RPM


def synthesize(sc: Scenario, snap: Snapshot) -> np.ndarray:
    """Accelerometer counts of one snapshot: int16 in ADC_MIN..ADC_MAX, frames x 3 (x, y, z),
    M_S2_PER_COUNT m/s^2 per count."""
    return _Signal(sc, snap.pump, snap.t0_s).next(int(round(snap.duration_s * FS_HZ)))


def stretch_counts(sc: Scenario, snaps: Sequence[Snapshot]) -> Iterator[np.ndarray]:
    """Counts of gap-free recordings (each starting where the one before ends) made from one
    running signal, so that they join sample by sample; the levels wander (WANDER_TAU_S)."""
    sig = _Signal(sc, snaps[0].pump, snaps[0].t0_s, wander=True)
    for snap in snaps:
        yield sig.next(int(round(snap.duration_s * FS_HZ)))


class _Signal:
    """One pump's accelerometer from t0, made chunk by chunk with its state carried (shaft angle,
    filter states, each source's level): a snapshot is the first chunk of a fresh signal, a
    continuous stretch many chunks of one. A snapshot's level of each source is exp(0.05 z), z
    standard normal: the spread from one snapshot to the next. With wander, z is a unit-variance
    AR(1) process from there (time constants WANDER_TAU_S; ph.ar1): a snapshot is a moment of
    the same slowly wandering levels."""

    def __init__(self, sc: Scenario, pump: str, t0: float, wander: bool = False):
        p = sc.pumps[pump]
        self.sc, self.p, self.t = sc, p, t0
        key = [sc.seed, 1 + [*sc.pumps].index(p.name), int(round(t0 * 1000))]
        rng = self.rng = np.random.default_rng(key)
        self.slip = 1.0 + 0.001 * rng.standard_normal()  # slip varies with load
        self.theta = rng.uniform(0, 2 * np.pi)          # shaft angle, rad
        self.z = rng.standard_normal(4)                 # level of each source (see the class)
        self.ph = rng.uniform(0, 2 * np.pi, 4)
        self.wander = np.random.default_rng(key + [1]) if wander else None
        self.zi: list[np.ndarray | None] = [None, None]  # flow and background filter states
        self.flow_norm: float | None = None

    def _noise(self, i: int, n: int) -> np.ndarray:
        """n frames of band-limited noise i (0 flow, 1 background), continuing its filter; the
        first chunk skips the filter's start-up."""
        skip = 1024 if self.zi[i] is None else 0
        zi = np.zeros((_FLOW_SOS.shape[0], 2, 3)) if self.zi[i] is None else self.zi[i]
        out, self.zi[i] = signal.sosfilt(_FLOW_SOS, self.rng.standard_normal((n + skip, 3)), axis=0, zi=zi)
        return out[skip:]

    def _levels(self, n: int) -> np.ndarray | list[np.ndarray]:
        if self.wander is None:
            return np.exp(0.05 * self.z)
        z = [ph.ar1(self.wander, n, math.exp(-1.0 / (tau * FS_HZ)), float(z0)) for tau, z0 in zip(WANDER_TAU_S, self.z)]
        self.z = np.array([v[-1] for v in z])
        return [np.exp(0.05 * v) for v in z]

    def next(self, n: int) -> np.ndarray:
        """The next n frames as counts (int16, n x 3)."""
        sc, p, rng, t0 = self.sc, self.p, self.rng, self.t
        t = t0 + np.arange(n) / FS_HZ
        self.t += n / FS_HZ
        rpm = sc.speed_rpm(p.name, t) * self.slip
        fr = rpm / 60.0
        theta = 2.0 * np.pi * np.cumsum(fr) / FS_HZ + self.theta
        self.theta = float(theta[-1] % (2 * np.pi))     # every source is a whole order: wraps unseen
        load = (rpm / TOP_RPM) ** 2
        vary = self._levels(n)
        cav = sc.fault_severity(p.name, "cavitation", t0) * float(np.clip((rpm.mean() - 890.0) / 590.0, 0, 1)) ** 1.5
        ph_ = self.ph

        a = np.outer(load * p.imbalance_m_s2 * vary[0] * np.cos(theta), _GAIN_1X)
        a[:, 2] = load * p.imbalance_m_s2 * vary[0] * _GAIN_1X[2] * np.sin(theta)  # rotating force
        a += np.outer(load * p.misalignment_m_s2 * vary[1] * np.cos(2 * theta + ph_[0]), _GAIN_2X)
        vane_level = p.vane_pass_m_s2 * vary[2] * (1.0 + 0.3 * cav * rng.standard_normal())
        vane = load * vane_level * (1.0 + 0.6 * np.cos(theta + ph_[1])) * np.cos(p.vane_count * theta + ph_[2])
        a += np.outer(vane, _GAIN_VANE)
        flow = self._noise(0, n)
        if self.flow_norm is None:
            self.flow_norm = float(flow.std())           # the first chunk's, kept: no step at a seam
        a += flow * np.reshape(p.flow_noise_rms_m_s2 * vary[3] * (1.0 + cav) / self.flow_norm, (-1, 1)) * load[:, None]
        a += 0.01 * self._noise(1, n)                    # station background
        a += np.outer(_bearing_impacts(sc, p, t0, theta, rpm, rng), _GAIN_RES)
        if cav > 0.0:
            a += _cavitation(rng, n, cav)
        a += rng.standard_normal((n, 3)) * (np.asarray(SENSOR_NOISE_UG_RTHZ) * 1e-6 * G_M_S2 * math.sqrt(FS_HZ / 2.0))
        drift = 0.03 * np.sin(2 * np.pi * (t - sc.start_t0_s) / _DAY_S + ph_[3])  # offsets follow temperature
        a += np.asarray(p.offsets_m_s2) + drift[:, None]
        a[:, 2] += G_M_S2
        counts = np.clip(np.rint(a / M_S2_PER_COUNT), ADC_MIN, ADC_MAX).astype(np.int16)
        if sc.fault_severity(p.name, "loose_cable", t0) > 0.0 and rng.random() < 0.8:
            _loose_cable(rng, counts)
        return counts


def _bearing_impacts(sc: Scenario, p: PumpSpec, t0: float, theta: np.ndarray, rpm: np.ndarray,
                     rng: np.random.Generator) -> np.ndarray:
    """Housing-resonance ring-down from outer-race impacts (m/s^2), zero on a healthy bearing."""
    sev = sc.fault_severity(p.name, "bearing_outer_race", t0)
    out = np.zeros(len(theta))
    if sev <= 0.0:
        return out
    # Impacts happen each time a ball passes the defect: BPFO cycles = order x shaft turns.
    passes = defect_orders(p.bearing).bpfo * (1.0 - BEARING_SLIP) * (theta - theta[0]) / (2 * np.pi)
    k = np.arange(1, int(passes[-1]))
    at = np.searchsorted(passes, k + 0.02 * rng.standard_normal(len(k)))  # slip jitter, ~2 % of a period
    at = at[(at > 0) & (at < len(out))]
    out[at] = _BEARING_END_M_S2 * sev * (rpm[at] / TOP_RPM) * (1.0 + 0.2 * rng.standard_normal(len(at)))
    return ph.Resonator(p.resonance_hz, p.resonance_q, FS_HZ).next(out)


def _cavitation(rng: np.random.Generator, n: int, cav: float) -> np.ndarray:
    """Cavitation noise (m/s^2): a raised floor above 400 Hz plus random bursts of it."""
    bursts = ph.bursts(rng, n, FS_HZ, 30.0, 0.008)
    noise = signal.sosfilt(_CAV_SOS, rng.standard_normal((n + 1024, 3)), axis=0)[1024:]
    noise /= noise.std()
    return noise * (cav * (0.25 + 1.5 * bursts))[:, None]


def _loose_cable(rng: np.random.Generator, counts: np.ndarray) -> None:
    """Dropouts (flat: held or zero, all axes) and full-scale spikes; overwrites counts."""
    n = len(counts)
    for _ in range(1 + rng.poisson(2.0)):
        i = int(rng.integers(1, n - 1))
        j = min(n, i + int(rng.uniform(0.02, 0.4) * FS_HZ))
        counts[i:j] = counts[i - 1] if rng.random() < 0.5 else 0
    at = rng.integers(0, n, rng.poisson(8.0))
    counts[at, rng.integers(0, 3, len(at))] = rng.choice(np.array([ADC_MIN, ADC_MAX], np.int16), len(at))


# --- files -------------------------------------------------------------------------------------

def snapshot_sidecar(sc: Scenario, snap: Snapshot) -> dict:
    """The sidecar of a snapshot, as a gateway would write it (rpm from the drive when steady)."""
    p = sc.pumps[snap.pump]
    rpm = sc.speed_rpm(p.name, np.array([snap.t0_s, snap.t0_s + snap.duration_s]))
    return {
        "m_s2_per_unit": M_S2_PER_COUNT,
        "full_scale": ADC_MAX,
        "sample_rate_hz": float(FS_HZ),
        "t0_s": snap.t0_s,
        "rpm": float(rpm[0]) if rpm[0] == rpm[1] else None,
        "vane_count": p.vane_count,
        "axes": list(AXES),
        "plant": p.site,
        "machine": p.name,
        "trigger": snap.trigger,
        "note": "invented demo data",
    }


def snapshot_set(sc: Scenario, snap: Snapshot) -> str:
    """'training' (healthy first days) or 'field'."""
    return "training" if snap.t0_s + snap.duration_s <= sc.training_end_t0_s else "field"


def write_scenario(out_dir: str | os.PathLike, seed: int = DEFAULT_SEED, days: float = DAYS,
                   training_days: float = TRAINING_DAYS, interval_s: float = SNAPSHOT_INTERVAL_S,
                   stretch_s: tuple[float, float] = (0.0, 0.0), jobs: int = 1) -> Path:
    """Write every recording as WAV + sidecar and the ground truth; returns ground_truth.json.

    Layout: OUT/PUMP/training/*.wav and OUT/PUMP/field/*.wav (each folder one gateway's stream,
    file names sort in time order), OUT/ground_truth.json. stretch_s: build_scenario's; a
    continuous stretch comes from one running signal, file after file (stretch_counts). jobs:
    processes, one pump each (the files are the same for any jobs).
    """
    sc = build_scenario(seed, days, training_days, interval_s, stretch_s=stretch_s)
    out = Path(out_dir)
    pumps = list(sc.pumps)
    if jobs > 1 and len(pumps) > 1:
        from concurrent.futures import ProcessPoolExecutor
        with ProcessPoolExecutor(max_workers=min(jobs, len(pumps))) as pool:
            made = list(pool.map(_write_pump, [out] * len(pumps), [sc] * len(pumps), pumps))
    else:
        made = [_write_pump(out, sc, pump) for pump in pumps]
    truth = ground_truth(sc)
    truth["files"] = dict(zip(pumps, made))
    gt = out / "ground_truth.json"
    tmp = gt.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(truth, indent=1) + "\n")
    os.replace(tmp, gt)
    return gt


def _write_pump(out: Path, sc: Scenario, pump: str) -> dict[str, list[str]]:
    """Write one pump's recordings; their paths (relative to out) per part."""
    files: dict[str, list[str]] = {"training": [], "field": []}
    for group in _joined([s for s in sc.snapshots if s.pump == pump]):
        made = stretch_counts(sc, group) if group[0].trigger == "continuous" else (synthesize(sc, group[0]),)
        for snap, counts in zip(group, made):
            part = snapshot_set(sc, snap)
            folder = out / snap.pump / part
            folder.mkdir(parents=True, exist_ok=True)
            stamp = datetime.fromtimestamp(snap.t0_s, timezone.utc).strftime("%Y%m%dT%H%M%SZ")
            path = write_wav(folder / f"{snap.pump}_{stamp}.wav", counts, FS_HZ, snapshot_sidecar(sc, snap))
            files[part].append(str(path.relative_to(out)))
    return files


def _joined(snaps: Sequence[Snapshot]) -> list[list[Snapshot]]:
    """One pump's recordings in order, those of one continuous stretch together."""
    return gap_free_groups(snaps, lambda s: s.trigger == "continuous", FS_HZ)


def ground_truth(sc: Scenario) -> dict:
    """What was seeded where: faults with their t0_s ranges, stops, continuous stretches, pump
    data, scales."""
    return {
        "note": "invented demo data: a fictional plant, pumps and faults",
        "plant": PLANT,
        "seed": sc.seed,
        "sample_rate_hz": FS_HZ,
        "m_s2_per_count": M_S2_PER_COUNT,
        "start_t0_s": sc.start_t0_s,
        "end_t0_s": sc.end_t0_s,
        "training_end_t0_s": sc.training_end_t0_s,
        "operating_rpm": list(OPERATING_RPM),
        "pumps": {
            name: {
                "vane_count": p.vane_count,
                "resonance_hz": p.resonance_hz,
                "bearing": {"n_elements": p.bearing.n_elements, "ball_diameter_mm": p.bearing.ball_diameter_mm,
                            "pitch_diameter_mm": p.bearing.pitch_diameter_mm,
                            "contact_angle_deg": p.bearing.contact_angle_deg},
                "bpfo_order": defect_orders(p.bearing).bpfo,
                "stops": [{"stop_t_s": a, "restart_t_s": b} for a, b in sc.stops[name]],
                "continuous": [{"from_t_s": g[0].t0_s, "to_t_s": g[-1].t0_s + g[-1].duration_s}
                               for g in _joined([s for s in sc.snapshots if s.pump == name])
                               if g[0].trigger == "continuous"],
            }
            for name, p in sc.pumps.items()
        },
        "faults": [
            {"pump": f.pump, "kind": f.kind, "start_t0_s": f.start_t0_s, "end_t0_s": f.end_t0_s,
             "description": f.description}
            for f in sc.faults
        ],
    }
