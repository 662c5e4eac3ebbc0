"""`edgevib demo --out DIR`: the whole host workflow on the invented Brackwater scenario.

INVENTED DEMO DATA (host_tools.data.demo_scenario): a fictional plant, pumps P-101 and P-102, and
seeded faults. Steps, as a technician and an engineer would take them:
1. generate the scenario into DIR/data (WAV snapshots with sidecars, ground_truth.json), with a
   stretch of continuous running on each day (--continuous-s) so that training can state a
   false-alert rate and the field's healthy running can be set beside it;
2. the commissioning check on the first snapshot of P-101 (host_tools.check.commission);
3. per pump, train a parameter set on its healthy training days (host_tools.fit.training);
4. replay its field days through the device detector, state carried from one snapshot to the
   next (host_tools.twin.replay), and write DIR/<pump>/params.msgpack, params.json, events.json,
   windows.csv and the report DIR/<pump>/report/index.html (host_tools.report.replay_report);
5. print per pump the alerts raised outside the seeded faults and when each fault was first seen,
   and the false-alert rate training stated beside the raises per running hour of the field's
   healthy running (outside every seeded fault) with the verdict of
   host_tools.twin.replay.promise_check;
6. the scorecard (host_tools.fit.scorecard): the detector judged on the invented Fenmoor
   evaluation histories (host_tools.data.scenarios, at the scale --evaluation names): trained on
   each machine's healthy history, replayed on histories with daily restarts, five machine faults
   and three sensor faults; false alerts per 30 days, delays from "clearly visible", sensor faults
   named first. Written to DIR/scorecard.json and DIR/scorecard.txt, printed at the end.
The pumps are trained and replayed in parallel, one process each (two cores make it quick).

`--fleet` runs the fleet part instead (host_tools.fleet.demo): twelve invented pumps at two
invented sites written as a fleet folder DIR/fleet, trained (DIR/trained) and reviewed
(DIR/review/index.html) through Dask; --pumps takes fewer, --scheduler uses an existing cluster.

Everything is built in a temporary folder beside DIR and moved into place at the end; an existing
DIR is replaced only when it is empty or holds an earlier demo.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np

from host_tools.errors import EdgevibError

HELP = "run the invented two-pump demo (generate data, check, train, replay, report), or with --fleet the fleet demo"

DEFAULT_DAYS = 42.0           # six weeks: every seeded fault of the scenario happens in them
DEFAULT_INTERVAL_S = 10800.0  # one 10 s snapshot every 3 hours (plus one at each stop and start): about a minute on 2 cores
# continuous running a day, s: 5 min on each training day (about 0.6 h of held-out running in all,
# some 25 independent stretches: enough for a rate fit, and each training hour costs about half a
# minute on a core) and 2 min on each field day
DEFAULT_STRETCH_S = (300.0, 120.0)
_MARKER = "demo.json"         # what a finished demo folder holds, so a rerun may replace it


def add_arguments(p: argparse.ArgumentParser) -> None:
    from host_tools.data import demo_scenario as ds
    from host_tools.data.scenarios import EVALUATION_SEED
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write (made, or replaced if it holds an earlier demo)")
    p.add_argument("--days", type=float, default=DEFAULT_DAYS, help=f"length of the scenario in days (default {DEFAULT_DAYS:g})")
    p.add_argument("--training-days", type=float, default=ds.TRAINING_DAYS,
                   help=f"healthy days at the start used for training (default {ds.TRAINING_DAYS:g})")
    p.add_argument("--interval-s", type=float, default=DEFAULT_INTERVAL_S, metavar="S",
                   help=f"seconds between periodic snapshots (default {DEFAULT_INTERVAL_S:g})")
    p.add_argument("--continuous-s", type=float, nargs=2, default=DEFAULT_STRETCH_S, metavar=("TRAIN", "FIELD"),
                   help="seconds of continuous running recorded on each training day and on each field day "
                        f"(default {DEFAULT_STRETCH_S[0]:g} {DEFAULT_STRETCH_S[1]:g}; 0 0: snapshots only)")
    p.add_argument("--seed", type=int, default=ds.DEFAULT_SEED, help=f"scenario seed (default {ds.DEFAULT_SEED})")
    p.add_argument("--jobs", type=int, default=None, help="worker processes (default: one per pump, at most the cores)")
    p.add_argument("--evaluation", choices=("demo", "full", "other", "off"), default="demo",
                   help="scorecard on the evaluation histories: demo (one machine, about a minute), full (two machines, "
                        "much longer), other (as full, on a slow 6-pole pump and a fixed-speed one) or off (default demo)")
    p.add_argument("--evaluation-seed", type=int, default=None, metavar="N",
                   help=f"seed of the evaluation histories (default {EVALUATION_SEED}, those the detector was developed "
                        "on; any other gives histories it has never seen)")
    p.add_argument("--gapless-hours", type=float, default=0.0, metavar="H",
                   help="also run each machine fault of the scorecard without a gap, every window as a gateway sees it, "
                        "from H hours before it is clearly visible to the first alert or H hours after (default 0: off)")
    p.add_argument("--fleet", action="store_true",
                   help="run the fleet part instead: a dozen invented pumps at two sites, trained and reviewed through Dask")
    p.add_argument("--pumps", type=int, default=12, metavar="N", help="--fleet: how many of the demo fleet's pumps (default 12)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="--fleet: an existing Dask scheduler (default: a local cluster)")


def run(args: argparse.Namespace) -> int:
    out = Path(args.out)
    _check_out(out)
    if not 0 < args.training_days < args.days:
        raise EdgevibError("--training-days must be above 0 and below --days")
    if not args.interval_s >= 60:
        raise EdgevibError("--interval-s must be at least 60 s")
    if args.jobs is not None and args.jobs < 1:
        raise EdgevibError("--jobs must be at least 1")
    stretch_s = tuple(getattr(args, "continuous_s", DEFAULT_STRETCH_S))
    if not all(0 <= v <= 3000 for v in stretch_s):
        raise EdgevibError("--continuous-s takes two lengths from 0 to 3000 s (a stretch keeps within an hour of steady speed)")
    gapless_h = getattr(args, "gapless_hours", 0.0)
    if not 0 <= gapless_h <= 24:
        raise EdgevibError("--gapless-hours must be from 0 to 24")
    if gapless_h and getattr(args, "evaluation", "demo") == "off":
        raise EdgevibError("--gapless-hours runs the scorecard's faults; it needs --evaluation demo, full or other")
    ev_seed = getattr(args, "evaluation_seed", None)
    if ev_seed is not None and getattr(args, "evaluation", "demo") == "off":
        raise EdgevibError("--evaluation-seed chooses the scorecard's histories; it needs --evaluation demo, full or other")
    if ev_seed is not None and not 0 <= ev_seed < 2 ** 31:
        raise EdgevibError("--evaluation-seed must be from 0 to 2147483647")
    started = time.monotonic()
    from host_tools.report.replay_report import staging_folder, swap_in
    if args.fleet and not 1 <= args.pumps <= 12:
        raise EdgevibError("--pumps must be from 1 to 12")
    tmp = staging_folder(out)
    try:
        if args.fleet:
            from host_tools.fleet import demo as fleet_demo
            lines = fleet_demo.build(tmp, out, args.seed, args.days, args.training_days, args.interval_s, args.pumps,
                                     args.scheduler, args.jobs)
            (tmp / _MARKER).write_text(json.dumps({"fleet": True, "seed": args.seed, "days": args.days,
                                                   "pumps": args.pumps}, indent=1) + "\n")
        else:
            lines = build(tmp, out, args.seed, args.days, args.training_days, args.interval_s, args.jobs,
                          getattr(args, "evaluation", "demo"), stretch_s, gapless_h, ev_seed)
        swap_in(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    print("\n".join(lines))
    print(f"demo finished in {time.monotonic() - started:.0f} s")
    return 0


def _check_out(out: Path) -> None:
    if out.exists() and not out.is_dir():
        raise EdgevibError(f"{out}: exists and is not a folder; give a folder for the demo")
    if out.is_dir() and any(out.iterdir()) and not (out / _MARKER).is_file():
        raise EdgevibError(f"{out}: folder holds other files and no earlier demo; choose an empty or new folder")
    if not out.parent.is_dir():
        raise EdgevibError(f"{out}: folder {out.parent} does not exist")


def build(work: Path, final: Path, seed: int, days: float, training_days: float, interval_s: float,
          jobs: int | None = None, evaluation: str = "off", stretch_s: tuple[float, float] = (0.0, 0.0),
          gapless_h: float = 0.0, evaluation_seed: int | None = None) -> list[str]:
    """Run the demo into folder `work` (paths are printed as they will be under `final`);
    returns the summary lines. Prints the commissioning check as it goes."""
    from host_tools.data import demo_scenario as ds
    from host_tools.progress import start
    bar = start(3, "steps", "demo")          # data, check, pumps
    n_pumps = len(ds.PUMPS)
    jobs = max(1, min(jobs or n_pumps, n_pumps, os.cpu_count() or 1))
    gt_path = ds.write_scenario(work / "data", seed=seed, days=days, training_days=training_days,
                                interval_s=interval_s, stretch_s=stretch_s, jobs=jobs)
    truth = json.loads(gt_path.read_text())
    bar.update(1)
    first = Path("data") / truth["files"]["P-101"]["training"][0]
    print(commissioning_text(work / first, final / first), end="")
    bar.update(1)
    pumps = sorted(truth["files"])
    if jobs == 1:
        results = [pump_run(work, p, truth) for p in pumps]
    else:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            results = list(pool.map(pump_run, [work] * len(pumps), pumps, [truth] * len(pumps)))
    bar.update(1)
    bar.close()
    lines = ["", "Summary (invented demo data: Brackwater pumping station)"]
    for r in results:
        lines += summary_lines(r, truth, final)
    if evaluation != "off":
        lines += ["", *scorecard_lines(work, final, evaluation, jobs, gapless_h, evaluation_seed)]
    lines += ["", "edgevib is advisory condition monitoring, not machinery protection or a safety shutdown system;",
              "an all-clear is no guarantee."]
    (work / _MARKER).write_text(json.dumps({"seed": seed, "days": days, "training_days": training_days,
                                            "interval_s": interval_s, "continuous_s": list(stretch_s),
                                            "pumps": results}, indent=1) + "\n")
    return lines


def scorecard_lines(work: Path, final: Path, scale: str, jobs: int | None, gapless_h: float = 0.0,
                    seed: int | None = None) -> list[str]:
    """Write the evaluation histories at `scale` and `seed` (None: scenarios.EVALUATION_SEED) into
    work/scenarios, train, replay and score them (and run the machine faults without a gap,
    gapless_h hours either side of clearly visible); write work/scorecard.json and .txt; return
    the printed lines."""
    from host_tools.data.files import load_board
    from host_tools.data import scenarios as sc
    from host_tools.ops.evaluate import evaluate_suite, to_json
    from host_tools.fit.scorecard import render_text
    j = max(1, min(jobs or (os.cpu_count() or 1), os.cpu_count() or 1))
    seed = sc.EVALUATION_SEED if seed is None else seed
    suite = sc.write_suite(work / "scenarios", seed=seed, scale=scale, jobs=j)
    card, _ = evaluate_suite(suite, load_board(None), jobs=j, gapless_h=gapless_h,
                             label=f"invented {sc.PLANT} histories, scale {scale}, seed {seed}, detector as trained by "
                                   "edgevib train")
    text = render_text(card)
    (work / "scorecard.json").write_text(to_json(card))
    (work / "scorecard.txt").write_text(text + "\n")
    return [text, f"  files: {final / 'scorecard.txt'}, scorecard.json; histories in {final / 'scenarios'}"]


def commissioning_text(path: Path, shown: Path) -> str:
    """The commissioning check of one recording, as `edgevib check` prints it (the command line
    shown with the path `shown`)."""
    from host_tools.check.check_text import render_text
    from host_tools.check.commission import check_recording, settings_from_board
    from host_tools.data.recording import read_recording
    rec = read_recording(path)
    return f"$ edgevib check {shown}\n" + render_text(check_recording(rec, settings_from_board(None)))


def pump_run(work: Path, pump: str, truth: dict) -> dict[str, Any]:
    """Train on one pump's training days, replay its field days, write its files; returns what
    the summary needs (JSON-able). Runs in a worker process."""
    import msgpack

    from firmware_py.run import params as pm
    from host_tools.data.files import load_board
    from host_tools.twin.replay import promise_check, promise_text, windows_csv
    from host_tools.data.recording import read_stream
    from host_tools.data.units import m_s2_per_count
    from host_tools.twin.replay import replay
    from host_tools.report.replay_report import detections, false_raises, pump_faults, write_report
    from host_tools.fit.training import train

    profile = load_board(None)
    scale = m_s2_per_count(pm.factory(profile))
    data = work / "data" / pump

    def stream(part: str):
        return read_stream(data / part, expected_rate_hz=profile["sample_rate_hz"], m_s2_per_count=scale)

    t = time.monotonic()
    params, summary = train(stream("training"), profile, 1.0)
    train_s = time.monotonic() - t
    field = stream("field")
    faults = pump_faults(truth, pump)
    healthy = HealthyRunning(faults)
    t = time.monotonic()
    result = replay([field], params, profile, names=[pump], on_chunk=healthy)
    replay_s = time.monotonic() - t
    folder = work / pump
    folder.mkdir()
    pm.build(params, profile)
    (folder / "params.msgpack").write_bytes(msgpack.packb(params, use_bin_type=True))
    (folder / "params.json").write_text(json.dumps(summary, indent=1) + "\n")
    (folder / "events.json").write_text(json.dumps(result.to_json(), indent=1) + "\n")
    # recordings named relative to the demo folder, so the CSV stays right once it is moved
    result.windows["recording"] = np.array([os.path.relpath(p, work) for p in result.windows["recording"].tolist()],
                                           dtype=object)
    (folder / "windows.csv").write_text(windows_csv(result))
    write_report(folder / "report", result, params, field, truth)
    t_from = field[0].t0_s
    t_to = field[-1].t0_s + field[-1].duration_s
    th = summary["thresholds"]
    false = false_raises(result.events, faults, t_from, t_to)
    healthy_h = healthy.windows * params["n"] * profile["analyse_every"] / params["fs_hz"] / 3600.0
    return {"pump": pump, "train_s": train_s, "replay_s": replay_s,
            "windows": int(len(result.windows["t_s"])), "recordings": len(field),
            "field_days": (t_to - t_from) / 86400.0, "events": len(result.events),
            "thresholds": {k: summary["thresholds"][k] for k in ("alert", "alarm", "clear")},
            "expected_false_alerts_per_30_days": th.get("expected_false_alerts_per_30_days"),
            "stated": (promise_text(th["expected_false_alerts_per_30_days"], th["range_95_per_30_days"],
                                    th.get("upper_bound", False))
                       if th.get("expected_false_alerts_per_30_days") is not None else None),
            "held_out_h": th.get("raise_fit", th.get("raise_count", {})).get("hours"),
            "healthy_check": promise_check(len(false["alerts"]), healthy_h, params),
            "healthy_running_h": healthy_h,
            "modes": summary["modes"]["k"], "warnings": summary.get("warnings", []),
            "false": false,
            "detections": [{**d, "size_then": _size_then(d)} for d in detections(result.events, faults)]}


def _size_then(d: dict) -> float | None:
    """A detected fault's size when it was raised, as a fraction of the largest it reaches (the
    scenario's growth law, host_tools.data.demo_scenario.Fault.severity); None when not raised."""
    from host_tools.data.demo_scenario import Fault
    if d["detected_t_s"] is None:
        return None
    return Fault(d["pump"], d["kind"], d["start_t0_s"], d["end_t0_s"], d["description"]).severity(d["detected_t_s"])


