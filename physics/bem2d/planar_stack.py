"""What the planar families share: their layer stack, electrode shapes, and the derivatives
of a capacitance with respect to permittivities, a thickness and the height of a top region.

Coordinates: the electrodes stand on the substrate's top face z = z0 (z0 = the substrate
thickness when a grounded back plane lies under the substrate at z = 0, else 0). Above the
substrate come the passivation (covering the electrodes), then the sensing film; the layout's
medium (``eps_r`` of the evaluation: air, a liquid, the material under test) fills the rest.

Derivatives are finite differences on one fixed mesh (the mesh depends only on the geometry),
so the discretisation error cancels to first order: permittivities one-sided with relative step
``REL_STEP``, thicknesses central with relative step ``THICK_STEP``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from elopt.physics.bem2d.shapes import Bar, Strip
from elopt.physics.bem2d.solve import Problem2D, prepare, solve_level
from elopt.physics.layout import Conductor, Layout
from elopt.physics.media import PlanarLayer

UM = 1e-6
REL_STEP = 1e-4
THICK_STEP = 1e-3
#: Heights (in periods or strip-set widths) where the top-region sensitivity is sampled.
PENETRATION_GRID = np.geomspace(1e-4, 2.0, 16)


@dataclass(frozen=True)
class Stack:
    """The planar stack in SI: thicknesses (0: absent; substrate 0: a half-space)."""

    substrate_eps_r: float
    substrate_m: float
    back_plane: bool
    passivation_eps_r: float
    passivation_m: float
    film_eps_r: float
    film_m: float

    @property
    def z0(self) -> float:
        return self.substrate_m if self.back_plane else 0.0

    def layers(self, scale_above_m: float | None = None, scale: float = 1.0) -> list[PlanarLayer]:
        """The layers; with ``scale_above_m``, every permittivity above that height times
        ``scale`` (layers split there; the medium above the stack becomes an explicit layer)."""
        z0 = self.z0
        spans = [
            (
                "substrate",
                self.substrate_eps_r,
                z0 - self.substrate_m if self.substrate_m > 0 else -math.inf,
                z0,
            ),
            ("passivation", self.passivation_eps_r, z0, z0 + self.passivation_m),
            (
                "film",
                self.film_eps_r,
                z0 + self.passivation_m,
                z0 + self.passivation_m + self.film_m,
            ),
        ]
        out = []
        for name, eps, lo, hi in spans:
            if not hi > lo:
                continue
            if scale_above_m is None or hi <= scale_above_m:
                out.append(PlanarLayer(name, eps, lo, hi))
            elif lo >= scale_above_m:
                out.append(PlanarLayer(name, eps * scale, lo, hi))
            else:
                out.append(PlanarLayer(name + "_low", eps, lo, scale_above_m))
                out.append(PlanarLayer(name + "_high", eps * scale, scale_above_m, hi))
        return out

    @property
    def top_m(self) -> float:
        return self.z0 + self.passivation_m + self.film_m


def electrode(x_left: float, x_right: float, z0: float, thickness: float, radius: float):
    """A Bar on z0 (or a Strip when the metal has no thickness)."""
    if thickness <= 0:
        return Strip(x_left, x_right, z0)
    return Bar(x_left, x_right, z0, z0 + thickness, min(radius, 0.5 * thickness))


def stack_layout(
    conductors: tuple[Conductor, ...], stack: Stack, eps_r: float, **changes
) -> Layout:
    """Layout of ``conductors`` over ``stack`` in a medium ``eps_r`` (stack fields changed)."""
    st = dataclasses.replace(stack, **changes)
    return Layout(conductors, eps_r=eps_r, ground_plane=st.back_plane, layers=tuple(st.layers()))


def fixed_mesh_capacitance(
    problem: Problem2D, layout: Layout, level: int, order: int
) -> np.ndarray:
    """C (n, n) F/m of ``layout`` on the mesh limits of ``problem`` (same panels)."""
    p = prepare(layout, problem.period_m)
    p = dataclasses.replace(p, h_max_m=problem.h_max_m, extent_m=problem.extent_m)
    return solve_level(p, level, order).capacitance_F


def above_scaled_layout(layout: Layout, stack: Stack, height_m: float, scale: float) -> Layout:
    """``layout`` with every permittivity above ``height_m`` (absolute z) times ``scale``."""
    layers = stack.layers(scale_above_m=height_m, scale=scale)
    top = max(height_m, stack.top_m)
    layers.append(PlanarLayer("medium_high", layout.eps_r * scale, top, math.inf))
    if height_m > stack.top_m:
        layers.append(PlanarLayer("medium_low", layout.eps_r, stack.top_m, height_m))
    return dataclasses.replace(layout, layers=tuple(layers))


def penetration_depths_m(
    value, problem: Problem2D, layout: Layout, stack: Stack, scale_m: float, level: int, order: int
) -> tuple[float, float, np.ndarray, np.ndarray]:
    """Penetration depths: heights above the electrodes' top face holding 50 % and 90 % of the
    sensitivity to the permittivity above that face (the face taken 1e-4 ``scale_m`` above
    the metal, see below).

    D(h) = d value / d(ln eps) with every permittivity above the top face + h scaled together
    (one-sided difference); the fraction held below h is 1 - D(h)/D(0), interpolated on the
    geometric grid of heights ``PENETRATION_GRID * scale_m``. ``value`` maps a capacitance matrix to the
    capacitance of interest. Returns (h50, h90, heights, fraction).
    """
    base = value(fixed_mesh_capacitance(problem, layout, level, order))
    z0 = stack.z0
    top_metal = max(float(c.shape.bounds[3]) for c in layout.conductors)

    def d_of(h: float) -> float:
        lay = above_scaled_layout(layout, stack, z0 + h, 1.0 + REL_STEP)
        return (value(fixed_mesh_capacitance(problem, lay, level, order)) - base) / REL_STEP

    # Scaling must not cut through a conductor, nor put the scaled face on the metal's top:
    # there the conductors rest on a layer face, a different treatment of the same mesh,
    # and the one-sided difference picks up that discretisation change divided by REL_STEP
    # (measured: D 20x too large on the humidity-film demo). Start a hair above the metal;
    # the share of a layer that thin is proportional to its thickness and negligible.
    h0 = max(top_metal - z0, 0.0) + PENETRATION_GRID[0] * scale_m
    d0 = d_of(h0)
    heights = h0 + PENETRATION_GRID * scale_m
    frac = np.array([1.0 - d_of(h) / d0 for h in heights])
    return (
        _crossing(heights, frac, 0.5) - h0,
        _crossing(heights, frac, 0.9) - h0,
        heights - h0,
        frac,
    )


def _crossing(heights: np.ndarray, frac: np.ndarray, target: float) -> float:
    k = int(np.searchsorted(frac, target))
    if k == 0:
        return float(heights[0])
    if k >= len(frac):
        return float("inf")
    f0, f1 = frac[k - 1], frac[k]
    t = (target - f0) / (f1 - f0) if f1 != f0 else 0.0
    return float(heights[k - 1] * (heights[k] / heights[k - 1]) ** t)
