"""CPython stand-in for the parts of MicroPython's `micropython` module that device code uses.
Never imported on a board. The code emitters' decorators leave a function as it is: under CPython
it runs as Python, with firmware_py.viper_stand standing in for viper's pointer casts.

Entry points: const(), heap_lock(), heap_unlock(), viper(), native()."""


def const(x):
    return x


def heap_lock():
    return None


def heap_unlock():
    return 0


def viper(f):
    return f


def native(f):
    return f
