"""Bearing defect frequencies against published multiples and handbook identities."""
import math

import pytest

from host_tools.data.bearing import BEARING_6205, BearingGeometry, defect_orders, orders_q12
from host_tools.errors import EdgevibError


def test_6205_orders_match_published_table():
    # 6205-size deep-groove ball bearing (9 balls, 7.94 mm ball, 39.04 mm pitch, 0 deg):
    # BPFO 3.585x, BPFI 5.415x, BSF 2.357x, FTF 0.398x shaft speed, as tabulated with a widely
    # used open bearing-fault dataset (values from memory). Table gives 3 decimals: +-0.0005.
    o = defect_orders(BEARING_6205)
    assert o.bpfo == pytest.approx(3.585, abs=5e-4)
    assert o.bpfi == pytest.approx(5.415, abs=5e-4)
    assert o.bsf == pytest.approx(2.357, abs=5e-4)
    assert o.ftf == pytest.approx(0.398, abs=5e-4)


@pytest.mark.parametrize("n,d,D,phi", [(9, 7.94, 39.04, 0.0), (12, 11.1, 52.0, 15.0), (16, 9.5, 71.5, 40.0)])
def test_kinematic_identities(n, d, D, phi):
    # Identities of the kinematic formulas (rolling-bearing literature; common practice):
    # BPFO + BPFI = n (one element passes a race point per element per shaft turn, summed over
    # both races); BPFO = n FTF (outer race passes = elements x cage turns); BPFI = n (1 - FTF)
    # (inner race sees the cage turning backwards relative to the shaft).
    o = defect_orders(BearingGeometry(n, d, D, phi))
    assert o.bpfo + o.bpfi == pytest.approx(n, rel=1e-12)
    assert o.bpfo == pytest.approx(n * o.ftf, rel=1e-12)
    assert o.bpfi == pytest.approx(n * (1.0 - o.ftf), rel=1e-12)
    r = d / D * math.cos(math.radians(phi))
    assert o.bsf == pytest.approx(D / (2 * d) * (1 - r) * (1 + r), rel=1e-12)


def test_contact_angle_lowers_inner_outer_split():
    # A larger contact angle shrinks (d/D) cos phi, moving BPFO and BPFI towards n/2.
    flat = defect_orders(BearingGeometry(12, 11.1, 52.0, 0.0))
    steep = defect_orders(BearingGeometry(12, 11.1, 52.0, 40.0))
    assert flat.bpfo < steep.bpfo < 6.0 < steep.bpfi < flat.bpfi


def test_frequencies_hz_scale_with_speed():
    f = defect_orders(BEARING_6205).frequencies_hz(1480.0)
    assert f["bpfo"] == pytest.approx(3.585 * 1480 / 60, rel=2e-4)
    assert set(f) == {"bpfo", "bpfi", "bsf", "ftf"}


@pytest.mark.parametrize("args", [(2, 7.94, 39.04, 0), (9, 40.0, 39.04, 0), (9, 0.0, 39.04, 0), (9, 7.94, 39.04, 90)])
def test_bad_geometry_rejected(args):
    with pytest.raises(EdgevibError, match="bearing"):
        BearingGeometry(*args)


def test_parameter_set_orders_are_the_handbook_formulas_in_q12():
    # fc_bear_q12 of the 6205 (9 balls, d = 7.94 mm, D = 39.04 mm, phi = 0) against the kinematic
    # formulas written out here (rolling-bearing literature, e.g. T. A. Harris, "Rolling Bearing
    # Analysis"; common practice): Q12 rounding leaves at most half an LSB, 1/8192 of an order.
    n, d, D = 9, 7.94, 39.04
    r = d / D
    want = [n / 2 * (1 - r), n / 2 * (1 + r), D / (2 * d) * (1 - r * r), (1 - r) / 2]
    got = orders_q12(BEARING_6205)
    assert all(isinstance(v, int) for v in got)
    for g, w in zip(got, want):
        assert abs(g / 4096 - w) <= 0.5 / 4096
