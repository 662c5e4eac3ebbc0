"""Evaluation histories: invented pumps on variable-speed drives, run for days, with faults that grow.

INVENTED DATA. "Fenmoor raw-water intake" and its pumps RW-1 and RW-2 are fictional; the signals
are made from the physics in host_tools.data.pump_physics, so that a detector can be judged the
way a user would judge it, on histories whose truth is known exactly.

Entry points
- `MACHINES`: the pumps, each with its operating modes on the drive. RW-1: 4-pole motor, 6 vanes,
  6205 bearing; RW-2: 2-pole motor, 5 vanes, 6306 bearing (the "full" scale). Two more for the
  "other" scale, machines unlike those the detector was tuned on: RW-5, a slow 6-pole pump (its
  shaft 2.1-2.6 bins of a 512-sample window at 3200 Hz), 7 vanes, 6306 bearing, a housing mode at
  900 Hz; RW-6, a 2-pole pump on a fixed-speed motor (one duty, only the slip moves), 4 vanes.
- `plan_history(name, machine, seed, days, ...)` -> `History`: a cheap plan (speed profile with
  daily stops, run-ups, run-downs, mode changes and trims, slow load drift; machine faults with
  onset and growth; sensor-fault spans; the recording schedule). No signals yet.
- `synthesize(history, t0_s, n, faults=True)` -> int16 counts (n x 3): one stretch of the
  accelerometer at any time, from its own generator seeded by (seed, machine, t0_s), so any
  recording can be made alone and comes out the same; the lines' phases are the unit's own
  (`unit_seed`), the same in every recording of one pump.
- `write_history(out_dir, history)` -> path of OUT/<history name>/ground_truth.json; writes
  every recording of the schedule as WAV + sidecar (host_tools.data.recording.write_wav) into
  OUT/<history name>/, file names in time order. Periodic snapshots (default 10 s every 10 min)
  stand alone; continuous stretches (around every stop and restart, some mode changes, and one
  long steady stretch) are written as gap-free files of at most `file_s` seconds, which the replay
  joins sample by sample. `axes=("x",)` writes the radial axis only (a one-axis board).
- `ground_truth(history)` -> dict (what ground_truth.json holds, see there): healthy span, stops
  with run-down and run-up times, speed changes, each machine fault's onset and the time it
  becomes clearly visible (computed from the synthesised signal with numpy: its own quantity
  6 dB above the same moment without the fault, or ISO velocity 25 % above), sensor-fault spans
  and the exact corrupted intervals.
- `evaluation_suite(seed, scale)` -> list of History: per machine a healthy training history, a
  healthy field history, one history per machine fault and per sensor fault (each its own, so
  one fault's latched alarm never hides the next). `write_suite(out_dir, seed, scale)` writes them
  all and OUT/suite.json (history name -> ground-truth path, role, machine).
- `stationary_chunks(seed, duration_s, ...)` and `write_stationary(out_dir, seed, duration_s)`:
  the stationary healthy recording of issue 15 (mono, 3200 Hz, slowly wandering levels), made
  chunk by chunk in bounded memory, any length.

Times are Unix seconds (t0_s of the sidecars) from an invented start date. Amplitudes are peak
m/s^2 at the machine's rated speed, forces growing with the square of speed below the first
critical speed (common practice).
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np

from host_tools.data import pump_physics as ph
from host_tools.data.bearing import BEARING_6205, BearingGeometry, defect_orders
from host_tools.data.recording import gap_free_groups, write_wav

PLANT = "Fenmoor raw-water intake"
START_T0_S = datetime(2026, 9, 7, tzinfo=timezone.utc).timestamp()  # invented start date
AXES = ("x", "y", "z")  # x radial horizontal, y axial, z radial vertical (reads +1 g)
DAY_S = 86400.0
SUPPLY_HZ = 50.0
BEARING_SLIP = 0.012       # rolling elements lag the kinematic rate by 1-2 % (Randall and Antoni 2011)
IMPACT_JITTER = 0.02       # random spread of impact times, fraction of a period (same source, order of magnitude)
VISIBLE_LINE_DB = 6.0      # "clearly visible": the fault's own quantity up 6 dB ...
VISIBLE_ISO_RATIO = 1.25   # ... or ISO velocity up 25 % (issue 9's definition)
VISIBLE_PROBE_S = 10.0     # length of the signal the visibility is measured on
MACHINE_FAULTS = ("imbalance", "misalignment", "bearing_outer_race", "cavitation", "looseness")
SENSOR_FAULTS = ("dropout", "loose_mount", "saturation")

# A 6306-size deep-groove ball bearing: 8 balls of 12.7 mm on a 51 mm pitch circle (catalogue
# values; from memory).
BEARING_6306 = BearingGeometry(n_elements=8, ball_diameter_mm=12.7, pitch_diameter_mm=51.0)


@dataclass(frozen=True)
class Machine:
    """One invented pump with its motor, drive modes, sensor and vibration sources.

    poles: motor poles (synchronous speed 120 f / poles r/min at drive frequency f);
    rated_slip: slip at rated torque; modes_hz: drive output frequencies of its operating modes;
    amplitudes: peak m/s^2 at rated speed (flow noise: r.m.s.); resonance: a housing mode rung by
    bearing impacts."""

    name: str
    poles: int
    rated_slip: float
    modes_hz: tuple[float, ...]
    vane_count: int
    bearing: BearingGeometry
    resonance_hz: float
    resonance_q: float
    imbalance_m_s2: float
    misalignment_m_s2: float
    vane_pass_m_s2: float
    flow_noise_m_s2: float
    offsets_m_s2: tuple[float, float, float]
    sensor: ph.Sensor = ph.ADXL345

    @property
    def rated_shaft_hz(self) -> float:
        """Shaft frequency at 50 Hz supply and rated load."""
        return 2.0 * SUPPLY_HZ / self.poles * (1.0 - self.rated_slip)


MACHINES = {
    "RW-1": Machine("RW-1", 4, 0.020, (50.0, 42.0, 35.0), 6, BEARING_6205, 1150.0, 14.0,
                    0.22, 0.09, 0.30, 0.07, (0.10, -0.06, 0.18)),
    "RW-2": Machine("RW-2", 2, 0.015, (50.0, 45.0), 5, BEARING_6306, 1380.0, 17.0,
                    0.30, 0.12, 0.38, 0.10, (-0.07, 0.12, -0.11)),
    "RW-5": Machine("RW-5", 6, 0.025, (50.0, 40.0), 7, BEARING_6306, 900.0, 12.0,
                    0.18, 0.08, 0.25, 0.06, (0.05, 0.08, -0.09)),
    "RW-6": Machine("RW-6", 2, 0.012, (50.0,), 4, BEARING_6205, 1450.0, 20.0,
                    0.35, 0.10, 0.45, 0.12, (0.02, -0.05, 0.07)),
}

# Per-axis gains (x, y, z) of each source at the sensor: 1x radial (rotating force), 2x strongest
# axially (misalignment; common practice), vane pass and flow spread, the housing mode mostly z.
_GAIN_1X = np.array([1.0, 0.25, 0.8])
_GAIN_2X = np.array([0.4, 1.0, 0.3])
_GAIN_VANE = np.array([0.7, 0.5, 0.6])
_GAIN_RES = np.array([0.6, 0.3, 1.0])
_GAIN_LOOSE = np.array([1.0, 0.2, 0.9])
_BEARING_FULL_M_S2 = 18.0   # ring-down peak of one impact at full severity and rated speed
_CAV_FULL_M_S2 = 1.2        # r.m.s. of cavitation noise at full severity (bursts 2.5x the floor)
_LEVEL_TAU_S = (20.0, 45.0, 30.0, 15.0)   # slow wander of 1x, 2x, vane pass, flow noise (AR(1))
_LEVEL_SPREAD = 0.05
_BACKGROUND_M_S2 = 0.01     # neighbouring plant, felt when this pump stands still
_GROWTH_SHAPE = 3.0         # exponential growth: slow start, fast end


# --- plan ----------------------------------------------------------------------------------------

@dataclass(frozen=True)
class MachineFault:
    """A machine fault: kind (MACHINE_FAULTS), onset (Unix s) and the time it takes to reach full
    severity; severity(t) 0 before onset, then grows exponentially to 1."""

    kind: str
    onset_t_s: float
    growth_s: float

    def severity(self, t: np.ndarray | float) -> np.ndarray:
        x = np.clip((np.asarray(t, dtype=np.float64) - self.onset_t_s) / self.growth_s, 0.0, 1.0)
        return np.expm1(_GROWTH_SHAPE * x) / math.expm1(_GROWTH_SHAPE)


@dataclass(frozen=True)
class SensorFault:
    """A sensor fault: kind (SENSOR_FAULTS) over [start_t_s, end_t_s); each recording inside is
    hit with probability `duty` (the fault is intermittent)."""

    kind: str
    start_t_s: float
    end_t_s: float
    duty: float = 0.6


@dataclass(frozen=True)
class Recording:
    """One file to write: start (Unix s), length (s), what it is ("periodic" snapshot or part of a
    "continuous" stretch) and why."""

    t0_s: float
    duration_s: float
    kind: str
    why: str


@dataclass
class History:
    """A planned history of one machine: speed profile (drive frequency breakpoints, linear in
    between), drift, faults and the recordings to write. Cheap to build; signals are made on
    demand by `synthesize`."""

    name: str
    role: str                       # "training", "healthy", "machine_fault", "sensor_fault", ...
    machine: Machine
    seed: int
    start_t_s: float
    end_t_s: float
    bt: np.ndarray                  # breakpoint times, Unix s
    bf: np.ndarray                  # drive frequency at the breakpoints, Hz (0 = stopped)
    stops: list[dict]
    changes: list[dict]
    faults: tuple[MachineFault, ...] = ()
    sensor_faults: tuple[SensorFault, ...] = ()
    recordings: tuple[Recording, ...] = ()
    drift_phase: tuple[float, float] = (0.0, 0.0)
    machine_index: int = 0
    unit_seed: int = 0              # the pump unit's own make-up (its lines' relative phases)
    file_s: float = 60.0
    _visible: dict = field(default_factory=dict, repr=False)

    def drive_hz(self, t: np.ndarray) -> np.ndarray:
        return np.interp(t, self.bt, self.bf)

    def load_drift(self, t: np.ndarray) -> np.ndarray:
        """Slow drift of the duty point (suction level over the day, a valve moved on some days):
        multiplies the load torque, so the slip and the flow-noise level follow it."""
        d = (np.asarray(t) - START_T0_S) / DAY_S
        return 1.0 + 0.06 * np.sin(2 * np.pi * d + self.drift_phase[0]) + 0.04 * np.sin(2 * np.pi * d / 3.7 + self.drift_phase[1])

    def shaft_hz(self, t: np.ndarray) -> np.ndarray:
        """Shaft frequency (Hz): drive frequency over pole pairs, less the slip at this load."""
        m = self.machine
        f = self.drive_hz(t)
        sync = f * 2.0 / m.poles
        load = ph.pump_load(f / SUPPLY_HZ, self.load_drift(t))
        return ph.shaft_speed_hz(sync * 60.0, load, m.rated_slip)

    def severity(self, kind: str, t: np.ndarray | float) -> np.ndarray:
        out = np.zeros(np.shape(t))
        for f in self.faults:
            if f.kind == kind:
                out = np.maximum(out, f.severity(t))
        return out

    def running_steady(self, t: float, margin_s: float = 30.0) -> bool:
        """True when the drive holds one frequency above 0 from t - margin_s to t + VISIBLE_PROBE_S."""
        a, b = t - margin_s, t + VISIBLE_PROBE_S
        f = self.drive_hz(np.r_[a, b, self.bt[(self.bt > a) & (self.bt < b)]])
        return bool(f[0] > 0 and np.all(f == f[0]))


def plan_history(name: str, machine: Machine | str, seed: int, days: float, start_t_s: float = START_T0_S,
                 role: str = "healthy", faults: Sequence[MachineFault] = (), sensor_faults: Sequence[SensorFault] = (),
                 interval_s: float = 600.0, snapshot_s: float = 10.0, long_stretch_s: float = 1800.0,
                 mode_change_stretches_per_day: float = 2.0, file_s: float = 60.0,
                 unit_seed: int | None = None) -> History:
    """Plan a history of `days` days of `machine` from start_t_s (see the module docstring).

    The drive follows the daily demand in the machine's modes (changes on the hour, 15 % of hours
    off the usual pattern), trims its set point by up to +-4 % within a mode in half the hours,
    and stops once on most days for 15-120 min. Ramps: run-up 4-12 s, run-down 6-20 s, mode
    changes at 1-2 Hz/s of drive frequency (VSD ramp settings; common practice). unit_seed: the
    pump unit (default seed), whose lines' phases every history of it shares (evaluation_suite
    gives a suite's histories of one machine the suite's seed)."""
    m = MACHINES[machine] if isinstance(machine, str) else machine
    idx = list(MACHINES).index(m.name) if m.name in MACHINES else 9
    rng = np.random.default_rng([seed, idx, 7])
    end = start_t_s + days * DAY_S
    pieces = _demand_pieces(rng, m, start_t_s, end)
    pieces, stop_windows = _add_stops(rng, pieces, start_t_s, end)
    bt, bf, stops, changes = _ramps(rng, pieces, end)
    h = History(name, role, m, seed, start_t_s, end, bt, bf, stops, changes, tuple(faults), tuple(sensor_faults),
                drift_phase=tuple(rng.uniform(0, 2 * np.pi, 2)), machine_index=idx, file_s=file_s,
                unit_seed=seed if unit_seed is None else unit_seed)
    h.recordings = _schedule(rng, h, interval_s, snapshot_s, long_stretch_s, mode_change_stretches_per_day)
    return h


def _demand_pieces(rng: np.random.Generator, m: Machine, t0: float, t1: float) -> list[tuple[float, float, str]]:
    """Piecewise-constant drive set point: [(t from, Hz, 'mode'|'trim')], on the hour and within."""
    top, low = 0, len(m.modes_hz) - 1
    mid = min(1, low)
    by_hour = [low] * 6 + [mid] * 4 + [top] * 8 + [mid] * 4 + [low] * 2
    out = []
    hours = int(math.ceil((t1 - t0) / 3600.0))
    hour0 = int(((t0 % DAY_S) // 3600))
    for h in range(hours):
        mode = by_hour[(hour0 + h) % 24]
        if rng.random() < 0.15:
            mode = int(np.clip(mode + rng.choice([-1, 1]), 0, low))
        base = m.modes_hz[mode]
        t = t0 + h * 3600.0
        out.append((t, base, "mode"))
        if rng.random() < 0.5:
            out.append((t + rng.uniform(300.0, 3300.0), round(base * (1.0 + rng.uniform(-0.04, 0.04)), 2), "trim"))
    return out


def _add_stops(rng: np.random.Generator, pieces: list, t0: float, t1: float) -> tuple[list, list]:
    """Insert the daily stops: on 85 % of days one stop of 15-120 min at a random time."""
    stops = []
    for d in range(int(math.ceil((t1 - t0) / DAY_S))):
        if rng.random() < 0.85:
            a = t0 + d * DAY_S + rng.uniform(0.5, 23.0) * 3600.0
            b = a + rng.uniform(15.0, 120.0) * 60.0
            if b < t1 - 1800.0:
                stops.append((a, b))
    out = []
    for a, b in stops:
        resume = [p for p in pieces if p[0] <= b][-1]
        pieces = [p for p in pieces if not a <= p[0] <= b] + [(a, 0.0, "stop"), (b, resume[1], "start")]
        pieces.sort(key=lambda p: p[0])
    for p in pieces:
        if out and p[1] == out[-1][1]:
            continue
        out.append(p)
    return out, stops


def _ramps(rng: np.random.Generator, pieces: list, t1: float) -> tuple[np.ndarray, np.ndarray, list, list]:
    """Breakpoints of the drive frequency with ramps between set points; the stop and change lists."""
    bt, bf = [pieces[0][0]], [pieces[0][1]]
    stops, changes = [], []
    down = None
    for (t, f, kind) in pieces[1:]:
        old = bf[-1]
        t = max(t, bt[-1] + 1.0)                           # a set point waits for the last ramp
        if f == 0.0:
            dur = rng.uniform(6.0, 20.0)
        elif old == 0.0:
            dur = rng.uniform(4.0, 12.0)
        else:
            dur = abs(f - old) / rng.uniform(1.0, 2.0)
        bt += [t, t + dur]
        bf += [old, f]
        if f == 0.0:
            down = (t, t + dur)
        elif old == 0.0:
            stops.append({"run_down_t_s": down[0] if down else None, "stopped_t_s": down[1] if down else None,
                          "run_up_t_s": t, "steady_t_s": t + dur})
        else:
            kind = "mode" if abs(f - old) > 0.05 * max(f, old) else "trim"
            changes.append({"t_s": t, "end_t_s": t + dur, "from_hz": old, "to_hz": f, "kind": kind})
    bt.append(t1)
    bf.append(bf[-1])
    return np.array(bt), np.array(bf), stops, changes


def _schedule(rng: np.random.Generator, h: History, interval_s: float, snapshot_s: float, long_s: float,
              changes_per_day: float) -> tuple[Recording, ...]:
    """Continuous stretches (each stop and restart, a few mode changes, one long steady stretch)
    and periodic snapshots that do not overlap them."""
    spans = []
    for s in h.stops:
        if s["run_down_t_s"] is not None:
            spans.append((s["run_down_t_s"] - 60.0, s["stopped_t_s"] + 30.0, "run-down and stop"))
        spans.append((s["run_up_t_s"] - 30.0, s["steady_t_s"] + 150.0, "restart and run-up"))
    modes = [c for c in h.changes if c["kind"] == "mode"]
    want = int(round(changes_per_day * (h.end_t_s - h.start_t_s) / DAY_S))
    for i in sorted(rng.choice(len(modes), min(want, len(modes)), replace=False).tolist()) if modes else []:
        spans.append((modes[i]["t_s"] - 60.0, modes[i]["end_t_s"] + 120.0, "mode change"))
    if long_s > 0:
        a = h.start_t_s + rng.uniform(0.2, 0.8) * (h.end_t_s - h.start_t_s - long_s)
        spans.append((a, a + long_s, "long continuous stretch"))
    spans = _merge([(max(a, h.start_t_s), min(b, h.end_t_s), w) for a, b, w in spans if b > h.start_t_s and a < h.end_t_s])
    recs = []
    for a, b, why in spans:
        fs = h.machine.sensor.fs_hz
        total = int(round((b - a) * fs))                   # whole samples, so the files join exactly
        per = int(round(h.file_s * fs))
        for k in range(0, total, per):
            recs.append(Recording(a + k / fs, min(per, total - k) / fs, "continuous", why))
    t = h.start_t_s + interval_s / 2
    while t + snapshot_s <= h.end_t_s:
        if not any(a - snapshot_s <= t <= b for a, b, _ in spans):
            recs.append(Recording(t, snapshot_s, "periodic", "periodic snapshot"))
        t += interval_s
    return tuple(sorted(recs, key=lambda r: r.t0_s))


def _merge(spans: list) -> list:
    out: list = []
    for a, b, w in sorted(spans):
        if out and a <= out[-1][1]:
            pa, pb, pw = out[-1]
            out[-1] = (pa, max(pb, b), pw if w in pw else f"{pw}; {w}")
        else:
            out.append((a, b, w))
    return out


# --- signals -------------------------------------------------------------------------------------

class _Synth:
    """The state of one continuous stretch of signal (shaft angle, filters, level wanders, impact
    count), advancing chunk by chunk."""

    def __init__(self, h: History, t0: float, faults: bool):
        m = h.machine
        self.h, self.m, self.faults = h, m, faults
        self.fs = m.sensor.fs_hz
        self.rng = np.random.default_rng([h.seed, 100 + h.machine_index, int(round(t0 * 1000)) % (2 ** 62)])
        # One generator per source: the faulty and the healthy copy of a moment share every
        # healthy source's noise, so their difference is the fault alone.
        seeds = self.rng.integers(0, 2 ** 62, 12)
        r = [np.random.default_rng(int(s)) for s in seeds]
        self.theta = float(r[0].uniform(0, 2 * np.pi))
        # The lines' phases against the shaft (1x on y, 2x, the vane pass and its 1x modulation,
        # looseness harmonics) are set by the unit's rotor and transfer paths: stable from one run
        # to the next, as field balancing relies on for 1x (common practice). So every recording
        # of one unit shares them (held at every speed, a simplification); drawn per recording
        # they would move the waveform's shape, and with it kurtosis and crest factor, from one
        # snapshot to the next, and unbroken running would keep one draw for days.
        self.ph = np.random.default_rng([h.unit_seed, 100 + h.machine_index, 1]).uniform(0, 2 * np.pi, 10)
        self.levels = [ph.Ar1Level(tau, _LEVEL_SPREAD, self.fs, r[1 + i]) for i, tau in enumerate(_LEVEL_TAU_S)]
        self.flow = ph.BandNoise(10.0, 1000.0, self.fs, 3, r[5])
        # Made only for a history with cavitation: the healthy and faulty copies still share it.
        self.cav_noise = (ph.BandNoise(400.0, min(1500.0, 0.45 * self.fs), self.fs, 3, r[7])
                          if any(f.kind == "cavitation" for f in h.faults) else None)
        self.res = ph.Resonator(m.resonance_hz, m.resonance_q, self.fs)
        self.impacts = ph.ImpactTrain(defect_orders(m.bearing).bpfo, BEARING_SLIP, IMPACT_JITTER, r[8])
        self.r_cav, self.r_sensor, self.r_sf = r[9], r[10], r[11]
        self.t = t0

    def next(self, n: int) -> np.ndarray:
        """The next n frames: acceleration in m/s^2 (n x 3), before the sensor."""
        h, m = self.h, self.m
        t = self.t + np.arange(n) / self.fs
        self.t += n / self.fs
        fr = h.shaft_hz(t)
        theta = ph.shaft_angle(fr, self.fs, self.theta)
        self.theta = float(theta[-1] % (4 * np.pi))       # wrap at two turns: 0.5x stays continuous
        ratio = fr / m.rated_shaft_hz
        force = ratio ** 2                                 # force ~ speed^2 (common practice)
        lv = [lvl.next(n) for lvl in self.levels]
        sev = {k: (h.severity(k, t) if self.faults else np.zeros(n)) for k in MACHINE_FAULTS}
        a = np.zeros((n, 3))
        one_x = m.imbalance_m_s2 * force * lv[0] * (1.0 + 3.0 * sev["imbalance"] + 0.5 * sev["misalignment"])
        a[:, 0] += _GAIN_1X[0] * one_x * np.cos(theta)
        a[:, 1] += _GAIN_1X[1] * one_x * np.cos(theta + self.ph[0])
        a[:, 2] += _GAIN_1X[2] * one_x * np.sin(theta)     # a rotating force: x and z in quadrature
        two_x = m.misalignment_m_s2 * force * lv[1] * (1.0 + 5.0 * sev["misalignment"])
        a += np.outer(ph.order_line(theta, 2.0, two_x, self.ph[1]), _GAIN_2X)
        a += np.outer(ph.vane_pass(theta, m.vane_count, m.vane_pass_m_s2 * force * lv[2], 0.6,
                                   (self.ph[2], self.ph[3])), _GAIN_VANE)
        # Flow noise of this pump (~ speed^2, with the duty point) and the neighbouring plant's,
        # which is there when this pump stands still; one noise source carries both (same band).
        a += self.flow.next(n) * (m.flow_noise_m_s2 * force * lv[3] * h.load_drift(t) + _BACKGROUND_M_S2)[:, None]
        s_loose = float(sev["looseness"].mean())
        if s_loose > 0.0:
            a += np.outer(ph.looseness(theta, 2.0 * m.imbalance_m_s2 * force, s_loose, self.ph[4:8]), _GAIN_LOOSE)
        amp = _BEARING_FULL_M_S2 * sev["bearing_outer_race"] * ratio
        imp = self.impacts.next(theta, amp)                # always advanced: keeps the impact count
        a += np.outer(self.res.next(imp), _GAIN_RES)
        if self.cav_noise is not None:
            cav_noise = self.cav_noise.next(n)             # always drawn: same noise with or without
            gate = ph.bursts(self.r_cav, n, self.fs, 30.0, 0.008)
            # Cavitation needs a small suction margin: strong at high flow, none below 80 % speed.
            cav = sev["cavitation"] * np.clip((ratio - 0.8) / 0.2, 0.0, 1.0) ** 1.5 * _CAV_FULL_M_S2
            a += cav_noise * (cav * (0.4 + 1.5 * gate))[:, None]
        d = (t - START_T0_S) / DAY_S                       # zero-g offsets follow temperature daily
        a += np.asarray(m.offsets_m_s2) + (0.03 * np.sin(2 * np.pi * d + self.ph[8]))[:, None]
        a[:, 2] += ph.G_M_S2
        return a


def synthesize(h: History, t0_s: float, n: int, faults: bool = True, sensor_faults: bool = True) -> np.ndarray:
    """Counts (int16, n x 3, the machine sensor's scale) of n frames from t0_s, made alone from a
    generator seeded by (seed, machine, t0_s). faults=False gives the same moment without the
    machine faults (the noise is the same); sensor_faults=False leaves out sensor faults."""
    return _snapshot(h, t0_s, n, faults, sensor_faults)[0]


def _snapshot(h: History, t0_s: float, n: int, faults: bool, sensor_faults: bool) -> tuple[np.ndarray, list]:
    s = _Synth(h, t0_s, faults)
    return _sense(h, s, t0_s, s.next(n), sensor_faults)


def _stretch_counts(h: History, recs: Sequence[Recording]) -> Iterator[tuple[Recording, np.ndarray, list]]:
    """Counts of gap-free recordings made from one running generator (no seam), with the sample
    runs each sensor fault corrupted."""
    s = _Synth(h, recs[0].t0_s, True)
    for r in recs:
        n = int(round(r.duration_s * s.fs))
        counts, hits = _sense(h, s, r.t0_s, s.next(n))
        yield r, counts, hits


def gapless_counts(h: History, t0_s: float, chunk_n: int) -> Iterator[tuple[float, np.ndarray]]:
    """The history's counts (int16, chunk_n x 3) without a gap from t0_s on, chunk after chunk,
    each with its start time (Unix s): one running generator, as a gateway's sensor sees the
    pump around the clock (it stops and restarts as the history plans; each sensor fault active
    at a chunk's start acts on that chunk, with the fault's duty). Endless: the caller stops."""
    s = _Synth(h, t0_s, True)
    t = t0_s
    while True:
        counts, _ = _sense(h, s, t, s.next(chunk_n))
        yield t, counts
        t += chunk_n / s.fs


def _sense(h: History, s: _Synth, t0: float, a: np.ndarray, sensor_faults: bool = True) -> tuple[np.ndarray, list]:
    """The sensor's counts of acceleration a (m/s^2) from t0, with the sensor faults active at t0:
    a loose mount acts on the motion the sensor receives, before its own noise and ADC (the
    electronics still add their noise); dropouts and an offset step act on the codes. Returns
    (counts, [(t from, t to, what)])."""
    m, fs, rng = h.machine, s.fs, s.r_sf
    n = len(a)
    active = [f for f in (h.sensor_faults if sensor_faults else ())
              if f.start_t_s <= t0 < f.end_t_s and rng.random() < f.duty]
    hits = []
    for f in active:
        if f.kind == "loose_mount":
            i = int(rng.integers(0, max(1, n // 2)))
            j = min(n, i + int(rng.uniform(0.3, 1.0) * n))
            a = a.copy()
            # how loose: the mount's resonance and its sharpness, and how often it knocks, differ
            # from one fixing to the next
            a[i:j] = ph.loose_mount(a[i:j], fs, rng, spikes_per_s=float(rng.uniform(1.0, 6.0)),
                                    mount_hz=float(rng.uniform(150.0, 500.0)), q=float(rng.uniform(2.0, 8.0)))
            hits.append((t0 + i / fs, t0 + j / fs, "loose mount"))
    counts = m.sensor.quantise(a, s.r_sensor)
    for f in active:
        if f.kind == "dropout":
            for i, j, how in ph.dropouts(counts, rng, 1 + int(rng.poisson(n / fs / 4.0))):
                hits.append((t0 + i / fs, t0 + j / fs, f"dropout ({how})"))
        elif f.kind == "saturation":
            # The offset puts the axis 0.2 g below the rail, so the vibration's peaks clip there.
            i = int(rng.integers(0, max(1, n // 2)))
            ax = int(rng.integers(0, counts.shape[1]))
            step = m.sensor.adc_max - int(0.2 * m.sensor.counts_per_g) - int(counts[:, ax].mean())
            ph.offset_step(counts, i, step, m.sensor.adc_min, m.sensor.adc_max, axis=ax)
            hits.append((t0 + i / fs, t0 + n / fs, "offset step to the rail"))
    return counts, hits


# --- visibility of machine faults -------------------------------------------------------------

def _own_quantity(kind: str, h: History, counts: np.ndarray, t: float) -> float:
    """The quantity a fault changes first, as an analyst would read it (peak m/s^2 or r.m.s.)."""
    m = h.machine
    a = counts.astype(np.float64) * m.sensor.m_s2_per_count
    fs = m.sensor.fs_hz
    fr = float(h.shaft_hz(np.array([t + VISIBLE_PROBE_S / 2]))[0])
    hw = 4.0 * fs / len(a) + 0.01 * fr                     # Hann main lobe plus the speed's wander
    if kind == "imbalance":
        return ph.line_amplitude(a[:, 0], fs, fr, hw)
    if kind == "misalignment":
        return ph.line_amplitude(a[:, 1], fs, 2 * fr, hw)
    if kind == "looseness":
        return math.sqrt(sum(ph.line_amplitude(a[:, 0], fs, k * fr, hw) ** 2 for k in (0.5, 1.5, 2.5)))
    if kind == "cavitation":
        return ph.band_rms(a[:, 0], fs, 1000.0, min(1500.0, 0.45 * fs))
    if kind == "bearing_outer_race":
        bpfo = defect_orders(m.bearing).bpfo * (1.0 - BEARING_SLIP) * fr
        band = (m.resonance_hz - 300.0, min(m.resonance_hz + 300.0, 0.48 * fs))
        return ph.envelope_line(a[:, 2], fs, band, bpfo, hw + 0.01 * bpfo)
    raise ValueError(kind)


def _iso(h: History, counts: np.ndarray) -> float:
    a = counts.astype(np.float64) * h.machine.sensor.m_s2_per_count
    return max(ph.iso_velocity_rms(a[:, k], h.machine.sensor.fs_hz) for k in range(a.shape[1]))


def _visible_at(h: History, f: MachineFault, t: float) -> tuple[bool, str]:
    n = int(VISIBLE_PROBE_S * h.machine.sensor.fs_hz)
    bad = synthesize(h, t, n, faults=True, sensor_faults=False)
    good = synthesize(h, t, n, faults=False, sensor_faults=False)
    q1, q0 = _own_quantity(f.kind, h, bad, t), _own_quantity(f.kind, h, good, t)
    if q1 >= q0 * 10 ** (VISIBLE_LINE_DB / 20.0):
        return True, f"own quantity +{20 * math.log10(q1 / q0):.1f} dB"
    v1, v0 = _iso(h, bad), _iso(h, good)
    if v1 >= VISIBLE_ISO_RATIO * v0:
        return True, f"ISO velocity x{v1 / v0:.2f}"
    return False, ""


def clearly_visible(h: History, f: MachineFault, step_s: float = 900.0) -> tuple[float | None, str]:
    """The first time (Unix s, within about 10 s) at which fault f is clearly visible in the
    signal while the pump runs steadily: its own quantity 6 dB above the same moment without the
    fault (same noise), or ISO velocity 25 % above. Scans every step_s, then bisects. None when
    it never becomes visible in the history."""
    prev = f.onset_t_s
    t = f.onset_t_s
    while t < h.end_t_s - VISIBLE_PROBE_S:
        if h.running_steady(t):
            ok, why = _visible_at(h, f, t)
            if ok:
                lo, hi, how = prev, t, why
                while hi - lo > 10.0:
                    mid = 0.5 * (lo + hi)
                    if not h.running_steady(mid):
                        break
                    ok, why = _visible_at(h, f, mid)
                    if ok:
                        hi, how = mid, why
                    else:
                        lo = mid
                return hi, how
            prev = t
        t += step_s
    return None, ""


# --- files -----------------------------------------------------------------------------------------

def sidecar(h: History, r: Recording, axes: Sequence[str] = AXES) -> dict:
    """The sidecar of a recording as a gateway would write it (rpm from the drive when steady, 0
    when stopped, null when changing)."""
    m = h.machine
    f = h.drive_hz(np.array([r.t0_s, r.t0_s + r.duration_s]))
    inside = np.any((h.bt > r.t0_s) & (h.bt < r.t0_s + r.duration_s) & (np.r_[np.diff(h.bf), 0] != 0))
    steady = f[0] == f[1] and not inside
    rpm = None
    if steady:
        rpm = 0.0 if f[0] == 0 else round(float(h.shaft_hz(np.array([r.t0_s]))[0]) * 60.0, 1)
    return {
        "m_s2_per_unit": m.sensor.m_s2_per_count, "m_s2_per_count": m.sensor.m_s2_per_count,
        "sample_rate_hz": m.sensor.fs_hz, "t0_s": r.t0_s, "rpm": rpm, "vane_count": m.vane_count,
        "axes": list(axes), "plant": PLANT, "machine": m.name, "trigger": r.kind,
        "sensor_noise_ug_rthz": [m.sensor.noise_ug_rthz[AXES.index(a)] for a in axes],
        "bearing": {"n_elements": m.bearing.n_elements, "ball_diameter_mm": m.bearing.ball_diameter_mm,
                    "pitch_diameter_mm": m.bearing.pitch_diameter_mm, "contact_angle_deg": m.bearing.contact_angle_deg},
        "note": "invented data (edgevib evaluation scenario)",
    }


def write_history(out_dir: str | os.PathLike, h: History, axes: Sequence[str] = AXES) -> Path:
    """Write every recording of h as WAV + sidecar into OUT/<h.name>/ and the ground truth as
    OUT/<h.name>/ground_truth.json (returned). Continuous stretches come from one running
    generator per stretch, file after file, so memory stays one file's worth."""
    folder = Path(out_dir) / h.name
    folder.mkdir(parents=True, exist_ok=True)
    cols = [AXES.index(a) for a in axes]
    files, hits = [], []

    def put(r: Recording, counts: np.ndarray) -> None:
        stamp = datetime.fromtimestamp(r.t0_s, timezone.utc).strftime("%Y%m%dT%H%M%S") + f"{r.t0_s % 1:.3f}"[1:] + "Z"
        p = write_wav(folder / f"{h.machine.name}_{stamp}.wav", np.ascontiguousarray(counts[:, cols]),
                      h.machine.sensor.fs_hz, sidecar(h, r, axes))
        files.append(p.name)

    for group in gap_free_groups(h.recordings, lambda r: r.kind == "continuous", h.machine.sensor.fs_hz):
        if group[0].kind == "continuous":
            for r, counts, hit in _stretch_counts(h, group):
                put(r, counts)
                hits += hit
        else:
            for r in group:
                counts, hit = _snapshot(h, r.t0_s, int(round(r.duration_s * h.machine.sensor.fs_hz)), True, True)
                hits += hit
                put(r, counts)
    truth = ground_truth(h, axes)
    truth["files"] = files
    truth["sensor_fault_hits"] = [{"t_s": a, "end_t_s": b, "what": w} for a, b, w in sorted(hits)]
    gt = folder / "ground_truth.json"
    tmp = gt.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(truth, indent=1) + "\n")
    os.replace(tmp, gt)
    return gt


