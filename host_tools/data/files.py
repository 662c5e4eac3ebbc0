"""Files the commands read and write: parameter-set bodies, board profiles, and output paths.

Entry points: load_body(path) -> (bytes, map), load_board(path) -> profile, require_existing(paths)
refuses recordings or folders that are not there, check_outputs(paths,
sources) refuses outputs that would overwrite an input; DEFAULT_BOARD.
"""
from __future__ import annotations

from pathlib import Path

import msgpack

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.run import board
from host_tools.data.recording import sidecar_path
from host_tools.errors import EdgevibError

DEFAULT_BOARD = Path(__file__).resolve().parents[2] / "boards" / "desk.json"
_REQUIRED = ("version", "board", "fs_hz", "n", "axes")   # keys every parameter-set body holds


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
