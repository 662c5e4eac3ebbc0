"""edgevib bench: measured cost of the feature stage on a real MicroPython and on the host."""
from __future__ import annotations

import json

HELP = "measure feature-stage cost (MicroPython fuel, heap, host throughput) and print the figures"


def add_arguments(p):
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    p.add_argument("--continuous-hours", type=float, default=0.0, metavar="H",
                   help="also train on 1 h of a stationary healthy pump and run H hours of another "
                        "realisation: the stated false-alert rate beside the raises observed (24 for issue 15's check)")
    p.add_argument("--quiet", action="store_true", help="no progress lines")


def run(args) -> int:
    from host_tools.ops import bench

    figures = bench.device_figures()
    figures.update(bench.host_figures())
    figures.update(bench.workflow_figures())
    if args.continuous_hours > 0:
        import sys

        from host_tools.ops.continuous import continuous_check

        def progress(x):
            if not args.quiet:
                print(f"continuous healthy running: {100 * x:.0f} %", file=sys.stderr)
        figures["continuous"] = continuous_check(3600.0, args.continuous_hours * 3600.0, progress=progress)
    figures["targets_met"] = bench.met(figures)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        width = max(map(len, figures))
        for k, v in figures.items():
            print(f"{k:<{width}}  {v}")
    return 0
