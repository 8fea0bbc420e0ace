"""Interdigitated and coplanar families: decomposition check, metrics, bad input."""

from __future__ import annotations

import math

import pytest

from elopt.physics.bem2d import Bar, Strip, solve_2d
from elopt.physics.electrodes.coplanar import Coplanar, CoplanarParams
from elopt.physics.electrodes.interdigitated import (
    Interdigitated,
    InterdigitatedOptions,
    InterdigitatedParams,
    comb_capacitance,
    fingers_layout,
)
from elopt.physics.electrodes.registry import get_family
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import PlanarLayer

BASE = dict(
    finger_width_um=10.0,
    gap_um=10.0,
    finger_count=12,
    finger_length_mm=1.0,
    drive_V=5.0,
    substrate_eps_r=4.6,
    film_eps_r=3.3,
    film_thickness_um=4.0,
)


def test_registered():
    assert get_family("interdigitated").name == "interdigitated"
    assert get_family("coplanar").name == "coplanar"


@pytest.mark.slow
def test_decomposition_matches_full_cross_section():
    # Igreja & Dias 2004 (docs/references.md item 19) split N fingers into N - 3 half interior
    # cells and two outer cells; the outer cells come here from a 4-finger cross-section. The
    # full 12-finger cross-section on the same stack must agree: what the split leaves out is
    # the interior cells' departure from periodicity near the ends.
    p = InterdigitatedParams(**BASE)
    ev = Interdigitated().evaluate(
        p,
        rel_accuracy=1e-4,
        options=InterdigitatedOptions(full_cross_section=True, penetration=False),
    )
    split = ev.metrics["capacitance_per_length_pF_per_m"]
    full = ev.extra["full_cross_section_pF_per_m"]
    assert split == pytest.approx(full, rel=3e-3)  # measured 1.9e-3 at N = 12
    # Without the outer cells the interior-only estimate (N - 1)/2 C_I is visibly off.
    interior_only = 0.5 * (p.finger_count - 1) * ev.metrics["interior_cell_pF_per_m"]
    assert abs(interior_only / full - 1) > 5 * abs(split / full - 1)


def test_zero_film_and_vacuum_gives_the_interior_closed_form():
    # docs/references.md item 19: glass half-space below, air above: C_I = (eps1 + 1) K/K'.
    from scipy.special import ellipk

    p = InterdigitatedParams(**{**BASE, "film_thickness_um": 0.0})
    ev = Interdigitated().evaluate(
        p, rel_accuracy=1e-5, options=InterdigitatedOptions(penetration=False)
    )
    k = math.sin(math.pi * 0.5 / 2)
    ref = (4.6 + 1.0) * EPS0_F_PER_M * ellipk(k * k) / ellipk(1 - k * k)
    assert ev.metrics["interior_cell_pF_per_m"] * 1e-12 == pytest.approx(ref, rel=3e-5)


def test_sensitivities_against_resolves():
    # The relative sensitivity to the film's permittivity (finite difference on one mesh) must
    # match two independent solves at eps and 1.01 eps (to first order in the step).
    p = InterdigitatedParams(**BASE)
    fam = Interdigitated()
    ev = fam.evaluate(
        p, rel_accuracy=1e-5, options=InterdigitatedOptions(end_cells=False, penetration=False)
    )
    lam = 2 * (p.finger_width_um + p.gap_um) * 1e-6

    def c_i(film_eps_r: float) -> float:
        lay = fingers_layout(InterdigitatedParams(**{**BASE, "film_eps_r": film_eps_r}), 2, 1.0)
        return comb_capacitance(
            solve_2d(lay, period_m=lam, rel_accuracy=1e-6).capacitance_matrix_F, 2
        )

    c0, c1, c2 = c_i(3.3 / 1.005), c_i(3.3), c_i(3.3 * 1.005)
    rel = (c2 - c0) / (2 * math.log(1.005) * c1)
    assert ev.metrics["film_relative_sensitivity"] == pytest.approx(rel, rel=2e-3)
    # Penetration depth (module definition): more of the sensitivity is held below 90 % than 50 %.
    ev = fam.evaluate(
        p, rel_accuracy=1e-4, options=InterdigitatedOptions(end_cells=False, penetration=True)
    )
    assert 0 < ev.metrics["penetration_depth_50_um"] < ev.metrics["penetration_depth_90_um"]


