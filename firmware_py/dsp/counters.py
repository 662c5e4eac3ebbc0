"""Event counters that saturate below 2**30, so no count ever becomes a heap int on a board
(small ints end at 2**30 - 1 on 32-bit ports: MicroPython py/smallint.h) and the per-window
path stays allocation-free however long a gateway runs or loses samples.

Entry points: COUNT_MAX; sat_add(a, b) -> a + b held at COUNT_MAX. A counter at COUNT_MAX reads
"at least this many". Allocation-free.
"""
from micropython import const

COUNT_MAX = const(0x3FFFFFFF)    # 2**30 - 1


def sat_add(a, b):
    """a + b for 0 <= a <= COUNT_MAX and 0 <= b <= COUNT_MAX, at most COUNT_MAX; no
    intermediate reaches 2**30 (the test is COUNT_MAX - a, never a + b)."""
    if b > COUNT_MAX - a:
        return COUNT_MAX
    return a + b
