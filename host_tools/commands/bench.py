"""edgevib bench: measured cost of the feature stage on two real MicroPythons and on the host,
and of training, replay (one long stream at 1 and 2 jobs, peak memory, next to numpy.fft.rfft)
and fleet replay (1 worker against all cores).

Progress goes to stderr, one step per stage (the global --quiet turns it off); the figures to
stdout, each with what it means, or as one JSON object with --json."""
from __future__ import annotations

import json
import sys

HELP = ("measure feature-stage cost (MicroPython fuel, viper against bytecode, Thumb code size, "
        "heap, host throughput), replay speed and memory, and fleet scaling")


def add_arguments(p):
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    p.add_argument("--stream-minutes", type=float, default=None, metavar="M",
                   help="length of the long single stream replayed (default 20)")


def run(args) -> int:
    from host_tools.errors import EdgevibError
    from host_tools.ops import bench
    from host_tools.progress import is_quiet, start

    minutes = bench.STREAM_MINUTES if args.stream_minutes is None else args.stream_minutes
    if not minutes > 0:
        raise EdgevibError("--stream-minutes must be a positive number")
    from host_tools.fleet.throughput import fleet_figures
    stages = [
        ("WASI MicroPython: fuel of the bytecode feature stage", bench.device_figures),
        ("unix MicroPython: viper against bytecode, feed + features at N = 1024", bench.viper_figures),
        ("mpy-cross -march=armv6m: Thumb instructions per viper function", bench.native_figures),
        ("host: numpy twin throughput", bench.host_figures),
        ("host: training, and replay of one long stream", lambda: bench.workflow_figures(minutes)),
        ("host: fleet replay on a local Dask cluster, 1 worker and all cores", fleet_figures),
    ]
    bar = start(len(stages), "stages", "bench")
    figures = {}
    for what, fn in stages:
        if not is_quiet():
            print(f"bench: {what} ...", file=sys.stderr, flush=True)
        figures.update(fn())
        bar.update(1)
    bar.close()
    figures["targets_met"] = bench.met(figures)
    if args.json:
        print(json.dumps(figures, indent=2))
        return 0
    width = max(map(len, figures))
    for k, v in figures.items():
        print(f"{k:<{width}}  {v}")
        if k in bench.MEANING:
            print(f"{'':<{width}}  ({bench.MEANING[k]})")
    return 0
