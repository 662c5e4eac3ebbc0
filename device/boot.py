# /boot.py on the gateway (edgevib deploy copies it there). It also runs at every soft reset,
# including those mpremote makes to copy files, so it neither counts boots nor starts the
# watchdog: it only reserves room for reporting an exception from the sampling timer.
from firmware_py.run import app

app.prepare()
