"""Figures of one solved design (PNG and SVG).

Bodies of revolution and 2-D cross-sections: the section drawn to scale (conductors,
dielectric layers and regions, the target plane), the field magnitude |E| as a colour map with
equipotential lines, the peak-surface-field point, and the surface field along each electrode
(plus the sensitivity density on the target, or the mid-plane field, when the family reports
it). 3-D designs: the electrodes coloured by surface field (a perspective view and the view
from the target) and the sensitivity density on the target.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from elopt.optimizer.report import figure_files as ff
from elopt.optimizer.report.safety import high_voltage_caution
from elopt.physics.electrodes.base import Evaluation
from elopt.physics.geometry import Curve, closed_outline, point_in_region
from elopt.physics.layout import Layout

MM = 1e-3
#: Grid columns of the field map; rows follow the section's aspect.
MAP_COLUMNS = 260
#: Equipotential lines at these fractions of the largest conductor potential.
EQUIPOTENTIAL_FRACTIONS = tuple(np.round(np.arange(0.1, 1.0, 0.1), 2))


def field_unit(peak_V_per_m: float) -> tuple[float, str]:
    """(scale, unit) that writes fields near ``peak_V_per_m`` with a few digits: kV/mm for
    breakdown-size fields, kV/m for the small fields of low-voltage sensors."""
    return (1e-6, "kV/mm") if peak_V_per_m >= 1e5 else (1e-3, "kV/m")


def volts_text(v: float) -> str:
    """A potential for a label: 10 V, 1.5 kV, 30 kV."""
    return f"{v / 1e3:.3g} kV" if abs(v) >= 1e3 else f"{v:.3g} V"


def mark_peak(ax: Any, x_mm: float, y_mm: float, label: str) -> None:
    """The peak-surface-field point: a star in the peak colour, on top of everything."""
    ax.plot(
        [x_mm],
        [y_mm],
        marker="*",
        ms=14,
        mfc=ff.PEAK_COLOUR,
        mec="white",
        mew=0.8,
        zorder=6,
        ls="none",
        label=label,
    )


def design_figure(
    evaluation: Evaluation,
    target: Path | list[Path],
    *,
    title: str,
    breakdown_V_per_m: float | None = None,
    mirror: bool = False,
) -> list[Path]:
    """Draw ``evaluation``'s design and write it to ``target`` (see figure_files.figure_paths)."""
    paths = target if isinstance(target, list) else ff.figure_paths(target)
    sol = evaluation.solution
    if getattr(sol, "point_dim", 2) == 3:
        fig = _figure_3d(evaluation, title, breakdown_V_per_m)
    else:
        fig = _figure_section(evaluation, title, breakdown_V_per_m, mirror)
    top_V = float(np.max(np.abs(sol.potentials_V), initial=0.0))
    top_V *= 2.0 if mirror else 1.0  # a mirror pair is driven at +V and -V: 2 V between them
    if high_voltage_caution(top_V):  # the picture may travel without the terminal's caution
        # A figure-level x label: the constrained layout makes room for it.
        fig.supxlabel(
            f"High voltage ({volts_text(top_V)}): a design aid, not a safety rating; build and "
            "test only under local electrical codes and licensed practice.",
            fontsize=8,
            color="#8a5a00",
        )
    return ff.save_figure(fig, paths)


# ----------------------------------------------------------------------------- cross-section


