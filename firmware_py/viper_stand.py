"""What the device's @micropython.viper functions need on ports without the viper emitter.

Entry points: ptr8, ptr16, ptr32 (stand-ins for viper's pointer casts) and SX32 (the shift that
sign-extends a 32-bit load to a machine word).

One source runs three ways: compiled by viper on a board (and on the unix MicroPython of the test
suite), as bytecode on the WASI MicroPython (the decorators removed before it compiles them: it
has no native emitter and rejects them as a syntax error; host_tools.twin.guest_stage does it),
and under CPython (firmware_py._host_micropython makes the decorators do nothing).

Inside a viper function the compiler treats ptr8/ptr16/ptr32(buf) as casts to a raw pointer into
buf's memory, whatever these names are bound to. Everywhere else these plain functions hand back
buf itself, which indexes the same elements. The two differ in one way that the device code
handles explicitly, so that every engine computes the same bits:

- A viper int is a machine word (32 bits on the boards, 64 on the x86-64 unix port), and a
  ptr16/ptr32 load zero-extends into it; indexing the array itself gives the signed value.
  Sign-extend every signed load: a 16-bit one as ((v & 0xFFFF) ^ 0x8000) - 0x8000 (right for
  either kind of load, on any word size), a 32-bit one as (v << SX32) >> SX32.
- Stores truncate to the element size in viper and must be in range for the array otherwise:
  store only values that fit the element type.
- Shift counts must stay below 32 (ARM and Xtensa treat larger counts differently, x86 takes them
  modulo 64).
"""
import sys

# Bits a machine word has beyond 32 where a ptr32 load is zero-extended into a wider viper int:
# 32 on a 64-bit port with native code, 0 on 32-bit ports (the load is the whole word), on ports
# without native code and under CPython (the load is a Python int with its sign). The native
# architecture is bits 10 and up of sys.implementation._mpy (0: none); CPython has no _mpy.
# Bytecode on a 64-bit port with native code shifts a signed Python int by 32 and back, which
# changes nothing (its small ints have 62 bits).
_ARCH = getattr(sys.implementation, "_mpy", 0) >> 10
SX32 = 32 if _ARCH and sys.maxsize > 0x7FFFFFFF else 0


def ptr8(buf):
    """buf itself: its elements as the viper cast would give them (bytes are unsigned)."""
    return buf


def ptr16(buf):
    """buf itself; sign-extend loads from signed arrays as the module docstring says."""
    return buf


def ptr32(buf):
    """buf itself; sign-extend loads with SX32 as the module docstring says."""
    return buf
