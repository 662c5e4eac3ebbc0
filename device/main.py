# /main.py on the gateway (edgevib deploy copies it there): run the application. The logic is
# in firmware_py/run/app.py, where the tests reach it. An exception that escapes after start-up
# is printed on the console and the board resets; that boot counts towards safe mode. main()
# returns only on an unkeyed gateway whose board profile is refused (it stays in the REPL).
import machine
import sys
import time

from firmware_py.run import app

try:
    app.main()
except Exception as e:
    sys.print_exception(e)
    time.sleep_ms(1000)
    machine.reset()
