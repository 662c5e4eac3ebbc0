"""Judge the detector on an evaluation suite: train per machine on its healthy training history,
replay every other history through the device detector, score the events against the truth.

`evaluate_suite(suite_json, profile, jobs=1, progress=False, label="", gapless_h=0)` -> (card, scored):
card from host_tools.fit.scorecard.scorecard, scored the per-history figures. With gapless_h > 0
each machine fault is also run without a gap, gapless_h hours either side of clearly visible
(host_tools.ops.continuous.gapless_fault), and each healthy history for its first 2 * gapless_h
hours (gapless_healthy), into the card's `gapless` section. The suite is what
host_tools.data.scenarios.write_suite wrote (suite.json beside one folder per history). Training
is host_tools.fit.training.train with its defaults (1 false alert per 30 days); replay is
host_tools.twin.replay.replay, one stream per history, each with a fresh detector.
"""
from __future__ import annotations

import json
import os
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np

from host_tools.errors import EdgevibError


def _train_machine(folder: Path, profile: dict) -> tuple[dict, dict]:
    """Train on one machine's healthy history with training's defaults (the bearing geometry from
    the sidecars, as the gateway's configuration gives it)."""
    from host_tools.data.recording import read_stream
    from host_tools.fit.training import train
    from host_tools.data.units import m_s2_per_count
    from firmware_py.run import params as pm
    scale = m_s2_per_count(pm.factory(profile))
    recs = read_stream(folder, expected_rate_hz=profile["sample_rate_hz"], m_s2_per_count=scale)
    return train(recs, profile, 1.0)


def evaluate_suite(suite_json: str | os.PathLike, profile: dict, jobs: int = 1, progress: bool = False,
                   label: str = "", gapless_h: float = 0.0) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """Train, replay and score every history of the suite (see the module docstring)."""
    from host_tools.fit.scorecard import gapless_section, score_history, scorecard
    from host_tools.twin.replay import replay
    root = Path(suite_json).parent
    suite = json.loads(Path(suite_json).read_text())
    items = suite["histories"]
    machines = sorted({h["machine"] for h in items})
    train_of = {m: next((h for h in items if h["machine"] == m and h["role"] == "training"), None) for m in machines}
    for m, h in train_of.items():
        if h is None:
            raise EdgevibError(f"{suite_json}: no training history for machine {m}")
    jobs = max(1, jobs)
    if jobs == 1 or len(machines) == 1:
        trained = [_train_machine(root / train_of[m]["folder"], profile) for m in machines]
    else:
        with ProcessPoolExecutor(max_workers=min(jobs, len(machines))) as pool:
            trained = list(pool.map(_train_machine, [root / train_of[m]["folder"] for m in machines],
                                    [profile] * len(machines)))
    params = {m: p for m, (p, _) in zip(machines, trained)}
    summaries = {m: s for m, (_, s) in zip(machines, trained)}
    scored = []
    for m in machines:
        field = [h for h in items if h["machine"] == m and h["role"] != "training"]
        res = replay([root / h["folder"] for h in field], params[m], profile, jobs=jobs, progress=progress,
                     names=[h["name"] for h in field])
        window_s = params[m]["n"] / params[m]["fs_hz"]
        for i, h in enumerate(field):
            truth = json.loads((root / h["ground_truth"]).read_text())
            ev = [e for e in res.events if e["stream"] == h["name"]]
            t = res.windows["t_s"][res.windows["stream"] == i]
            scored.append(score_history(ev, t, window_s, truth))
    card = scorecard(scored, label)
    if gapless_h > 0:
        card["gapless"] = gapless_section(*_gapless(root, suite, params, profile, gapless_h, jobs), gapless_h)
    card["training"] = {m: {"alert": summaries[m]["thresholds"]["alert"], "alarm": summaries[m]["thresholds"]["alarm"],
                            "expected_false_alerts_per_30_days": summaries[m]["thresholds"].get("expected_false_alerts_per_30_days"),
                            "upper_bound": summaries[m]["thresholds"].get("upper_bound"),
                            "modes": summaries[m]["modes"]["k"]} for m in machines}
    return card, scored


def _gapless(root: Path, suite: dict, params: dict, profile: dict, hours: float, jobs: int
             ) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """gapless_fault for every machine-fault history of the suite whose fault becomes clearly
    visible, and gapless_healthy (2 * hours) for every healthy one, in up to `jobs` processes (minutes of work: a progress bar on stderr,
    one step per history). Returns (fault runs, healthy runs)."""
    from host_tools.ops.continuous import gapless_fault, gapless_healthy
    from host_tools.progress import start
    faults = [h for h in suite["histories"] if h["role"] == "machine_fault"]
    healthy = [h for h in suite["histories"] if h["role"] == "healthy"]
    vis = [json.loads((root / h["ground_truth"]).read_text())["machine_faults"][0]["visible_t_s"] for h in faults]
    # a fault never clearly visible in its history has no time to run around
    faults, vis = [h for h, v in zip(faults, vis) if v is not None], [v for v in vis if v is not None]
    seed, scale = suite["seed"], suite["scale"]
    calls = ([(gapless_fault, (seed, scale, h["name"], v, params[h["machine"]], profile, hours)) for h, v in zip(faults, vis)]
             + [(gapless_healthy, (seed, scale, h["name"], params[h["machine"]], profile, 2 * hours)) for h in healthy])
    bar = start(len(calls), "histories", "gapless run")
    out = []
    if jobs <= 1:
        for fn, a in calls:
            out.append(fn(*a))
            bar.update(1)
    else:
        with ProcessPoolExecutor(max_workers=min(jobs, len(calls))) as pool:
            for r in [pool.submit(fn, *a) for fn, a in calls]:
                out.append(r.result())
                bar.update(1)
    bar.close()
    return out[:len(faults)], out[len(faults):]


def to_json(card: dict) -> str:
    """The card as JSON text (numpy numbers made plain)."""
    def plain(o: Any) -> Any:
        if isinstance(o, (np.integer,)):
            return int(o)
        if isinstance(o, (np.floating,)):
            return float(o)
        raise TypeError(type(o))
    return json.dumps(card, indent=1, default=plain) + "\n"
