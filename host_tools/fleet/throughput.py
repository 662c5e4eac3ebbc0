"""Fleet replay throughput on this machine: one Dask worker against one per core, same fleet, one run.

Entry point: fleet_figures(pumps, days) -> dict of figures for `edgevib bench`.

A slice of the invented demo fleet (host_tools.data.demo_fleet) is written to a temporary folder;
one parameter set, trained on five healthy days of one pump, is installed on every gateway
(throughput does not depend on whose set it is). The same fleet replay (host_tools.fleet.runs.replay_fleet:
planning, feature tasks, detector passes, the summary) then runs on a local cluster of 1 worker and
on one of local_cores() workers. Each cluster is started before its clock starts, so the figure is
the work, not the start-up. Samples count per axis (a 3-axis frame is 3 samples).
"""
from __future__ import annotations

import shutil
import tempfile
import time
from datetime import date
from pathlib import Path


def fleet_figures(pumps: int = 8, days: float = 3.0, interval_s: float = 10800.0) -> dict:
    """fleet_replay_msamples_per_s_1_worker, ..._all_cores, the cores, and their ratio."""
    from firmware_py.run import params as pm
    from host_tools.data import demo_fleet as dfl
    from host_tools.data.analysis import load_board
    from host_tools.data.files import encode_set
    from host_tools.data.recording import read_stream
    from host_tools.fit.training import train
    from host_tools.fleet import engine, layout, runs
    from host_tools.twin.replay import m_s2_per_count

    cores = engine.local_cores()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "fleet"
        layout.init_fleet(root, "bench fleet")
        profile = load_board(None)
        # the set: trained on five healthy days of one pump, a snapshot every 2 hours (the steadiness
        # rules of training need some 50 steady windows); throughput does not depend on whose set it is.
        # 4 s snapshots, shorter than the demo's: the same fleet as the figures in docs/engineer.md,
        # and a bench that stays short in the test suite
        teach = dfl.build_fleet_scenario(days=5.5, training_days=5.0, interval_s=7200.0, pumps=1, snapshot_s=4.0)
        layout.add_gateway(root, "teach", dfl.manifest(teach, "P-101", profile["name"]))
        dfl.write_pump(root, teach, "P-101", folder=root / "teach")
        healthy = read_stream(root / "teach" / layout.HEALTHY, profile["sample_rate_hz"], m_s2_per_count(pm.factory(profile)))
        params, summary = train(healthy, profile, 1.0)
        shutil.rmtree(root / "teach")
        sc = dfl.build_fleet_scenario(days=days, training_days=1.0, interval_s=interval_s, pumps=pumps, snapshot_s=4.0)
        for p in sc.pumps:
            layout.add_gateway(root, dfl.gateway_id(p), dfl.manifest(sc, p, profile["name"]))
            dfl.write_pump(root, sc, p)
        body = encode_set(params, profile)
        for g in layout.gateways(root):
            layout.install_set(g, body, summary, date(2026, 3, 3))
        rates = {}
        for n in (1, cores):
            with engine.cluster(workers=n) as client:
                client.wait_for_workers(n)
                out = Path(tmp) / f"out{n}"
                out.mkdir()
                t0 = time.perf_counter()
                doc, _ = runs.replay_fleet(client, root, out, None, None, review=False, reports=False, quiet=True)
                rates[n] = doc["samples"] / (time.perf_counter() - t0)
    return {
        "fleet_gateways": pumps,
        "fleet_msamples": round(doc["samples"] / 1e6, 1),
        "fleet_replay_msamples_per_s_1_worker": round(rates[1] / 1e6, 2),
        "fleet_replay_msamples_per_s_all_cores": round(rates[cores] / 1e6, 2),
        "fleet_workers_all_cores": cores,
        "fleet_scaling_ratio": round(rates[cores] / rates[1], 2),
    }
