"""A layout: the conductors of one electrostatic problem, how each is driven, and the medium.

A conductor is either *driven* (its potential is fixed, ``potential_V``) or *floating* (its
total charge is fixed, ``charge_C``; its potential is solved for). The medium is homogeneous
with relative permittivity ``eps_r``. Optionally a grounded infinite plane z = 0 bounds the
half-space z > 0, and a uniform field ``applied_field_V_per_m`` along +z is applied
(potential -E0 z).

````shape`` is a :class:`elopt.physics.geometry.Curve` for bodies of revolution; the 3-D solver takes
triangle surfaces there instead. Insulators other than the medium are ``layers`` (planar, infinite
in extent) and ``regions`` (bounded bodies), described in :mod:`elopt.physics.media`.

``estimate_covers`` names the conductors a design is measured on: the solvers' error estimate
and the accuracy request then cover the capacitance entries (i, j) among them only (the
others, e.g. a grounded finger's own C_tt that no metric reads, are still solved and
reported). Empty: every conductor.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from elopt.physics.errors import GeometryError
from elopt.physics.geometry import (
    Curve,
    closed_outline,
    outside_outline_box,
    point_in_region,
    polyline_distance,
)
from elopt.physics.media import DielectricRegion, LayerStack, PlanarLayer

EPS0_F_PER_M = 8.8541878128e-12
"""Vacuum permittivity in F/m (CODATA 2018)."""


@dataclass(frozen=True)
class Conductor:
    """One conductor: a name, a shape, and exactly one of potential (V) or total charge (C)."""

    name: str
    shape: Any
    potential_V: float | None = None
    charge_C: float | None = None

    def __post_init__(self) -> None:
        if (self.potential_V is None) == (self.charge_C is None):
            raise GeometryError(
                f"conductor '{self.name}': give exactly one of potential_V (driven) or charge_C "
                f"(floating), got potential_V={self.potential_V}, charge_C={self.charge_C}"
            )
        value = self.potential_V if self.potential_V is not None else self.charge_C
        if not math.isfinite(value):
            raise GeometryError(f"conductor '{self.name}': drive value must be finite, got {value}")

    @property
    def floating(self) -> bool:
        return self.charge_C is not None


@dataclass(frozen=True)
class Layout:
    """Conductors plus the medium; validated on construction for bodies of revolution."""

    conductors: tuple[Conductor, ...]
    eps_r: float = 1.0
    ground_plane: bool = False
    applied_field_V_per_m: float = 0.0
    layers: tuple[PlanarLayer, ...] = ()
    regions: tuple[DielectricRegion, ...] = ()
    estimate_covers: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "conductors", tuple(self.conductors))
        object.__setattr__(self, "layers", tuple(self.layers))
        object.__setattr__(self, "regions", tuple(self.regions))
        covers = self.estimate_covers
        object.__setattr__(
            self, "estimate_covers", (covers,) if isinstance(covers, str) else tuple(covers)
        )
        if not self.conductors:
            raise GeometryError("layout: needs at least one conductor")
        if not (math.isfinite(self.eps_r) and self.eps_r >= 1.0):
            raise GeometryError(f"layout: eps_r must be finite and >= 1, got {self.eps_r}")
        if not math.isfinite(self.applied_field_V_per_m):
            raise GeometryError(
                f"layout: applied_field_V_per_m must be finite, got {self.applied_field_V_per_m}"
            )
        _ = self.layer_stack  # validates the layers against each other and the plane
        names = [c.name for c in self.conductors]
        dup = {n for n in names if names.count(n) > 1}
        if dup:
            raise GeometryError(f"layout: conductor names must be unique, repeated: {sorted(dup)}")
        self._validate_estimate_covers()
        if all(isinstance(c.shape, Curve) for c in self.conductors):
            self._validate_curves()

    @property
    def eps_F_per_m(self) -> float:
        """Permittivity of the medium (F/m): everything not a conductor, layer or region."""
        return EPS0_F_PER_M * self.eps_r

    @property
    def layer_stack(self) -> LayerStack:
        """The planar layers with the medium and the ground plane, validated together."""
        return LayerStack(self.layers, medium_eps_r=self.eps_r, ground_plane=self.ground_plane)

    @property
    def homogeneous(self) -> bool:
        """True when no layer or region is present (one medium everywhere)."""
        return not self.layers and not self.regions

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.conductors)

    @property
    def estimate_indices(self) -> tuple[int, ...]:
        """Indices (ascending) of the conductors whose capacitance entries the error estimate
        covers: every conductor unless ``estimate_covers`` names some."""
        if not self.estimate_covers:
            return tuple(range(len(self.conductors)))
        return tuple(sorted(self.index(name) for name in self.estimate_covers))

    @property
    def estimated_names(self) -> tuple[str, ...]:
        """Names of the conductors whose entries the error estimate covers, layout order."""
        return tuple(self.names[i] for i in self.estimate_indices)

    def _validate_estimate_covers(self) -> None:
        names = self.names
        for name in self.estimate_covers:
            if name not in names:
                raise GeometryError(
                    f"layout: estimate_covers names {name!r}, not a conductor; the conductors "
                    f"are {', '.join(names)}"
                )
        if len(set(self.estimate_covers)) != len(self.estimate_covers):
            raise GeometryError(
                f"layout: estimate_covers = {list(self.estimate_covers)} names a conductor twice"
            )

    def index(self, name: str) -> int:
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no conductor '{name}'; conductors are {list(self.names)}") from None

    def _validate_curves(self) -> None:
        for c in self.conductors:
            c.shape.validate(c.name)
            if self.ground_plane:
                if c.shape.sample_box[1] <= 0:
                    pts = c.shape.sample(16)
                    zmin, i = float(pts[:, 1].min()), int(pts[:, 1].argmin())
                    raise GeometryError(
                        f"conductor '{c.name}': touches or crosses the ground plane z = 0 "
                        f"(reaches z = {zmin:.6g} m at r = {pts[i, 0]:.6g} m); every point must "
                        "have z > 0"
                    )
        for i in range(len(self.conductors)):
            for j in range(i + 1, len(self.conductors)):
                _check_apart(self.conductors[i], self.conductors[j])


def _check_apart(a: Conductor, b: Conductor) -> None:
    """Raise GeometryError when the curves of ``a`` and ``b`` (their ``sample(16)``
    polylines) touch, or one starts inside the other's outline."""
    size = max(a.shape.size, b.shape.size)
    tol = 1e-9 * size
    # Polylines whose bounding boxes lie farther apart than the tolerance cannot touch.
    box_a, box_b = a.shape.sample_box, b.shape.sample_box
    if all(box_a[k] <= box_b[k + 2] + tol and box_b[k] <= box_a[k + 2] + tol for k in (0, 1)):
        dist, where = polyline_distance(a.shape.sample(16), b.shape.sample(16))
        if dist <= tol:
            raise GeometryError(
                f"conductors '{a.name}' and '{b.name}' touch or intersect near (r, z) = "
                f"({where[0]:.6g}, {where[1]:.6g}) m (distance {dist:.3g} m); conductors must be "
                "apart"
            )
    for inner, outer in ((a, b), (b, a)):
        pin = inner.shape.sample(16)[:1]
        if outside_outline_box(outer.shape, pin[0]):
            continue
        outline = closed_outline(outer.shape)
        if outline is not None and point_in_region(pin, outline)[0]:
            raise GeometryError(
                f"conductor '{inner.name}' lies inside conductor '{outer.name}' (point "
                f"({pin[0, 0]:.6g}, {pin[0, 1]:.6g}) m); conductors must not overlap"
            )


def driven(name: str, shape: Any, potential_V: float) -> Conductor:
    return Conductor(name=name, shape=shape, potential_V=float(potential_V))


def floating(name: str, shape: Any, charge_C: float = 0.0) -> Conductor:
    return Conductor(name=name, shape=shape, charge_C=float(charge_C))


def layout(conductors: Sequence[Conductor], **kwargs: Any) -> Layout:
    return Layout(conductors=tuple(conductors), **kwargs)
