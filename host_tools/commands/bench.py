"""edgevib bench: measured cost of the feature stage on a real MicroPython and on the host."""
from __future__ import annotations

import json

HELP = "measure feature-stage cost (MicroPython fuel, heap, host throughput) and print the figures"


def add_arguments(p):
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")


def run(args) -> int:
    from host_tools.ops import bench

    figures = bench.device_figures()
    figures.update(bench.host_figures())
    figures.update(bench.workflow_figures())
    from host_tools.fleet.throughput import fleet_figures
    figures.update(fleet_figures())
    figures["targets_met"] = bench.met(figures)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        width = max(map(len, figures))
        for k, v in figures.items():
            print(f"{k:<{width}}  {v}")
    return 0
