"""The fleet part of the demo (`edgevib demo --fleet`): the invented fleet from data to review page.

Entry point: build(work, final, seed, days, training_days, interval_s, pumps, scheduler, workers)
runs, on one Dask cluster (local by default):
1. write the demo fleet (host_tools.data.demo_fleet) as a fleet folder DIR/fleet, one task per pump;
2. `fleet train`: a set per gateway from its healthy days, into DIR/trained/<gateway>/;
3. install each set in its gateway folder as if flashed on the day after training ended
   (params.msgpack, params.json, params_since in the manifest);
4. `fleet review`: every gateway's archive replayed, the fleet page DIR/review/index.html with
   each pump's replay report.
Returns the lines to print. INVENTED DEMO DATA throughout.
"""
from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone
from pathlib import Path


def build(work: Path, final: Path, seed: int, days: float, training_days: float, interval_s: float,
          pumps: int, scheduler: str | None = None, workers: int | None = None) -> list[str]:
    """Run the fleet demo into folder `work` (paths printed as they will be under `final`)."""
    from host_tools.data import demo_fleet as dfl
    from host_tools.data.analysis import load_board
    from host_tools.fleet import engine, layout, runs

    sc = dfl.build_fleet_scenario(seed, days, training_days, interval_s, pumps)
    fleet = layout.init_fleet(work / "fleet", "Brackwater and Hollin Fen (invented demo fleet)")
    profile = load_board(None)
    for p in sc.pumps:
        layout.add_gateway(fleet, dfl.gateway_id(p), dfl.manifest(sc, p, profile["name"]))
    installed = (datetime.fromtimestamp(sc.training_end_t0_s, timezone.utc) + timedelta(days=1)).date()
    with engine.cluster(scheduler, workers) as client:
        futs = [client.submit(dfl.write_pump, str(fleet), sc, p, pure=False) for p in sc.pumps]
        engine.watch(futs, "demo fleet: recordings")
        client.gather(futs)
        (work / "trained").mkdir()
        tdoc, tlines = runs.train_fleet(client, fleet, work / "trained", 1.0)
        for g in tdoc["gateways"]:
            d = work / "trained" / g
            layout.install_set(fleet / g, (d / layout.PARAMS).read_bytes(),
                               json.loads((d / layout.PARAMS_SUMMARY).read_text()), installed)
        (work / "review").mkdir()
        rdoc, rlines = runs.replay_fleet(client, fleet, work / "review", None, None, review=True, reports=True)
    lines = ["", "Fleet demo (invented demo data: Brackwater pumping station and Hollin Fen lift station)",
             f"{len(sc.pumps)} gateways in {final / 'fleet'}; sets trained on days 0-{training_days:g} and "
             f"installed {installed.isoformat()}", ""]
    lines += tlines[:-1] + [""] + rlines[:-1]
    lines += ["", f"fleet page: {final / 'review' / 'index.html'}",
              "seeded faults (ground truth, for comparison with the page):"]
    lines += [f"  {f.pump}: {f.kind.replace('_', ' ')} from day {(f.start_t0_s - sc.start_t0_s) / 86400:.1f}"
              for f in sc.faults]
    return lines
