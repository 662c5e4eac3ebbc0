"""`edgevib rollback --port PORT [--key-file K]`: return a gateway to its previous parameter set.

With a site key the command is signed for exactly this step (docs/protocol.md, "Site key").
"""
from __future__ import annotations

import argparse

from host_tools.link.device_link import connected, read_key
from host_tools.errors import EdgevibError
from host_tools.link import DeviceRefused

HELP = "return a gateway to its previous parameter set"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    p.add_argument("--key-file", metavar="K", help="site key file: sign the rollback (its bytes are the key)")


def run(args: argparse.Namespace) -> int:
    key = read_key(args.key_file)
    with connected(args.port) as c:
        info = c.identify()
        if info["param_previous"] is None:
            raise EdgevibError(f"the gateway on {args.port} has no previous parameter set to roll back to")
        before = info["param_version"]
        try:
            version = c.rollback(key)
        except DeviceRefused as e:
            if e.code == "refused":
                raise EdgevibError(str(e)) from None
            raise
        info = c.identify()
    print(f"rolled back from version {before} to version {version} (CRC 0x{info['param_crc']:08x})")
    return 0
