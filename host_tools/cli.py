"""The `edgevib` command line: one table of sub-commands, each a module in host_tools.commands.

Each command module defines HELP (one line), add_arguments(parser) and run(args) -> int.
Only the module of the command being run is imported (all of them for the top-level help), so
start-up stays quick and one command's import trouble cannot break another.
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
    "deploy": "deploy",
    "replay": "replay",
    "train": "train",
    "emulate": "emulate",
    "events": "events",
    "flash": "flash",
    "monitor": "monitor",
    "record": "record",
    "rollback": "rollback",
    "ack": "ack",
    "learn": "learn",
    "fleet": "fleet",
}


def _parser(argv: list[str]) -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="edgevib", description="Vibration condition monitoring tools.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    wanted = next((a for a in argv if not a.startswith("-")), None)
    for name, modname in COMMANDS.items():
        if wanted in COMMANDS and name != wanted:
            sub.add_parser(name)
            continue
        mod = importlib.import_module("host_tools.commands." + modname)
        sp = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(sp)
        sp.set_defaults(_run=mod.run)
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    args = _parser(argv).parse_args(argv)
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
