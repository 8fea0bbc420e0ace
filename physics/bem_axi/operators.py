"""Discrete single-layer operators of the axisymmetric boundary-element method.

``potential_matrix(mesh, X)`` returns T (M, N) with phi(X_m) = (1/eps) sum_n T[m, n] sigma_n
for node values sigma (C/m^2); ``field_matrix`` returns (M, N, 2) for (E_r, E_z) likewise.
Far panels use their Gauss nodes directly, except the mapped corner panels of the collocation
matrix, which take an upsampled Gauss rule in their parameter (:func:`mapped_far_rule`). Panels
closer to a target than ``NEAR_FACTOR`` times their length (mapped ones: inside the Bernstein
ellipse of their far rule) are integrated on sub-rules graded towards the target's foot
point, with sigma interpolated from the panel's nodes. The collocation matrix replaces each panel's
self-interaction by a product rule that integrates the logarithmic part of the kernel exactly.
The grounded plane z = 0 enters through image panels at (r, -z) carrying -sigma.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from elopt.physics.bem_axi.mesh import KIND_MAPPED, AxiMesh
from elopt.physics.bem_axi.near_sums import MAX_LEVELS, add_near_corrections, near_zones
from elopt.physics.bem_axi.ring_sums import (
    add_self_blocks,
    collocation_sum,
    field_sum,
    mapped_rule_points,
    node_rows,
    panel_rule_columns,
    potential_sum,
)
from elopt.physics.quadrature import (
    barycentric_weights,
    end_log_weights,
    gauss_legendre,
    lagrange_matrix,
)

#: A panel is "near" a target closer than at least this many panel lengths (lower bound).
NEAR_FACTOR = 1.0
#: Gauss points of a mapped corner panel's far rule in the collocation matrix: the panel's
#: own, its image's in z = 0. Measured (collocation of both levels of three sharp guarded
#: probes, 1e-6 entries, in-process A/B): (12, 8) 1.56 - 2.72 ms, against (10, 8), (14, 8),
#: (12, 6), (12, 10), (10, 6), (14, 10) 0.3 - 12 % slower; fewer points put more pairs near,
#: more cost every target.
MAPPED_FAR_POINTS = (12, 8)


def entry_tolerance(p: int) -> float:
    """Relative error allowed in a far-rule entry for panels of p nodes.

    Up to 4 nodes serve requests >= 1e-5 (``solve.default_order``): 1e-8 keeps three orders of
    margin (measured on the guarded probes: C moves by at most 5e-8 against 1e-10) and halves
    the near pairs; higher orders serve tight requests and keep 1e-10.
    """
    return 1e-8 if p <= 4 else 1e-10


def near_factor(p: int, rel_error: float | None = None) -> float:
    """Distance, in panel lengths, beyond which a panel's own p-point Gauss rule is accurate
    to ``rel_error`` (default :func:`entry_tolerance`).

    The rule's error on a kernel singular at distance d past a panel end of length L falls like
    rho^(-2p), rho = x0 + sqrt(x0^2 - 1), x0 = 1 + 2 d / L (Bernstein ellipse); closer panels
    take the graded near-field rule instead.
    """
    if rel_error is None:
        rel_error = entry_tolerance(p)
    rho = rel_error ** (-1.0 / (2 * p))
    x0 = 0.5 * (rho + 1.0 / rho)
    return max(0.5 * (x0 - 1.0), NEAR_FACTOR)


def mapped_rho(n: int, rel_error: float) -> float:
    """Bernstein-ellipse parameter of [-1, 1] outside which an n-point Gauss rule in a mapped
    panel's parameter is accurate to ``rel_error`` (error like rho^(-2n))."""
    return rel_error ** (-1.0 / (2 * n))


def _rule_order(p: int) -> int:
    """Gauss points per graded sub-piece: the kernel is not polynomial, so a little above p."""
    return max(p + 2, 6)


def _far_pairs(mesh: AxiMesh, pts: np.ndarray, cols: np.ndarray, mirror: bool, field: bool):
    """Direct node-rule values (B, p, ncomp) already in the far sums for these pairs."""
    src = mesh.points_m
    return node_rows(
        np.ascontiguousarray(pts[:, 0]),
        np.ascontiguousarray(pts[:, 1]),
        np.ascontiguousarray(src[:, 0]),
        np.ascontiguousarray(src[:, 1]),
        mesh.weights_m,
        np.ascontiguousarray(cols, dtype=np.int64),
        mirror,
        field,
    )


