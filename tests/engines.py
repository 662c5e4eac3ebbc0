"""The two real MicroPythons of the test suite, for tests that run the same guest code on both:
the WASI build (bytecode, 31-bit small ints: host_tools.twin.mpy_guest) and the unix port with
the viper functions compiled to x86-64 code (host_tools.twin.mpy_unix). Each runner takes a
guest body and returns an object whose .out holds what the guest emitted."""
import pytest

from host_tools.twin.mpy_guest import run_guest
from host_tools.twin.mpy_unix import run_unix

ENGINES = pytest.mark.parametrize("run", [run_guest, run_unix], ids=["wasi-bytecode", "unix-viper"])


class _CPythonResult:
    def __init__(self, out):
        self.out = out


def run_cpython(body):
    """The same guest body under CPython (firmware_py imported as the host imports it), with
    emit() and locked() as the guests have them: the reference the MicroPythons are held to."""
    import json
    import textwrap

    import firmware_py  # noqa: F401  (the micropython stand-in)
    out = []

    def emit(v):
        out.append(json.loads(json.dumps(v)))    # the guests' JSON round trip

    def locked(fn):
        return True, fn()
    exec(compile(textwrap.dedent(body), "<guest body>", "exec"), {"emit": emit, "locked": locked})
    return _CPythonResult(out)
