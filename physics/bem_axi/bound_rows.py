"""Rows of the bound-charge (interface) equations without layers, compiled: the principal
value of the normal field at interface nodes.

``principal_normal_field_matrix(mesh, rows, delta, ground_plane)`` returns PV (R, N) with
E_n^PV(x_r) = (1/eps) sum_n PV[r, n] sigma_n. Every panel but the row's own is smooth at the
node, so its value is taken at the node itself: the far sum of :func:`ring_sums.normal_field_sum`,
with the graded near-field rule of the homogeneous operators (:mod:`operators`) for panels
within their near reach. The own panel's principal value comes from the means M of the graded
rule's normal fields d, 2d and 4d off both sides (the mean cancels the jump), extrapolated to
d = 0 as (8 M(d) - 6 M(2d) + M(4d)) / 3, on the pieces near the node only
(:func:`ring_sums.own_panel_pv_rows`): the panel's ends and the split, a distance D from the
node, leave about (d / D)^3 (a two-point rule's (d / D)^2 cancels against the neighbours only
when they are offset too).
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem_axi.mesh import KIND_SEGMENT, AxiMesh
from elopt.physics.bem_axi.operators import _far_pairs, _rule_order, near_factor
from elopt.physics.bem_axi.ring_sums import (
    foot_points,
    near_rows,
    normal_field_sum,
    own_panel_pv_rows,
)
from elopt.physics.quadrature import barycentric_weights, gauss_legendre

#: Innermost graded pieces (per side) of the own panel that take the offset means: they reach
#: s = 2^(PV_INNER_LEVELS - 1) d from the node. The split leaves about (d / s)^3 (measured on
#: docs/references.md item 11 with 6 nodes: C within 1e-11 of the all-offset rule at 13, 6e-10
#: at 11, 1e-12 at 15), below the dielectric noise floors (3e-10).
PV_INNER_LEVELS = 13
#: Deepest grading of the near-field pieces (2^-44 of a panel), as the homogeneous rule.
MAX_LEVELS = 44
_MIRROR = np.array([1.0, -1.0])


def principal_normal_field_matrix(
    mesh: AxiMesh,
    rows: np.ndarray,
    delta_m: np.ndarray,
    ground_plane: bool,
    entry_error: float | None = None,
) -> np.ndarray:
    """PV (R, N) at nodes ``rows`` (R,) along their mesh normals; ``delta_m`` (R, 1) m is the
    own panel's offset d (module text); off-panel entries to relative error ``entry_error``
    (default :func:`operators.entry_tolerance`). Image panels in z = 0 enter with -sigma."""
    p = mesh.order
    t = np.ascontiguousarray(mesh.points_m[rows])
    nrm = np.ascontiguousarray(mesh.normals[rows])
    src = mesh.points_m
    mat = normal_field_sum(
        *(np.ascontiguousarray(a) for a in (t[:, 0], t[:, 1], nrm[:, 0], nrm[:, 1])),
        np.ascontiguousarray(src[:, 0]),
        np.ascontiguousarray(src[:, 1]),
        mesh.weights_m,
        ground_plane,
    )
    own = np.asarray(rows) // p
    # a ring in the horizontal plane of a target has no normal (z) field there, nor a mean of
    # it at +-d: coplanar flat panels add nothing to a target whose normal is vertical
    flat_z = np.where(
        (mesh.kind == KIND_SEGMENT) & (mesh.coef[:, 1] == mesh.coef[:, 3]), mesh.coef[:, 1], np.nan
    )
    vertical = nrm[:, 0] == 0.0
    for mirror in (False, True) if ground_plane else (False,):
        centres = mesh.center_m * _MIRROR if mirror else mesh.center_m
        reach = (near_factor(p, entry_error) + 0.5) * mesh.length_m
        ti, pj = np.nonzero(np.sum((t[:, None] - centres[None]) ** 2, axis=2) < reach**2)
        if not mirror:
            keep = (pj != own[ti]) & ~(vertical[ti] & (flat_z[pj] == t[ti, 1]))
            ti, pj = ti[keep], pj[keep]
        if len(ti) == 0:
            continue
        pts = t[ti]
        cols = pj[:, None] * p + np.arange(p)
        d = _graded_rows(mesh, pts, pj, mirror) - _far_pairs(mesh, pts, cols, mirror, True)
        dn = np.einsum("bkc,bc->bk", d, nrm[ti])
        mat[ti[:, None], cols] += -dn if mirror else dn
    sel = np.nonzero(~(vertical & (flat_z[own] == t[:, 1])))[0]
    if len(sel):
        own_cols = own[sel, None] * p + np.arange(p)
        far = np.einsum("bkc,bc->bk", _far_pairs(mesh, t[sel], own_cols, False, True), nrm[sel])
        pv = _own_panel_rows(mesh, t[sel], nrm[sel], own[sel], delta_m[sel])
        mat[sel[:, None], own_cols] += pv - far
    return mat


def grading_levels(length_m: np.ndarray, distance_m: np.ndarray) -> np.ndarray:
    """Graded pieces per side (B,) for panels of ``length_m`` (B,) at ``distance_m`` (B,) from
    their targets: one beyond log2(length / distance), as the homogeneous near-field rule."""
    ratio = length_m / np.maximum(distance_m, 1e-300)
    return np.clip(np.ceil(np.log2(np.maximum(ratio, 1.0))) + 1, 1, MAX_LEVELS).astype(np.int64)


def _rules(p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    x, _ = gauss_legendre(p)
    xq, wq = gauss_legendre(_rule_order(p))
    return x, barycentric_weights(p), xq, wq


def _graded_rows(mesh: AxiMesh, pts: np.ndarray, pj: np.ndarray, mirror: bool) -> np.ndarray:
    """Field rows (B, p, 2) of targets ``pts`` (B, 2) against panels ``pj`` (B,) by the graded
    near-field rule (sigma interpolated from the panel's nodes)."""
    r, z = np.ascontiguousarray(pts[:, 0]), np.ascontiguousarray(pts[:, 1])
    coef = np.ascontiguousarray(mesh.coef[pj])
    tau_c, dist = foot_points(r, z, mesh.kind[pj], coef, mirror)
    levels = grading_levels(mesh.length_m[pj], dist)
    return near_rows(r, z, mesh.kind[pj], coef, tau_c, levels, mirror, True, *_rules(mesh.order))


def _own_panel_rows(
    mesh: AxiMesh, t: np.ndarray, nrm: np.ndarray, own: np.ndarray, delta_m: np.ndarray
) -> np.ndarray:
    """Principal value (R, p) of the normal field of each target's own panel ``own`` (R,)."""
    d = np.ascontiguousarray(delta_m.reshape(-1))
    coef = np.ascontiguousarray(mesh.coef[own])
    r, z = np.ascontiguousarray(t[:, 0]), np.ascontiguousarray(t[:, 1])
    tau_c, _ = foot_points(r, z, mesh.kind[own], coef, False)
    return own_panel_pv_rows(
        r,
        z,
        np.ascontiguousarray(nrm[:, 0]),
        np.ascontiguousarray(nrm[:, 1]),
        mesh.kind[own],
        coef,
        tau_c,
        d,
        grading_levels(mesh.length_m[own], d),
        PV_INNER_LEVELS,
        *_rules(mesh.order),
    )