def ground_truth(h: History, axes: Sequence[str] = AXES) -> dict:
    """What a history holds, for scoring (times Unix s):
    machine, role, start/end, healthy_until_t_s (the first fault onset, or the end: before it the
    machine and sensor are healthy), stops, speed changes, machine_faults [{kind, onset_t_s,
    visible_t_s, visible_by}], sensor_faults [{kind, start_t_s, end_t_s}], scales and geometry."""
    m = h.machine
    mf = []
    for f in h.faults:
        key = (f.kind, f.onset_t_s)
        if key not in h._visible:
            h._visible[key] = clearly_visible(h, f)
        vis, how = h._visible[key]
        mf.append({"kind": f.kind, "onset_t_s": f.onset_t_s, "growth_s": f.growth_s,
                   "visible_t_s": vis, "visible_by": how})
    sf = [{"kind": f.kind, "start_t_s": f.start_t_s, "end_t_s": f.end_t_s, "duty": f.duty} for f in h.sensor_faults]
    onsets = [f["onset_t_s"] for f in mf] + [f["start_t_s"] for f in sf]
    o = defect_orders(m.bearing)
    return {
        "note": "invented data: a fictional plant, pumps and faults",
        "plant": PLANT, "history": h.name, "role": h.role, "machine": m.name, "seed": h.seed,
        "start_t_s": h.start_t_s, "end_t_s": h.end_t_s,
        "healthy_until_t_s": min(onsets) if onsets else h.end_t_s,
        "sample_rate_hz": m.sensor.fs_hz, "m_s2_per_count": m.sensor.m_s2_per_count, "axes": list(axes),
        "sensor": m.sensor.name, "vane_count": m.vane_count, "poles": m.poles, "rated_slip": m.rated_slip,
        "modes_hz": list(m.modes_hz), "resonance_hz": m.resonance_hz,
        "bearing": {"n_elements": m.bearing.n_elements, "ball_diameter_mm": m.bearing.ball_diameter_mm,
                    "pitch_diameter_mm": m.bearing.pitch_diameter_mm, "contact_angle_deg": m.bearing.contact_angle_deg,
                    "orders": {"bpfo": o.bpfo, "bpfi": o.bpfi, "bsf": o.bsf, "ftf": o.ftf}},
        "stops": h.stops, "speed_changes": h.changes,
        "machine_faults": mf, "sensor_faults": sf,
        "recordings": [{"t0_s": r.t0_s, "duration_s": r.duration_s, "kind": r.kind, "why": r.why} for r in h.recordings],
    }


