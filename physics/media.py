"""Insulators around the conductors: planar layers and bounded dielectric regions.

One description for every solver (axisymmetric, 2-D, 3-D). Everything that is neither a
conductor, a layer nor a region is the layout's medium (``Layout.eps_r``).

* A :class:`PlanarLayer` fills ``z_bottom_m <= z <= z_top_m`` for every x, y (or r): a coating on
  the grounded target, a substrate, a film, a slab of material under test. ``z_bottom_m`` may be
  ``-inf`` (a half-space below, e.g. a thick substrate) and ``z_top_m`` ``+inf`` (a half-space
  above). Layers never overlap; the medium fills the gaps between them.
* A :class:`DielectricRegion` is a bounded body of one permittivity whose ``shape`` is a closed
  boundary in the solver's own form (a closed generating curve, or one closed by the axis, for
  bodies of revolution; a closed triangle surface in 3-D; a closed curve in a 2-D cross-section).

Relative permittivities are finite and > 0 (values below 1 describe no passive medium at
statics, but are accepted for checks against formulas; the families ask for >= 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from elopt.physics.errors import GeometryError


def check_eps_r(owner: str, eps_r: float) -> float:
    """``eps_r`` as a float if finite and > 0, else a :class:`GeometryError` naming ``owner``."""
    try:
        value = float(eps_r)
    except (TypeError, ValueError):
        raise GeometryError(f"{owner}: eps_r must be a number, got {eps_r!r}") from None
    if not (math.isfinite(value) and 0.0 < value <= 1e6):
        raise GeometryError(f"{owner}: eps_r must be finite and in (0, 1e6], got {value:g}")
    return value


@dataclass(frozen=True)
class PlanarLayer:
    """A slab ``z_bottom_m <= z <= z_top_m`` of relative permittivity ``eps_r``, infinite in x, y."""

    name: str
    eps_r: float
    z_bottom_m: float
    z_top_m: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "eps_r", check_eps_r(f"layer '{self.name}'", self.eps_r))
        lo, hi = float(self.z_bottom_m), float(self.z_top_m)
        if math.isnan(lo) or math.isnan(hi) or lo == math.inf or hi == -math.inf:
            raise GeometryError(
                f"layer '{self.name}': bounds must be numbers with z_bottom < +inf and "
                f"z_top > -inf, got z_bottom_m={lo:g}, z_top_m={hi:g}"
            )
        if not hi > lo:
            raise GeometryError(
                f"layer '{self.name}': thickness must be > 0, got z_bottom_m={lo:g} m, "
                f"z_top_m={hi:g} m"
            )
        object.__setattr__(self, "z_bottom_m", lo)
        object.__setattr__(self, "z_top_m", hi)

    @property
    def thickness_m(self) -> float:
        return self.z_top_m - self.z_bottom_m


@dataclass(frozen=True)
class LayerStack:
    """Planar layers, bottom to top, with the medium's permittivity in the gaps and beyond.

    ``ground_plane`` says whether a grounded plane bounds the problem at z = 0 from below (then
    every layer lies in z >= 0).
    """

    layers: tuple[PlanarLayer, ...]
    medium_eps_r: float = 1.0
    ground_plane: bool = False

    def __post_init__(self) -> None:
        layers = tuple(sorted(self.layers, key=lambda layer: layer.z_bottom_m))
        object.__setattr__(self, "layers", layers)
        for a, b in zip(layers, layers[1:], strict=False):
            if b.z_bottom_m < a.z_top_m:
                raise GeometryError(
                    f"layers '{a.name}' and '{b.name}' overlap: '{a.name}' reaches z = "
                    f"{a.z_top_m:g} m, '{b.name}' starts at z = {b.z_bottom_m:g} m"
                )
        if self.ground_plane:
            for layer in layers:
                if layer.z_bottom_m < 0.0:
                    raise GeometryError(
                        f"layer '{layer.name}': lies below the ground plane (z_bottom_m = "
                        f"{layer.z_bottom_m:g} m); with a ground plane every layer needs z >= 0"
                    )

    @property
    def interfaces_m(self) -> np.ndarray:
        """Sorted finite heights (K,) in m where the permittivity changes (the plane excluded)."""
        heights = {
            v
            for layer in self.layers
            for v in (layer.z_bottom_m, layer.z_top_m)
            if math.isfinite(v) and not (self.ground_plane and v == 0.0)
        }
        return np.asarray(
            sorted(z for z in heights if self.eps_r_below(z) != self.eps_r_above(z)), dtype=float
        )

    def eps_r_below(self, z_m: float) -> float:
        """Permittivity just below the height ``z_m``."""
        for layer in self.layers:
            if layer.z_bottom_m < z_m <= layer.z_top_m:
                return layer.eps_r
        return self.medium_eps_r

    def eps_r_above(self, z_m: float) -> float:
        """Permittivity just above the height ``z_m``."""
        for layer in self.layers:
            if layer.z_bottom_m <= z_m < layer.z_top_m:
                return layer.eps_r
        return self.medium_eps_r

    def eps_r_at(self, z_m: np.ndarray) -> np.ndarray:
        """Permittivity at heights ``z_m`` (M,); on an interface, the value above it."""
        z = np.asarray(z_m, dtype=float)
        out = np.full(z.shape, float(self.medium_eps_r))
        for layer in self.layers:
            out[(z >= layer.z_bottom_m) & (z < layer.z_top_m)] = layer.eps_r
        return out


@dataclass(frozen=True)
class DielectricRegion:
    """A bounded insulator: a closed boundary ``shape`` (solver's form) and its ``eps_r``."""

    name: str
    shape: Any
    eps_r: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "eps_r", check_eps_r(f"region '{self.name}'", self.eps_r))
