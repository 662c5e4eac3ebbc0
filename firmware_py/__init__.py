"""edgevib device core. MicroPython subset, also importable by CPython (the host runs it unchanged).
Under CPython there is no `micropython` module; install a stand-in so device modules can say
`from micropython import const` exactly as they do on the board."""
try:
    import micropython  # noqa: F401
except ImportError:
    import sys
    from firmware_py import _host_micropython
    sys.modules["micropython"] = _host_micropython
