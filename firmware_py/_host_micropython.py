"""CPython stand-in for the parts of MicroPython's `micropython` module that device code uses.
Never imported on a board.

Entry points: const(), heap_lock(), heap_unlock()."""


def const(x):
    return x


def heap_lock():
    return None


def heap_unlock():
    return 0
