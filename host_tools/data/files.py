"""Files the commands read and write: parameter-set bodies, board profiles, and output paths.

Entry points: load_body(path) -> (bytes, map), encode_set(params, profile) -> the body bytes a
gateway's store takes, expected_rate(path) -> the expected false alerts per 30 days from the
training summary beside a set, load_board(path) -> profile, require_existing(paths) refuses
recordings or folders that are not there, check_outputs(paths, sources) refuses outputs that would
overwrite an input; DEFAULT_BOARD.
"""
from __future__ import annotations

import json
import os
from pathlib import Path

import msgpack

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.codec import mpack
from firmware_py.run import board
from firmware_py.run import params as pm
from host_tools.data.recording import sidecar_path
from host_tools.errors import EdgevibError

DEFAULT_BOARD = Path(__file__).resolve().parents[2] / "boards" / "desk.json"
_REQUIRED = ("version", "board", "fs_hz", "n", "axes")   # keys every parameter-set body holds
# The gateway's parameter store holds images up to 8192 bytes (firmware_py.store.paramstore, cap);
# an image is the body plus 5 bytes of head, 32 of signature and 4 of CRC.
_STORE_CAP = 8192
_IMAGE_EXTRA = 5 + 32 + 4


def load_body(path: str) -> tuple[bytes, dict]:
    """The file's bytes and the map they decode to; EdgevibError unless a usable set body."""
    try:
        with open(path, "rb") as f:
            data = f.read()
    except OSError as e:
        raise EdgevibError(f"{path}: cannot read ({e.strerror})") from None
    try:
        body = msgpack.unpackb(data, raw=False, strict_map_key=False)
    except Exception as e:   # msgpack raises several types for malformed input
        raise EdgevibError(f"{path}: not a MessagePack value ({type(e).__name__}: {e})") from None
    if not isinstance(body, dict):
        raise EdgevibError(f"{path}: a parameter set is a MessagePack map, this is a {type(body).__name__}")
    for k in _REQUIRED:
        if k not in body:
            raise EdgevibError(f"{path}: parameter set has no '{k}'")
    if not isinstance(body["version"], int) or isinstance(body["version"], bool):
        raise EdgevibError(f"{path}: 'version' must be an int")
    return data, body


def encode_set(params: dict, profile: dict) -> bytes:
    """The MessagePack body of `params`, checked: the device's own decoder reads it back unchanged,
    it fits a gateway's store, and the device can build it on `profile`."""
    body = msgpack.packb(params, use_bin_type=True)
    if mpack.unpackb(body) != params:
        raise EdgevibError("internal: the encoded parameter set does not decode to itself")
    if len(body) + _IMAGE_EXTRA > _STORE_CAP:
        raise EdgevibError(f"the parameter set is {len(body)} bytes, more than a gateway's store holds")
    pm.build(params, profile)
    return body


def expected_rate(path: str | os.PathLike) -> float | None:
    """Expected false alerts per 30 days from the training summary beside the set at `path`
    (PARAMS.json beside PARAMS.msgpack), if there is one."""
    side = Path(path).with_suffix(".json")
    try:
        doc = json.loads(side.read_text(encoding="utf-8"))
        v = doc["thresholds"]["expected_false_alerts_per_30_days"]
    except (OSError, ValueError, KeyError, TypeError):
        return None
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def load_board(path: str | Path | None) -> dict:
    """The board profile at path (default DEFAULT_BOARD); EdgevibError with the reason if unusable."""
    try:
        return board.load(str(path or DEFAULT_BOARD))
    except board.BoardError as e:
        raise EdgevibError(f"board profile {e}") from None


def require_existing(sources: list[Path]) -> None:
    """One clear line for a recording or folder that is not there."""
    for s in sources:
        if not s.exists():
            raise EdgevibError(f"{s}: no such recording or folder")


def check_outputs(paths: list[Path], sources: list[Path]) -> None:
    """Refuse outputs that would overwrite an input (recording or sidecar) or have no folder."""
    inputs: set[Path] = set()
    for s in sources:
        files = [q for q in s.iterdir()] if s.is_dir() else [s, sidecar_path(s)]
        inputs.update(q.resolve() for q in files)
    for o in paths:
        if o.resolve() in inputs:
            raise EdgevibError(f"{o}: would overwrite an input; choose another name")
        if not o.parent.is_dir():
            raise EdgevibError(f"{o}: folder {o.parent} does not exist")