# --- the evaluation suite ------------------------------------------------------------------------

SCALES = {
    # days of training, of the healthy field history and of each fault history; snapshot spacing
    "full": {"train_days": 2.5, "healthy_days": 3.0, "fault_days": 3.0, "sensor_days": 1.2, "interval_s": 1800.0,
             "long_s": 600.0, "changes_per_day": 1.0, "machines": ("RW-1", "RW-2")},
    # as full, on the two machines unlike RW-1 and RW-2 (a slow 6-pole pump, a fixed-speed one)
    "other": {"train_days": 2.5, "healthy_days": 3.0, "fault_days": 3.0, "sensor_days": 1.2, "interval_s": 1800.0,
              "long_s": 600.0, "changes_per_day": 1.0, "machines": ("RW-5", "RW-6")},
    # the demo's: one machine, shorter, hourly snapshots (a minute or so on two cores)
    "demo": {"train_days": 1.5, "healthy_days": 1.0, "fault_days": 2.2, "sensor_days": 1.3, "interval_s": 3600.0,
             "long_s": 120.0, "changes_per_day": 0.5, "machines": ("RW-1",)},
}
_GROWTH_DAYS = {"imbalance": 2.0, "misalignment": 2.0, "bearing_outer_race": 2.5, "cavitation": 1.5, "looseness": 2.0}


