"""Kinematic defect frequencies of a rolling-element bearing from its geometry.

A local defect on a race or a rolling element makes an impact each time the two meet. With no
slip, the impact rates are fixed multiples ("orders") of the shaft speed, set by the number of
rolling elements n, the ball diameter d, the pitch diameter D and the contact angle phi
(rolling-bearing literature, e.g. T. A. Harris, "Rolling Bearing Analysis"; common practice):

    BPFO = (n/2) fr (1 - (d/D) cos phi)          ball pass, outer race (stationary outer ring)
    BPFI = (n/2) fr (1 + (d/D) cos phi)          ball pass, inner race
    FTF  = (fr/2)  (1 - (d/D) cos phi)           fundamental train (cage) frequency
    BSF  = (D/(2d)) fr (1 - ((d/D) cos phi)^2)   ball spin frequency

The formulas assume the inner ring turns with the shaft and the outer ring is fixed. Real
bearings slip by about 1-2 %, so measured lines sit slightly below these (common practice).

Entry points: BearingGeometry, DefectOrders, defect_orders().
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

from host_tools.errors import EdgevibError


@dataclass(frozen=True)
class BearingGeometry:
    """Geometry of one bearing: lengths in mm, contact angle in degrees."""

    n_elements: int
    ball_diameter_mm: float
    pitch_diameter_mm: float
    contact_angle_deg: float = 0.0

    def __post_init__(self) -> None:
        if int(self.n_elements) != self.n_elements or self.n_elements < 3:
            raise EdgevibError(f"bearing: need at least 3 rolling elements, got {self.n_elements}")
        if not 0.0 < self.ball_diameter_mm < self.pitch_diameter_mm:
            raise EdgevibError(
                "bearing: ball diameter must be positive and smaller than the pitch diameter "
                f"(got d={self.ball_diameter_mm} mm, D={self.pitch_diameter_mm} mm)"
            )
        if not 0.0 <= self.contact_angle_deg < 90.0:
            raise EdgevibError(
                f"bearing: contact angle must be in [0, 90) degrees, got {self.contact_angle_deg}"
            )


@dataclass(frozen=True)
class DefectOrders:
    """Defect frequencies as multiples of shaft speed (dimensionless orders)."""

    bpfo: float
    bpfi: float
    bsf: float
    ftf: float

    def frequencies_hz(self, shaft_rpm: float) -> dict[str, float]:
        """Defect frequencies in Hz at a shaft speed given in r/min."""
        fr = shaft_rpm / 60.0
        return {"bpfo": self.bpfo * fr, "bpfi": self.bpfi * fr, "bsf": self.bsf * fr, "ftf": self.ftf * fr}


def geometry_from_record(d: dict) -> BearingGeometry:
    """A geometry from its JSON form (a sidecar's or a fleet manifest's "bearing": n_elements,
    ball_diameter_mm, pitch_diameter_mm, optional contact_angle_deg). KeyError names a missing
    key, TypeError/ValueError a value that is not a number; a count that is not whole (9.5, "9")
    is refused by BearingGeometry, never truncated."""
    g = BearingGeometry(d["n_elements"], float(d["ball_diameter_mm"]), float(d["pitch_diameter_mm"]),
                        float(d.get("contact_angle_deg", 0.0)))
    return replace(g, n_elements=int(g.n_elements))


def defect_orders(g: BearingGeometry) -> DefectOrders:
    """Kinematic defect orders of bearing `g` (formulas in the module docstring)."""
    ratio = g.ball_diameter_mm / g.pitch_diameter_mm * math.cos(math.radians(g.contact_angle_deg))
    half_n = g.n_elements / 2.0
    return DefectOrders(
        bpfo=half_n * (1.0 - ratio),
        bpfi=half_n * (1.0 + ratio),
        bsf=g.pitch_diameter_mm / (2.0 * g.ball_diameter_mm) * (1.0 - ratio * ratio),
        ftf=0.5 * (1.0 - ratio),
    )


# A 6205-size deep-groove ball bearing (the geometry used by the demo pumps). Geometry as
# tabulated with a widely used open bearing-fault dataset; from memory.
BEARING_6205 = BearingGeometry(n_elements=9, ball_diameter_mm=7.94, pitch_diameter_mm=39.04)


def orders_q12(g: BearingGeometry) -> list[int]:
    """The parameter set's fc_bear_q12 for bearing `g`: [bpfo, bpfi, bsf, ftf] in shaft orders,
    Q12 (rounded; 1/8192 of an order at most off, 0.003 % of a 6205's BPFO)."""
    o = defect_orders(g)
    return [round(v * 4096) for v in (o.bpfo, o.bpfi, o.bsf, o.ftf)]
