"""Copies of firmware_py for a MicroPython guest to import: as written, or as bytecode only.

Entry points: stage_firmware(dst, emitters) and bytecode_source(text).

A port without native code generation (the WASI MicroPython of the test suite) rejects
`@micropython.viper` and `@micropython.native` at compile time ("invalid micropython decorator"),
so a function cannot detect the missing emitter itself: its module would not compile. The loader
for such a port is this copy step. It blanks the decorator lines (keeping line numbers for
tracebacks) and leaves every other line as it is, so the same function bodies run as bytecode,
with firmware_py.viper_stand standing in for the pointer casts. No second copy of any algorithm
exists: the staged files are the repository's files minus those lines.
"""
from __future__ import annotations

import re
import shutil
from pathlib import Path

import firmware_py

_DECORATOR = re.compile(r"^[ \t]*@micropython\.(viper|native)[ \t]*$", re.MULTILINE)


def bytecode_source(text: str) -> str:
    """text with every emitter decorator line made empty."""
    return _DECORATOR.sub("", text)


def stage_firmware(dst: Path, emitters: bool) -> Path:
    """Copy firmware_py into dst/firmware_py; without emitters, as bytecode_source of each file.
    Returns dst."""
    src = Path(firmware_py.__file__).parent
    out = dst / "firmware_py"
    shutil.copytree(src, out, ignore=shutil.ignore_patterns("__pycache__"))
    if not emitters:
        for f in out.rglob("*.py"):
            f.write_text(bytecode_source(f.read_text()))
    return dst
