# edgevib device core. MicroPython subset, also importable by CPython (the host runs it unchanged).
