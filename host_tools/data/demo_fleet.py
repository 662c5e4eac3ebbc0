"""The demo fleet: the invented scenario grown to a dozen pumps at two invented sites.

INVENTED DEMO DATA. Brackwater pumping station (P-101 to P-106) and Hollin Fen lift station (L-201
to L-206) are fictional, as are their pumps, overhauls and faults. The signals come from
host_tools.data.demo_scenario (same physics, same sensor); P-101 and P-102 are the two-pump
demo's pumps with the same faults.

Seeded faults, a few developing over the weeks:
- P-101: loose sensor cable days 11.3-13.6, bearing outer-race defect from day 20 (as the demo);
- P-102: cavitation days 25.5-28 (as the demo);
- P-104: bearing outer-race defect from day 30, still small at the end;
- L-203: bearing outer-race defect from day 14, strong by the end;
- L-205: cavitation days 31-33.5.
L-202 had an overhaul on day 21, after its parameter set was trained (on days 0-7): the review
should say that its set is older than its last overhaul.

Recordings: 10 s snapshots (SNAPSHOT_S) every interval_s and one at each stop and start; each
sidecar names the drive-end bearing's geometry, as the manifest does.

Entry points: FLEET_PUMPS, FLEET_FAULTS, build_fleet_scenario(...), manifest(sc, pump, board), and
write_pump(root, sc, pump) writes one pump's snapshots into its gateway folder of a fleet folder
(host_tools.fleet.layout): healthy/ (the training days) and archive/ (the rest). The parameter
sets are not made here (`edgevib demo --fleet` trains them).
"""
from __future__ import annotations

import os
from dataclasses import replace
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any

from host_tools.data import demo_scenario as ds
from host_tools.data.bearing import BEARING_6205, BearingGeometry
from host_tools.data.recording import write_wav

SITE_B = "Hollin Fen lift station"
# A slightly larger deep-groove bearing for the lift station's pumps (invented geometry).
BEARING_L = BearingGeometry(n_elements=8, ball_diameter_mm=9.53, pitch_diameter_mm=46.4)

_P = ds.PumpSpec
FLEET_PUMPS = ds.PUMPS + (
    _P("P-103", 6, 1150.0, 16.0, 0.22, 0.12, 0.33, 0.08, (0.05, 0.02, -0.10), stop_days=(2.3, 12.5, 29.1)),
    _P("P-104", 5, 1050.0, 14.0, 0.28, 0.09, 0.30, 0.09, (-0.10, 0.06, 0.12), stop_days=(4.2, 17.7, 35.3)),
    _P("P-105", 7, 1200.0, 17.0, 0.26, 0.11, 0.27, 0.07, (0.08, -0.04, 0.05), stop_days=(1.2, 22.4, 31.8)),
    _P("P-106", 6, 1300.0, 15.0, 0.24, 0.13, 0.36, 0.08, (0.00, 0.09, -0.06), stop_days=(5.9, 14.1, 40.2)),
    _P("L-201", 5, 980.0, 13.0, 0.32, 0.15, 0.40, 0.10, (0.11, 0.00, 0.15), BEARING_L, (2.7, 18.6, 26.4), SITE_B),
    _P("L-202", 5, 1010.0, 13.0, 0.30, 0.12, 0.38, 0.10, (-0.07, 0.05, -0.08), BEARING_L, (3.1, 21.0, 36.2), SITE_B),
    _P("L-203", 6, 1080.0, 14.0, 0.29, 0.14, 0.35, 0.09, (0.03, -0.11, 0.10), BEARING_L, (1.9, 9.3, 24.8), SITE_B),
    _P("L-204", 5, 950.0, 12.0, 0.34, 0.10, 0.42, 0.11, (0.06, 0.07, -0.02), BEARING_L, (4.8, 16.0, 33.9), SITE_B),
    _P("L-205", 6, 1120.0, 15.0, 0.27, 0.16, 0.31, 0.09, (-0.02, -0.06, 0.07), BEARING_L, (0.8, 13.3, 38.8), SITE_B),
    _P("L-206", 5, 1000.0, 13.0, 0.31, 0.11, 0.37, 0.10, (0.09, 0.03, -0.12), BEARING_L, (6.2, 19.9, 30.5), SITE_B),
)
FLEET_FAULTS = ds.FAULT_PLAN + (
    ("P-104", "bearing_outer_race", 30.0, None, "drive-end bearing outer-race defect, early"),
    ("L-203", "bearing_outer_race", 14.0, None, "drive-end bearing outer-race defect, growing"),
    ("L-205", "cavitation", 31.0, 33.5, "low wet-well level: cavitation at high flow"),
)
# What a gateway of this fleet records: 10 s snapshots (the length the fleet archive
# assumes). The detector scores a snapshot only after the speed is steady and the start-up
# hold-off has passed, and raises only when the score persists over half of 10 s of running
# (det_persist_ms): a 4 s snapshot leaves a second or two of scored running, a 10 s one most of it.
SNAPSHOT_S = 10.0
# Overhauls (days from the scenario's start; negative = before it) per pump.
OVERHAUL_DAYS = {"P-101": (-400.0,), "P-102": (-210.0,), "P-103": (-95.0,), "P-104": (-700.0,),
                 "P-105": (-30.0,), "P-106": (-150.0,), "L-201": (-320.0,), "L-202": (-500.0, 21.0),
                 "L-203": (-610.0,), "L-204": (-60.0,), "L-205": (-240.0,), "L-206": (-180.0,)}


