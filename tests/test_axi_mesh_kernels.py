"""The compiled mesh assembly (physics/bem_axi/mesh_kernels.py) gives the meshes of the plain numpy
assembly bit for bit.

The reference below is the numpy code the kernels replaced: level-0 panels cut into a level's
panels at ``np.linspace`` fractions, panel coefficients from the pieces' specs, singular and
mapped corner panels marked, nodes and centres by ``mesh.panel_geometry``, length elements,
tangents, normals, weights, panel lengths and arc lengths. It is the project's own
discretisation, not physics, so the check is equality with it: every array of the mesh with its
dtype and shape to the last bit, at levels 0-3 with 4 and 6 nodes per panel (and 8 on the
guarded probes and the simple layouts) under every mesh rule, on the layouts of
tests/test_axi_grading_kernels.py (guarded probes, their dielectric variants and interface
chains, spheres, spheroids, disks, the uniform-field profile, random coaxial sets).
"""

from __future__ import annotations

import numpy as np
from test_axi_grading_kernels import (
    RULES,
    _dielectric_layouts,
    _guarded_layouts,
    _random_layouts,
    _simple_layouts,
)

from elopt.physics.bem_axi import mesh, mesh_kernels
from elopt.physics.quadrature import gauss_legendre

FIELDS = (
    "conductor",
    "kind",
    "coef",
    "length_m",
    "center_m",
    "at_corner",
    "points_m",
    "tangents",
    "normals",
    "jac_m",
    "weights_m",
    "arc_m",
    "interp_jac",
)


def _ref_split(piece, t0, t1, frac):
    edges = t0[:, None] + (t1 - t0)[:, None] * frac
    reps = len(frac) - 1
    return np.repeat(piece, reps), edges[:, :-1].ravel(), edges[:, 1:].ravel()


def _ref_coefs(base, piece, t0, t1):
    kind = base.kind[piece]
    sp = base.spec[piece]
    coef = np.empty((len(piece), 5))
    seg = kind == mesh.KIND_SEGMENT
    s, a0, a1 = sp[seg], t0[seg][:, None], t1[seg][:, None]
    coef[seg, 0:2] = 0.5 * (1 - a0) * s[:, 0:2] + 0.5 * (1 + a0) * s[:, 2:4]
    coef[seg, 2:4] = 0.5 * (1 - a1) * s[:, 0:2] + 0.5 * (1 + a1) * s[:, 2:4]
    coef[seg, 4] = 0.0
    rest = ~seg
    s = sp[rest]
    coef[rest, 0:3] = s[:, 0:3]
    coef[rest, 3] = s[:, 3] + 0.5 * (t0[rest] + 1) * s[:, 4]
    coef[rest, 4] = s[:, 3] + 0.5 * (t1[rest] + 1) * s[:, 4]
    return kind, coef


def _ref_assemble(layout, base, piece, t0, t1, level, order):
    xg, wg = gauss_legendre(order)
    kind_a, coef_a = _ref_coefs(base, piece, t0, t1)
    conductor_a = base.conductor[piece]
    first, last = mesh._piece_ends(piece)
    at_corner = np.zeros(len(piece), dtype=bool)
    for k, at_end in base.corner_ends:
        at_corner[last[k] if at_end else first[k]] = True
    for k, at_end, power in base.mapped_ends:
        j = last[k] if at_end else first[k]
        at_corner[j] = True
        kind_a[j] = mesh.KIND_MAPPED
        coef_a[j, 4] = -power if at_end else power
    mapped = kind_a == mesh.KIND_MAPPED
    tau = np.broadcast_to(np.append(xg, 0.0), (len(kind_a), order + 1))
    pts, der = mesh.panel_geometry(kind_a, coef_a, tau)
    center, pts, der = pts[:, order], pts[:, :order], der[:, :order]
    if mapped.any():
        center[mapped] = 0.5 * (coef_a[mapped, 0:2] + coef_a[mapped, 2:4])
    jac = np.linalg.norm(der, axis=-1)
    tang = der / jac[..., None]
    sgn = base.signs[conductor_a][:, None, None]
    normals = sgn * np.stack([tang[..., 1], -tang[..., 0]], axis=-1)
    weights = jac * wg
    length = weights.sum(axis=1)
    ends = np.cumsum(length)
    first_of = np.searchsorted(conductor_a, conductor_a)
    arc_start = ends - length - np.where(first_of > 0, ends[first_of - 1], 0.0)
    frac = np.broadcast_to(0.5 * (xg + 1.0), (len(kind_a), order))
    if mapped.any():
        frac = frac.copy()
        frac[mapped] = mesh.mapped_fraction(xg, coef_a[mapped, 4][:, None])[0]
    arc = arc_start[:, None] + frac * length[:, None]
    interp_jac = np.where(mapped[:, None], jac, 1.0)
    return mesh.AxiMesh(
        order=order,
        level=level,
        conductor=conductor_a,
        kind=kind_a,
        coef=coef_a,
        length_m=length,
        center_m=center,
        at_corner=at_corner,
        points_m=pts.reshape(-1, 2),
        tangents=tang.reshape(-1, 2),
        normals=normals.reshape(-1, 2),
        jac_m=jac.reshape(-1),
        weights_m=weights.reshape(-1),
        arc_m=arc.reshape(-1),
        interp_jac=interp_jac.reshape(-1),
    )