class HealthyRunning:
    """on_chunk of host_tools.twin.replay.replay: counts the windows that entered the persistence
    evidence (running, as promise_check counts it) outside every seeded fault span (start and end
    inclusive, as host_tools.report.replay_report.false_raises judges raises)."""

    def __init__(self, faults: list[dict]):
        self.faults, self.windows = faults, 0

    def __call__(self, stream: int, chunk: Any) -> None:
        t = chunk.features.t_s
        inside = np.zeros(len(t), bool)
        for f in self.faults:
            inside |= (t >= f["start_t0_s"]) & (t <= f["end_t0_s"])
        self.windows += int((chunk.steps.pushed.astype(bool) & ~inside).sum())


def _when(t_s: float, start: float, recording: str | None = None, offset_s: float | None = None) -> str:
    """UTC time (with the recording and offset when it is an event's), and the scenario day."""
    from host_tools.data.times import moment
    return f"{moment(t_s, recording, offset_s)}, day {(t_s - start) / 86400.0:.2f} of the scenario"


def _delay(s: float) -> str:
    return f"{s / 3600:.1f} h" if s < 2 * 86400 else f"{s / 86400:.1f} days"


def promise_lines(r: dict) -> list[str]:
    """Training's stated rate, and the raises per running hour of the field's healthy running
    beside it with promise_check's verdict."""
    if r["stated"] is None:
        return ["  stated by training: no false-alert rate (no held-out running)"]
    c = r["healthy_check"]
    out = [f"  stated by training: {r['stated']}"
           + (f", from {r['held_out_h']:.2f} h of held-out running" if r.get("held_out_h") else "")]
    if c is None:
        return out + ["  healthy field running: none to set beside it"]
    return out + [f"  healthy field running: {c['observed_raises']} false alert(s) in {c['running_h']:.2f} h of running "
                  f"({c['observed_raises'] / c['running_h']:.2g} per running hour, {c['observed_per_30_days']:.3g} per 30 days): "
                  f"{c['verdict']}"]


