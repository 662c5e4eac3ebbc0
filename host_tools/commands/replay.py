"""`edgevib replay REC... --params PARAMS.msgpack`: recordings through the exact device detector.

OUT.json (--json): {"sample_rate_hz": float, "streams": [stream names], "events": [...],
"summary": {"streams": {name: s}, "total": s}}. An event: {"stream", "t_s" (window end, s, the
recordings' clock), "recording" (path of the file the window ends in), "offset_s" (s into it), "from", "to" (state names), "reason" (firmware_py.detect.alarm.REASON_NAMES), "mode"
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
detector state carried across), the files named directly form one more stream. Replay streams
chunk by chunk (host_tools.twin.replay.StreamReplay): memory does not grow with the recordings'
length, --jobs processes compute the features of one stream's chunks at once, and progress
counts windows (host_tools.progress). Printed times are UTC with the recording and the offset
in it (host_tools.data.times). --json writes sample_rate_hz, streams, events and summary;
--windows-csv one row per window, written as the chunks come into a temporary file that is
moved into place whole at the end; --report DIR the HTML report (host_tools.report.replay_report;
one sub-folder per stream when there are several). Files follow the umask.
"""
from __future__ import annotations

import argparse
import importlib
import importlib.util
import json
import re
from pathlib import Path
from typing import Any, BinaryIO


from host_tools.data.analysis import profile_for_set
from host_tools.data.files import check_outputs, load_body, require_existing
from host_tools.data.recording import atomic_open, atomic_write, open_stream
from host_tools.data.times import moment
from host_tools.errors import EdgevibError
from host_tools.ops.param_gate import prove
from host_tools.data.units import m_s2_per_count
from host_tools.twin.replay import (ReplayChunk, ReplayResult, check_text, csv_header, csv_rows, default_jobs,
                                   group_sources, replay, stream_names)

HELP = "replay recordings through the device detector: events, per-window states, scores and features"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recordings", nargs="+", metavar="REC", help="recordings or folders of them (a folder is one stream)")
    p.add_argument("--params", required=True, metavar="PARAMS.msgpack", help="parameter set to replay with")
    p.add_argument("--board", metavar="PROFILE.json",
                   help="board profile (default boards/<the set's board>.json; none for a set trained on recordings)")
    p.add_argument("--json", metavar="OUT.json", help="write sample_rate_hz, streams, events and summary")
    p.add_argument("--windows-csv", metavar="W.csv", help="write one row per window")
    p.add_argument("--report", metavar="DIR", help="write the HTML report into DIR")
    p.add_argument("--jobs", type=int, default=default_jobs(), metavar="J",
                   help="processes computing features (default: the cores available)")


class CsvSink:
    """Writes the windows of each replayed chunk to an open file as they come (header once)."""

    def __init__(self, f: BinaryIO, names: list[str]):
        self.f, self.names, self.started = f, names, False

    def __call__(self, stream: int, chunk: ReplayChunk) -> None:
        cols = chunk.columns()
        if not self.started:
            self.f.write(csv_header(cols).encode())
            self.started = True
        self.f.write(csv_rows(self.names[stream], cols).encode())


def _report_module():
    if importlib.util.find_spec("host_tools.report.replay_report") is None:
        raise EdgevibError("report module missing")
    return importlib.import_module("host_tools.report.replay_report")


def open_sources(paths: list[str], params: dict) -> tuple[list[list[Any]], list[Path]]:
    """The streams (RecordingFile lists, at the set's rate and scale) of command-line inputs."""
    groups = group_sources([Path(s) for s in paths])
    return [open_stream(g, expected_rate_hz=params["fs_hz"], m_s2_per_count=m_s2_per_count(params))
            for g in groups], [Path(s) for s in paths]


def run(args: argparse.Namespace) -> int:
    _, params = load_body(args.params)
    if args.board is None and not isinstance(params["board"], str):
        raise EdgevibError(f"{args.params}: 'board' must be a str")
    if args.jobs < 1:
        raise EdgevibError("--jobs must be at least 1")
    sources = [Path(s) for s in args.recordings]
    require_existing(sources)
    outs = [Path(p) for p in (args.json, args.windows_csv) if p]
    inputs = sources + [Path(args.params)] + ([Path(args.board)] if args.board else [])
    check_outputs(outs + ([Path(args.report)] if args.report else []), inputs)
    report = _report_module() if args.report else None
    streams, _ = open_sources(args.recordings, params)
    profile = profile_for_set(params, args.board, streams[0])
    prove(params, profile, args.params)
    if args.windows_csv:
        with atomic_open(Path(args.windows_csv)) as f:
            names = stream_names(streams)
            result = replay(streams, params, profile, jobs=args.jobs, progress=True, names=names, keep_windows=False,
                            on_chunk=CsvSink(f, names))
    else:
        result = replay(streams, params, profile, jobs=args.jobs, progress=True, keep_windows=False)
    if args.json:
        atomic_write(Path(args.json), (json.dumps(result.to_json(), indent=1) + "\n").encode())
    if report is not None:
        write_reports(report, Path(args.report), result, params, streams)
    print(summary_text(result), end="")
    return 0


def write_reports(report, out: Path, result: ReplayResult, params: dict, streams: list) -> None:
    """The HTML report of each stream (one sub-folder per stream when there are several)."""
    if len(streams) == 1:
        report.write_report(out, result, params, streams[0])
        return
    out.mkdir(exist_ok=True)
    for name, recs in zip(result.streams, streams):
        sub = out / re.sub(r"[^A-Za-z0-9_.-]+", "_", name)
        report.write_report(sub, result, params, recs, stream=name)


def event_line(e: dict) -> str:
    """One event as a person reads it: when (UTC, recording, offset), the change, why, the score."""
    feat = f", {e['feature']}" if e.get("feature") else ""
    when = moment(e["t_s"], e.get("recording"), e.get("offset_s"))
    return f"{when}  {e['from']} -> {e['to']} ({e['reason']}{feat}, score {e['score']:.2f})"


def summary_text(result: ReplayResult) -> str:
    """A few lines per stream: time per state, alerts, alarms, faults and each raising event."""
    lines = []
    for name in result.streams:
        s = result.summary["streams"][name]
        states = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in s["windows_per_state"].items() if v)
        lines.append(f"{name}: {s['recordings']} recordings, {s['windows']} windows ({states}); "
                     f"{s['alerts']} alerts, {s['alarms']} alarms, {s['sensor_faults']} sensor faults")
        for e in result.events:
            if e["stream"] == name and e["to"] in ("alert", "alarm", "sensor_fault"):
                lines.append("  " + event_line(e))
    check = result.summary["total"].get("promise")
    if check:
        lines.append("the set's training " + check_text(check) + " (raises on healthy running are false alerts)")
    lines.append("advisory condition monitoring, not machinery protection; no alert is no guarantee of health\n")
    return "\n".join(lines)
