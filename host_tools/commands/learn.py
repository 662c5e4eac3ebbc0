"""`edgevib learn --port PORT --start | --stop`: on-device learning of this pump's normal.

Start it only while the pump runs healthy through its usual operating points: the gateway takes
what it sees as normal. Training on a laptop from recordings (`edgevib train`) sets better
thresholds; learning on the device is for commissioning without one.
"""
from __future__ import annotations

import argparse

from host_tools.link.device_link import add_key_argument, connected, read_key
from host_tools.errors import EdgevibError

HELP = "start or stop learning this pump's normal on the gateway"


def add_arguments(p: argparse.ArgumentParser) -> None:
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--start", action="store_true", help="start learning (baseline, then operating modes)")
    g.add_argument("--stop", action="store_true", help="abandon learning; the model in use stays")
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)


def run(args: argparse.Namespace) -> int:
    with connected(args.port, key=read_key(args.key_file)) as c:
        if args.stop:
            was = c.status()["state"]
            if was != "learning":
                print(f"the gateway was not learning (it is {was}); nothing to stop")
                return 0
        c.learn(bool(args.start))
        state = c.status()["state"]
    if args.start and state != "learning":
        raise EdgevibError(f"the gateway did not start learning (it is {state}): acknowledge a "
                           "latched alarm and clear any sensor fault first")
    if args.stop and state == "learning":
        raise EdgevibError("the gateway is still learning after the stop command")
    print("learning started" if args.start else f"learning stopped; the gateway is {state}")
    return 0
