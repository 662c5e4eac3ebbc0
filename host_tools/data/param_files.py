"""Parameter set files and board profiles on the host: read, check, encode.

Entry points: load_body(path) reads a PARAMS.msgpack body, encode_set(params, profile) turns a set
into the body bytes a gateway's store takes (refusing one that would not fit or not decode),
load_board(path) reads a board profile, board_path(name) finds boards/<name>.json. Used by the
train, replay and flash commands and by the fleet tools.
"""
from __future__ import annotations

import os
from pathlib import Path

import msgpack

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.codec import mpack
from firmware_py.run import board
from firmware_py.run import params as pm
from host_tools.errors import EdgevibError

BOARDS = Path(__file__).resolve().parents[2] / "boards"
_REQUIRED = ("version", "board", "fs_hz", "n", "axes")
# The gateway's parameter store holds images up to 8192 bytes (firmware_py.store.paramstore, cap);
# an image is the body plus 5 bytes of head, 32 of signature and 4 of CRC.
_STORE_CAP = 8192
_IMAGE_EXTRA = 5 + 32 + 4


def load_body(path: str | os.PathLike) -> tuple[bytes, dict]:
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


def load_board(path: str | os.PathLike | None) -> dict:
    """The board profile at `path` (None: the default desk profile)."""
    from host_tools.check.commission import DEFAULT_BOARD
    try:
        return board.load(str(path or DEFAULT_BOARD))
    except board.BoardError as e:
        raise EdgevibError(f"board profile {e}") from None


def board_path(name: str) -> Path:
    """boards/<name>.json of the project."""
    return BOARDS / f"{name}.json"
