"""`edgevib train NORMAL... --out PARAMS.msgpack`: a parameter set from healthy recordings.

NORMAL: recordings (.wav/.csv/.npy with sidecars) or folders; each folder is one stream of one
gateway, the files named directly form one more stream. Writes PARAMS.msgpack (the parameter set
body: one MessagePack map, for `edgevib flash` and firmware_py.run.params.build), PARAMS.json beside
it (what was learned, host_tools.fit.training) and PARAMS.report.txt (the training report, also
printed). Everything is computed and encoded first; each file is then moved into place whole, so
a refused input writes nothing.
"""
from __future__ import annotations

import argparse
import json
from pathlib import Path

import firmware_py  # noqa: F401
from host_tools.errors import EdgevibError
from host_tools.data.analysis import desk_profile, scale_of
from host_tools.data.files import check_outputs, encode_set, load_board, require_existing
from host_tools.data.recording import atomic_write, open_stream, read_stream
from host_tools.progress import note
from host_tools.twin.replay import default_jobs, group_sources
from host_tools.fit.training import report_text, train

HELP = "train a parameter set on healthy recordings: baseline, operating modes, thresholds for a false-alert target"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("normal", nargs="+", metavar="NORMAL", help="healthy recordings or folders of them (a folder is one stream)")
    p.add_argument("--out", required=True, metavar="PARAMS.msgpack", help="parameter set to write (.msgpack)")
    p.add_argument("--board", metavar="PROFILE.json",
                   help="board profile of the gateway the set is for (default: settings built from the recordings)")
    p.add_argument("--false-alerts-per-month", type=float, default=1.0, metavar="X",
                   help="target expected false alerts per 30 days of running (default 1)")
    p.add_argument("--version", type=int, default=1, metavar="V", help="parameter set version (default 1)")
    p.add_argument("--jobs", type=int, default=default_jobs(), metavar="J",
                   help="processes for the operating-mode fits (default: the cores available)")


def outputs(out: Path) -> tuple[Path, Path, Path]:
    """PARAMS.msgpack, its summary PARAMS.json and report PARAMS.report.txt."""
    return out, out.with_suffix(".json"), out.with_suffix(".report.txt")


def run(args: argparse.Namespace) -> int:
    out = Path(args.out)
    if out.suffix.lower() != ".msgpack":
        raise EdgevibError(f"{out}: the parameter set is written as .msgpack; give a .msgpack name")
    paths = list(outputs(out))
    sources = [Path(s) for s in args.normal]
    require_existing(sources)
    check_outputs(paths, sources + ([Path(args.board)] if args.board else []))
    if not args.false_alerts_per_month > 0:
        raise EdgevibError("--false-alerts-per-month must be a positive number")
    if not 0 <= args.version < 1 << 30:
        raise EdgevibError("--version must be an int from 0 to 2**30 - 1")
    groups = group_sources(sources)
    if args.board:
        profile = load_board(args.board)
    else:   # analysis settings from the recordings themselves (host_tools.data.analysis)
        profile = desk_profile([r for g in groups for r in open_stream(g)])
    scale = scale_of(profile)
    streams = [read_stream(g, expected_rate_hz=profile["sample_rate_hz"], m_s2_per_count=scale) for g in groups]
    note(f"train: {sum(len(s) for s in streams)} recordings, {profile['sample_rate_hz']} Hz, windows of "
         f"{profile['window_n']} samples, {profile['axes']} axes (board {profile['name']})")
    params, summary = train(streams, profile, args.false_alerts_per_month, version=args.version,
                            jobs=max(1, args.jobs), progress=True)
    body = encode_set(params, profile)
    text = report_text(summary)
    rendered = [body, (json.dumps(summary, indent=1) + "\n").encode(), text.encode()]
    for path, data in zip(paths, rendered):
        atomic_write(path, data)
    print(text, end="")
    print(f"wrote {paths[0]}, {paths[1].name}, {paths[2].name}")
    return 0