def test_penetration_share_starts_at_zero_and_grows(monkeypatch):
    # The sensitivity held in a layer just above the metal is proportional to its thickness
    # (the field energy density there is finite): a 4 nm layer over 10 um fingers holds well
    # under 1 % of it (common practice, no source), and the share grows with the height.
    from elopt.physics.bem2d import planar_stack

    seen = []
    original = planar_stack.penetration_depths_m

    def spy(*args, **kwargs):
        out = original(*args, **kwargs)
        seen.append(out)
        return out

    monkeypatch.setattr(planar_stack, "penetration_depths_m", spy)
    p = InterdigitatedParams(**{**BASE, "metal_thickness_um": 0.2})
    fam = Interdigitated()
    ev = fam.evaluate(
        p, rel_accuracy=1e-4, options=InterdigitatedOptions(end_cells=False, penetration=True)
    )
    heights, frac = seen[-1][2], seen[-1][3]
    assert heights[0] < 1e-8
    assert 0 <= frac[0] < 0.01
    assert all(b >= a - 1e-6 for a, b in zip(frac, frac[1:], strict=False))
    # Half the share lies above a hair's height: the depth is a fraction of the pitch.
    assert 0.05 < ev.metrics["penetration_depth_50_um"] < 20.0


def test_coplanar_family_runs_with_back_plane():
    p = CoplanarParams(
        strip_count=3,
        strip_width_um=500.0,
        gap_um=200.0,
        length_mm=10.0,
        drive_V=3.0,
        centre_drive=True,
        substrate_eps_r=4.4,
        substrate_thickness_um=800.0,
        back_plane=True,
        film_eps_r=2.3,
        film_thickness_um=300.0,
    )
    ev = Coplanar().evaluate(p, rel_accuracy=1e-4)
    m = ev.metrics
    assert m["capacitance_pF"] > 0 and m["film_relative_sensitivity"] > 0
    assert m["peak_surface_field_V_per_m"] > 3.0 / 200e-6  # above the mean gap field
    assert m["capacitance_pF"] == pytest.approx(m["capacitance_per_length_pF_per_m"] * 0.01)


@pytest.mark.parametrize(
    ("change", "words"),
    [
        ({"gap_um": 0.0}, "gap_um = 0 must be > 0"),
        ({"finger_width_um": -1.0}, "finger_width_um = -1 must be > 0"),
        ({"film_eps_r": 0.0}, "film_eps_r = 0 must lie in (0, 1e+06]"),
        ({"substrate_eps_r": -2.0}, "substrate_eps_r = -2 must lie in (0, 1e+06]"),
        ({"film_thickness_um": -1.0}, "film_thickness_um = -1 must be >= 0"),
        ({"finger_count": 1}, "finger_count = 1 must be a whole number"),
        (
            {"metal_thickness_um": 1.0, "passivation_thickness_um": 0.5},
            "metal_thickness_um = 1 must be <= passivation_thickness_um = 0.5",
        ),
        ({"back_plane": True}, "back_plane = true needs substrate_thickness_um > 0"),
        ({"corner_radius_um": 0.2, "metal_thickness_um": 0.2}, "corner_radius_um = 0.2 must be <="),
    ],
)
def test_bad_family_input_one_line(change, words):
    with pytest.raises(ElectrodeError) as err:
        Interdigitated().validate(InterdigitatedParams(**{**BASE, **change}))
    msg = str(err.value)
    assert words in msg and "\n" not in msg


def test_bad_solver_input_one_line():
    lay = Layout((driven("a", Strip(0.0, 1.0, 0.0), 1.0), driven("b", Strip(0.5, 2.0, 0.0), 0.0)))
    with pytest.raises(GeometryError, match="touch or overlap"):
        solve_2d(lay)
    one = Layout((driven("a", Strip(0.0, 3.0, 0.0), 1.0),), ground_plane=False)
    with pytest.raises(GeometryError, match="must be less than the period"):
        solve_2d(one, period_m=2.0)
    # Fingers touching across the period boundary (a finger and the next cell's copy).
    pair = Layout((driven("a", Strip(0.0, 1.0, 0.0), 1.0), driven("b", Strip(1.5, 2.0, 0.0), 0.0)))
    with pytest.raises(GeometryError, match="touch or overlap"):
        solve_2d(pair, period_m=2.0)
    with pytest.raises(GeometryError, match="width must be > 0"):
        solve_2d(Layout((driven("a", Strip(1.0, 1.0, 0.0), 1.0),), ground_plane=True))
    with pytest.raises(GeometryError, match="thickness must be > 0"):
        PlanarLayer("film", 3.0, 1.0, 1.0)
    with pytest.raises(GeometryError, match="eps_r must be finite and in"):
        PlanarLayer("film", 0.0, 0.0, 1.0)
    across = Layout(
        (driven("a", Bar(0.0, 1.0, 0.0, 0.5), 1.0),),
        ground_plane=False,
        layers=(PlanarLayer("pas", 3.0, 0.0, 0.2),),
    )
    with pytest.raises(GeometryError, match="across the layer interface at z = 0.2"):
        solve_2d(across)
