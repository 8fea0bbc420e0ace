"""Free-charge samples on the faces of conductor panels (one per closed panel, two per sheet
panel) of a 3-D panel solve.

A closed panel's sample is its own density (times the free share). On an open sheet the
unknown is the density summed over both faces; each face's value is the normal field just off
that face (probes :data:`FACE_OFFSET` panel sizes out), whose field sums are the costly part:
:func:`face_samples` takes a subset of panels so a search can ask for the faces it needs.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem3d.evaluate import directional_derivative
from elopt.physics.layout import EPS0_F_PER_M, Layout

#: Points for the one-sided field of a sheet face sit this many panel sizes off the panel.
FACE_OFFSET = 1e-7


def face_layout(panels, layout: Layout, subset: np.ndarray | None = None) -> dict:
    """Where the samples of conductor panels ``subset`` (default: all) lie, without values.

    Keys: ``points_m`` (S, 3), ``normals`` (S, 3), ``panel`` (S,) panel index, ``owner``
    (S,), ``face`` (S,) 0 / +1 / -1 (closed panels first, then every sheet panel's +1 face,
    then its -1 face), ``area_m2`` (S,), ``eps_F_per_m`` (S,) the permittivity of the medium
    touching that face, ``ratio`` (S,) the free share: the free density of a closed sample
    is ``ratio`` times the panel's density, of a sheet face ``ratio`` times eps_m E . n.
    """
    p = panels
    mesh = p.mesh
    idx = np.arange(p.n_conductor_panels) if subset is None else np.asarray(subset, np.int64)
    keep = idx[~p.sheet[idx]]
    sheet = idx[p.sheet[idx]]
    panel_all = np.concatenate([keep, sheet, sheet])
    normals_all = np.concatenate([mesh.normals[keep], mesh.normals[sheet], -mesh.normals[sheet]])
    points_all = mesh.centroids_m[panel_all]
    face = np.concatenate(
        [np.zeros(len(keep), np.int8), np.ones(len(sheet), np.int8), -np.ones(len(sheet), np.int8)]
    )
    # The total density is eps_m E_n outside; the free one eps_f E_n (module text of .solve).
    eps_face = EPS0_F_PER_M * p.eps_front[panel_all]
    ratio = eps_face / layout.eps_F_per_m
    if p.background is not None:
        # planar layers: closed panels carry the free density already; on a sheet face
        # -grad . n of the potential integrals is eps_m E . n, its free charge eps_face E . n
        # with eps_face that of the layer just outside
        # (a conductor inside a body: the body's eps_front, its density sigma radiating in
        # the slab eps_slab, so the free one is eps_front / eps_slab of it)
        off = (FACE_OFFSET * mesh.diameters_m[panel_all])[:, None] * normals_all
        touch, slab = p.eps_front[panel_all], p.eps_slab[panel_all]
        coated = touch != slab
        eps_face = EPS0_F_PER_M * np.where(coated, touch, p.background.eps_r_at(points_all + off))
        ratio = np.where(
            face != 0, eps_face / layout.eps_F_per_m, np.where(coated, touch / slab, 1.0)
        )
    return {
        "points_m": points_all,
        "normals": normals_all,
        "panel": panel_all,
        "owner": p.owner[panel_all],
        "face": face,
        "area_m2": mesh.areas_m2[panel_all],
        "eps_F_per_m": eps_face,
        "ratio": ratio,
    }


def face_samples(
    level, layout: Layout, dens: np.ndarray, applied: bool, subset: np.ndarray | None = None
) -> dict:
    """Free-charge samples of the conductor panels ``subset`` (default: all) of a level
    (closed: one; sheet: one per face) for total densities (N, K) of every panel; with
    ``applied`` the layout's applied field is added on the sheet faces.

    Keys: those of :func:`face_layout` and ``sigma`` (S, K) the free density on that face.
    """
    p = level.panels
    mesh = p.mesh
    out = face_layout(p, layout, subset)
    face = out["face"]
    closed = face == 0
    values = np.empty((len(face), dens.shape[1]))
    values[closed] = dens[out["panel"][closed]]
    if not np.all(closed):
        # Each sheet face: sigma_face = eps_m E . n_face just off it.
        sheet = out["panel"][~closed]
        n2 = out["normals"][~closed]
        probes = mesh.centroids_m[sheet] + (FACE_OFFSET * mesh.diameters_m[sheet])[:, None] * n2
        # eps_m E . n = -grad(pot integral) . n (the 1/eps_m of the potential cancels).
        on_face = -directional_derivative(p, dens, probes, n2)
        if applied:
            on_face += (layout.eps_F_per_m * layout.applied_field_V_per_m * n2[:, 2])[:, None]
        values[~closed] = on_face
    out["sigma"] = values * out["ratio"][:, None]
    return out