def _frame(layout: Layout, planar: bool = False) -> tuple[float, float, float, float]:
    pts = np.concatenate([c.shape.sample(32) for c in layout.conductors])
    if planar:  # a cross-section per unit length: both sides of x = 0, room below for layers
        x_lo, x_hi = float(pts[:, 0].min()), float(pts[:, 0].max())
        z_lo, z_hi = float(pts[:, 1].min()), float(pts[:, 1].max())
        span = max(x_hi - x_lo, z_hi - z_lo)
        bottom = 0.0 if layout.ground_plane else z_lo - 0.35 * span
        return x_lo - 0.12 * span, x_hi + 0.12 * span, bottom, z_hi + 0.35 * span
    r_max = float(pts[:, 0].max())
    z_lo, z_hi = float(pts[:, 1].min()), float(pts[:, 1].max())
    bottom = 0.0 if layout.ground_plane or z_lo >= 0 else z_lo - 0.3 * (z_hi - z_lo)
    top = z_hi + 0.35 * max(z_hi - bottom, 0.2 * r_max)
    return 0.0, 1.25 * r_max, bottom, top


def _inside_any(layout: Layout, points: np.ndarray) -> np.ndarray:
    inside = np.zeros(len(points), dtype=bool)
    for c in layout.conductors:
        outline = closed_outline(c.shape)
        if outline is not None:
            inside |= point_in_region(points, outline)
    return inside


