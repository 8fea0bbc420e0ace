"""Conductor cross-sections of the 2-D solver, in the (x, z) plane (m).

* :class:`Strip`: a zero-thickness horizontal strip (an open sheet; its normal is +z, the top
  face is face +1). The unknown on it is the charge of both faces together.
* :class:`Bar`: a rectangle of finite thickness, its four corners sharp or rounded with
  ``corner_radius_m`` (quarter circles), traversed counter-clockwise.

Each shape lists its pieces: straight lines and circular arcs with a flag per end saying
whether the charge is singular there (a sharp corner or a free sheet edge, where panels are
graded) or only the curvature jumps (a fillet's end, mildly graded).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from elopt.physics.errors import GeometryError


def sample_pieces(pieces: list[Piece], n: int) -> np.ndarray:
    """About n points (K, 2) as (x, z) along the pieces, spaced by arc length."""
    total = sum(p.length_m for p in pieces)
    out = []
    for p in pieces:
        k = max(2, int(round(n * p.length_m / total)))
        u = np.linspace(0.0, 1.0, k, endpoint=False)
        if p.center is None:
            z = p.start + (p.end - p.start) * u
        else:
            z = p.center + (p.start - p.center) * np.exp(1j * p.sweep * u)
        out.append(np.stack([z.real, z.imag], axis=1))
    last = pieces[-1].end
    out.append(np.array([[last.real, last.imag]]))
    return np.concatenate(out)


@dataclass(frozen=True)
class Piece:
    """A line (``center`` None) from ``start`` to ``end``, or an arc about ``center``.

    Points are complex x + i z. ``grade_start`` / ``grade_end``: 2 singular, 1 mild, 0 none.
    """

    start: complex
    end: complex
    center: complex | None
    grade_start: int
    grade_end: int

    @property
    def length_m(self) -> float:
        if self.center is None:
            return abs(self.end - self.start)
        return abs(self.start - self.center) * abs(self.sweep)

    @property
    def sweep(self) -> float:
        """Signed angle (rad) of an arc, counter-clockwise positive."""
        a0 = math.atan2((self.start - self.center).imag, (self.start - self.center).real)
        a1 = math.atan2((self.end - self.center).imag, (self.end - self.center).real)
        return (a1 - a0 + math.pi) % (2 * math.pi) - math.pi


@dataclass(frozen=True)
class Strip:
    """Zero-thickness strip from ``x_left_m`` to ``x_right_m`` at height ``z_m``."""

    x_left_m: float
    x_right_m: float
    z_m: float

    closed = False
    kind = "sheet"

    def sample(self, n: int) -> np.ndarray:
        return sample_pieces(self.pieces(), n)

    def validate(self, name: str) -> None:
        vals = (self.x_left_m, self.x_right_m, self.z_m)
        if not all(math.isfinite(v) for v in vals):
            raise GeometryError(f"conductor '{name}': strip bounds must be finite, got {vals}")
        if not self.x_right_m > self.x_left_m:
            raise GeometryError(
                f"conductor '{name}': strip width must be > 0, got x_left_m = "
                f"{self.x_left_m:g}, x_right_m = {self.x_right_m:g}"
            )

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        return self.x_left_m, self.x_right_m, self.z_m, self.z_m

    def pieces(self) -> list[Piece]:
        return [
            Piece(complex(self.x_left_m, self.z_m), complex(self.x_right_m, self.z_m), None, 2, 2)
        ]


@dataclass(frozen=True)
class Bar:
    """Rectangle [x_left, x_right] x [z_bottom, z_top] (m), corners rounded with radius r."""

    x_left_m: float
    x_right_m: float
    z_bottom_m: float
    z_top_m: float
    corner_radius_m: float = 0.0

    closed = True
    kind = "ring"

    def sample(self, n: int) -> np.ndarray:
        return sample_pieces(self.pieces(), n)[:-1]

    def validate(self, name: str) -> None:
        vals = (self.x_left_m, self.x_right_m, self.z_bottom_m, self.z_top_m, self.corner_radius_m)
        if not all(math.isfinite(v) for v in vals):
            raise GeometryError(f"conductor '{name}': bar bounds must be finite, got {vals}")
        w, t = self.x_right_m - self.x_left_m, self.z_top_m - self.z_bottom_m
        if not (w > 0 and t > 0):
            raise GeometryError(
                f"conductor '{name}': bar width and thickness must be > 0, got {w:g} m, {t:g} m"
            )
        r = self.corner_radius_m
        if not 0.0 <= r <= 0.5 * min(w, t) * (1 + 1e-12):
            raise GeometryError(
                f"conductor '{name}': corner_radius_m = {r:g} must lie in [0, min(width, "
                f"thickness)/2 = {0.5 * min(w, t):g}]"
            )

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        return self.x_left_m, self.x_right_m, self.z_bottom_m, self.z_top_m

    def pieces(self) -> list[Piece]:
        xl, xr, zb, zt = self.bounds
        r = min(self.corner_radius_m, 0.5 * min(xr - xl, zt - zb))
        corners = [complex(xl, zb), complex(xr, zb), complex(xr, zt), complex(xl, zt)]
        if r == 0.0:
            return [Piece(corners[k], corners[(k + 1) % 4], None, 2, 2) for k in range(4)]
        # Inward offsets of each corner's centre, in traversal order.
        inward = [complex(1, 1), complex(-1, 1), complex(-1, -1), complex(1, -1)]
        direction = [1, 1j, -1, -1j]  # of the side leaving each corner
        out: list[Piece] = []
        for k in range(4):
            c = corners[k] + r * inward[k]
            a_start = corners[k] - r * direction[k - 1]  # where the incoming side ends
            a_end = corners[k] + r * direction[k]
            out.append(Piece(a_start, a_end, c, 1, 1))
            nxt = corners[(k + 1) % 4] - r * direction[k]
            if abs(nxt - a_end) > 1e-12 * (abs(nxt) + r):
                out.append(Piece(a_end, nxt, None, 1, 1))
        return out
