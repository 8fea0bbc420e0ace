"""The result of a surface-charge solve: the contract every solver's result honours.

Both the axisymmetric solver and the 3-D panel solver return a :class:`ChargeSolution`.
Everything is SI: charges in C, densities in C/m^2, capacitances in F, fields in V/m,
positions in m. Points are (r, z) pairs for the axisymmetric solver and (x, y, z) triples for
the 3-D solver; ``point_dim`` says which.

The Maxwell capacitance matrix ``C`` gives the conductor charges for conductor potentials with
no applied field: ``Q = C @ V``, column j being the charges with conductor j at 1 V and the rest
at 0, each the integral of the solved density. It is not symmetrised: its asymmetry is a
discretisation error, measured and folded into ``rel_error_estimate``. The ground plane (when
present) is the reference conductor and is not a row.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from elopt.physics.layout import Layout
from elopt.physics.refinement import (
    Convergence,
    ErrorEstimate,
    Refinement,
    SolveOptions,
    StopReason,
)


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


def covered_entries_text(covers: Sequence[str], names: Sequence[str]) -> str:
    """Which capacitance entries an error estimate covers, in words: "the capacitance
    matrix" (every conductor), "C[pad, pad]" (one) or "the entries among pad, pour"."""
    if len(covers) == len(names):
        return "the capacitance matrix"
    if len(covers) == 1:
        return f"C[{covers[0]}, {covers[0]}]"
    return f"the entries among {', '.join(covers)}"


@dataclass(frozen=True)
class SurfaceSamples:
    """Free surface charge on one conductor at the excitation, sample by sample.

    ``kind`` "profile": points on the generating curve of a cross-section, (K, 2) as (r, z)
    for bodies of revolution or (x, z) in 2-D; "panels": (K, 3) panel centroids. Per sample:
    ``sigma_C_per_m2`` the density on that face, ``field_V_per_m`` = |sigma| / eps of the
    medium touching that face, ``area_m2`` the quadrature area (axisymmetric: including 2 pi r;
    2-D: per metre of length), ``face`` 0 on a closed surface, +1 / -1 on the two faces of an
    open sheet (+1: the face its normal points out of), ``normal`` (K, d) the unit outward
    normal of that face, ``arc_length_m`` for profiles the distance along the generating curve
    from its start (both faces of a sheet share it), None for panels. Samples are ordered by
    face (+1 before -1), then along the curve.
    """

    conductor: str
    kind: Literal["profile", "panels"]
    points_m: np.ndarray
    sigma_C_per_m2: np.ndarray
    field_V_per_m: np.ndarray
    area_m2: np.ndarray
    face: np.ndarray
    normal: np.ndarray
    arc_length_m: np.ndarray | None

    @property
    def charge_C(self) -> float:
        """Total charge of the samples (both faces of a sheet), C."""
        return float(np.sum(self.sigma_C_per_m2 * self.area_m2))


@dataclass(frozen=True)
class PeakField:
    """Largest surface field magnitude |sigma|/eps on one conductor at the actual excitation.

    ``singular`` is True when the peak sits at a sharp edge or corner: the field there is
    infinite in the exact solution, so the reported value depends on the mesh and is no
    design number (round the edge). ``rel_error_estimate``: estimated relative error of
    ``field_V_per_m`` from the last levels (see :mod:`elopt.physics.refinement`), NaN after one.
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
    conductors' potentials solved for); ``rel_error_estimate`` estimates the largest error
    of an entry (i, j) of C relative to sqrt(C_ii C_jj) over the entries among the conductors
    ``estimate_covers`` names (every conductor unless the layout names some; see
    :mod:`elopt.physics.refinement`), ``matrix_rel_error_estimate`` the same over every entry;
    ``accuracy_met`` says whether every request of ``options`` was met (``requested_accuracy``
    is ``options.rel_accuracy``); ``stop_reason`` why refinement stopped.
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
    #: True for a cross-section per unit length ((x, z) points), False for bodies of revolution
    #: ((r, z) points) and 3-D layouts.
    planar: bool = False
    options: SolveOptions
    convergence: Convergence
    stop_reason: StopReason
    error_estimate: ErrorEstimate
    levels: tuple

    def _adopt(self, refinement: Refinement) -> None:
        """Take the refinement's verdict (solver constructors call this)."""
        self.levels = refinement.levels
        self.options = refinement.options
        self.convergence = refinement.convergence
        self.error_estimate = refinement.estimate
        self.stop_reason = refinement.stop_reason
        self.rel_error_estimate = float(refinement.estimate.capacitance)
        self.requested_accuracy = float(refinement.options.rel_accuracy)
        self.accuracy_met = bool(refinement.accuracy_met)

    @property
    def estimate_covers(self) -> tuple[str, ...]:
        """The conductors (layout order) whose entries (i, j) ``rel_error_estimate`` covers."""
        return self.layout.estimated_names

    @property
    def estimate_scope(self) -> str:
        """The entries ``rel_error_estimate`` covers, in words (:func:`covered_entries_text`)."""
        return covered_entries_text(self.estimate_covers, self.layout.names)

    @property
    def estimate_covers_all(self) -> bool:
        """Whether ``rel_error_estimate`` covers every entry of C."""
        return len(self.estimate_covers) == len(self.layout.conductors)

    @property
    def matrix_rel_error_estimate(self) -> float:
        """``rel_error_estimate``'s estimate taken over every entry of C (the same number
        when the estimate covers every conductor)."""
        if self.estimate_covers_all:
            return float(self.rel_error_estimate)
        return float(self.error_estimate.matrix)

    def _take_finest_level(self) -> Any:
        """C, the excitation's potentials and densities, and the charges from the finest level
        (levels that hold ``capacitance_F``, ``applied_charges_C`` and ``excitation(layout)``)."""
        fine = self.levels[-1]
        self._fine = fine
        self.capacitance_matrix_F = fine.capacitance_F
        self.potentials_V, self.sigma_C_per_m2 = fine.excitation(self.layout)
        self.charges_C = fine.capacitance_F @ self.potentials_V + fine.applied_charges_C
        return fine

    @abstractmethod
    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        """Potential in V at points (M, point_dim) off the conductor surfaces -> (M,)."""

    @abstractmethod
    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        """Electric field in V/m at points (M, point_dim) -> (M, point_dim)."""

    @abstractmethod
    def surface_samples(self, conductor: str) -> SurfaceSamples:
        """Surface charge on one conductor at the excitation (see :class:`SurfaceSamples`)."""

    def peak_fields(self) -> tuple[PeakField, ...]:
        """One :class:`PeakField` per conductor, layout order, on the finest level."""
        errors = self.error_estimate.peaks if len(self.levels) >= 2 else ()
        out = []
        for k, p in enumerate(self.levels[-1].peaks()):
            err = float(errors[k]) if k < len(errors) else float("nan")
            out.append(PeakField(p.conductor, p.field_V_per_m, p.location_m, p.singular, err))
        return tuple(out)

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
