"""`edgevib compare OLD.msgpack NEW.msgpack REC...`: what a new set would have done against the old.

Both sets replay the same recordings (host_tools.twin.compare: streaming, bounded memory). Prints,
side by side: time in each state, alerts raised, the observed alert rate per 30 days of running
next to the expected false-alert rate from training (PARAMS.json beside the set, when present),
every raising event of each set, and the raises one set makes and the other does not (UTC time,
recording and offset, driving feature, score). Ends with one summary line; exit 0.

--json OUT.json writes the comparison machine-readable (`-` prints it instead of the text);
--report DIR writes one HTML page with both sets' score tracks on shared axes. Outputs are
written whole (temporary name, then moved into place) and follow the umask.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from host_tools.data.analysis import profile_for_set
from host_tools.data.files import check_outputs, expected_rate, load_body, require_existing
from host_tools.data.recording import atomic_write, open_stream
from host_tools.errors import EdgevibError
from host_tools.ops.param_gate import prove
from host_tools.report.compare_report import comparison_text, write_compare_report
from host_tools.twin.compare import SetUnderTest, compare
from host_tools.data.units import m_s2_per_count
from host_tools.twin.replay import default_jobs, group_sources, stream_names

HELP = "replay recordings through two parameter sets and show side by side what each would have done"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("old", metavar="OLD.msgpack", help="the set in use")
    p.add_argument("new", metavar="NEW.msgpack", help="the set to compare with it")
    p.add_argument("recordings", nargs="+", metavar="REC", help="recordings or folders of them (a folder is one stream)")
    p.add_argument("--board", metavar="PROFILE.json", help="board profile for both sets (default: each set's board)")
    p.add_argument("--json", metavar="OUT.json", help="write the comparison as JSON (- prints it instead of the text)")
    p.add_argument("--report", metavar="DIR", help="write the HTML comparison into DIR")
    p.add_argument("--jobs", type=int, default=default_jobs(), metavar="J",
                   help="processes computing features (default: the cores available)")


def run(args: argparse.Namespace) -> int:
    if args.jobs < 1:
        raise EdgevibError("--jobs must be at least 1")
    sources = [Path(s) for s in args.recordings]
    require_existing(sources)
    outs = [Path(args.json)] if args.json and args.json != "-" else []
    inputs = sources + [Path(args.old), Path(args.new)] + ([Path(args.board)] if args.board else [])
    check_outputs(outs + ([Path(args.report)] if args.report else []), inputs)
    groups = group_sources(sources)
    sets, streams = [], []
    for path in (Path(args.old), Path(args.new)):
        _, params = load_body(str(path))
        recs = [open_stream(g, expected_rate_hz=params["fs_hz"], m_s2_per_count=m_s2_per_count(params)) for g in groups]
        profile = profile_for_set(params, args.board, recs[0])
        prove(params, profile, str(path))
        sets.append(SetUnderTest(path.name, params, profile, expected_rate(path)))
        streams.append(recs)
    c = compare((streams[0], streams[1]), sets, jobs=args.jobs, progress=True, names=stream_names(streams[0]))
    doc = (json.dumps(c.to_json(), indent=1) + "\n").encode()
    if outs:
        atomic_write(outs[0], doc)
    if args.report:
        write_compare_report(Path(args.report), c)
    if args.json == "-":
        sys.stdout.write(doc.decode())
    else:
        print(comparison_text(c), end="")
    return 0
