"""ISO 10816-3 zone placement at and either side of every boundary of the default table."""
import pytest

import firmware_py  # noqa: F401
from firmware_py.detect import iso_zones as iz

# ISO 10816-3 / 20816-3 boundaries A/B, B/C, C/D in mm/s r.m.s., FROM MEMORY (not confirmed
# against the standard; the team's notes list the same figures as unconfirmed). Written
# here as decimals on purpose, independently of the module's hundredths.
EXPECTED_MM_S = {
    (1, "rigid"): (2.3, 4.5, 7.1),
    (1, "flexible"): (3.5, 7.1, 11.0),
    (2, "rigid"): (1.4, 2.8, 4.5),
    (2, "flexible"): (2.3, 4.5, 7.1),
}
CASES = sorted(EXPECTED_MM_S)


@pytest.mark.parametrize("key", CASES)
def test_default_table_is_the_documented_one(key):
    assert tuple(b / 100 for b in iz.DEFAULT_BOUNDS_CMM[key]) == EXPECTED_MM_S[key]


@pytest.mark.parametrize("key", CASES)
@pytest.mark.parametrize("vel_per_mm_s", [1000, 6680, 65536])
def test_zone_at_and_either_side_of_each_boundary(key, vel_per_mm_s):
    bounds = iz.bounds_in_vel_units(key[0], key[1], vel_per_mm_s)
    for i, mm_s in enumerate(EXPECTED_MM_S[key]):
        assert bounds[i] == round(mm_s * vel_per_mm_s)
        assert iz.zone_of(bounds[i] - 1, bounds) == i        # just under: the better zone
        assert iz.zone_of(bounds[i], bounds) == i + 1        # on the boundary: the worse zone
        assert iz.zone_of(bounds[i] + 1, bounds) == i + 1
    assert iz.zone_of(0, bounds) == iz.ZONE_A
    assert iz.zone_of((1 << 30) - 1, bounds) == iz.ZONE_D


@pytest.mark.parametrize("key", CASES)
def test_zone_of_physical_velocities(key):
    # 1 mm/s = 6680 units (a 1 mg/count sensor, F_VEL Q16: 65536 / 9.81); mid-zone values
    b = iz.bounds_in_vel_units(key[0], key[1], 6680)
    edges = (0.0,) + EXPECTED_MM_S[key] + (2 * EXPECTED_MM_S[key][2],)
    for zone in range(4):
        mid = (edges[zone] + edges[zone + 1]) / 2
        assert iz.zone_of(int(mid * 6680), b) == zone
    assert iz.ZONE_NAMES[iz.zone_of(int(EXPECTED_MM_S[key][1] * 6680), b)] == "C"


def test_unknown_group_or_foundation_is_refused():
    with pytest.raises(ValueError):
        iz.bounds_in_vel_units(3, "rigid", 6680)
    with pytest.raises(ValueError):
        iz.bounds_in_vel_units(2, "soft", 6680)
    with pytest.raises(ValueError):
        iz.bounds_in_vel_units(1, "flexible", 1 << 28)      # would not fit F_VEL units
