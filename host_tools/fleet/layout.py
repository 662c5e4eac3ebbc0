"""The fleet folder: one sub-folder per gateway, each with its recordings, captures, parameter set and manifest.

Entry points: init_fleet(root, name), add_gateway(root, gateway, manifest), install_set(folder, ...),
gateways(root),
read_manifest(folder), recording_spans(files), filing_folder(root, gateway, kind).

    FLEET/
      fleet.json               {"edgevib_fleet": 1, "name": ...}: marks the folder as a fleet
      <gateway>/               one per gateway; the folder name is the gateway's id
        gateway.json           the manifest (below)
        params.msgpack         the parameter set on the gateway now (body as `edgevib flash` sends it)
        params.json            what its training learned (host_tools.fit.training summary), if known
        archive/               recordings of the pump (periodic snapshots, `edgevib record`)
        captures/              event captures (`edgevib events`)
        healthy/               recordings chosen as healthy duty, for training

The manifest, gateway.json, one JSON object:
    pump          required  the pump's name (e.g. "P-101")
    site          required  where it stands
    board         required  board profile name (boards/<board>.json)
    vane_count    optional  impeller vanes (int), null when unknown
    bearing       optional  drive-end bearing: {"designation", "n_elements", "ball_diameter_mm",
                            "pitch_diameter_mm", "contact_angle_deg"}; null when unknown
    overhauls     required  UTC dates of overhauls, "YYYY-MM-DD", oldest first (may be empty)
    params_since  optional  UTC date the current parameter set went onto the gateway
Other keys are kept untouched. A broken manifest is refused with one line naming the file.

Recordings are never modified here; filing writes new files into archive/ or captures/ only.
"""
from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass, field
from datetime import date, datetime, timezone
from pathlib import Path
from typing import Any

from host_tools.data.bearing import geometry_from_record
from host_tools.data.recording import RECORDING_SUFFIXES, atomic_write
from host_tools.errors import EdgevibError

FLEET_FILE = "fleet.json"
MANIFEST = "gateway.json"
PARAMS = "params.msgpack"
PARAMS_SUMMARY = "params.json"
ARCHIVE, CAPTURES, HEALTHY = "archive", "captures", "healthy"
KINDS = (ARCHIVE, CAPTURES, HEALTHY)
FORMAT = 1
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


@dataclass(frozen=True)
class Manifest:
    """A gateway's manifest (see the module docstring); dates as datetime.date."""

    gateway: str
    pump: str
    site: str
    board: str
    overhauls: tuple[date, ...]
    vane_count: int | None = None
    bearing: dict[str, Any] | None = None
    params_since: date | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def to_json(self) -> dict[str, Any]:
        """The manifest as written to gateway.json."""
        out = {"pump": self.pump, "site": self.site, "board": self.board, "vane_count": self.vane_count,
               "bearing": self.bearing, "overhauls": [d.isoformat() for d in self.overhauls],
               "params_since": self.params_since.isoformat() if self.params_since else None}
        out.update(self.extra)
        return out


def init_fleet(root: str | os.PathLike, name: str) -> Path:
    """Make (or keep) the fleet folder `root` with its fleet.json; refuses a folder holding other things."""
    r = Path(root)
    marker = r / FLEET_FILE
    if marker.is_file():
        read_fleet(r)
        return r
    if r.exists() and (not r.is_dir() or any(r.iterdir())):
        raise EdgevibError(f"{r}: exists and is not an empty folder nor a fleet; choose a new or empty folder")
    if not r.parent.is_dir():
        raise EdgevibError(f"{r}: folder {r.parent} does not exist")
    r.mkdir(exist_ok=True)
    atomic_write(marker, (json.dumps({"edgevib_fleet": FORMAT, "name": name}, indent=1) + "\n").encode())
    return r


