"""The host's proof that a parameter set runs before it goes anywhere (flash, deploy, replay).

prove(body, profile, where) runs firmware_py.run.param_check.trial, the device's own check (types,
cross-key consistency, a build and synthetic windows under the heap lock), and turns a refusal
into one EdgevibError line. profile_for(body) is the board profile the set names, if the host has
it (boards/<board>.json).
"""
from __future__ import annotations

from pathlib import Path

import firmware_py  # noqa: F401
from firmware_py.run import board, param_check
from host_tools.errors import EdgevibError

BOARDS = Path(__file__).resolve().parents[2] / "boards"


def prove(body: dict, profile: dict, where: str) -> None:
    """EdgevibError '<where>: parameter set refused: <reason>' unless body runs on profile."""
    try:
        param_check.trial(body, profile)
    except ValueError as e:
        raise EdgevibError(f"{where}: parameter set refused: {e}") from None


def profile_for(body: dict) -> dict | None:
    """The checked profile of the board body names, or None if the host has no such profile."""
    name = body.get("board")
    if not isinstance(name, str) or not name.replace("-", "").replace("_", "").isalnum():
        return None
    path = BOARDS / f"{name}.json"
    if not path.is_file():
        return None
    try:
        return board.load(str(path))
    except board.BoardError as e:
        raise EdgevibError(f"board profile {e}") from None
