"""edgevib bench: measured cost of the feature stage on two real MicroPythons and on the host.

Progress goes to stderr, one line per stage (--quiet turns it off); the figures to stdout, each
with what it means, or as one JSON object with --json."""
from __future__ import annotations

import json
import sys

HELP = ("measure feature-stage cost (MicroPython fuel, viper against bytecode, Thumb code size, "
        "heap, host throughput) and print the figures")


def add_arguments(p):
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    p.add_argument("--quiet", action="store_true", help="no progress lines")


def run(args) -> int:
    from host_tools.ops import bench

    stages = [
        ("WASI MicroPython: fuel of the bytecode feature stage", bench.device_figures),
        ("unix MicroPython: viper against bytecode, feed + features at N = 1024", bench.viper_figures),
        ("mpy-cross -march=armv6m: Thumb instructions per viper function", bench.native_figures),
        ("host: numpy twin throughput", bench.host_figures),
        ("host: training and replay on a small demo scenario", bench.workflow_figures),
    ]
    figures = {}
    for i, (what, fn) in enumerate(stages, 1):
        if not args.quiet:
            print(f"[{i}/{len(stages)}] {what} ...", file=sys.stderr, flush=True)
        figures.update(fn())
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
