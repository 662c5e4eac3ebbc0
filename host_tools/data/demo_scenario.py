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

Deterministic: one seed fixes the whole scenario; each snapshot draws from its own generator
seeded by (seed, pump, time), so any snapshot can be made alone and comes out the same.

Entry points: PumpSpec, Fault, Snapshot, Scenario, build_scenario(), synthesize(), snapshot_sidecar(), snapshot_set(), write_scenario(), ground_truth().
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
from scipy import signal

from host_tools.data import pump_physics as ph
from host_tools.data.bearing import BEARING_6205, BearingGeometry, defect_orders
from host_tools.data.recording import write_wav

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
OPERATING_RPM = (1480.0, 1180.0, 890.0)
TOP_RPM = OPERATING_RPM[0]
RAMP_RPM_PER_S = 150.0
START_T0_S = datetime(2026, 3, 2, tzinfo=timezone.utc).timestamp()  # invented start date
BEARING_SLIP = 0.01  # rolling elements lag the kinematic rate by about 1 % (common practice)
# Noise density per axis (x, y, z), ug/sqrt(Hz): the ADXL345's (pump_physics.ADXL345, from memory).
SENSOR_NOISE_UG_RTHZ = ph.ADXL345.noise_ug_rthz
_DAY_S = 86400.0


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
                   fault_plan: tuple = FAULT_PLAN) -> Scenario:
    """Plan the scenario (speeds, stops, faults, snapshot times); cheap, no signals yet.
    pumps and fault_plan: the demo's two pumps by default (host_tools.data.demo_fleet gives more)."""
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
    snaps.sort(key=lambda s: (s.pump, s.t0_s))
    return Scenario(seed, t_start, t_end, d(training_days), {p.name: p for p in pumps}, faults,
                    tuple(snaps), stops, speed_bp)


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
    p = sc.pumps[snap.pump]
    rng = np.random.default_rng([sc.seed, 1 + [*sc.pumps].index(p.name), int(round(snap.t0_s * 1000))])
    n = int(round(snap.duration_s * FS_HZ))
    t = snap.t0_s + np.arange(n) / FS_HZ
    rpm = sc.speed_rpm(p.name, t) * (1.0 + 0.001 * rng.standard_normal())  # slip varies with load
    fr = rpm / 60.0
    theta = 2.0 * np.pi * np.cumsum(fr) / FS_HZ + rng.uniform(0, 2 * np.pi)  # shaft angle, rad
    load = (rpm / TOP_RPM) ** 2
    vary = np.exp(0.05 * rng.standard_normal(4))  # day-to-day spread of each source
    cav = sc.fault_severity(p.name, "cavitation", snap.t0_s) * float(np.clip((rpm.mean() - 890.0) / 590.0, 0, 1)) ** 1.5
    ph = rng.uniform(0, 2 * np.pi, 4)

    a = np.outer(load * p.imbalance_m_s2 * vary[0] * np.cos(theta), _GAIN_1X)
    a[:, 2] = load * p.imbalance_m_s2 * vary[0] * _GAIN_1X[2] * np.sin(theta)  # rotating force
    a += np.outer(load * p.misalignment_m_s2 * vary[1] * np.cos(2 * theta + ph[0]), _GAIN_2X)
    vane_level = p.vane_pass_m_s2 * vary[2] * (1.0 + 0.3 * cav * rng.standard_normal())
    vane = load * vane_level * (1.0 + 0.6 * np.cos(theta + ph[1])) * np.cos(p.vane_count * theta + ph[2])
    a += np.outer(vane, _GAIN_VANE)
    flow = signal.sosfilt(_FLOW_SOS, rng.standard_normal((n + 1024, 3)), axis=0)[1024:]  # skip filter start-up
    a += flow * (p.flow_noise_rms_m_s2 * vary[3] * (1.0 + cav) / flow.std()) * load[:, None]
    a += 0.01 * signal.sosfilt(_FLOW_SOS, rng.standard_normal((n + 1024, 3)), axis=0)[1024:]  # station background
    a += np.outer(_bearing_impacts(sc, p, snap.t0_s, theta, rpm, rng), _GAIN_RES)
    if cav > 0.0:
        a += _cavitation(rng, n, cav)
    a += rng.standard_normal((n, 3)) * (np.asarray(SENSOR_NOISE_UG_RTHZ) * 1e-6 * G_M_S2 * math.sqrt(FS_HZ / 2.0))
    drift = 0.03 * np.sin(2 * np.pi * (t - sc.start_t0_s) / _DAY_S + ph[3])  # offsets follow temperature
    a += np.asarray(p.offsets_m_s2) + drift[:, None]
    a[:, 2] += G_M_S2
    counts = np.clip(np.rint(a / M_S2_PER_COUNT), ADC_MIN, ADC_MAX).astype(np.int16)
    if sc.fault_severity(p.name, "loose_cable", snap.t0_s) > 0.0 and rng.random() < 0.8:
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
                   training_days: float = TRAINING_DAYS, interval_s: float = SNAPSHOT_INTERVAL_S) -> Path:
    """Write every snapshot as WAV + sidecar and the ground truth; returns ground_truth.json.

    Layout: OUT/PUMP/training/*.wav and OUT/PUMP/field/*.wav (each folder one gateway's stream,
    file names sort in time order), OUT/ground_truth.json.
    """
    sc = build_scenario(seed, days, training_days, interval_s)
    out = Path(out_dir)
    files: dict[str, dict[str, list[str]]] = {name: {"training": [], "field": []} for name in sc.pumps}
    for snap in sc.snapshots:
        part = snapshot_set(sc, snap)
        folder = out / snap.pump / part
        folder.mkdir(parents=True, exist_ok=True)
        stamp = datetime.fromtimestamp(snap.t0_s, timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        path = write_wav(folder / f"{snap.pump}_{stamp}.wav", synthesize(sc, snap), FS_HZ, snapshot_sidecar(sc, snap))
        files[snap.pump][part].append(str(path.relative_to(out)))
    truth = ground_truth(sc)
    truth["files"] = files
    gt = out / "ground_truth.json"
    tmp = gt.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(truth, indent=1) + "\n")
    os.replace(tmp, gt)
    return gt


def ground_truth(sc: Scenario) -> dict:
    """What was seeded where: faults with their t0_s ranges, stops, pump data, scales."""
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
            }
            for name, p in sc.pumps.items()
        },
        "faults": [
            {"pump": f.pump, "kind": f.kind, "start_t0_s": f.start_t0_s, "end_t0_s": f.end_t0_s,
             "description": f.description}
            for f in sc.faults
        ],
    }
