"""`edgevib replay REC... --params PARAMS.msgpack`: recordings through the exact device detector.

OUT.json (--json): {"sample_rate_hz": float, "streams": [stream names], "events": [...],
"summary": {"streams": {name: s}, "total": s}}. An event: {"stream", "t_s" (window end, s, the
recordings' clock), "from", "to" (state names), "reason" (firmware_py.detect.alarm.REASON_NAMES), "mode"
(int or null), "feature" (e.g. "velocity_rms axis z", or null), "score" (spreads of the nearest
mode)}. A summary s: recordings, windows, observed_s, t_first_s, t_last_s, windows_per_state
{state: count}, alerts, alarms, sensor_faults (events into those states), first_alert_t_s,
first_alarm_t_s, first_sensor_fault_t_s (null when none), events_lost; the total adds streams.
W.csv (--windows-csv): one row per window, columns stream, recording, t_s, state, score, mode
(-1 none), feature (the one that drove the score, guard or fault; empty when none),
accel_rms_m_s2 and velocity_rms_mm_s (largest axis), zone (ISO letter), then per axis <a>:
accel_rms_m_s2_<a>, velocity_rms_mm_s_<a>, peak_m_s2_<a>, crest_<a>, kurtosis_<a>, mean_m_s2_<a>,
clipped_<a>, band_<lo>_<hi>_hz_db_<a> (dB re 1 (m/s^2)^2; -inf for an empty band).

REC: recordings or folders; each folder is one stream (one gateway's recordings in t0_s order,
detector state carried across), the files named directly form one more stream. Streams replay in
parallel (--jobs), with a progress bar only when stderr is a terminal. --json writes
sample_rate_hz, streams, events and summary; --windows-csv one row per window; --report DIR the
HTML report (host_tools.report.replay_report; one sub-folder per stream when there are several). JSON and CSV
are rendered in memory and each moved into place whole.
"""
from __future__ import annotations

import argparse
import csv
import importlib
import importlib.util
import io
import json
import re
import sys
from pathlib import Path

import numpy as np

from host_tools.commands.train import check_outputs
from host_tools.data.param_files import load_body, load_board
from host_tools.errors import EdgevibError
from host_tools.data.recording import atomic_write, read_stream
from host_tools.twin.replay import ReplayResult, default_jobs, group_sources, m_s2_per_count, replay

HELP = "replay recordings through the device detector: events, per-window states, scores and features"
_BOARDS = Path(__file__).resolve().parents[2] / "boards"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recordings", nargs="+", metavar="REC", help="recordings or folders of them (a folder is one stream)")
    p.add_argument("--params", required=True, metavar="PARAMS.msgpack", help="parameter set to replay with")
    p.add_argument("--board", metavar="PROFILE.json", help="board profile (default boards/<the set's board>.json)")
    p.add_argument("--json", metavar="OUT.json", help="write sample_rate_hz, streams, events and summary")
    p.add_argument("--windows-csv", metavar="W.csv", help="write one row per window")
    p.add_argument("--report", metavar="DIR", help="write the HTML report into DIR")
    p.add_argument("--jobs", type=int, default=default_jobs(), metavar="J",
                   help="streams replayed at once (default: the cores available)")


def windows_csv(result: ReplayResult) -> str:
    """One row per window: stream (name), then every per-window column of the result."""
    cols = {k: v for k, v in result.windows.items() if k != "stream"}
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\n")
    out.writerow(["stream", *cols])
    names = np.array(result.streams, dtype=object)[result.windows["stream"]]
    data = [names.tolist()] + [v.tolist() for v in cols.values()]
    fmt = ["{}"] + ["{:.3f}" if k == "t_s" else "{:.6g}" for k in cols]   # t_s: ms on a Unix clock
    for row in zip(*data):
        out.writerow([f.format(v) if isinstance(v, float) else v for f, v in zip(fmt, row)])
    return buf.getvalue()


def _report_module():
    if importlib.util.find_spec("host_tools.report.replay_report") is None:
        raise EdgevibError("report module missing")
    return importlib.import_module("host_tools.report.replay_report")


def run(args: argparse.Namespace) -> int:
    _, params = load_body(args.params)
    profile = load_board(args.board or _BOARDS / f"{params['board']}.json")
    for key, want in (("board", profile["name"]), ("fs_hz", profile["sample_rate_hz"]), ("n", profile["window_n"]),
                      ("axes", profile["axes"])):
        if params.get(key) != want:
            raise EdgevibError(f"{args.params}: {key} {params.get(key)!r} does not match board {profile['name']} ({want!r})")
    if args.jobs < 1:
        raise EdgevibError("--jobs must be at least 1")
    sources = [Path(s) for s in args.recordings]
    outs = [Path(p) for p in (args.json, args.windows_csv) if p]
    check_outputs(outs + ([Path(args.report)] if args.report else []), sources)
    report = _report_module() if args.report else None
    groups = group_sources(sources)
    result = replay(groups, params, profile, jobs=args.jobs, progress=sys.stderr.isatty())
    rendered = []
    if args.json:
        rendered.append((Path(args.json), (json.dumps(result.to_json(), indent=1) + "\n").encode()))
    if args.windows_csv:
        rendered.append((Path(args.windows_csv), windows_csv(result).encode()))
    for path, data in rendered:
        atomic_write(path, data)
    if report is not None:
        _write_reports(report, Path(args.report), result, params, groups)
    print(summary_text(result), end="")
    return 0


def _write_reports(report, out: Path, result: ReplayResult, params: dict, groups: list) -> None:
    scale = m_s2_per_count(params)
    if len(groups) == 1:
        report.write_report(out, result, params, read_stream(groups[0], params["fs_hz"], scale))
        return
    out.mkdir(exist_ok=True)
    for name, g in zip(result.streams, groups):
        sub = out / re.sub(r"[^A-Za-z0-9_.-]+", "_", name)
        report.write_report(sub, result, params, read_stream(g, params["fs_hz"], scale), stream=name)


def summary_text(result: ReplayResult) -> str:
    """A few lines per stream: windows per state, alerts, alarms, faults and the first concern."""
    lines = []
    for name in result.streams:
        s = result.summary["streams"][name]
        states = ", ".join(f"{k} {v}" for k, v in s["windows_per_state"].items() if v)
        lines.append(f"{name}: {s['recordings']} recordings, {s['windows']} windows ({states}); "
                     f"{s['alerts']} alerts, {s['alarms']} alarms, {s['sensor_faults']} sensor faults")
        for e in result.events:
            if e["stream"] == name and e["to"] in ("alert", "alarm", "sensor_fault"):
                feat = f", {e['feature']}" if e["feature"] else ""
                lines.append(f"  t={e['t_s']:.2f} s  {e['from']} -> {e['to']} ({e['reason']}{feat}, score {e['score']:.2f})")
    lines.append("advisory condition monitoring, not machinery protection; no alert is no guarantee of health\n")
    return "\n".join(lines)