def field_map(
    evaluation: Evaluation, frame: tuple[float, float, float, float]
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Grid (R, Z) in m over ``frame`` and the potential (V) and |E| (V/m) on it, NaN inside
    conductors."""
    sol = evaluation.solution
    r0, r1, z0, z1 = frame
    nr = MAP_COLUMNS
    nz = int(np.clip(round(nr * (z1 - z0) / (r1 - r0)), 40, 2 * nr))
    # Cell centres: never on the axis nor on the plane, where the kernels are singular.
    r = r0 + (np.arange(nr) + 0.5) * (r1 - r0) / nr
    z = z0 + (np.arange(nz) + 0.5) * (z1 - z0) / nz
    rr, zz = np.meshgrid(r, z)
    pts = np.stack([rr.ravel(), zz.ravel()], axis=1)
    inside = _inside_any(sol.layout, pts)
    phi = np.full(len(pts), np.nan)
    emag = np.full(len(pts), np.nan)
    out = pts[~inside]
    phi[~inside] = sol.potential_at(out)
    emag[~inside] = np.linalg.norm(sol.field_at(out), axis=1)
    return rr, zz, phi.reshape(rr.shape), emag.reshape(rr.shape)


def _draw_section(ax: Any, evaluation: Evaluation, frame, mirror: bool) -> None:
    from matplotlib.colors import LogNorm
    from matplotlib.patches import Polygon, Rectangle

    sol = evaluation.solution
    layout = sol.layout
    r0, r1, z0, z1 = frame
    for layer in layout.layers:
        lo, hi = max(layer.z_bottom_m, z0), min(layer.z_top_m, z1)
        if hi > lo:
            ax.add_patch(
                Rectangle(
                    (r0 / MM, lo / MM),
                    (r1 - r0) / MM,
                    (hi - lo) / MM,
                    color=ff.DIELECTRIC_COLOUR,
                    alpha=0.55,
                    lw=0,
                    zorder=0.5,
                )
            )
            ax.text(
                r1 / MM,
                hi / MM,
                f" {layer.name} (eps_r {layer.eps_r:g})",
                va="top",
                ha="right",
                fontsize=7,
                color="#5a4a2a",
                zorder=5,
            )
    rr, zz, phi, emag = field_map(evaluation, frame)
    finite = emag[np.isfinite(emag) & (emag > 0)]
    if finite.size:
        lo, hi = np.percentile(finite, [2.0, 99.7])
        mesh = ax.pcolormesh(
            rr / MM,
            zz / MM,
            np.clip(emag, lo, hi),
            shading="auto",
            cmap=ff.field_colormap(),
            norm=LogNorm(vmin=lo, vmax=max(hi, 1.0001 * lo)),
            zorder=1,
            rasterized=True,
        )
        bar = ax.figure.colorbar(mesh, ax=ax, pad=0.01, fraction=0.04)
        bar.set_label("|E| (V/m)")
    v_top = max((abs(v) for v in sol.potentials_V), default=0.0)
    if v_top > 0 and np.isfinite(phi).any():
        levels = [f * v_top for f in EQUIPOTENTIAL_FRACTIONS]
        cs = ax.contour(
            rr / MM,
            zz / MM,
            phi,
            levels=levels,
            colors="white",
            linewidths=0.7,
            alpha=0.85,
            zorder=2,
        )
        ax.clabel(cs, fmt=volts_text, fontsize=6, inline=True)
    for k, c in enumerate(layout.conductors):
        colour = ff.CONDUCTOR_COLOURS[k % len(ff.CONDUCTOR_COLOURS)]
        outline = closed_outline(c.shape)
        drive = volts_text(float(sol.potentials_V[k]))
        if outline is not None:
            ax.add_patch(
                Polygon(
                    outline / MM,
                    closed=True,
                    fc=colour,
                    ec="black",
                    lw=0.6,
                    zorder=3,
                    label=f"{c.name} ({drive})",
                )
            )
        else:
            pts = c.shape.sample(64) / MM
            ax.plot(
                pts[:, 0],
                pts[:, 1],
                color=colour,
                lw=2.2,
                zorder=3,
                label=f"{c.name} ({drive}, sheet)",
            )
    for region in layout.regions:
        if isinstance(region.shape, Curve):
            outline = closed_outline(region.shape)
            if outline is not None:
                ax.add_patch(
                    Polygon(
                        outline / MM,
                        closed=True,
                        fc=ff.DIELECTRIC_COLOUR,
                        ec="#8a7a5a",
                        lw=0.6,
                        alpha=0.8,
                        zorder=2.5,
                        label=f"{region.name} (eps_r {region.eps_r:g})",
                    )
                )
    if layout.ground_plane:
        ax.axhline(
            0.0,
            color=ff.TARGET_COLOUR,
            lw=3,
            zorder=4,
            label="mid-plane (0 V)" if mirror else "target plane (0 V)",
        )
    peak = sol.peak_field
    scale, unit = field_unit(peak.field_V_per_m)
    pr, pz = peak.location_m[0] / MM, peak.location_m[1] / MM
    mark_peak(ax, pr, pz, f"peak |E| {peak.field_V_per_m * scale:.3g} {unit} on {peak.conductor}")
    ax.set_xlim(r0 / MM, r1 / MM)
    ax.set_ylim(z0 / MM, z1 / MM)
    ax.set_aspect("equal")
    if getattr(sol, "planar", False):
        ax.set_xlabel("x (mm), cross-section per unit length")
    else:
        ax.set_xlabel("r (mm), axis of revolution at r = 0")
    ax.set_ylabel("z (mm)")
    ax.legend(loc="upper left", fontsize=7, framealpha=0.9)


def _figure_section(evaluation: Evaluation, title: str, breakdown: float | None, mirror: bool):
    plt = ff.pyplot()
    layout = evaluation.solution.layout
    frame = _frame(layout, planar=bool(getattr(evaluation.solution, "planar", False)))
    aspect = (frame[3] - frame[2]) / (frame[1] - frame[0])
    width = 10.0
    top_h = float(np.clip(width * 0.9 * aspect, 2.6, 6.5))
    extra = _extra_panel(evaluation)
    fig = plt.figure(figsize=(width, top_h + 3.4), layout="constrained")
    grid = fig.add_gridspec(2, 2 if extra else 1, height_ratios=[top_h, 3.2])
    ax = fig.add_subplot(grid[0, :])
    _draw_section(ax, evaluation, frame, mirror)
    ax.set_title("cross-section to scale: |E| (colour), equipotentials (white)", fontsize=9)
    _draw_surface_field(fig.add_subplot(grid[1, 0]), evaluation, breakdown)
    if extra:
        extra(fig.add_subplot(grid[1, 1]))
    fig.suptitle(title, fontsize=11)
    return fig


def _draw_surface_field(ax: Any, evaluation: Evaluation, breakdown: float | None) -> None:
    sol = evaluation.solution
    peak = sol.peak_field
    scale, unit = field_unit(peak.field_V_per_m)
    top = 0.0
    for k, c in enumerate(sol.layout.conductors):
        s = sol.surface_samples(c.name)
        if s.arc_length_m is None:
            continue
        colour = ff.CONDUCTOR_COLOURS[k % len(ff.CONDUCTOR_COLOURS)]
        for face, style, label in (
            (0, "-", c.name),
            (1, "-", f"{c.name}, + face"),
            (-1, ":", f"{c.name}, - face"),
        ):
            sel = s.face == face
            if not sel.any():
                continue
            order = np.argsort(s.arc_length_m[sel], kind="stable")
            e = s.field_V_per_m[sel][order] * scale
            top = max(top, float(np.max(e, initial=0.0)))
            ax.plot(
                s.arc_length_m[sel][order] / MM,
                e,
                color=colour,
                ls=style,
                lw=1.4,
                marker=".",
                ms=3,
                label=label,
            )
    if breakdown is not None and breakdown * scale < 3.0 * max(top, 1e-300):
        ax.axhline(
            breakdown * scale,
            color=ff.LIMIT_COLOUR,
            ls="--",
            lw=1,
            label=f"breakdown {breakdown * scale:.3g} {unit}",
        )
    ax.set_xlabel("arc length along the generating curve (mm)")
    ax.set_ylabel(f"surface field |sigma|/eps ({unit})")
    ax.set_title(
        f"surface field along each electrode (peak {peak.field_V_per_m * scale:.3g} {unit})",
        fontsize=9,
    )
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)


def _extra_panel(evaluation: Evaluation):
    extra = evaluation.extra
    if "sensitivity_density_F_per_m3" in extra and "target_r_m" in extra:
        r, dens = np.asarray(extra["target_r_m"]), np.asarray(extra["sensitivity_density_F_per_m3"])

        def draw(ax: Any) -> None:
            keep = r <= 1.6 * _frame(evaluation.solution.layout)[1]
            ax.plot(r[keep] / MM, dens[keep] * 1e15 * 1e-6 * 1e-6, color=ff.FRONT_COLOUR, lw=1.6)
            ax.set_xlabel("radius on the target (mm)")
            ax.set_ylabel("fF/um per mm^2")
            ax.set_title("sensitivity density on the target: where -dC/dd comes from", fontsize=9)
            ax.grid(alpha=0.3)

        return draw
    if "midplane_field_V_per_m" in extra:
        r, e = np.asarray(extra["midplane_r_m"]), np.asarray(extra["midplane_field_V_per_m"])

        def draw(ax: Any) -> None:
            ax.plot(r / MM, e / e[0], color=ff.FRONT_COLOUR, lw=1.6)
            ax.set_xlabel("radius on the mid-plane (mm)")
            ax.set_ylabel("|E| / |E(0)|")
            ax.set_title("field on the mid-plane relative to the centre", fontsize=9)
            ax.grid(alpha=0.3)

        return draw
    return None


# ----------------------------------------------------------------------------- 3-D


def panel_fields(solution: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(T, 3, 3) panel corners in mm, (T,) surface field |sigma|/eps in V/m, (T,) owner
    conductor, from a panel solver's finest mesh; None when the solution has no panels."""
    panels = getattr(solution, "panels", None)
    mesh = getattr(panels, "mesh", None)
    sigma = getattr(solution, "sigma_C_per_m2", None)
    if mesh is None or sigma is None or len(sigma) != len(mesh.triangles):
        return None
    # conductor panels come first; dielectric bodies' panels follow and carry no free charge
    nc = int(getattr(panels, "n_conductor_panels", len(sigma)))
    corners = np.asarray(mesh.vertices_m)[np.asarray(mesh.triangles)[:nc]] / MM
    # the solver's own face fields (the medium touching each face, both faces of a sheet)
    field = solution.panel_field_V_per_m()
    return corners, field, np.asarray(panels.owner)[:nc]


def facing_panels(
    corners: np.ndarray, owner: np.ndarray, names: list[str], extra: dict
) -> np.ndarray:
    """(T,) bool: the electrode panels whose outward normal looks at the target — down by
    default (a probe over its target); up when the family's report data say
    ``target_side = "above"`` (a board pad under its cover). Conductors named in
    ``extra["target_conductors"]`` are the target itself and left out."""
    look = 1.0 if extra.get("target_side", "below") == "above" else -1.0
    skip = set(extra.get("target_conductors", ()))
    electrode = np.array([names[k] not in skip for k in owner], dtype=bool)
    normals = np.cross(corners[:, 1] - corners[:, 0], corners[:, 2] - corners[:, 0])
    return electrode & (look * normals[:, 2] > 0.5 * np.linalg.norm(normals, axis=1))


def _figure_3d(evaluation: Evaluation, title: str, breakdown: float | None):
    from matplotlib.collections import PolyCollection
    from matplotlib.colors import LogNorm, Normalize
    from mpl_toolkits.mplot3d.art3d import Poly3DCollection

    plt = ff.pyplot()
    sol = evaluation.solution
    panels = panel_fields(sol)
    if panels is None:  # no mesh to draw: the surface samples as points
        samples = [sol.surface_samples(c.name) for c in sol.layout.conductors]
        pts = np.concatenate([s.points_m for s in samples]) / MM
        corners = np.repeat(pts[:, None, :], 3, axis=1)
        field = np.concatenate([s.field_V_per_m for s in samples])
        owner = np.concatenate([np.full(len(s.field_V_per_m), k) for k, s in enumerate(samples)])
    else:
        corners, field, owner = panels
    positive = field[field > 0]
    lo, hi = np.percentile(positive, [1.0, 99.9]) if positive.size else (1.0, 10.0)
    norm = LogNorm(vmin=lo, vmax=max(hi, 1.0001 * lo))
    cmap = ff.field_colormap()
    colours = cmap(norm(np.clip(field, lo, hi)))
    has_density = "sensitivity_density_xy_F_per_m3" in evaluation.extra
    n = 3 if has_density else 2
    fig = plt.figure(figsize=(5.2 * n, 5.0), layout="constrained")
    grid = fig.add_gridspec(1, n, width_ratios=[1.25] + [1.0] * (n - 1), wspace=0.08)
    peak = sol.peak_field
    px, py, pz = (v / MM for v in peak.location_m)
    scale, unit = field_unit(peak.field_V_per_m)

    # the side the target is on (see facing_panels): the 3-D view looks from there
    look = 1.0 if evaluation.extra.get("target_side", "below") == "above" else -1.0

    ax3 = fig.add_subplot(grid[0, 0], projection="3d")
    ax3.add_collection3d(
        Poly3DCollection(
            corners, facecolors=colours, edgecolors=colours, linewidths=0.15, zsort="min"
        )
    )
    ax3.scatter([px], [py], [pz], marker="*", s=160, c=ff.PEAK_COLOUR, edgecolors="white")
    lo_xyz, hi_xyz = corners.reshape(-1, 3).min(axis=0), corners.reshape(-1, 3).max(axis=0)
    for set_lim, k in ((ax3.set_xlim, 0), (ax3.set_ylim, 1), (ax3.set_zlim, 2)):
        set_lim(lo_xyz[k], hi_xyz[k])
    span = hi_xyz - lo_xyz
    # Heights drawn at least a third of the width, so that the side faces can be seen.
    ax3.set_box_aspect((span[0], span[1], max(span[2], span[:2].max() / 3.0)))
    ax3.view_init(elev=38 * look, azim=-58)
    ax3.locator_params(nbins=4)
    ax3.set_xlabel("x (mm)")
    ax3.set_ylabel("y (mm)")
    ax3.set_zlabel("z (mm)")
    ax3.set_title(
        f"electrodes seen from {'above' if look > 0 else 'below'}, coloured by surface field",
        fontsize=9,
    )

    ax = fig.add_subplot(grid[0, 1])
    facing = facing_panels(
        corners, owner, [c.name for c in sol.layout.conductors], evaluation.extra
    )
    # the faces nearest the viewer drawn last
    order = np.flatnonzero(facing)[np.argsort(look * corners[facing, :, 2].mean(axis=1))]
    # The faces' own (linear) scale: on a flat face the field varies by tens of per cent,
    # which the log scale of the whole surface would hide.
    face_lo, face_hi = np.percentile(field[facing], [0.5, 99.8]) if facing.any() else (lo, hi)
    face_norm = Normalize(vmin=face_lo * scale, vmax=max(face_hi, 1.0001 * face_lo) * scale)
    face_colours = cmap(face_norm(field[order] * scale))
    ax.add_collection(
        PolyCollection(
            corners[order, :, :2], facecolors=face_colours, edgecolors=face_colours, linewidths=0.15
        )
    )
    ax.autoscale_view()
    mark_peak(
        ax,
        px,
        py,
        f"peak {peak.field_V_per_m * scale:.3g} {unit} on {peak.conductor} (z = {pz:.3g} mm)",
    )
    ax.set_aspect("equal")
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    ax.set_title("faces that look at the target, seen from the target", fontsize=9)
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.14))
    from matplotlib.cm import ScalarMappable

    bar3 = fig.colorbar(
        ScalarMappable(norm=norm, cmap=cmap), ax=ax3, fraction=0.04, pad=0.08, shrink=0.7
    )
    bar3.set_label("surface field (V/m), log scale")
    bar = fig.colorbar(ScalarMappable(norm=face_norm, cmap=cmap), ax=ax, fraction=0.05, pad=0.02)
    bar.set_label(f"surface field on these faces ({unit})")
    if breakdown is not None and face_norm.vmin <= breakdown * scale <= face_norm.vmax:
        bar.ax.axhline(breakdown * scale, color=ff.LIMIT_COLOUR, lw=2)
    if has_density:
        outline = corners[facing].reshape(-1, 3)
        _draw_density_xy(fig.add_subplot(grid[0, 2]), evaluation, outline)
    fig.suptitle(title, fontsize=11)
    return fig