def summary_lines(r: dict, truth: dict, final: Path) -> list[str]:
    """The printed summary of one pump."""
    start = truth["start_t0_s"]
    fr = r["false"]
    per30 = len(fr["alerts"]) / fr["healthy_days"] * 30 if fr["healthy_days"] > 0 else float("nan")
    th = r["thresholds"]
    out = ["", f"{r['pump']}: trained in {r['train_s']:.1f} s ({r['modes']} operating modes; alert {th['alert']:.2f}, "
               f"alarm {th['alarm']:.2f} spreads), "
               f"replayed {r['recordings']} recordings ({r['windows']} windows, {r['field_days']:.1f} days) in {r['replay_s']:.1f} s",
           f"  outside the seeded faults ({fr['healthy_days']:.1f} days): {len(fr['alerts'])} false alert(s) "
           f"({per30:.2f} per 30 days), {len(fr['sensor_faults'])} false sensor fault(s)"]
    out += promise_lines(r)
    if r["warnings"]:
        out.append(f"  training: {len(r['warnings'])} warning(s) in {final / r['pump'] / 'params.json'}, the first: "
                   f"{r['warnings'][0]}")
    for e in fr["alerts"]:
        out.append(f"    false alert: {_when(e['t_s'], start, e.get('recording'), e.get('offset_s'))}, {e['from']} -> {e['to']} ({e['reason']}, {e.get('feature') or '-'})")
    if not r["detections"]:
        out.append("  no seeded fault in this span")
    for d in r["detections"]:
        what = d["kind"].replace("_", " ")
        if d["detected_t_s"] is None:
            out.append(f"  {what} (from {_when(d['start_t0_s'], start)}): NOT detected")
        else:
            out.append(f"  {what} (from {_when(d['start_t0_s'], start)}): detected "
                       f"{_when(d['detected_t_s'], start, d.get('recording'), d.get('offset_s'))} "
                       f"as {d['detected_as']}, {_delay(d['delay_s'])} after it began"
                       + (f", when it stood at {100 * d['size_then']:.2g} % of the size it grows to"
                          if d["size_then"] < 1.0 else ""))
    folder = final / r["pump"]
    out.append(f"  report: {folder / 'report' / 'index.html'}")
    out.append(f"  files:  {folder / 'params.msgpack'}, params.json, events.json, windows.csv")
    return out