def _correct_near(
    mat: np.ndarray,
    mesh: AxiMesh,
    targets: np.ndarray,
    mirror: bool,
    exclude_self: bool,
    rel_error: float | None = None,
    mapped_points: int | None = None,
) -> None:
    """Replace the far-rule value of (target, panel) pairs closer than
    (:func:`near_factor` + 1/2) panel lengths to the panel's centre by graded sub-rules, with
    sigma interpolated from the panel's nodes (in place; :mod:`near_sums`).

    The far rule of a mapped panel is what ``mat`` holds for it: its node rule
    (``mapped_points`` None) or the ``mapped_points``-point rule of :func:`mapped_far_rule`;
    its near pairs are those inside the Bernstein ellipse where that rule errs by
    ``rel_error`` (:func:`mapped_rho`).
    ``mat`` (M, N, ncomp) holds real-minus-image sums; image corrections enter with a minus.
    Each (target, node) pair occurs once, so a plain indexed add is exact.
    """
    p = mesh.order
    if rel_error is None:
        rel_error = entry_tolerance(p)
    xq, wq = gauss_legendre(_rule_order(p))
    factor = near_factor(p, rel_error)
    rho = mapped_rho(mapped_points, rel_error) if mapped_points else _bernstein_rho(factor)
    far = gauss_legendre(mapped_points) if mapped_points else None
    add_near_corrections(
        mat,
        np.ascontiguousarray(targets[:, 0]),
        np.ascontiguousarray(targets[:, 1]),
        mesh.kind,
        mesh.coef,
        mesh.length_m,
        *_near_zones(mesh, factor, rho),
        np.ascontiguousarray(mesh.points_m[:, 0]),
        np.ascontiguousarray(mesh.points_m[:, 1]),
        mesh.weights_m,
        mesh.density_scale,
        mirror,
        exclude_self,
        rho,
        gauss_legendre(p)[0],
        barycentric_weights(p),
        xq,
        wq,
        far,
    )


def _bernstein_rho(factor: float) -> float:
    """The Bernstein-ellipse parameter of a point ``factor`` panel lengths past a panel's end
    (:func:`near_factor`'s ellipse)."""
    x0 = 1.0 + 2.0 * factor
    return x0 + math.sqrt(x0 * x0 - 1.0)


