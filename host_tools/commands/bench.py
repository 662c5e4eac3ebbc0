"""edgevib bench: measured cost of the feature stage on a real MicroPython and on the host, and of
training and replay (one long stream at 1 and 2 jobs, peak memory, next to numpy.fft.rfft)."""
from __future__ import annotations

import json

HELP = "measure feature-stage cost (MicroPython fuel, heap, host throughput) and replay speed and memory"


def add_arguments(p):
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    p.add_argument("--stream-minutes", type=float, default=None, metavar="M",
                   help="length of the long single stream replayed (default 20)")


def run(args) -> int:
    from host_tools.errors import EdgevibError
    from host_tools.ops import bench
    from host_tools.progress import start

    minutes = bench.STREAM_MINUTES if args.stream_minutes is None else args.stream_minutes
    if not minutes > 0:
        raise EdgevibError("--stream-minutes must be a positive number")
    bar = start(4, "parts", "bench")
    figures = bench.device_figures()
    bar.update(1)
    figures.update(bench.host_figures())
    bar.update(1)
    figures.update(bench.workflow_figures(minutes))
    bar.update(1)
    from host_tools.fleet.throughput import fleet_figures
    figures.update(fleet_figures())
    bar.update(1)
    bar.close()
    figures["targets_met"] = bench.met(figures)
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        width = max(map(len, figures))
        for k, v in figures.items():
            print(f"{k:<{width}}  {v}")
    return 0