def build_fleet_scenario(seed: int = ds.DEFAULT_SEED, days: float = ds.DAYS, training_days: float = ds.TRAINING_DAYS,
                         interval_s: float = ds.SNAPSHOT_INTERVAL_S, pumps: int = len(FLEET_PUMPS),
                         snapshot_s: float = SNAPSHOT_S) -> ds.Scenario:
    """The fleet's scenario; `pumps` keeps only the first so many (tests use a few). Snapshots of
    snapshot_s seconds every interval_s and at each stop and start."""
    chosen = FLEET_PUMPS[:pumps]
    names = {p.name for p in chosen}
    sc = ds.build_scenario(seed, days, training_days, interval_s, pumps=chosen,
                           fault_plan=tuple(f for f in FLEET_FAULTS if f[0] in names))
    return replace(sc, snapshots=tuple(replace(s, duration_s=snapshot_s) for s in sc.snapshots
                                       if s.t0_s + snapshot_s <= sc.end_t0_s))


def gateway_id(pump: str) -> str:
    """The demo's gateway folder name for a pump: the site's short name and the pump's."""
    site = "brackwater" if pump.startswith("P-") else "hollinfen"
    return f"{site}-{pump.lower()}"


def manifest(sc: ds.Scenario, pump: str, board: str) -> dict[str, Any]:
    """gateway.json of a demo pump (params_since is set when a set is installed)."""
    p = sc.pumps[pump]
    start = datetime.fromtimestamp(sc.start_t0_s, timezone.utc)
    return {"pump": pump, "site": p.site, "board": board, "vane_count": p.vane_count, "bearing": _bearing(p.bearing),
            "overhauls": [(start + timedelta(days=d)).date().isoformat() for d in OVERHAUL_DAYS[pump]],
            "params_since": None, "note": "invented demo data"}


def write_pump(root: str | os.PathLike, sc: ds.Scenario, pump: str, folder: str | os.PathLike | None = None) -> int:
    """Write one pump's snapshots into its gateway folder (root/gateway_id(pump), or `folder`):
    training days into healthy/, the rest into archive/. Returns the number of files written. Runs
    as a task of `edgevib demo --fleet`."""
    folder = Path(folder) if folder is not None else Path(root) / gateway_id(pump)
    n = 0
    for snap in sc.snapshots:
        if snap.pump != pump:
            continue
        part = "healthy" if ds.snapshot_set(sc, snap) == "training" else "archive"
        stamp = datetime.fromtimestamp(snap.t0_s, timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        side = dict(ds.snapshot_sidecar(sc, snap), bearing=_bearing(sc.pumps[pump].bearing))
        write_wav(folder / part / f"{pump}_{stamp}.wav", ds.synthesize(sc, snap), ds.FS_HZ, side)
        n += 1
    return n


def _bearing(b: BearingGeometry) -> dict[str, Any]:
    """A bearing's geometry as the manifest and the sidecars hold it."""
    return {"designation": "6205" if b == BEARING_6205 else "invented 8-ball", "n_elements": b.n_elements,
            "ball_diameter_mm": b.ball_diameter_mm, "pitch_diameter_mm": b.pitch_diameter_mm,
            "contact_angle_deg": b.contact_angle_deg}