def _draw_density_xy(ax: Any, evaluation: Evaluation, electrode_pts_mm: np.ndarray) -> None:
    xy = np.asarray(evaluation.extra["target_xy_m"]) / MM
    dens = np.asarray(evaluation.extra["sensitivity_density_xy_F_per_m3"]) * 1e15 * 1e-12
    half = 1.4 * float(np.max(np.abs(electrode_pts_mm[:, :2])))
    keep = (np.abs(xy[:, 0]) <= half) & (np.abs(xy[:, 1]) <= half)
    tc = ax.tricontourf(xy[keep, 0], xy[keep, 1], dens[keep], levels=14, cmap=ff.field_colormap())
    ax.set_aspect("equal")
    ax.set_xlim(-half, half)
    ax.set_ylim(-half, half)
    ax.set_xlabel("x on the target (mm)")
    ax.set_ylabel("y on the target (mm)")
    bar = ax.figure.colorbar(tc, ax=ax, fraction=0.05, pad=0.02)
    bar.set_label("fF/um per mm^2")
    x0, y0 = electrode_pts_mm[:, :2].min(axis=0)
    x1, y1 = electrode_pts_mm[:, :2].max(axis=0)
    ax.plot([x0, x1, x1, x0, x0], [y0, y0, y1, y1, y0], color="white", ls="--", lw=0.8)
    ax.set_title(
        "sensitivity density on the target\n(dashed: the electrodes' outer edge)", fontsize=9
    )
    if not math.isfinite(float(dens[keep].sum())):
        ax.text(0.5, 0.5, "density not finite", transform=ax.transAxes, ha="center")