def _arrays(m: mesh.AxiMesh) -> list[np.ndarray]:
    named = [np.asarray(getattr(m, f)) for f in FIELDS]
    return named + [m.density_scale, m.node_conductor, m.ring_area_m2]


def _compare(layouts, monkeypatch, orders=(4, 6, 8)) -> dict[str, int]:
    """Assert equal meshes; return how many compared meshes had mapped panels, singular
    corner panels, arcs, ellipse arcs and several conductors (so each path was met)."""
    seen = dict(mapped=0, corner=0, arc=0, ellipse=0, several=0)
    for layout in layouts:
        for rule in RULES:
            for order in orders:
                mesh.clear_mesh_cache()
                new = [mesh.build_mesh(layout, level, order, rule) for level in range(4)]
                with monkeypatch.context() as m:
                    m.setattr(mesh, "_assemble_mesh", _ref_assemble)
                    m.setattr(mesh_kernels, "split_panels", _ref_split)
                    ref = [mesh.build_mesh(layout, level, order, rule) for level in range(4)]
                for a, b in zip(new, ref, strict=True):
                    assert (a.order, a.level) == (b.order, b.level)
                    for x, y in zip(_arrays(a), _arrays(b), strict=True):
                        assert x.dtype == y.dtype and x.shape == y.shape
                        assert (
                            np.ascontiguousarray(x).tobytes() == np.ascontiguousarray(y).tobytes()
                        )
                    seen["mapped"] += bool((b.kind == mesh.KIND_MAPPED).any())
                    seen["corner"] += bool((b.at_corner & (b.kind != mesh.KIND_MAPPED)).any())
                    seen["arc"] += bool((b.kind == mesh.KIND_ARC).any())
                    seen["ellipse"] += bool((b.kind == mesh.KIND_ELLIPSE).any())
                    seen["several"] += len(set(b.conductor.tolist())) > 1
    mesh.clear_mesh_cache()
    return seen


def test_guarded_probes_assemble_as_the_numpy_reference(monkeypatch):
    seen = _compare(_guarded_layouts(), monkeypatch)
    assert seen["mapped"] and seen["corner"] and seen["arc"] and seen["several"]


def test_dielectric_variants_and_their_chains_assemble_as_the_numpy_reference(monkeypatch):
    seen = _compare(_dielectric_layouts(), monkeypatch, orders=(4, 6))
    assert seen["mapped"] and seen["corner"] and seen["arc"]


def test_spheres_spheroids_disks_and_profiles_assemble_as_the_numpy_reference(monkeypatch):
    seen = _compare(_simple_layouts(), monkeypatch)
    assert all(seen.values()), seen


def test_random_coaxial_sets_assemble_as_the_numpy_reference(monkeypatch):
    seen = _compare(_random_layouts(12), monkeypatch, orders=(4, 6))
    assert seen["mapped"] and seen["several"]
