"""Absolute vibration-severity guard: broadband velocity r.m.s. placed in the evaluation zones
A-D of ISO 10816-3 / ISO 20816-3 (machine groups 1 and 2, rigid and flexible foundations).

SOURCE: ISO 10816-3 zone boundaries, FROM MEMORY, not checked against the standard
(a figure recalled by the team, unconfirmed). Confirm against the purchased standard
(or the site's own acceptance limits) before relying on them; the parameter set may carry any
other boundaries, this table is only the default.

Units: boundaries here are mm/s r.m.s. x 100 (hundredths of mm/s, so 2.3 mm/s -> 230).
On the device the guard compares F_VEL (velocity r.m.s., counts/s, Q16) against boundaries the
host has already converted into those units (bounds_in_vel_units); the device never sees mm/s.

Entry points: bounds_in_vel_units(), zone_of()."""
from micropython import const

ZONE_A = const(0)   # newly commissioned machines
ZONE_B = const(1)   # acceptable for unrestricted long-term operation
ZONE_C = const(2)   # not suitable for long-term continuous operation: at least an alert
ZONE_D = const(3)   # severe enough to cause damage: alarm

ZONE_NAMES = ("A", "B", "C", "D")

# (group, foundation) -> boundaries A/B, B/C, C/D in mm/s x 100. Group 1: large machines
# (300 kW - 50 MW); group 2: medium machines (15 - 300 kW). From memory, see above.
DEFAULT_BOUNDS_CMM = {
    (1, "rigid"): (230, 450, 710),
    (1, "flexible"): (350, 710, 1100),
    (2, "rigid"): (140, 280, 450),
    (2, "flexible"): (230, 450, 710),
}


def bounds_in_vel_units(group, foundation, vel_per_mm_s):
    """Default boundaries of (group, foundation) as three ints in F_VEL units (counts/s, Q16).

    vel_per_mm_s: F_VEL units that make 1 mm/s r.m.s. (an int from the sensor calibration).
    Rounded to the nearest unit. Runs once, when the parameter set is built (host or device).
    """
    key = (group, foundation)
    if key not in DEFAULT_BOUNDS_CMM:
        raise ValueError("no default ISO 10816-3 table for group %r, foundation %r" % key)
    out = []
    for b in DEFAULT_BOUNDS_CMM[key]:
        v = (b * vel_per_mm_s + 50) // 100
        if not 0 < v < (1 << 30):
            raise ValueError("ISO boundary %d mm/s x100 does not fit F_VEL units" % b)
        out.append(v)
    return out


def zone_of(vel, bounds):
    """Zone (ZONE_A..ZONE_D) of velocity vel against bounds (A/B, B/C, C/D), same units.

    A value exactly on a boundary belongs to the worse zone (the cautious reading).
    """
    z = 0
    while z < 3 and vel >= bounds[z]:
        z += 1
    return z