EVALUATION_SEED = 2027     # the seed of the histories the detector was developed on


def evaluation_suite(seed: int = EVALUATION_SEED, scale: str = "full", machines: Sequence[str] | None = None) -> list[History]:
    """The histories a detector is judged on (see the module docstring). Training histories come
    first in time; every field history starts where its machine's training ends. machines:
    default the scale's ("full": RW-1 and RW-2, "demo": RW-1, "other": RW-5 and RW-6)."""
    c = SCALES[scale]
    machines = machines or c["machines"]
    out = []
    for mi, name in enumerate(machines):
        base = dict(interval_s=c["interval_s"], long_stretch_s=c["long_s"], mode_change_stretches_per_day=c["changes_per_day"],
                    unit_seed=seed)
        t_train = START_T0_S
        t_field = t_train + c["train_days"] * DAY_S
        out.append(plan_history(f"{name}-training", name, seed, c["train_days"], t_train, role="training", **base))
        out.append(plan_history(f"{name}-healthy", name, seed + 1, c["healthy_days"], t_field, role="healthy", **base))
        lead = 0.8 * DAY_S
        for k, kind in enumerate(MACHINE_FAULTS):
            onset = t_field + lead + (k % 3) * 0.1 * DAY_S
            f = MachineFault(kind, onset, _GROWTH_DAYS[kind] * DAY_S)
            out.append(plan_history(f"{name}-{kind.replace('_', '-')}", name, seed + 10 + k, c["fault_days"], t_field,
                                    role="machine_fault", faults=(f,), **base))
        if name == machines[0]:
            # the span starts `lead` into the history: sensor_days must exceed it to hold any of it
            for k, kind in enumerate(SENSOR_FAULTS):
                a = t_field + lead
                sf = SensorFault(kind, a, a + 0.5 * DAY_S)
                out.append(plan_history(f"{name}-sensor-{kind.replace('_', '-')}", name, seed + 20 + k,
                                        c["sensor_days"], t_field, role="sensor_fault", sensor_faults=(sf,), **base))
    return out


