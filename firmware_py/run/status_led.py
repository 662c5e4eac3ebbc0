"""Status LED: one blink code per gateway state, so a technician at the pump can read the state
without a laptop. Each code is 16 steps of 125 ms (a 2 s cycle), most significant bit first,
LED on where the bit is set. Our own design; the table is in docs/boards.md.

Entry points: level(), StatusLed."""
from micropython import const

_STEP_MS = const(125)
_STEPS = const(16)

PATTERNS = {
    "starting": 0xFFFF,       # steady on: start-up window, REPL reachable with Ctrl-C
    "normal": 0x8000,         # one short blink every 2 s: heartbeat
    "idle": 0xA000,           # two short blinks: machine stopped
    "learning": 0xFF00,       # slow: 1 s on, 1 s off
    "alert": 0xCCCC,          # 2 Hz
    "alarm": 0xAAAA,          # 4 Hz
    "sensor_fault": 0xA800,   # three short blinks: no samples, or the sensor is unhealthy
    "safe": 0xFFFE,           # on with one short gap: safe mode, link only, no sampling
}


def level(state, t_ms):
    """LED level (0/1) of state's code at t_ms (ms, any origin). An unknown state shows as
    sensor_fault, so no state is ever dark."""
    pat = PATTERNS.get(state)
    if pat is None:
        pat = PATTERNS["sensor_fault"]
    return (pat >> (_STEPS - 1 - (t_ms // _STEP_MS) % _STEPS)) & 1


class StatusLed:
    """pin: a machine.Pin set up as output, or None (a board without an LED)."""

    def __init__(self, pin):
        self.pin = pin

    def show(self, state, t_ms):
        """Drive the LED for state at t_ms; call often (every main-loop pass). No allocation."""
        if self.pin is not None:
            self.pin.value(level(state, t_ms))
