# /boot.py on the gateway (edgevib deploy copies it there). It also runs at every soft reset,
# including those mpremote makes to copy files, so it neither counts boots nor starts the
# watchdog: it reserves room for reporting an exception from the sampling timer and, on a
# gateway that holds a site key, turns Ctrl-C into data at once (no REPL window).
from firmware_py.run import app

app.prepare()