def write_suite(out_dir: str | os.PathLike, seed: int = EVALUATION_SEED, scale: str = "full", axes: Sequence[str] = AXES,
                histories: Sequence[History] | None = None, jobs: int = 1) -> Path:
    """Write every history of evaluation_suite (or the ones given) and OUT/suite.json, returned:
    {"seed", "scale", "plant", "histories": [{"name", "role", "machine", "ground_truth", "folder"}]}
    with paths relative to OUT. jobs > 1 writes that many histories at once, in processes."""
    out = Path(out_dir)
    hs = evaluation_suite(seed, scale) if histories is None else list(histories)
    if jobs > 1:
        from concurrent.futures import ProcessPoolExecutor
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            gts = list(pool.map(write_history, [out] * len(hs), hs, [tuple(axes)] * len(hs)))
    else:
        gts = [write_history(out, h, axes) for h in hs]
    items = [{"name": h.name, "role": h.role, "machine": h.machine.name, "folder": h.name,
              "ground_truth": str(gt.relative_to(out))} for h, gt in zip(hs, gts)]
    p = out / "suite.json"
    p.write_text(json.dumps({"seed": seed, "scale": scale, "plant": PLANT, "note": "invented data",
                             "histories": items}, indent=1) + "\n")
    return p


# --- issue 15: the stationary healthy recording ---------------------------------------------------

