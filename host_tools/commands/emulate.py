"""`edgevib emulate --recording REC.wav [--board B] [--speed X] [--state-dir DIR] [--loop]`:
a virtual gateway on a pseudo-terminal (host_tools/twin/virtual_gateway.py).

The first line on stdout is the port to give the other commands (`--port`). The parameter files
and event snapshots live in --state-dir (a temporary folder, removed at exit, by default), so
stopping and restarting on the same folder is a power cut. At the end of the recording the
gateway idles, still answering on the link; --loop starts the recording again instead. Runs
until Ctrl-C, SIGTERM or SIGHUP.
"""
from __future__ import annotations

import argparse
import shutil
import signal
import sys
import tempfile
import threading

from host_tools.link.device_link import read_key
from host_tools.twin.virtual_gateway import DESK_BOARD, VirtualGateway, load_profile

HELP = "run a virtual gateway fed from a recording, on a pseudo-terminal"
_STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)   # SIGHUP: its terminal closed


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--recording", required=True, metavar="REC.wav", help="recording with its sidecar")
    p.add_argument("--board", metavar="B.json", help=f"board profile (default {DESK_BOARD.name})")
    p.add_argument("--speed", type=float, default=1.0,
                   help="real time multiple; 0 = as fast as possible (default 1)")
    p.add_argument("--state-dir", metavar="DIR",
                   help="folder for the parameter store and snapshots (default: a temporary one)")
    p.add_argument("--loop", action="store_true", help="repeat the recording instead of idling at its end")
    p.add_argument("--key-file", metavar="K", help="site key the virtual gateway holds (its bytes are the key)")


def run(args: argparse.Namespace) -> int:
    profile = load_profile(args.board)
    key = read_key(args.key_file)
    stop = threading.Event()
    before = {sig: signal.signal(sig, lambda *_: stop.set()) for sig in _STOP_SIGNALS}
    temp = None
    try:
        state = args.state_dir or tempfile.mkdtemp(prefix="edgevib-emulate-")
        temp = None if args.state_dir else state
        vg = VirtualGateway(args.recording, profile, state, speed=args.speed,
                            loop=args.loop, key=key)
        print(vg.port, flush=True)
        print(f"edgevib emulate: {profile['name']} gateway on {vg.port}, {vg.recording.duration_s:.1f} s "
              f"of {vg.recording.path.name} at speed {args.speed:g}, state in {state}",
              file=sys.stderr, flush=True)
        if vg.saturated:
            print(f"edgevib emulate: {vg.saturated} samples beyond the converter's range are saturated, "
                  "as the board's sensor would read them", file=sys.stderr, flush=True)
        vg.start()
        told = False
        while not stop.wait(0.2):
            if vg.ended.is_set() and not told:
                then = "starting it again" if args.loop else "idling, still answering (Ctrl-C to stop)"
                print(f"edgevib emulate: the recording has played to its end; {then}", file=sys.stderr, flush=True)
                told = True
        vg.stop()
    finally:
        if temp:
            shutil.rmtree(temp, ignore_errors=True)
        for sig, handler in before.items():
            signal.signal(sig, handler)
    return 0
