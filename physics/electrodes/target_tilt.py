"""A driven-guard sensor over a tilted grounded target, solved in 3-D.

The target plane is tilted by theta about an axis lying in it (along y, through x = x_a).
That is the same problem as the sensor turned by -theta about the same axis over a level
target, which the image method solves exactly; the 3-D solver does so. From one solve:

- C_sense = C_ss + C_sg (sensor and guard both at V), at the tilt;
- its sensitivity -dC_sense/dd to the standoff measured along the target's normal (the plane
  shape derivative, :meth:`PanelSolution.plane_capacitance_derivative_F_per_m`);
- the tilt sensitivity dC_sense/dtheta (the Hadamard formula with the plane displacement
  dz = -theta (x - x_a), :meth:`PanelSolution.plane_tilt_derivative_F_per_rad`).

Works for any layout of 3-D surfaces whose first conductor is the sensor and second the guard.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from elopt.physics.bem3d.mesh import rotation_about_axis
from elopt.physics.bem3d.solution import PanelSolution
from elopt.physics.layout import Conductor, Layout

#: fF per um for a derivative in F/m; fF per mrad for one in F/rad.
FF_PER_UM = 1e15 * 1e-6
FF_PER_MRAD = 1e15 * 1e-3


def tilted_layout(layout: Layout, tilt_rad: float, axis_x_m: float) -> Layout:
    """``layout`` (3-D surfaces) as seen over a target tilted by ``tilt_rad`` about the line
    y-axis through (axis_x_m, 0, 0): every conductor turned by -tilt about that line."""
    if tilt_rad == 0.0:
        return layout
    rot = rotation_about_axis(np.array([0.0, 1.0, 0.0]), -tilt_rad)
    p = np.array([axis_x_m, 0.0, 0.0])
    shift = p - rot @ p
    return replace(
        layout,
        conductors=tuple(
            Conductor(c.name, c.shape.transformed(rot, shift), c.potential_V, c.charge_C)
            for c in layout.conductors
        ),
    )


def sense_capacitance_F(c: np.ndarray) -> float:
    """C_sense = C_ss + C_sg for sensor index 0, guard index 1 (driven guard)."""
    return float(c[0, 0] + c[0, 1])


def tilt_metrics(solution: PanelSolution, axis_x_m: float) -> dict[str, float]:
    """C_sense (fF), -dC_sense/dd (fF/um) and dC_sense/dtheta (fF/mrad) of a solved tilt."""
    d_plane = solution.plane_capacitance_derivative_F_per_m()
    d_tilt = solution.plane_tilt_derivative_F_per_rad(axis_point_m=(axis_x_m, 0.0))
    return {
        "sense_capacitance_fF": sense_capacitance_F(solution.capacitance_matrix_F) * 1e15,
        "sensitivity_fF_per_um": sense_capacitance_F(d_plane) * FF_PER_UM,
        "tilt_sensitivity_fF_per_mrad": sense_capacitance_F(d_tilt) * FF_PER_MRAD,
    }
