"""Bounded dielectric regions in the 2-D solver against closed forms.

* A dielectric circular cylinder (eps_r) in a uniform transverse field E0, vacuum around:
  the field inside is uniform, 2 E0 / (eps_r + 1); outside, phi = -E0 z (1 - lambda R^2 / r^2),
  lambda = (eps_r - 1)/(eps_r + 1). Textbook (e.g. Landau & Lifshitz, Electrodynamics of
  Continuous Media, sect. 8 problems; from memory).
* A conducting cylinder inside a dielectric shell over a grounded plane, both circles of one
  Apollonius family (the equipotentials of a line charge at height c and its image): with
  u = acosh(h / r) for a circle of radius r centred at height h (h^2 - r^2 = c^2), the potential
  of the bare problem depends on u only, so with eps_r between the circles u_b < u < u_a it
  stays a function of u, piecewise linear, and D_n is continuous on u = u_b. Hence exactly
  C' = 2 pi eps0 / ((u_a - u_b)/eps_r + u_b). (Derived here from the image solution; as the
  circles become concentric, u_a - u_b -> ln(b/a): the coaxial-shell formula.)
* Across the shell's surface D_n and E_t are continuous (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics.bem2d import Bar, Strip, solve_2d
from elopt.physics.errors import ElOptError, GeometryError
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import DielectricRegion, PlanarLayer


def circle(xc: float, zc: float, r: float) -> Bar:
    """A circle as a Bar rounded to its half width."""
    return Bar(xc - r, xc + r, zc - r, zc + r, r)


@pytest.mark.parametrize("eps_r", [4.0, 0.5])
def test_dielectric_cylinder_in_uniform_field(eps_r):
    # Two far strips at 0 V (width w = 1 at d = 2000 radii) give the layout its conductors (a
    # capacitance to refine on); their induced dipoles change the field at the cylinder by
    # about (w / d)^2 E0 ~ 3e-7 E0.
    lay = Layout(
        (
            driven("far_a", Strip(2000.0, 2001.0, 0.0), 0.0),
            driven("far_b", Strip(-2001.0, -2000.0, 0.0), 0.0),
        ),
        regions=(DielectricRegion("rod", circle(0.0, 0.0, 1.0), eps_r),),
        applied_field_V_per_m=1.0,
    )
    sol = solve_2d(lay, rel_accuracy=1e-6)
    inside = np.array([[0.0, 0.0], [0.3, 0.2], [-0.5, -0.4]])
    e = sol.field_at(inside)
    assert e[:, 1] == pytest.approx(np.full(3, 2.0 / (eps_r + 1.0)), rel=1e-5)
    assert np.abs(e[:, 0]).max() < 1e-5
    lam = (eps_r - 1.0) / (eps_r + 1.0)
    # Outside on the axis at z = 2: E_z = 1 + lam / 4 (from the potential above).
    assert sol.field_at(np.array([[0.0, 2.0]]))[0, 1] == pytest.approx(1.0 + lam / 4.0, rel=1e-5)


def apollonius(r: float, c: float = 1.0) -> tuple[float, float]:
    """Centre height h and u = acosh(h / r) of the circle of radius r in the family of foci c."""
    h = math.sqrt(c * c + r * r)
    return h, math.acosh(h / r)


def shell_layout(eps_r: float) -> tuple[Layout, float]:
    a, b = 0.4, 0.8
    ha, ua = apollonius(a)
    hb, ub = apollonius(b)
    lay = Layout(
        (driven("core", circle(0.0, ha, a), 1.0),),
        ground_plane=True,
        regions=(DielectricRegion("shell", circle(0.0, hb, b), eps_r),),
    )
    return lay, 2 * math.pi * EPS0_F_PER_M / ((ua - ub) / eps_r + ub)


@pytest.mark.parametrize("eps_r", [3.0, 10.0])
def test_cylinder_in_eccentric_shell_over_plane(eps_r):
    lay, exact = shell_layout(eps_r)
    sol = solve_2d(lay, rel_accuracy=1e-6)
    assert sol.accuracy_met
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(exact, rel=2e-6)
    # Free charge on the core: eps_r times the equivalent (background) density it carries.
    smp = sol.surface_samples("core")
    assert smp.sigma_C_per_m2 @ smp.area_m2 == pytest.approx(exact, rel=2e-6)
    # Surface field on the core of the bare image solution, scaled: E = q / (2 pi eps) |grad u|.
    assert np.all(smp.field_V_per_m > 0)


def test_shell_interface_continuity():
    eps_r = 5.0
    lay, _ = shell_layout(eps_r)
    sol = solve_2d(lay, rel_accuracy=1e-6)
    hb, _ = apollonius(0.8)
    for ang in (0.3, 1.4, 2.5, -1.0):
        n = np.array([math.cos(ang), math.sin(ang)])
        t = np.array([-n[1], n[0]])
        x0 = np.array([0.0, hb]) + 0.8 * n

        # One-sided values extrapolated to the surface from 1e-3 and 2e-3 off it.
        o1, i1, o2, i2 = sol.field_at(
            np.stack([x0 + 1e-3 * n, x0 - 1e-3 * n, x0 + 2e-3 * n, x0 - 2e-3 * n])
        )
        out, inn = 2 * o1 - o2, 2 * i1 - i2
        scale = np.linalg.norm(out)
        assert out @ n == pytest.approx(eps_r * (inn @ n), rel=1e-4)  # D_n, eps0 cancels
        assert abs(out @ t - inn @ t) < 1e-4 * scale  # E_t


def test_region_in_a_layer_is_reciprocal_and_changes_c():
    # A rod of eps 6 in the air above a substrate between two strips: reciprocity holds within
    # the estimate and the rod raises the coupling (more permittivity in the field).
    layers = (PlanarLayer("substrate", 4.0, -math.inf, 0.0),)
    conds = (
        driven("a", Strip(-1.5, -0.25, 0.0), 1.0),
        driven("b", Strip(0.25, 1.5, 0.0), 0.0),
    )
    bare = solve_2d(Layout(conds, layers=layers), rel_accuracy=1e-5)
    rod = DielectricRegion("rod", circle(0.0, 0.4, 0.2), 6.0)
    sol = solve_2d(Layout(conds, layers=layers, regions=(rod,)), rel_accuracy=1e-5)
    c = sol.capacitance_matrix_F
    assert abs(c[0, 1] - c[1, 0]) < 1e-5 * abs(c[0, 1])
    assert -c[0, 1] > -bare.capacitance_matrix_F[0, 1]


@pytest.mark.parametrize(
    ("region", "conds", "layers", "words"),
    [
        (
            DielectricRegion("slab", Bar(-1.0, 1.0, -0.5, 0.5), 3.0),
            (driven("a", Strip(3.0, 4.0, 2.0), 1.0),),
            (PlanarLayer("sub", 4.0, -math.inf, 0.0),),
            ["region 'slab'", "layer interface", "z = 0"],
        ),
        (
            DielectricRegion("blob", circle(0.0, 1.0, 0.5), 3.0),
            (driven("a", Strip(-1.0, 0.0, 1.0), 1.0),),
            (),
            ["conductor 'a'", "region 'blob'", "wholly inside or"],
        ),
        (
            DielectricRegion("flat", Strip(-1.0, 1.0, 1.0), 3.0),
            (driven("a", Strip(3.0, 4.0, 2.0), 1.0),),
            (),
            ["region 'flat'", "Bar outline", "Strip"],
        ),
    ],
)
def test_bad_region_input_one_line(region, conds, layers, words):
    lay = Layout(conds, layers=layers, regions=(region,))
    with pytest.raises(GeometryError) as info:
        solve_2d(lay, rel_accuracy=1e-3)
    msg = str(info.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg


@pytest.mark.parametrize("eps_r", [0.0, -2.0])
def test_region_eps_must_be_positive(eps_r):
    with pytest.raises(ElOptError) as info:
        DielectricRegion("rod", circle(0.0, 1.0, 0.5), eps_r)
    msg = str(info.value)
    assert "\n" not in msg and "region 'rod'" in msg and "eps_r" in msg
