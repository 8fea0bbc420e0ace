"""Checks shared by the 3-D dielectric tests: a coated body of revolution solved by both the
axisymmetric and the 3-D solver, and the interface conditions at points beside a body."""

from __future__ import annotations

import numpy as np

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem3d.revolve import RevolvedSurface
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.geometry import Curve
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion


def coated_in_both_solvers(rod: Curve, coat: Curve, eps_r: float, h: float, **layout_kw):
    """(3-D C / axisymmetric C - 1, the 3-D relative estimate) for a driven body of
    revolution ``rod`` in a coat ``coat`` of eps_r; the 3-D surfaces revolved with panels of
    about h (m); ``layout_kw`` (ground_plane, layers) shared by both layouts."""
    axi = Layout(
        (driven("rod", rod, 1.0),),
        regions=(DielectricRegion("coat", coat, eps_r),),
        **layout_kw,
    )
    ref = solve_axisymmetric(axi, rel_accuracy=1e-7)
    assert ref.accuracy_met
    three = Layout(
        (driven("rod", RevolvedSurface(rod, h), 1.0),),
        regions=(DielectricRegion("coat", RevolvedSurface(coat, h), eps_r),),
        **layout_kw,
    )
    sol = solve_3d(three, rel_accuracy=1e-2)
    assert sol.accuracy_met
    c, c_ref = sol.capacitance_matrix_F[0, 0], ref.capacitance_matrix_F[0, 0]
    return c / c_ref - 1, sol.rel_error_estimate


def interface_jumps(sol, eps_out: float, eps_in: float) -> tuple[float, float]:
    """At 20 points on random body panels, just off either side: the largest jump of the
    tangential field and the largest mismatch eps_out E_n+ - eps_in E_n-, both relative to
    the field inside (the mismatch also over eps_in)."""
    p = sol.panels
    nc = p.n_conductor_panels
    idx = np.random.default_rng(1).choice(np.arange(nc, p.n), 20, replace=False)
    n = p.mesh.normals[idx]
    x = np.einsum("k,tkc->tc", [0.6, 0.3, 0.1], p.mesh.corners_m[idx])
    d = 1e-6 * p.mesh.diameters_m[idx][:, None] * n
    out, inn = sol.field_at(x + d), sol.field_at(x - d)
    en_out, en_in = np.sum(out * n, axis=1), np.sum(inn * n, axis=1)
    scale = np.linalg.norm(inn, axis=1)
    t_jump = (out - en_out[:, None] * n) - (inn - en_in[:, None] * n)
    mismatch = np.abs(eps_out * en_out - eps_in * en_in) / (eps_in * scale)
    return float(np.max(np.linalg.norm(t_jump, axis=1) / scale)), float(np.max(mismatch))
