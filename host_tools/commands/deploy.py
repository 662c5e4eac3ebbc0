"""`edgevib deploy --port PORT --board B`: precompile firmware_py to .mpy and copy it, main.py,
boot.py, the board profile and optional parameters to a gateway (host_tools.ops.deploy does it).

--dry-run builds the .mpy files and prints every command without touching a device. Otherwise the
board's firmware is read first and one that cannot run the native code is refused with the reason.
"""
from __future__ import annotations

import argparse
from pathlib import Path

HELP = "compile firmware_py to .mpy and copy it with the board profile to a gateway (mpremote)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True,
                   help="serial port of the gateway (e.g. /dev/ttyACM0, COM3)")
    p.add_argument("--board", required=True, metavar="B", help="board profile name (boards/B.json)")
    p.add_argument("--params", metavar="P.msgpack", type=Path,
                   help="parameter set for /params.cur: an image or a MessagePack map")
    p.add_argument("--build", metavar="DIR", type=Path,
                   help="build folder (default build/deploy-B)")
    p.add_argument("--wait", metavar="S", type=float, default=10.0,
                   help="seconds to wait for the port to appear after a reset (default 10)")
    p.add_argument("--dry-run", action="store_true",
                   help="build and print every command; do not touch the device")


def run(args: argparse.Namespace) -> int:
    from host_tools.ops import deploy

    _, profile = deploy.board_profile(args.board)
    image = deploy.parameter_image(args.params, profile) if args.params else None
    build = args.build or (Path("build") / ("deploy-" + args.board))
    pl = deploy.plan(args.port, args.board, build.resolve(), args.params)
    mpys = deploy.build_files(pl, image)
    print(f"built {len(mpys)} .mpy files in {pl.build}")
    if args.dry_run:
        print("dry run: would copy with")
        print(deploy.show(pl.copy_cmd))
        return 0
    deploy.copy_to_board(pl, args.wait, profile=profile)
    print(f"deployed {args.board} to {args.port}; the gateway restarts")
    return 0
