"""The `edgevib` command line: one table of sub-commands, each a module in host_tools.commands.

Each command module defines HELP (one line), add_arguments(parser) and run(args) -> int.
Modules are imported only when their command runs, so start-up stays quick.
"""
from __future__ import annotations

import argparse
import importlib
import sys

from host_tools.errors import EdgevibError

# name -> module under host_tools.commands
COMMANDS = {
    "bench": "bench",
    "check": "check",
    "demo": "demo",
}


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="edgevib", description="Vibration condition monitoring tools.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, modname in COMMANDS.items():
        mod = importlib.import_module("host_tools.commands." + modname)
        sp = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(sp)
        sp.set_defaults(_run=mod.run)
    return p


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return int(args._run(args) or 0)
    except EdgevibError as e:
        print(f"edgevib: error: {e}", file=sys.stderr)
        return e.exit_status
    except KeyboardInterrupt:
        print("edgevib: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
