"""The compiled level-0 grading (physics/bem_axi/grading_kernels.py) gives the panels of the
plain numpy grading bit for bit.

The reference is the grading's own numpy path, which curves with ellipse arcs take and which
the kernels replaced for the others (balance by neighbour lengths, then splits of panels
longer than the rule's gap factor times their distance to the other conductors' and the
images' samples, every panel re-tested per round): every curve is sent down it here. It is the project's own
rule, not physics, so the check is equality with it: same pieces and the same parameters to
the last bit, on guarded probes (filleted and sharp, many gaps and standoffs, recessed, with
each dielectric insulator and its interface chains), the uniform-field profile, spheres,
spheroids (ellipse arcs: the numpy path), disks (sheets) and random coaxial sets, with and
without the ground plane, under every mesh rule and one with another gap factor.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from elopt.physics import geometry as geo
from elopt.physics.bem_axi import mesh
from elopt.physics.bem_axi.dielectric_solve import dielectric_model
from elopt.physics.bem_axi.solve import COARSE_RULE, CONDUCTOR_COARSE_RULE
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.electrodes.uniform_field import UniformField, UniformFieldParams
from elopt.physics.errors import GeometryError
from elopt.physics.layout import Layout, driven

RULES = (
    mesh.default_rule(4),
    mesh.default_rule(6),
    mesh.default_rule(8),
    COARSE_RULE,
    CONDUCTOR_COARSE_RULE,
    replace(CONDUCTOR_COARSE_RULE, gap_factor=3.0),  # a gap factor other than the default
)
MM = 1e-3


_CURVE_PIECES = mesh._curve_pieces


def _numpy_path(curve):
    """``mesh._curve_pieces`` reporting every curve as not compiled: the grading then takes
    its numpy path (the one ellipse arcs take), the reference here."""
    return (*_CURVE_PIECES(curve)[:3], False)


_numpy_path.cache_clear = _CURVE_PIECES.cache_clear


def _probe(**kw) -> GuardedDiskParams:
    base = dict(
        sensor_radius_mm=2.0,
        guard_gap_mm=0.1,
        guard_width_mm=1.9,
        thickness_mm=0.5,
        fillet_mm=0.05,
        standoff_mm=0.2,
        drive_V=1.0,
    )
    return GuardedDiskParams(**{**base, **kw})


def _guarded_layouts() -> list[Layout]:
    out = []
    for fillet in (0.0, 0.02, 0.05, 0.2):
        for standoff in (0.01, 0.2, 0.5, 3.0):
            for gap in (0.01, 0.1, 0.6):
                out.append(
                    GuardedDisk().build(
                        _probe(fillet_mm=fillet, standoff_mm=standoff, guard_gap_mm=gap)
                    )
                )
    out.append(GuardedDisk().build(_probe(recess_mm=0.1)))
    out.append(GuardedDisk().build(_probe(fillet_mm=0.0, recess_mm=0.3, thickness_mm=1.0)))
    return out


def _dielectric_layouts() -> list[Layout]:
    variants = (
        dict(spacer_eps_r=4.0),
        dict(spacer_eps_r=4.0, fillet_mm=0.0),
        dict(housing_width_mm=0.5),
        dict(target_layer_um=50.0),
        dict(potting_depth_mm=1.0),
        dict(potting_depth_mm=1.0, spacer_eps_r=3.0, housing_width_mm=0.3, fillet_mm=0.0),
    )
    out = []
    for kw in variants:
        layout = GuardedDisk().build(_probe(**kw))
        out.append(layout)
        for loose in (False, True):
            model = dielectric_model(layout, loose)
            out.append(model.mesh_layout)
            out.extend(model.chain_layouts)
    return out


def _simple_layouts() -> list[Layout]:
    out = []
    for ground in (False, True):
        lift = 1.5 if ground else 0.0
        out += [
            Layout((driven("s", geo.sphere(1.0, lift), 1.0),), ground_plane=ground),
            Layout((driven("d", geo.disk(1.0, 0.3), 1.0),), ground_plane=ground),
            Layout(
                (
                    driven("a", geo.disk(1.0, 0.3), 1.0),
                    driven("b", geo.disk(0.7, 0.45), 0.0),
                ),
                ground_plane=ground,
            ),
            Layout(
                (
                    driven("p", geo.spheroid(1.0, 0.3, lift), 1.0),
                    driven("q", geo.sphere(0.5, lift + 0.9), 0.0),
                ),
                ground_plane=ground,
            ),
            Layout(
                (
                    driven("q", geo.sphere(0.5, 1.0), 1.0),
                    driven("d", geo.disk(2.0, 0.45), 0.0),
                ),
                ground_plane=ground,
            ),
        ]
    params = UniformFieldParams(
        gap_mm=0.5,
        flat_radius_mm=5.0,
        blend_length_mm=3.0,
        edge_radius_mm=1.0,
        back_thickness_mm=4.0,
        drive_V=1.0,
    )
    out.append(UniformField().build(params))
    return out


def _random_layouts(count: int) -> list[Layout]:
    """Coaxial spheres and disks at random sizes and gaps (10^-3 to 10^-0.5 apart)."""
    rng = np.random.default_rng(7)
    out = []
    while len(out) < count:
        z, shapes = 0.02 + rng.uniform(0.0, 0.5), []
        for _ in range(rng.integers(1, 4)):
            if rng.uniform() < 0.5:
                r = rng.uniform(0.1, 1.0)
                shapes.append(geo.sphere(r, z + r))
                z += 2 * r
            else:
                shapes.append(geo.disk(rng.uniform(0.2, 2.0), z))
            z += 10 ** rng.uniform(-3, -0.5)
        try:
            out.append(
                Layout(
                    tuple(driven(f"c{k}", s, 1.0) for k, s in enumerate(shapes)),
                    ground_plane=bool(rng.uniform() < 0.7),
                )
            )
        except GeometryError:  # rejected by the layout check: draw again
            continue
    return out


def _level0(layout: Layout, rule: mesh.MeshRule) -> list[tuple[np.ndarray, ...]]:
    mesh.clear_mesh_cache()
    got = mesh._base_intervals(layout, rule)
    return [(p.piece, p.t0, p.t1) for _, p, _ in got]


def _compare(layouts: list[Layout], monkeypatch) -> tuple[int, int]:
    """Assert equal panels; return how many (layout, rule) pairs the gap pass and the
    balance changed in the reference (so the comparison exercised both)."""
    gap_changed = balance_changed = 0
    for layout in layouts:
        for rule in RULES:
            new = _level0(layout, rule)
            with monkeypatch.context() as m:
                seen = {}
                gaps, balance = mesh._refine_gaps, mesh._balance

                def spy_gaps(lay, per_conductor, ratio, gap_factor, seen=seen, gaps=gaps):
                    seen["before"] = [len(p.piece) for _, p, _ in per_conductor]
                    return gaps(lay, per_conductor, ratio, gap_factor)

                def spy_balance(curve, panels, ratio, seen=seen, balance=balance):
                    out = balance(curve, panels, ratio)
                    seen["balanced"] = seen.get("balanced", 0) + (
                        len(out.piece) > len(panels.piece)
                    )
                    return out

                m.setattr(mesh, "_curve_pieces", _numpy_path)
                m.setattr(mesh, "_refine_gaps", spy_gaps)
                m.setattr(mesh, "_balance", spy_balance)
                ref = _level0(layout, rule)
            assert len(new) == len(ref)
            for (p1, a1, b1), (p2, a2, b2) in zip(new, ref, strict=True):
                assert p1.dtype == p2.dtype and np.array_equal(p1, p2)
                assert a1.dtype == a2.dtype and b1.dtype == b2.dtype
                assert a1.tobytes() == a2.tobytes() and b1.tobytes() == b2.tobytes()
            gap_changed += [len(p) for p, _, _ in ref] != seen["before"]
            balance_changed += seen.get("balanced", 0) > 0
    mesh.clear_mesh_cache()
    return gap_changed, balance_changed


def test_guarded_probes_grade_as_the_numpy_reference(monkeypatch):
    layouts = _guarded_layouts()
    gap_changed, balance_changed = _compare(layouts, monkeypatch)
    assert gap_changed >= len(layouts) and balance_changed >= len(layouts)


def test_dielectric_variants_and_their_chains_grade_as_the_numpy_reference(monkeypatch):
    gap_changed, balance_changed = _compare(_dielectric_layouts(), monkeypatch)
    assert gap_changed > 0 and balance_changed > 0


def test_spheres_spheroids_disks_and_profiles_grade_as_the_numpy_reference(monkeypatch):
    gap_changed, balance_changed = _compare(_simple_layouts(), monkeypatch)
    assert gap_changed > 0 and balance_changed > 0


def test_random_coaxial_sets_grade_as_the_numpy_reference(monkeypatch):
    layouts = _random_layouts(40)
    gap_changed, _ = _compare(layouts, monkeypatch)
    assert gap_changed > len(layouts)
