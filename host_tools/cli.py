"""The `edgevib` command line: one table of sub-commands, each a module in host_tools.commands.

Each command module defines HELP (one line), add_arguments(parser) and run(args) -> int.
`--quiet` (before or after the command name) turns progress output off (host_tools.progress).
Only the module of the command being run is imported (all of them for the top-level help), so
start-up stays quick and one command's import trouble cannot break another.

Entry points: main().
"""
from __future__ import annotations

import argparse
import importlib
import sys

from host_tools import progress
from host_tools.errors import EdgevibError

# name -> module under host_tools.commands
COMMANDS = {
    "bench": "bench",
    "check": "check",
    "compare": "compare",
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
    p.add_argument("--quiet", action="store_true", help="no progress bars or progress lines")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                        help="no progress bars or progress lines")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    wanted = next((a for a in argv if not a.startswith("-")), None)
    for name, modname in COMMANDS.items():
        if wanted in COMMANDS and name != wanted:
            sub.add_parser(name)
            continue
        mod = importlib.import_module("host_tools.commands." + modname)
        sp = sub.add_parser(name, help=mod.HELP, description=mod.HELP, parents=[common])
        mod.add_arguments(sp)
        sp.set_defaults(_run=mod.run)
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    args = _parser(argv).parse_args(argv)
    progress.set_quiet(args.quiet)
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
