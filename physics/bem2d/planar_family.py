"""Evaluation steps shared by the planar families (interdigitated, coplanar).

Given a solved layout over a :class:`~elopt.physics.bem2d.planar_stack.Stack`, compute the
relative sensitivities to the medium's and the film's permittivity, the film-thickness
derivative and the penetration depths, all on the second-finest mesh of the solve (finite
differences on a fixed mesh, see :mod:`elopt.physics.bem2d.planar_stack`).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from elopt.physics.bem2d import planar_stack as ps
from elopt.physics.bem2d.solution import Solution2D
from elopt.physics.electrodes import metrics
from elopt.physics.electrodes.base import parameter
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.errors import ElectrodeError
from elopt.physics.layout import EPS0_F_PER_M, Layout


@dataclass(frozen=True)
class Sensitivities:
    """Relative sensitivities (d ln C / d ln eps), film-thickness derivative (1/m of C, i.e.
    d ln C / d t) and penetration depths (m) of one capacitance."""

    medium_rel: float
    film_rel: float
    film_thickness_rel_per_m: float
    depth50_m: float
    depth90_m: float


def sensitivities(
    sol: Solution2D,
    stack: ps.Stack,
    value: Callable[[np.ndarray], float],
    depth_scale_m: float,
    penetration: bool,
) -> Sensitivities:
    """Finite-difference sensitivities of ``value(C)`` for the solved layout ``sol``."""
    problem = sol.problem
    layout = sol.layout
    level = sol.levels[-2].panels.level if len(sol.levels) >= 2 else sol.levels[-1].panels.level
    order = sol.panels.order

    def cap(lay: Layout) -> float:
        return value(ps.fixed_mesh_capacitance(problem, lay, level, order))

    base = cap(layout)
    step = ps.REL_STEP
    medium = ps.above_scaled_layout(layout, stack, stack.top_m, 1 + step)
    medium_rel = (cap(medium) - base) / (step * base)
    film_rel = thick_rel = 0.0
    if stack.film_m > 0:
        conds = layout.conductors
        up = ps.stack_layout(conds, stack, layout.eps_r, film_eps_r=stack.film_eps_r * (1 + step))
        film_rel = (cap(up) - base) / (step * base)
        dt = ps.THICK_STEP * stack.film_m
        hi = ps.stack_layout(conds, stack, layout.eps_r, film_m=stack.film_m + dt)
        lo = ps.stack_layout(conds, stack, layout.eps_r, film_m=stack.film_m - dt)
        thick_rel = (cap(hi) - cap(lo)) / (2 * dt * base)
    d50 = d90 = float("nan")
    if penetration:
        d50, d90, _, _ = ps.penetration_depths_m(
            value, problem, layout, stack, depth_scale_m, level, order
        )
    return Sensitivities(medium_rel, film_rel, thick_rel, d50, d90)


def check_stack_params(rules: RuleBook, p, metal_key: str = "metal_thickness_um") -> None:
    """Relations every planar family shares for its stack and metal (ranges are declared)."""
    if not isinstance(p.back_plane, bool):
        rules.broken.append(f"back_plane = {p.back_plane!r} must be true or false")
    elif p.back_plane and not p.substrate_thickness_um > 0:
        rules.broken.append(
            f"back_plane = true needs substrate_thickness_um > 0 (got "
            f"{p.substrate_thickness_um:.6g}; 0 means a half-space substrate)"
        )
    t = float(getattr(p, metal_key))
    if p.passivation_thickness_um > 0 and t > p.passivation_thickness_um * (1 + 1e-12):
        rules.broken.append(
            f"{metal_key} = {t:.6g} must be <= passivation_thickness_um = "
            f"{p.passivation_thickness_um:.6g} (electrodes buried across the passivation's top "
            "face: the planar-layer model cannot hold them; thicken the passivation or set it 0)"
        )
    elif p.passivation_thickness_um <= 0 and p.film_thickness_um > 0 and t > p.film_thickness_um:
        rules.broken.append(
            f"{metal_key} = {t:.6g} must be <= film_thickness_um = {p.film_thickness_um:.6g} "
            "(electrodes buried across the film's top face)"
        )
    r = float(p.corner_radius_um)
    if r > 0.5 * t * (1 + 1e-12):
        rules.broken.append(
            f"corner_radius_um = {r:.6g} must be <= {metal_key} / 2 = {0.5 * t:.6g} (0 for "
            "sharp corners or a zero-thickness metal)"
        )


def check_numbers(rules: RuleBook, params) -> bool:
    """Every numeric field finite (booleans and strings are checked by their own rules)."""
    ok = True
    for f in dataclasses.fields(params):
        v = getattr(params, f.name)
        if isinstance(v, (bool, str)):
            continue
        if not isinstance(v, (int, float)) or not math.isfinite(v):
            rules.broken.append(f"{f.name} = {v!r} must be a finite number")
            ok = False
    return ok


@dataclass(frozen=True, kw_only=True)
class StackParams:
    """Declared fields of the metal and the layer stack, shared by the planar Params."""

    metal_thickness_um: float = parameter(
        "um", "electrode metal thickness (0: zero-thickness strips)", default=0.0, low=0.0
    )
    corner_radius_um: float = parameter(
        "um", "radius of the metal's rounded corners (0: sharp)", default=0.0, low=0.0
    )
    substrate_eps_r: float = parameter(
        "", "substrate relative permittivity", default=4.6, low=0.0, low_open=True, high=1e6
    )
    substrate_thickness_um: float = parameter(
        "um", "substrate thickness (0: a half-space)", default=0.0, low=0.0
    )
    back_plane: bool = parameter("", "grounded plane under the substrate", default=False)
    passivation_eps_r: float = parameter(
        "", "passivation relative permittivity", default=3.9, low=0.0, low_open=True, high=1e6
    )
    passivation_thickness_um: float = parameter(
        "um", "passivation over the electrodes (0: none)", default=0.0, low=0.0
    )
    film_eps_r: float = parameter(
        "", "sensing film relative permittivity", default=1.0, low=0.0, low_open=True, high=1e6
    )
    film_thickness_um: float = parameter(
        "um", "sensing film thickness (0: none)", default=0.0, low=0.0
    )


def validate_flags(rules: RuleBook, options) -> None:
    """Options of the planar families are flags: each must be true or false."""
    for f in dataclasses.fields(options):
        v = getattr(options, f.name)
        if not isinstance(v, bool):
            rules.broken.append(f"{f.name} = {v!r} must be true or false")


def period_from_cell(layout: Layout) -> float:
    """The period of a two-finger cell: twice the distance between the fingers' centres."""
    a, b = (c.shape.bounds for c in layout.conductors[:2])
    return abs((b[0] + b[1]) - (a[0] + a[1]))


