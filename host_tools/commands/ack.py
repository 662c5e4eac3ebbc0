"""`edgevib ack --port PORT`: acknowledge a latched alarm on a gateway.

An alarm stays latched until a person acknowledges it. Acknowledging does not make the machine
healthy: if the cause is still there the gateway stays in alarm (or drops to alert) and says so.
"""
from __future__ import annotations

import argparse

from host_tools.link.device_link import add_key_argument, connected, read_key

HELP = "acknowledge a latched alarm on a gateway"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)


def run(args: argparse.Namespace) -> int:
    with connected(args.port, key=read_key(args.key_file)) as c:
        latched = c.acknowledge()
        state = c.status()["state"]
    if not latched:
        print(f"no alarm was latched; the gateway is {state}")
    elif state == "alarm":
        print("alarm acknowledged, but its cause is still present: the gateway stays in alarm")
    else:
        print(f"alarm acknowledged; the gateway is now {state}")
    return 0