def _near_zones(
    mesh: AxiMesh, factor: float, rho: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centres (P,) r, z and radii (P,) of the discs beyond which each panel's far rule is
    accurate: about the panel's centre, its length times ``factor`` + 1/2; a mapped panel's
    (chord fraction u^m) about its corner: the Bernstein ellipse ``rho`` about its parameter
    interval reaches |u| up to 1/2 + (rho + 1/rho) / 4, i.e. that to the m-th power chord
    lengths from the corner (the near pass then takes only the pairs inside that ellipse)."""
    u_max = 0.5 + 0.25 * (rho + 1.0 / rho)
    return near_zones(mesh.kind, mesh.coef, mesh.length_m, mesh.center_m, factor, u_max)


def _operator(
    mesh: AxiMesh, targets: np.ndarray, ground_plane: bool, kind: str, exclude_self: bool = False
) -> np.ndarray:
    """Target-by-node matrix (M, N, ncomp) of the potential ("phi") or field ("field")."""
    t = np.ascontiguousarray(targets, dtype=float)
    src = mesh.points_m
    args = (t[:, 0].copy(), t[:, 1].copy(), src[:, 0].copy(), src[:, 1].copy(), mesh.weights_m)
    if kind == "phi":
        mat = potential_sum(*args, ground_plane)[..., None]
    else:
        mat = field_sum(*args, ground_plane)
    _correct_near(mat, mesh, t, False, exclude_self)
    if ground_plane:
        _correct_near(mat, mesh, t, True, False)
    return mat


def potential_matrix(mesh: AxiMesh, targets_m: np.ndarray, ground_plane: bool) -> np.ndarray:
    """T (M, N): potential at targets (M, 2) is T @ sigma / eps (targets off the surface)."""
    return _operator(mesh, targets_m, ground_plane, "phi")[..., 0]


def field_matrix(mesh: AxiMesh, targets_m: np.ndarray, ground_plane: bool) -> np.ndarray:
    """F (M, N, 2): field (E_r, E_z) at targets (M, 2) is F @ sigma / eps (per component)."""
    return _operator(mesh, targets_m, ground_plane, "field")


def collocation_matrix(
    mesh: AxiMesh, ground_plane: bool, entry_error: float | None = None
) -> np.ndarray:
    """A (N, N): potential at each node, with exact log-singular self-panel integration;
    off-panel entries to relative error ``entry_error`` (default :func:`entry_tolerance`).
    Mapped panels' far columns take :func:`mapped_far_rule` of ``MAPPED_FAR_POINTS`` points."""
    src = mesh.points_m
    r, z = np.ascontiguousarray(src[:, 0]), np.ascontiguousarray(src[:, 1])
    p = mesh.order
    mat = collocation_sum(r, z, mesh.weights_m, ground_plane, own_run=p)
    n_real, n_image = _set_mapped_columns(mat, mesh, ground_plane)
    mat = mat[..., None]
    _correct_near(mat, mesh, src, False, True, entry_error, n_real)
    if ground_plane:
        _correct_near(mat, mesh, src, True, False, entry_error, n_image)
    mat = mat[..., 0]
    _self_blocks(mesh, mat)
    return mat


def _set_mapped_columns(
    mat: np.ndarray, mesh: AxiMesh, ground_plane: bool
) -> tuple[int | None, int | None]:
    """Overwrite the columns of the mapped panels in the far sum ``mat`` (N, N) (their node
    rule) by :func:`mapped_far_rule` of ``MAPPED_FAR_POINTS`` points, the image's with the
    second count; returns those counts (None, None without mapped panels)."""
    panels = np.flatnonzero(mesh.kind == KIND_MAPPED)
    if len(panels) == 0:
        return None, None
    n_real, n_image = MAPPED_FAR_POINTS
    r, z = np.ascontiguousarray(mesh.points_m[:, 0]), np.ascontiguousarray(mesh.points_m[:, 1])
    sr, sz, rule = mapped_far_rule(mesh, panels, n_real, n_image if ground_plane else 0)
    panel_rule_columns(mat, r, z, sr, sz, rule, mesh.order, panels, n_real)
    return n_real, n_image


def mapped_far_rule(
    mesh: AxiMesh, panels: np.ndarray, n: int, n_image: int = 0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The far rule of mapped panels ``panels`` (J,): n Gauss points in each one's parameter,
    then ``n_image`` in its image's in z = 0; points (J * (n + n_image),) r, z in m
    (panel-major), and weights (J, n + n_image, p) of its node values of sigma: Gauss weight
    times the Lagrange basis of the p nodes at the point times the node's ``interp_jac``
    (the panel interpolates sigma times the length element; the ring kernel carries r').
    Accurate outside :func:`mapped_rho` (n), where the node rule needs :func:`mapped_rho` (p)."""
    return mapped_rule_points(
        mesh.kind,
        mesh.coef,
        panels,
        mesh.density_scale,
        gauss_legendre(n)[0],
        _far_basis(n, mesh.order),
        gauss_legendre(n_image)[0] if n_image else _NO_POINTS,
        _far_basis(n_image, mesh.order) if n_image else np.empty((0, mesh.order)),
    )


_NO_POINTS = np.empty(0)


@lru_cache(maxsize=16)
def _far_basis(n: int, p: int) -> np.ndarray:
    """(n, p): the n-point Gauss weights times the Lagrange basis of p Gauss nodes there."""
    s, ws = gauss_legendre(n)
    out = ws[:, None] * lagrange_matrix(s, p)
    out.setflags(write=False)
    return out


def _self_blocks(mesh: AxiMesh, mat: np.ndarray) -> None:
    """Add the self-interaction of each panel into ``mat`` (N, N): target node i, source node
    k of i's panel (:func:`ring_sums.add_self_blocks`).

    The panel is cut at the target's parameter and graded towards it until the innermost
    piece is short against the target's distance to the axis (the kernel's smooth part varies
    on that scale). Outer pieces take Gauss rules on the full kernel; the two innermost pieces
    take the split K(m) = A(m1) - K(m1) ln(m1)/pi, whose logarithm is integrated exactly.
    On a mapped panel the smooth part of that split, ln(|y(t) - y(t_i)| / |t - t_i|), is
    singular about the target's parameter distance d_c to the corner away from it (the map's
    u^m - u_i^m has its other roots there), so the innermost piece is also at most d_c / 2
    long; its rows interpolate sigma times the length element and are scaled by the nodes'.
    """
    p = mesh.order
    xq, wq = gauss_legendre(_rule_order(p))
    add_self_blocks(
        mat,
        mesh.points_m,
        mesh.kind,
        mesh.coef,
        mesh.length_m,
        mesh.density_scale,
        MAX_LEVELS,
        gauss_legendre(p)[0],
        barycentric_weights(p),
        xq,
        wq,
        end_log_weights(len(xq)),
    )
