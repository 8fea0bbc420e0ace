"""Sign of the planar families' medium sensitivity against independent estimates.

Under a grounded back plane a medium of permittivity eps spanning the top of the stack tends,
as eps grows, to a conductor tied to the plane's potential (far away the potential is the
plane's, and with eps -> inf the normal field inside the medium vanishes, so the medium is one
equipotential: common practice, no source). The mutual capacitance between a driven and a
held strip then falls toward its value with a grounded sheet on the stack's top face; the
tank-level demo (configs/coplanar_tank_level.toml) reads exactly this shunt effect.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from pathlib import Path

import pytest

from elopt.physics.bem2d import Strip, solve_2d
from elopt.physics.electrodes.coplanar import Coplanar, CoplanarParams, strips_layout
from elopt.physics.layout import driven

DEMO = Path(__file__).resolve().parents[1] / "configs" / "coplanar_tank_level.toml"


def demo_params() -> CoplanarParams:
    geometry = dict(tomllib.loads(DEMO.read_text())["geometry"])
    geometry.pop("family")
    return CoplanarParams(**geometry)


def mutual(c) -> float:
    """Charge drawn onto the held strips 0 and 2 by the centre strip 1 at 1 V (F/m)."""
    return -float(c[1, 0] + c[1, 2])


@pytest.mark.slow
def test_tank_level_mutual_falls_toward_the_grounded_sheet_limit():
    p = demo_params()
    m = {
        e: mutual(solve_2d(strips_layout(p, e), rel_accuracy=1e-4).capacitance_matrix_F)
        for e in (1.0, 80.0, 1000.0)
    }
    base = strips_layout(p, 1.0)
    top = p.substrate_thickness_um * 1e-6 + p.film_thickness_um * 1e-6
    sheet = driven("sheet", Strip(-0.5, 0.5, top), 0.0)  # 1 m wide: 50 device widths
    shielded = dataclasses.replace(base, conductors=(*base.conductors, sheet))
    limit = mutual(solve_2d(shielded, rel_accuracy=1e-4).capacitance_matrix_F)
    assert m[1.0] > m[80.0] > m[1000.0] > limit
    # With eps = 1000 the medium is within a few per cent of the grounded sheet (measured 4 %).
    assert m[1000.0] / limit - 1 < 0.06


@pytest.mark.slow
def test_tank_level_reported_sensitivity_matches_two_full_solves():
    # The family's fixed-mesh derivative against a finite difference of two independent solves
    # (each refined on its own), eps_r 80 -> 80.8.
    p = demo_params()
    ev = Coplanar().evaluate(p, eps_r=80.0, rel_accuracy=1e-5)
    rel = ev.metrics["mut_relative_sensitivity"]
    c0, c1 = (
        mutual(solve_2d(strips_layout(p, e), rel_accuracy=1e-6).capacitance_matrix_F)
        for e in (80.0, 80.8)
    )
    fd = (c1 - c0) / (0.01 * c0)
    assert rel < 0 and fd < 0
    assert rel == pytest.approx(fd, rel=2e-2)
    assert math.isnan(ev.metrics["cell_constant_per_m"])
    assert "shield" in ev.extra["metric_notes"]["cell_constant_per_m"]
    assert "mutual" in ev.extra["sense_capacitance_meaning"]