@dataclass(frozen=True)
class StationarySpec:
    """The stationary healthy pump of issue 15: mono (radial), 3200 Hz, 1x at about 49 Hz, 2x and
    vane pass (6 vanes) plus flow noise, each level wandering as AR(1) (time constant drawn in
    tau_s, spread drawn in spread), the speed wandering by speed_spread (0.2 %)."""

    fs_hz: float = 3200.0
    shaft_hz: float = 49.0
    vane_count: int = 6
    amp_1x_m_s2: float = 0.30
    amp_2x_m_s2: float = 0.12
    amp_vane_m_s2: float = 0.25
    flow_rms_m_s2: float = 0.08
    tau_s: tuple[float, float] = (15.0, 60.0)
    spread: tuple[float, float] = (0.06, 0.10)
    speed_spread: float = 0.002
    speed_tau_s: float = 30.0
    sensor: ph.Sensor = ph.ADXL345


def stationary_chunks(seed: int, duration_s: float, chunk_s: float = 60.0, spec: StationarySpec = StationarySpec(),
                      with_levels: bool = False) -> Iterator[np.ndarray | tuple[np.ndarray, np.ndarray]]:
    """Counts (int16, n x 1) of the stationary healthy recording, chunk_s seconds at a time, to
    duration_s in all; memory stays one chunk's worth for any length (24 h included). The same
    seed gives the same samples whatever the chunk length. with_levels: also yield the four
    relative levels (n x 4: 1x, 2x, vane pass, flow) and the speed ratio as a fifth column."""
    rng = np.random.default_rng([seed, 15])
    r = [np.random.default_rng(int(s)) for s in rng.integers(0, 2 ** 62, 8)]
    fs = spec.fs_hz
    taus = r[0].uniform(*spec.tau_s, 4)
    spreads = r[0].uniform(*spec.spread, 4)
    ph0 = r[0].uniform(0, 2 * np.pi, 4)
    levels = [ph.Ar1Level(taus[i], spreads[i], fs, r[1 + i]) for i in range(4)]
    speed = ph.Ar1Level(spec.speed_tau_s, spec.speed_spread, fs, r[5])
    flow = ph.BandNoise(10.0, 1000.0, fs, 1, r[6])
    # The sample stream is fixed per second (blocks of fs samples) so the chunk length does not
    # change the random draws; a chunk is a whole number of blocks, the last one cut.
    block = int(round(fs))
    total = int(round(duration_s * fs))
    per_chunk = max(1, int(round(chunk_s))) * block
    theta = 0.0
    done = 0
    while done < total:
        parts, lv_parts = [], []
        for _ in range(per_chunk // block):
            if done >= total:
                break
            lv = np.stack([l.next(block) for l in levels], axis=1)
            sp = speed.next(block)
            th = ph.shaft_angle(spec.shaft_hz * sp, fs, theta)
            theta = float(th[-1] % (4 * np.pi))
            a = (ph.order_line(th, 1.0, spec.amp_1x_m_s2 * lv[:, 0], ph0[0])
                 + ph.order_line(th, 2.0, spec.amp_2x_m_s2 * lv[:, 1], ph0[1])
                 + ph.order_line(th, float(spec.vane_count), spec.amp_vane_m_s2 * lv[:, 2], ph0[2])
                 + flow.next(block)[:, 0] * spec.flow_rms_m_s2 * lv[:, 3])
            counts = spec.sensor.quantise(a[:, None], r[7])
            take = min(block, total - done)
            parts.append(counts[:take])
            lv_parts.append(np.column_stack([lv, sp])[:take])
            done += take
        chunk = np.concatenate(parts)
        yield (chunk, np.concatenate(lv_parts)) if with_levels else chunk


def write_stationary(out_dir: str | os.PathLike, seed: int, duration_s: float, file_s: float = 600.0,
                     start_t_s: float = START_T0_S, spec: StationarySpec = StationarySpec(),
                     machine: str = "RW-3") -> list[Path]:
    """Write the stationary healthy recording as gap-free mono WAV files of file_s seconds (with
    sidecars: rpm of the mean speed, t0_s continuing) into out_dir; returns the WAV paths."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    t = start_t_s
    for counts in stationary_chunks(seed, duration_s, file_s, spec):
        stamp = datetime.fromtimestamp(t, timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        side = {"m_s2_per_unit": spec.sensor.m_s2_per_count, "m_s2_per_count": spec.sensor.m_s2_per_count,
                "sample_rate_hz": spec.fs_hz, "t0_s": t, "rpm": spec.shaft_hz * 60.0, "vane_count": spec.vane_count,
                "axes": ["x"], "plant": PLANT, "machine": machine, "trigger": "continuous",
                "sensor_noise_ug_rthz": [spec.sensor.noise_ug_rthz[0]],
                "note": f"invented data: stationary healthy pump (seed {seed})"}
        paths.append(write_wav(out / f"{machine}_{stamp}.wav", counts, spec.fs_hz, side))
        t += len(counts) / spec.fs_hz
    return paths
