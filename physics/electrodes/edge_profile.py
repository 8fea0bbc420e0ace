"""Edge profile of a uniform-field electrode: flat face, curvature ramp, edge arc, flat back.

The generating curve (metres, (r, z) half-plane, face at z = ``face_z``) runs

1. along the flat face from the axis to r = R_f (curvature 0);
2. through a *curvature ramp* of arc length L_b whose curvature rises linearly from 0 to
   1/R_e (an Euler spiral / clothoid, so that tangent and curvature are continuous). It is
   built from ``ramp_arcs`` tangent-continuous circular arcs of equal length whose curvatures
   are the ramp's mid-values, (k - 1/2) / (N R_e): each curvature step is 1/(N R_e) and the
   total turn is exactly the clothoid's, L_b / (2 R_e);
3. around the edge arc of radius R_e until the tangent is vertical (the overall radius R_o);
4. up a vertical rim (when there is height left), round the back corner with the same R_e,
   and along the flat back at z = face_z + T to the axis.

L_b = 0 gives a flat-faced disk whose rim is rounded with R_e: the sharpest member of the
family. The curve turns one way only (convex), so it cannot cross itself once
L_b < pi R_e (the ramp stops short of vertical) and T >= (front rise) + R_e (the back closes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from elopt.physics.geometry import Arc, Curve, Piece, Segment

#: Arcs approximating the curvature ramp (curvature step 1/(N R_e) between neighbours).
RAMP_ARCS = 8


@dataclass(frozen=True)
class RampEnd:
    """Where the curvature ramp ends: point (r, z) in m and tangent angle in rad."""

    r: float
    z: float
    angle: float


def ramp_arcs(
    flat_radius_m: float, face_z_m: float, blend_length_m: float, edge_radius_m: float, n: int
) -> tuple[list[Arc], RampEnd]:
    """The ramp's ``n`` arcs from (R_f, face_z) heading +r, and where the ramp ends."""
    r, z, angle = flat_radius_m, face_z_m, 0.0
    arcs: list[Arc] = []
    if blend_length_m > 0:
        step = blend_length_m / n
        for k in range(1, n + 1):
            radius = edge_radius_m * n / (k - 0.5)
            turn = step / radius
            cr, cz = r - radius * math.sin(angle), z + radius * math.cos(angle)
            a0 = angle - math.pi / 2
            arcs.append(Arc((cr, cz), radius, a0, a0 + turn))
            angle += turn
            r, z = cr + radius * math.cos(a0 + turn), cz + radius * math.sin(a0 + turn)
    return arcs, RampEnd(r, z, angle)


def front_rise_m(
    blend_length_m: float, edge_radius_m: float, n: int = RAMP_ARCS
) -> tuple[float, float]:
    """(rise of the front profile above the face up to the vertical tangent, radial reach
    beyond R_f of the same), both in m."""
    _, end = ramp_arcs(0.0, 0.0, blend_length_m, edge_radius_m, n)
    cr = end.r - edge_radius_m * math.sin(end.angle)
    cz = end.z + edge_radius_m * math.cos(end.angle)
    return cz, cr + edge_radius_m


def profile_curve(
    flat_radius_m: float,
    face_z_m: float,
    blend_length_m: float,
    edge_radius_m: float,
    back_thickness_m: float,
    n: int = RAMP_ARCS,
) -> Curve:
    """Generating curve of the whole electrode (a "body": axis to axis), metres."""
    pieces: list[Piece] = [Segment((0.0, face_z_m), (flat_radius_m, face_z_m))]
    arcs, end = ramp_arcs(flat_radius_m, face_z_m, blend_length_m, edge_radius_m, n)
    pieces.extend(arcs)
    cr = end.r - edge_radius_m * math.sin(end.angle)
    cz = end.z + edge_radius_m * math.cos(end.angle)
    back_z = face_z_m + back_thickness_m
    rim = (back_z - edge_radius_m) - cz
    a0 = end.angle - math.pi / 2
    if rim > 1e-9 * back_thickness_m:
        pieces.append(Arc((cr, cz), edge_radius_m, a0, 0.0))
        pieces.append(Segment((cr + edge_radius_m, cz), (cr + edge_radius_m, cz + rim)))
        pieces.append(Arc((cr, cz + rim), edge_radius_m, 0.0, math.pi / 2))
    else:
        # No rim left: front and back arcs share one centre, so they are one arc.
        pieces.append(Arc((cr, cz), edge_radius_m, a0, math.pi / 2))
        back_z = cz + edge_radius_m
    pieces.append(Segment((cr, back_z), (0.0, back_z)))
    return Curve(tuple(pieces))