def read_fleet(root: str | os.PathLike) -> dict[str, Any]:
    """fleet.json of `root`; refuses a folder that is not a fleet."""
    marker = Path(root) / FLEET_FILE
    if not marker.is_file():
        raise EdgevibError(f"{root}: not a fleet folder (no {FLEET_FILE}; make one with `edgevib fleet init`)")
    try:
        meta = json.loads(marker.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as e:
        raise EdgevibError(f"{marker}: not valid JSON ({e})") from None
    if not isinstance(meta, dict) or meta.get("edgevib_fleet") != FORMAT:
        raise EdgevibError(f"{marker}: not a fleet description of format {FORMAT}")
    return meta


def add_gateway(root: str | os.PathLike, gateway: str, manifest: dict[str, Any],
                params_body: bytes | None = None, params_summary: dict | None = None) -> Path:
    """Make FLEET/<gateway>/ with its manifest, empty archive/captures/healthy folders and, if given,
    its parameter set (MessagePack body) and training summary. Refuses an existing gateway."""
    read_fleet(root)
    if not _ID.match(gateway):
        raise EdgevibError(f"gateway id {gateway!r}: use letters, digits, '.', '_' or '-' (up to 64, not starting with a sign)")
    folder = Path(root) / gateway
    if folder.exists():
        raise EdgevibError(f"{folder}: gateway already in the fleet")
    parse_manifest(folder / MANIFEST, manifest)     # refuse a bad manifest before anything is made
    folder.mkdir()
    for k in KINDS:
        (folder / k).mkdir()
    if params_body is not None:
        atomic_write(folder / PARAMS, params_body)
    if params_summary is not None:
        atomic_write(folder / PARAMS_SUMMARY, (json.dumps(params_summary, indent=1) + "\n").encode())
    atomic_write(folder / MANIFEST, (json.dumps(manifest, indent=1) + "\n").encode())
    return folder


def install_set(folder: str | os.PathLike, params_body: bytes, params_summary: dict | None, since: date) -> None:
    """Record in gateway folder `folder` that a parameter set went onto the gateway on `since`:
    params.msgpack (and params.json when given) replaced whole, params_since in the manifest set."""
    f = Path(folder)
    path = f / MANIFEST
    raw = json.loads(path.read_text(encoding="utf-8"))
    read_manifest(f)
    raw["params_since"] = since.isoformat()
    atomic_write(f / PARAMS, params_body)
    if params_summary is not None:
        atomic_write(f / PARAMS_SUMMARY, (json.dumps(params_summary, indent=1) + "\n").encode())
    atomic_write(path, (json.dumps(raw, indent=1) + "\n").encode())


def gateways(root: str | os.PathLike) -> list[Path]:
    """The gateway folders of a fleet (sub-folders holding a manifest or any of the known folders), by name."""
    read_fleet(root)
    return sorted(p for p in Path(root).iterdir()
                  if p.is_dir() and not p.name.startswith(".") and
                  ((p / MANIFEST).exists() or any((p / k).is_dir() for k in KINDS)))


def read_manifest(folder: str | os.PathLike) -> Manifest:
    """The manifest of gateway folder `folder`; EdgevibError with one line naming the file if broken."""
    path = Path(folder) / MANIFEST
    if not path.is_file():
        raise EdgevibError(f"{path}: missing manifest")
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as e:
        raise EdgevibError(f"{path}: manifest is not valid JSON ({e})") from None
    return parse_manifest(path, raw)


def parse_manifest(path: Path, raw: Any) -> Manifest:
    """Check a manifest's keys (see the module docstring); `path` names it in errors."""
    if not isinstance(raw, dict):
        raise EdgevibError(f"{path}: manifest must be a JSON object")
    for key in ("pump", "site", "board"):
        if not isinstance(raw.get(key), str) or not raw[key].strip():
            raise EdgevibError(f"{path}: manifest needs {key!r} (a non-empty string)")
    vanes = raw.get("vane_count")
    if vanes is not None and (not isinstance(vanes, int) or isinstance(vanes, bool) or vanes < 1):
        raise EdgevibError(f"{path}: vane_count must be a positive int or null, not {vanes!r}")
    bearing = raw.get("bearing")
    if bearing is not None:
        if not isinstance(bearing, dict):
            raise EdgevibError(f"{path}: bearing must be an object or null")
        try:
            geometry_from_record(bearing)
        except KeyError as e:
            raise EdgevibError(f"{path}: bearing needs {e.args[0]!r}") from None
        except (TypeError, ValueError) as e:
            raise EdgevibError(f"{path}: bearing data not numbers ({e})") from None
        except EdgevibError as e:
            raise EdgevibError(f"{path}: {e}") from None
    overhauls = raw.get("overhauls")
    if not isinstance(overhauls, list):
        raise EdgevibError(f"{path}: manifest needs 'overhauls', a list of UTC dates YYYY-MM-DD (may be empty)")
    days = tuple(_date(path, "overhauls", v) for v in overhauls)
    if list(days) != sorted(days):
        raise EdgevibError(f"{path}: overhauls must be listed oldest first")
    since = raw.get("params_since")
    known = {"pump", "site", "board", "vane_count", "bearing", "overhauls", "params_since"}
    return Manifest(gateway=path.parent.name, pump=raw["pump"], site=raw["site"], board=raw["board"],
                    overhauls=days, vane_count=vanes, bearing=bearing,
                    params_since=None if since is None else _date(path, "params_since", since),
                    extra={k: v for k, v in raw.items() if k not in known})


def _date(path: Path, key: str, v: Any) -> date:
    if not isinstance(v, str) or not _DATE.match(v):
        raise EdgevibError(f"{path}: {key} must be UTC dates written YYYY-MM-DD, not {v!r}")
    try:
        return date.fromisoformat(v)
    except ValueError:
        raise EdgevibError(f"{path}: {key}: {v!r} is not a calendar date") from None


def date_t_s(d: date) -> float:
    """Unix seconds of the start (00:00 UTC) of date d."""
    return datetime(d.year, d.month, d.day, tzinfo=timezone.utc).timestamp()


def filing_target(out: str | None, fleet: str | None, gateway: str | None, kind: str, option: str) -> Path | None:
    """Where `record` (kind archive) or `events` (kind captures) writes: `out` as given, or with
    --fleet and --gateway the gateway's folder of that kind (None then means: name a file in it).
    option: the command's own output option, for the message when neither or both are given."""
    if fleet is None and gateway is None:
        if out is None:
            raise EdgevibError(f"give {option}, or --fleet FLEET --gateway ID to file into a fleet folder")
        return Path(out)
    if out is not None or fleet is None or gateway is None:
        raise EdgevibError(f"give either {option} or both --fleet and --gateway")
    return filing_folder(fleet, gateway, kind)


def filing_folder(root: str | os.PathLike, gateway: str, kind: str) -> Path:
    """Where `record` (kind archive) or `events` (kind captures) files into for `gateway`; refuses
    a fleet or gateway that does not exist."""
    if kind not in KINDS:
        raise EdgevibError(f"unknown fleet folder kind {kind!r}")
    read_fleet(root)
    folder = Path(root) / gateway
    read_manifest(folder)
    out = folder / kind
    out.mkdir(exist_ok=True)
    return out


# --- recordings ---------------------------------------------------------------------------------

def recording_files(folder: Path) -> list[Path]:
    """The recordings in `folder` (not recursive), by name; none when it does not exist."""
    if not folder.is_dir():
        return []
    return sorted(q for q in folder.iterdir() if q.suffix.lower() in RECORDING_SUFFIXES and q.is_file())
