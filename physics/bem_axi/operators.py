"""Discrete single-layer operators of the axisymmetric boundary-element method.

``potential_matrix(mesh, X)`` returns T (M, N) with phi(X_m) = (1/eps) sum_n T[m, n] sigma_n
for node values sigma (C/m^2); ``field_matrix`` returns (M, N, 2) for (E_r, E_z) likewise.
Far panels use their Gauss nodes directly. Panels closer to a target than ``NEAR_FACTOR``
times their length are integrated on sub-rules graded towards the target's foot point, with
sigma interpolated from the panel's nodes. The collocation matrix replaces each panel's
self-interaction by a product rule that integrates the logarithmic part of the kernel exactly.
The grounded plane z = 0 enters through image panels at (r, -z) carrying -sigma.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from elopt.physics.bem_axi.mesh import AxiMesh
from elopt.physics.bem_axi.ring_kernels import ring_field, ring_potential
from elopt.physics.bem_axi.ring_sums import (
    field_sum,
    foot_points,
    near_rows,
    potential_sum,
    self_rows,
)
from elopt.physics.quadrature import barycentric_weights, gauss_legendre, log_product_weights

#: A panel is "near" a target closer than at least this many panel lengths (lower bound).
NEAR_FACTOR = 1.0
#: Deepest grading of the near-field sub-rules (2^-44 of a panel).
_MAX_LEVELS = 44
_MIRROR = np.array([1.0, -1.0])

Kernel = Callable[..., np.ndarray | tuple[np.ndarray, np.ndarray]]


def near_factor(p: int, rel_error: float = 1e-10) -> float:
    """Distance, in panel lengths, beyond which a panel's own p-point Gauss rule is accurate.

    The rule's error on a kernel singular at distance d past a panel end of length L falls like
    rho^(-2p), rho = x0 + sqrt(x0^2 - 1), x0 = 1 + 2 d / L (Bernstein ellipse); closer panels
    take the graded near-field rule instead.
    """
    rho = rel_error ** (-1.0 / (2 * p))
    x0 = 0.5 * (rho + 1.0 / rho)
    return max(0.5 * (x0 - 1.0), NEAR_FACTOR)


def _near_pairs(mesh: AxiMesh, targets: np.ndarray, mirror: bool) -> tuple[np.ndarray, np.ndarray]:
    centres = mesh.center_m * _MIRROR if mirror else mesh.center_m
    d2 = (targets[:, None, 0] - centres[None, :, 0]) ** 2 + (
        targets[:, None, 1] - centres[None, :, 1]
    ) ** 2
    reach = (near_factor(mesh.order) + 0.5) * mesh.length_m
    return np.nonzero(d2 < reach * reach)


def _rule_order(p: int) -> int:
    """Gauss points per graded sub-piece: the kernel is not polynomial, so a little above p."""
    return max(p + 2, 6)


def _near_rows(
    mesh: AxiMesh, pts: np.ndarray, pj: np.ndarray, mirror: bool, field: bool
) -> np.ndarray:
    """Accurate rows (B, p, ncomp) of near (target, panel) pairs; sigma at panel nodes."""
    p = mesh.order
    tau_c, delta = foot_points(
        np.ascontiguousarray(pts[:, 0]),
        np.ascontiguousarray(pts[:, 1]),
        mesh.kind[pj],
        np.ascontiguousarray(mesh.coef[pj]),
        mirror,
    )
    ratio = mesh.length_m[pj] / np.maximum(delta, 1e-300)
    levels = np.clip(np.ceil(np.log2(np.maximum(ratio, 1.0))) + 2, 1, _MAX_LEVELS).astype(np.int64)
    levels[ratio < 0.5] = 1
    x, _ = gauss_legendre(p)
    xq, wq = gauss_legendre(_rule_order(p))
    return near_rows(
        np.ascontiguousarray(pts[:, 0]),
        np.ascontiguousarray(pts[:, 1]),
        mesh.kind[pj],
        np.ascontiguousarray(mesh.coef[pj]),
        tau_c,
        levels,
        mirror,
        field,
        x,
        barycentric_weights(p),
        xq,
        wq,
    )


def _far_pairs(
    mesh: AxiMesh, pts: np.ndarray, cols: np.ndarray, mirror: bool, kernel: Kernel
) -> np.ndarray:
    """Direct node-rule values (B, p, ncomp) already in the far sums for these pairs."""
    src = mesh.points_m[cols]
    zs = -src[..., 1] if mirror else src[..., 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        vals = kernel(pts[:, 0][:, None], pts[:, 1][:, None], src[..., 0], zs)
    vals = vals if isinstance(vals, tuple) else (vals,)
    w = mesh.weights_m[cols]
    return np.stack([np.where(np.isfinite(v), v, 0.0) * w for v in vals], axis=-1)


def _correct_near(
    mat: np.ndarray,
    mesh: AxiMesh,
    targets: np.ndarray,
    mirror: bool,
    kernel: Kernel,
    exclude_self: bool,
) -> None:
    """Replace the direct-rule value of near (target, panel) pairs by accurate rows (in place).

    ``mat`` (M, N, ncomp) holds real-minus-image sums; image corrections enter with a minus.
    """
    ti, pj = _near_pairs(mesh, targets, mirror)
    if exclude_self:
        keep = pj != ti // mesh.order
        ti, pj = ti[keep], pj[keep]
    if len(ti) == 0:
        return
    pts = targets[ti]
    cols = pj[:, None] * mesh.order + np.arange(mesh.order)
    delta = _near_rows(mesh, pts, pj, mirror, mat.shape[2] == 2) - _far_pairs(
        mesh, pts, cols, mirror, kernel
    )
    np.add.at(mat, (ti[:, None], cols), -delta if mirror else delta)


def _operator(
    mesh: AxiMesh, targets: np.ndarray, ground_plane: bool, kind: str, exclude_self: bool = False
) -> np.ndarray:
    """Target-by-node matrix (M, N, ncomp) of the potential ("phi") or field ("field")."""
    t = np.ascontiguousarray(targets, dtype=float)
    src = mesh.points_m
    args = (t[:, 0].copy(), t[:, 1].copy(), src[:, 0].copy(), src[:, 1].copy(), mesh.weights_m)
    if kind == "phi":
        mat = potential_sum(*args, ground_plane)[..., None]
        kernel = ring_potential
    else:
        mat = field_sum(*args, ground_plane)
        kernel = ring_field
    _correct_near(mat, mesh, t, False, kernel, exclude_self)
    if ground_plane:
        _correct_near(mat, mesh, t, True, kernel, False)
    return mat


def potential_matrix(mesh: AxiMesh, targets_m: np.ndarray, ground_plane: bool) -> np.ndarray:
    """T (M, N): potential at targets (M, 2) is T @ sigma / eps (targets off the surface)."""
    return _operator(mesh, targets_m, ground_plane, "phi")[..., 0]


def field_matrix(mesh: AxiMesh, targets_m: np.ndarray, ground_plane: bool) -> np.ndarray:
    """F (M, N, 2): field (E_r, E_z) at targets (M, 2) is F @ sigma / eps (per component)."""
    return _operator(mesh, targets_m, ground_plane, "field")


def collocation_matrix(mesh: AxiMesh, ground_plane: bool) -> np.ndarray:
    """A (N, N): potential at each node, with exact log-singular self-panel integration."""
    mat = _operator(mesh, mesh.points_m, ground_plane, "phi", exclude_self=True)[..., 0]
    p = mesh.order
    idx = np.arange(mesh.n_panels)[:, None] * p + np.arange(p)
    rows = mesh.points_m.reshape(-1, p, 2)
    far_self = np.stack(
        [_far_pairs(mesh, rows[:, i], idx, False, ring_potential)[..., 0] for i in range(p)], axis=1
    )
    mat[idx[:, :, None], idx[:, None, :]] += _self_blocks(mesh) - far_self
    return mat


def _self_blocks(mesh: AxiMesh) -> np.ndarray:
    """Self-interaction (P, p, p) of each panel: target node i, source node k.

    The panel is cut at the target's parameter and graded towards it until the innermost
    piece is short against the target's distance to the axis (the kernel's smooth part varies
    on that scale). Outer pieces take Gauss rules on the full kernel; the two innermost pieces
    take the split K(m) = A(m1) - K(m1) ln(m1)/pi, whose logarithm is integrated exactly.
    """
    p = mesh.order
    x, _ = gauss_legendre(p)
    xq, _ = gauss_legendre(_rule_order(p))
    wq = gauss_legendre(_rule_order(p))[1]
    logw_end = log_product_weights(np.array([-1.0]), len(xq))[0]
    tgt = mesh.points_m
    panel = np.repeat(np.arange(mesh.n_panels), p)
    ratio = 2.0 * mesh.length_m[panel] / np.maximum(tgt[:, 0], 1e-300)
    levels = np.clip(np.ceil(np.log2(np.maximum(ratio, 1.0))) + 1, 1, _MAX_LEVELS).astype(np.int64)
    rows = self_rows(
        np.ascontiguousarray(tgt[:, 0]),
        np.ascontiguousarray(tgt[:, 1]),
        mesh.kind[panel],
        np.ascontiguousarray(mesh.coef[panel]),
        np.tile(x, mesh.n_panels),
        levels,
        x,
        barycentric_weights(p),
        xq,
        wq,
        logw_end,
    )
    return rows.reshape(mesh.n_panels, p, p)
