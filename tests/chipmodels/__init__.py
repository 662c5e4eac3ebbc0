# Register-level models of the accelerometers the drivers support, and stand-ins for
# machine.I2C / machine.SPI / machine.Pin that route bus transactions to them. Written in the
# MicroPython subset (no typing, no f-string specifiers, allocation-free transactions) so the
# same models run in the MicroPython guest of the test suite and under CPython.
