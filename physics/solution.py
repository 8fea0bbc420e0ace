"""The result of a surface-charge solve: the contract every solver's result honours.

Both the axisymmetric solver and the 3-D panel solver return a :class:`ChargeSolution`.
Everything is SI: charges in C, densities in C/m^2, capacitances in F, fields in V/m,
positions in m. Points are (r, z) pairs for the axisymmetric solver and (x, y, z) triples for
the 3-D solver; ``point_dim`` says which.

The Maxwell capacitance matrix ``C`` gives the conductor charges for conductor potentials with
no applied field: ``Q = C @ V``. It is symmetric with a positive diagonal and a non-positive
off-diagonal. The ground plane (when present) is the reference conductor and is not a row.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np

from elopt.physics.layout import Layout


def excitation_potentials(
    layout: Layout, capacitance_F: np.ndarray, applied_charges_C: np.ndarray
) -> np.ndarray:
    """Conductor potentials (n,) V at the layout's excitation.

    Driven conductors keep their potential; floating ones take the potentials at which
    C V + Q_applied gives their set charges.
    """
    n = len(layout.conductors)
    volts = np.zeros(n)
    fl = np.array([c.floating for c in layout.conductors])
    for i, c in enumerate(layout.conductors):
        if not c.floating:
            volts[i] = c.potential_V
    if fl.any():
        q = np.array([c.charge_C for c in layout.conductors if c.floating])
        rhs = q - applied_charges_C[fl] - capacitance_F[np.ix_(fl, ~fl)] @ volts[~fl]
        volts[fl] = np.linalg.solve(capacitance_F[np.ix_(fl, fl)], rhs)
    return volts


@dataclass(frozen=True)
class PeakField:
    """Largest surface field magnitude |sigma|/eps on one conductor at the actual excitation.

    ``singular`` is True when the peak sits at a sharp edge or corner: the field there is
    infinite in the exact solution, so the reported value depends on the mesh and is no
    design number (round the edge). ``rel_error_estimate`` compares the two finest meshes.
    """

    conductor: str
    field_V_per_m: float
    location_m: tuple[float, ...]
    singular: bool
    rel_error_estimate: float


class ChargeSolution(ABC):
    """Surface charge of a layout at its excitation, plus the capacitance matrix.

    Guarantees: ``capacitance_matrix_F`` is (n, n) for n conductors in layout order;
    ``charges_C`` and ``potentials_V`` are (n,) at the layout's excitation (floating
    conductors' potentials solved for); ``rel_error_estimate`` is the largest entry-wise change
    of C between the last two refinement levels, each entry scaled by sqrt(C_ii C_jj);
    ``accuracy_met`` says whether it reached ``requested_accuracy``.
    """

    layout: Layout
    capacitance_matrix_F: np.ndarray
    charges_C: np.ndarray
    potentials_V: np.ndarray
    rel_error_estimate: float
    requested_accuracy: float
    accuracy_met: bool
    n_unknowns: int
    point_dim: int

    @abstractmethod
    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        """Potential in V at points (M, point_dim) off the conductor surfaces -> (M,)."""

    @abstractmethod
    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        """Electric field in V/m at points (M, point_dim) -> (M, point_dim)."""

    @abstractmethod
    def surface_samples(self, conductor: str) -> dict[str, np.ndarray]:
        """Surface charge along one conductor at the excitation.

        Returns arrays of one length K: ``points_m`` (K, point_dim), ``sigma_C_per_m2`` (K,),
        ``area_m2`` (K,) quadrature area per sample (sums to the surface area), and
        ``field_V_per_m`` (K,) = |sigma|/eps. The axisymmetric solver adds ``arc_length_m``.
        """

    @abstractmethod
    def peak_fields(self) -> tuple[PeakField, ...]:
        """One :class:`PeakField` per conductor, layout order."""

    @abstractmethod
    def plane_capacitance_derivative_F_per_m(self) -> np.ndarray:
        """dC/d(delta), (n, n) in F/m, for the ground plane moved by delta towards +z.

        Uses the Hadamard shape derivative dC_ij = (1/eps) * integral of sigma_i sigma_j over
        the plane, sigma_i the plane's charge density with conductor i at 1 V, the rest at 0.
        """

    @abstractmethod
    def plane_sensitivity_density(self, i: int, j: int, points_m: np.ndarray) -> np.ndarray:
        """Integrand of :meth:`plane_capacitance_derivative_F_per_m` entry (i, j), F/m^3.

        ``points_m`` are positions on the plane: radii (M,) for the axisymmetric solver,
        (M, 2) x-y pairs for the 3-D solver.
        """

    @property
    def peak_field(self) -> PeakField:
        """The largest of :meth:`peak_fields`."""
        return max(self.peak_fields(), key=lambda p: p.field_V_per_m)