def stack_of(p) -> ps.Stack:
    um = ps.UM
    return ps.Stack(
        substrate_eps_r=float(p.substrate_eps_r),
        substrate_m=float(p.substrate_thickness_um) * um,
        back_plane=bool(p.back_plane),
        passivation_eps_r=float(p.passivation_eps_r),
        passivation_m=float(p.passivation_thickness_um) * um,
        film_eps_r=float(p.film_eps_r),
        film_m=float(p.film_thickness_um) * um,
    )


def mutual(c: np.ndarray, a: list[int], b: list[int]) -> float:
    """Mutual capacitance between conductor groups a and b: -sum C[a, b]."""
    return -float(c[np.ix_(a, b)].sum())


#: Metrics both planar families report (declared in the metric registry).
COMMON_METRICS = (
    metrics.PLANAR_CAPACITANCE,
    metrics.PLANAR_CAPACITANCE_PER_LENGTH,
    metrics.PLANAR_MUT_SENSITIVITY,
    metrics.PLANAR_MUT_RELATIVE_SENSITIVITY,
    metrics.PLANAR_FILM_SENSITIVITY,
    metrics.PLANAR_FILM_RELATIVE_SENSITIVITY,
    metrics.PLANAR_FILM_THICKNESS_SENSITIVITY,
    metrics.PLANAR_PENETRATION_DEPTH_50,
    metrics.PLANAR_PENETRATION_DEPTH_90,
    metrics.PLANAR_CELL_CONSTANT,
)


def common_metrics(
    c_total_F: float,
    length_m: float,
    sens: Sensitivities,
    eps_r: float,
    stack: ps.Stack,
    peak: float,
) -> dict[str, float]:
    """The :data:`COMMON_METRICS` values from the total capacitance and the sensitivities."""
    d_mut = sens.medium_rel * c_total_F / eps_r
    d_film = sens.film_rel * c_total_F / stack.film_eps_r if stack.film_m > 0 else 0.0
    return {
        "capacitance_pF": c_total_F * 1e12,
        "capacitance_per_length_pF_per_m": c_total_F / length_m * 1e12,
        "mut_sensitivity_fF_per_eps": d_mut * 1e15,
        "mut_relative_sensitivity": sens.medium_rel,
        "film_sensitivity_fF_per_eps": d_film * 1e15,
        "film_relative_sensitivity": sens.film_rel,
        "film_thickness_sensitivity_fF_per_um": sens.film_thickness_rel_per_m
        * c_total_F
        * 1e15
        * 1e-6,
        "penetration_depth_50_um": sens.depth50_m / ps.UM,
        "penetration_depth_90_um": sens.depth90_m / ps.UM,
        "peak_surface_field_V_per_m": peak,
        "cell_constant_per_m": EPS0_F_PER_M / d_mut if d_mut > 0 else float("nan"),
    }


def metric_notes(sens: Sensitivities, back_plane: bool) -> dict[str, str]:
    """Why metrics are undefined or surprising (metric name -> sentence), for the report."""
    if sens.medium_rel > 0:
        return {}
    why = (
        "the sense capacitance falls as the medium's eps_r rises (mut_relative_sensitivity = "
        f"{sens.medium_rel:.3g}), so eps0 / (dC/d eps_r) is no cell constant"
    )
    if back_plane:
        why += (
            ". This is physics, not an error: under a grounded back plane a medium of high "
            "permittivity that spans the stack acts as a shield held at the plane's potential; "
            "it takes field lines from the held electrodes, so the mutual capacitance drops "
            "toward its value with a grounded sheet on the stack's top face (a shunt-mode "
            "reading; the driven electrode's own capacitance to ground rises instead)"
        )
    return {"cell_constant_per_m": why, "mut_relative_sensitivity": why}


def electrode_error(family: str, exc: Exception) -> ElectrodeError:
    return ElectrodeError(f"{family}: {exc}")
