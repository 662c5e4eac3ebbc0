"""`edgevib fleet init|replay|train|compare|review FLEET`: the single-pump commands over every gateway of a fleet, through Dask.

FLEET is a fleet folder (host_tools.fleet.layout; docs/engineer.md, "A fleet"). Every action but
init runs on a Dask cluster: by default a local one with a worker process per core, nothing to set
up; `--scheduler ADDRESS` sends the same work to an existing cluster whose workers see FLEET at
the same path. Work units are (gateway, recording chunk) feature tasks and one detector pass per
gateway in time order (host_tools.fleet.work), so results equal `edgevib replay` on each
gateway alone. A gateway whose folder, manifest or recordings are broken gets its own error line
and the rest completes; the exit status is then 2.

- init FLEET [--name N]: make the fleet folder; with --gateway ID --pump --site --board (and
  optionally --vane-count, --bearing, --overhaul, --params, --params-since) add a gateway to it.
- replay FLEET --out DIR: each gateway's archive/ with its params.msgpack; DIR/replay.json holds
  per gateway the replay summary and events (as `edgevib replay --json`) or its error; --reports
  adds each gateway's replay report in DIR/<gateway>/report/.
- train FLEET --out DIR: a set per gateway from its healthy/ recordings, into DIR/<gateway>/
  params.msgpack, params.json, params.report.txt (the gateways' own sets are left alone); version
  one above the set in use. DIR/train.json: per gateway the thresholds or its error.
- compare FLEET --candidates CANDS --out DIR: per gateway, the set in use against
  CANDS/<gateway>/params.msgpack over its archive (host_tools.twin.compare, as `edgevib compare`):
  DIR/<gateway>/compare/index.html and DIR/compare.json. Nothing is flashed.
- review FLEET --out DIR: replay as above plus the healthy recordings (the drift reference), and
  one page DIR/index.html: a row per pump, most severe first (host_tools.fleet.review and page),
  with a link to each pump's report DIR/<gateway>/report/index.html. DIR/review.json: the rows.
--since/--until (UTC dates) limit the recordings replayed to those starting in [since, until).
Progress: a bar on a terminal, a line at every tenth otherwise, counted in Dask tasks done;
--quiet turns it off. --json prints
the written JSON instead of the summary lines.
"""
from __future__ import annotations

import argparse
import json
import shutil
from datetime import date, datetime, timezone
from pathlib import Path
from typing import Any

from host_tools.errors import EdgevibError

HELP = "run replay, train, compare or review over every gateway of a fleet folder, in parallel through Dask"
_ACTIONS = ("init", "replay", "train", "compare", "review")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("action", choices=_ACTIONS, help="what to do")
    p.add_argument("fleet", metavar="FLEET", help="the fleet folder")
    p.add_argument("--out", metavar="DIR", help="output folder (replay, train, review): made, or replaced if it holds an earlier run")
    p.add_argument("--scheduler", metavar="ADDRESS", help="an existing Dask scheduler (default: a local cluster on this machine's cores)")
    p.add_argument("--workers", type=int, metavar="N", help="local cluster: worker processes (default: one per core)")
    p.add_argument("--since", metavar="YYYY-MM-DD", help="replay recordings starting on or after this UTC date")
    p.add_argument("--until", metavar="YYYY-MM-DD", help="replay recordings starting before this UTC date")
    p.add_argument("--candidates", metavar="DIR", help="compare: the sets to compare with, DIR/<gateway>/params.msgpack (as `fleet train` writes them)")
    p.add_argument("--reports", action="store_true", help="replay: also write each gateway's replay report")
    p.add_argument("--false-alerts-per-month", type=float, default=1.0, metavar="X",
                   help="train: target expected false alerts per 30 days of running (default 1)")
    p.add_argument("--json", action="store_true", help="print the JSON written instead of the summary lines")
    g = p.add_argument_group("init: add a gateway")
    g.add_argument("--name", help="init: the fleet's name (default: the folder's name)")
    g.add_argument("--gateway", metavar="ID", help="gateway id (its folder name)")
    g.add_argument("--pump", help="pump name")
    g.add_argument("--site", help="site name")
    g.add_argument("--board", help="board profile name (boards/NAME.json)")
    g.add_argument("--vane-count", type=int, metavar="N", help="impeller vanes")
    g.add_argument("--bearing", metavar="N,D_BALL,D_PITCH[,ANGLE]",
                   help="drive-end bearing: rolling elements, ball and pitch diameters (mm), contact angle (degrees)")
    g.add_argument("--overhaul", action="append", default=[], metavar="YYYY-MM-DD", help="an overhaul date (repeat)")
    g.add_argument("--params", metavar="PARAMS.msgpack", help="the parameter set on the gateway now (copied, with PARAMS.json)")
    g.add_argument("--params-since", metavar="YYYY-MM-DD", help="UTC date that set went onto the gateway")


