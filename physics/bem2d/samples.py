"""Surface samples of one 2-D level at the layout's excitation.

On a zero-thickness strip the unknown is the density of both faces together; it is split into
the two faces from the normal field just off each face (second-order one-sided differences of
the potential, whose near-singular parts are integrated exactly), rescaled so that the two
faces sum to the total exactly.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem2d.assemble import potential_matrix
from elopt.physics.solution import excitation_potentials

#: One-sided steps for a sheet face's normal field, in panel half-lengths.
FACE_STEP = 1e-3


def xy(z: np.ndarray) -> np.ndarray:
    """Complex positions (K,) -> (K, 2) as (x, z)."""
    return np.stack([np.real(z), np.imag(z)], axis=1)


def excitation(level) -> tuple[np.ndarray, np.ndarray, float]:
    """Conductor potentials (n,), nodal densities (N,) and the far offset (V) at the drive
    (with the applied field's share)."""
    layout = level.problem.layout
    volts = excitation_potentials(layout, level.capacitance_F, level.applied_charges_C)
    sigma = level.sigma_unit @ volts
    offset = float(level.offset_unit @ volts)
    if level.sigma_applied is not None:
        sigma = sigma + level.sigma_applied
        offset += level.offset_applied
    return volts, sigma, offset


def potential(level, sigma: np.ndarray, offset: float, x: np.ndarray) -> np.ndarray:
    """Potential (M,) V at complex points ``x`` for nodal densities ``sigma`` (with the
    applied field's -E0 z)."""
    pr = level.problem
    a = potential_matrix(level.panels, pr.slabs, x, period=pr.period_m, extent_m=pr.extent_m)
    return a @ sigma - offset - pr.layout.applied_field_V_per_m * np.asarray(x).imag


def touching_eps(level, sel: np.ndarray, normals: np.ndarray) -> np.ndarray:
    """Permittivity (K,) F/m touching the nodes ``sel`` on the side of ``normals`` (K,)."""
    p = level.panels
    eps = level.problem.slabs.eps_touching(xy(p.points[sel]), xy(normals))
    if level.node_eps is not None:
        inside = level.node_eps[sel]
        eps = np.where(np.isnan(inside), eps, inside)
    return eps


def free_density(level, sigma: np.ndarray) -> np.ndarray:
    """Free charge density (N,) from the nodal densities (conductors inside a region)."""
    return sigma if level.node_factor is None else sigma * level.node_factor


def level_samples(level, split: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Every node's samples (sheet nodes as two faces): points (complex), sigma, eps of the
    touching medium, area per metre, face, normal (complex), arc length, owner. ``split``
    (N,) bool limits the sheet nodes split into faces (others are left out)."""
    volts, sigma, offset = excitation(level)
    free = free_density(level, sigma)
    p = level.panels
    pts = p.points
    nrm = p.normals.ravel()
    w = p.node_weights
    owner = p.node_conductor
    on_conductor = owner < len(level.problem.layout.conductors)
    closed = ~np.repeat(p.sheet, p.order) & on_conductor
    sheet = np.repeat(p.sheet, p.order) if split is None else (np.repeat(p.sheet, p.order) & split)
    arc = p.node_arc_length
    half = np.repeat(p.half, p.order)
    out: dict[str, list] = {
        k: [] for k in ("points", "sigma", "eps", "area", "face", "normal", "arc", "owner")
    }

    def add(sel, sig, face, normal):
        out["points"].append(pts[sel])
        out["sigma"].append(sig)
        out["eps"].append(touching_eps(level, sel, normal))
        out["area"].append(w[sel])
        out["face"].append(np.full(int(sel.sum()), face, dtype=np.int8))
        out["normal"].append(normal)
        out["arc"].append(arc[sel])
        out["owner"].append(owner[sel])

    add(closed, free[closed], 0, nrm[closed])
    if sheet.any():
        x, n, hh = pts[sheet], nrm[sheet], half[sheet]
        v = volts[owner[sheet]]
        d = n * FACE_STEP * hh
        # Both faces in one evaluation: points d and 2d off the top face, then the bottom.
        u = potential(level, sigma, offset, np.concatenate([x + d, x + 2 * d, x - d, x - 2 * d]))
        u = u.reshape(4, len(x))
        # Outward normal field of each face: -dphi/dn, second order one-sided.
        fields = [-(4 * u[2 * f] - u[2 * f + 1] - 3 * v) / (2 * FACE_STEP * hh) for f in (0, 1)]
        s_top = touching_eps(level, sheet, n) * fields[0]
        s_bot = touching_eps(level, sheet, -n) * fields[1]
        total = free[sheet]
        both = s_top + s_bot
        scale = np.where(np.abs(both) > 0, total / np.where(both == 0, 1.0, both), 0.5)
        add(sheet, s_top * scale, 1, n)
        add(sheet, s_bot * scale, -1, -n)
    return {k: np.concatenate(v) for k, v in out.items()}


def sheet_peak_candidates(level) -> np.ndarray:
    """Sheet nodes (N,) bool that may hold a conductor's largest face field.

    A face whose charge has the sign of the total carries at most the total density, so
    |sigma_face| / eps_face <= |sigma| / eps_min (eps_min: the smaller permittivity at the
    node). The node with the largest total is split first; every node whose bound reaches its
    face field stays a candidate (all of the strip's nodes when none does, and every sheet
    node under an applied field, which can charge the faces with opposite signs).
    """
    _, sigma, _ = excitation(level)
    p = level.panels
    sheet = np.repeat(p.sheet, p.order)
    if level.problem.layout.applied_field_V_per_m != 0.0:
        return sheet  # a field across a strip charges its faces with opposite signs
    owner = p.node_conductor
    every = np.ones(p.n, dtype=bool)
    nrm = p.normals.ravel()
    eps_min = np.minimum(touching_eps(level, every, nrm), touching_eps(level, every, -nrm))
    bound = np.abs(free_density(level, sigma)) / eps_min
    first = np.zeros(p.n, dtype=bool)
    for k in np.unique(owner[sheet]):
        sel = np.nonzero(sheet & (owner == k))[0]
        first[sel[np.argmax(bound[sel])]] = True
    s = level_samples(level, first)
    field = np.abs(s["sigma"]) / s["eps"]
    keep = np.zeros(p.n, dtype=bool)
    for k in np.unique(owner[sheet]):
        best = field[(s["owner"] == k) & (s["face"] != 0)].max()
        mine = sheet & (owner == k)
        hold = mine & (bound >= best * (1 - 1e-12))
        # Faces of opposite sign break the bound: then every node of the strip stays.
        keep |= hold if hold.any() else mine
    return keep