def run(args: argparse.Namespace) -> int:
    if args.action == "init":
        return _init(args)
    from host_tools.fleet import layout
    layout.read_fleet(args.fleet)
    if not args.out:
        raise EdgevibError(f"fleet {args.action}: give --out DIR")
    out = Path(args.out)
    _check_out(out, Path(args.fleet))
    if args.workers is not None and args.workers < 1:
        raise EdgevibError("--workers must be at least 1")
    if args.action == "compare" and not (args.candidates and Path(args.candidates).is_dir()):
        raise EdgevibError("fleet compare: give --candidates DIR, a folder with <gateway>/params.msgpack (e.g. from `fleet train`)")
    if args.action == "train" and not args.false_alerts_per_month > 0:
        raise EdgevibError("--false-alerts-per-month must be a positive number")
    since = _day(args.since, "--since")
    until = _day(args.until, "--until")
    from host_tools.fleet import engine, runs
    from host_tools.report.replay_report import staging_folder, swap_in
    tmp = staging_folder(out)
    try:
        with engine.cluster(args.scheduler, args.workers) as client:
            if args.action == "compare":
                doc, lines = runs.compare_fleet(client, Path(args.fleet), Path(args.candidates), tmp, since, until)
            elif args.action == "train":
                doc, lines = runs.train_fleet(client, Path(args.fleet), tmp, args.false_alerts_per_month)
            else:
                doc, lines = runs.replay_fleet(client, Path(args.fleet), tmp, since, until, args.action == "review",
                                          args.reports or args.action == "review")
        swap_in(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if args.json:
        print(json.dumps(doc, indent=1))
    else:
        print("\n".join(lines))
        print(f"wrote {out}")
    return 2 if doc["errors"] else 0


# --- init ------------------------------------------------------------------------------------------

def _init(args: argparse.Namespace) -> int:
    from host_tools.data.files import load_body
    from host_tools.fleet import layout
    root = layout.init_fleet(args.fleet, args.name or Path(args.fleet).resolve().name)
    if not args.gateway:
        if any(getattr(args, k) for k in ("pump", "site", "board", "params")):
            raise EdgevibError("fleet init: --pump, --site, --board and --params describe a gateway; give --gateway ID too")
        print(f"fleet folder {root} ready; add gateways with `edgevib fleet init {root} --gateway ID --pump ... --site ... --board ...`")
        return 0
    manifest: dict[str, Any] = {"pump": args.pump, "site": args.site, "board": args.board,
                                "vane_count": args.vane_count, "bearing": _bearing(args.bearing),
                                "overhauls": sorted(args.overhaul), "params_since": args.params_since}
    body = summary = None
    if args.params:
        body, params = load_body(args.params)
        if args.board and params["board"] != args.board:
            raise EdgevibError(f"{args.params}: the set is for board {params['board']}, not {args.board}")
        side = Path(args.params).with_suffix(".json")
        if side.is_file():
            try:
                summary = json.loads(side.read_text(encoding="utf-8"))
            except (ValueError, UnicodeDecodeError) as e:
                raise EdgevibError(f"{side}: not valid JSON ({e})") from None
        if args.params_since is None:
            manifest["params_since"] = datetime.now(timezone.utc).date().isoformat()
    folder = layout.add_gateway(root, args.gateway, manifest, body, summary)
    print(f"added gateway {args.gateway} ({args.pump}, {args.site}) in {folder}: recordings go in "
          f"{layout.ARCHIVE}/, event captures in {layout.CAPTURES}/, healthy duty for training in {layout.HEALTHY}/")
    return 0


def _bearing(text: str | None) -> dict | None:
    if not text:
        return None
    parts = text.split(",")
    try:
        vals = [float(v) for v in parts]
    except ValueError:
        raise EdgevibError(f"--bearing {text!r}: give N,D_BALL,D_PITCH[,ANGLE] as numbers") from None
    if len(vals) not in (3, 4) or vals[0] != int(vals[0]):
        raise EdgevibError(f"--bearing {text!r}: give N,D_BALL,D_PITCH[,ANGLE] (N a whole number)")
    return {"n_elements": int(vals[0]), "ball_diameter_mm": vals[1], "pitch_diameter_mm": vals[2],
            "contact_angle_deg": vals[3] if len(vals) == 4 else 0.0}


def _day(text: str | None, opt: str) -> float | None:
    if text is None:
        return None
    from host_tools.fleet.layout import date_t_s
    try:
        return date_t_s(date.fromisoformat(text))
    except ValueError:
        raise EdgevibError(f"{opt} {text!r}: give a UTC date as YYYY-MM-DD") from None


def _check_out(out: Path, fleet: Path) -> None:
    if out.resolve() == fleet.resolve() or fleet.resolve() in out.resolve().parents:
        raise EdgevibError(f"{out}: outputs go outside the fleet folder (recordings are never touched)")
    if out.exists() and not out.is_dir():
        raise EdgevibError(f"{out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not any((out / n).is_file() for n in ("replay.json", "train.json", "compare.json", "review.json")):
        raise EdgevibError(f"{out}: folder holds other files and no earlier fleet run; choose an empty or new folder")
    if not out.parent.is_dir():
        raise EdgevibError(f"{out}: folder {out.parent} does not exist")
