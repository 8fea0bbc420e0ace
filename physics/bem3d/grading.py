"""One-dimensional node distributions graded toward edges, nested under refinement.

Every distribution is a list of pieces, each a smooth map s in [0, 1] -> x with a node
count; level l puts ``count * 2**l`` uniform steps in s on every piece, so level l + 1
contains every node of level l (nested meshes: h and h/2 compare the same geometry), and
the steps at any level are a smooth function of position (what Richardson extrapolation
needs).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np


def polynomial_grading(s: np.ndarray, q: float) -> np.ndarray:
    """Map [0, 1] -> [0, 1] with steps shrinking like s**(q-1) toward both ends (q = 1: none).

    For a charge density singular like rho**(lambda - 1) at an edge, q of about 2 to 3
    keeps the panel error near the edge from dominating (common practice, no source).
    """
    s = np.asarray(s, dtype=float)
    if q == 1.0:
        return s
    a = s**q
    return a / (a + (1.0 - s) ** q)


def cosine_grading(s: np.ndarray, alpha: float) -> np.ndarray:
    """Map [0, 1] -> [0, 1] with slope 1 - alpha at both ends and 1 + alpha in the middle."""
    s = np.asarray(s, dtype=float)
    return s - alpha * np.sin(2.0 * np.pi * s) / (2.0 * np.pi)


@lru_cache(maxsize=8)
def _polynomial_max_slope(q: float) -> float:
    s = np.linspace(0.0, 1.0, 4001)
    return float(np.max(np.gradient(polynomial_grading(s, q), s)))


#: Above this many steps per unit of level-0 spacing an interval is not planned at all: its
#: node count is reported as infinite (a size check refuses it before anything is allocated).
_MAX_PLANNED_STEPS = 1e12


def _sharp_steps(length: float, h: float, grade: float) -> int:
    """Level-0 steps of a sharp-edged interval (largest step about ``h``)."""
    return max(1, math.ceil(length * _polynomial_max_slope(grade) / h))


#: Level-0 steps on each fillet strip (half of a rounded edge's quarter circle) by default.
ARC_STEPS = 2


def fillet_arc_steps(h: float, fillet: float, arc_steps: int = ARC_STEPS) -> int:
    """Level-0 steps on each fillet strip of a rounded edge of radius ``fillet`` (m): at least
    ``arc_steps``, and no longer than ``h`` along the arc."""
    return max(arc_steps, math.ceil(0.25 * math.pi * fillet / h))


def _fillet_plan(
    length: float, h: float, fillet: float, arc_steps: int = ARC_STEPS
) -> tuple[float, int, int, float]:
    """(strip width w, level-0 steps on each fillet strip, on the middle part, cosine alpha)."""
    w = min(fillet, 0.5 * length)
    arc = 0.25 * math.pi * w
    n_arc = fillet_arc_steps(h, w, arc_steps)
    arc_step = arc / n_arc
    mid_len = length - 2.0 * w
    n_mid, alpha = 0, 0.0
    if mid_len > 1e-12 * length:
        # Largest alpha (<= 0.9) whose end step matches the arc step.
        n_mid = max(1, math.ceil(mid_len / h))
        for _ in range(40):
            alpha = min(0.9, max(0.0, 1.0 - arc_step * n_mid / mid_len))
            n_new = max(1, math.ceil(mid_len * (1.0 + alpha) / h))
            if n_new == n_mid:
                break
            n_mid = n_new
    return w, n_arc, n_mid, alpha


def interval_node_count(
    a: float,
    b: float,
    h: float,
    level: int,
    *,
    grade: float,
    fillet: float,
    arc_steps: int = ARC_STEPS,
) -> float:
    """Nodes :func:`interval_nodes` would make (an upper bound by the seams; inf when the
    interval holds more than about 1e12 level-0 steps). Nothing is allocated."""
    length = b - a
    if not length / h <= _MAX_PLANNED_STEPS:
        return math.inf
    steps = 2**level
    if fillet <= 0:
        return float(_sharp_steps(length, h, grade) * steps + 1)
    _, n_arc, n_mid, _ = _fillet_plan(length, h, fillet, arc_steps)
    strips = 2 * (n_arc * steps + 1)
    # The strips share their inner ends with the middle part (or with each other).
    return float(strips + n_mid * steps - 1 if n_mid else strips - 1)


def axis_node_count(
    breaks: list[float],
    h: float,
    level: int,
    *,
    fillet: float,
    grade: float,
    arc_steps: int = ARC_STEPS,
    centred: bool = False,
) -> float:
    """Nodes :func:`axis_nodes` would make through ``breaks`` (see :func:`interval_node_count`;
    one more when ``centred`` may add the node 0)."""
    pieces = [
        interval_node_count(
            breaks[k], breaks[k + 1], h, level, grade=grade, fillet=fillet, arc_steps=arc_steps
        )
        for k in range(len(breaks) - 1)
    ]
    return sum(pieces) - (len(pieces) - 1) + (1 if centred else 0)


def interval_nodes(
    a: float,
    b: float,
    h: float,
    level: int,
    *,
    grade: float,
    fillet: float,
    arc_steps: int = ARC_STEPS,
) -> np.ndarray:
    """Nodes on [a, b] (metres) with both ends at edges of the solid.

    Sharp edges (``fillet`` = 0): polynomial grading of exponent ``grade``, largest step
    about ``h`` at level 0. Rounded edges: a strip of width w = min(fillet, (b - a)/2) at each
    end whose nodes follow x = w (1 - tan(theta)), theta uniform in [0, pi/4], so that the
    rounding map of a box puts them at equal angles on the fillet's quarter circle (half of
    the quarter lies on each face); between the strips a cosine grading brings the step from
    the fillet's arc step up to ``h``; each strip has :func:`fillet_arc_steps` steps at
    level 0. Steps halve with every level.
    """
    steps = 2**level
    length = b - a
    if fillet <= 0:
        n = _sharp_steps(length, h, grade)
        s = np.linspace(0.0, 1.0, n * steps + 1)
        x = a + length * polynomial_grading(s, grade)
    else:
        w, n_arc, n_mid, alpha = _fillet_plan(length, h, fillet, arc_steps)
        theta = np.linspace(0.0, 0.25 * math.pi, n_arc * steps + 1)
        off = w * (1.0 - np.tan(theta))
        parts = [(a + off)[::-1]]
        if n_mid:
            s = np.linspace(0.0, 1.0, n_mid * steps + 1)
            parts.append(a + w + (length - 2.0 * w) * cosine_grading(s, alpha))
        parts.append(b - off)
        x = np.concatenate(parts)
    x = np.unique(x)
    # Seams of two pieces may differ in the last bit; keep one node per seam.
    keep = np.concatenate([[True], np.diff(x) > 1e-12 * length])
    x = x[keep]
    x[0], x[-1] = a, b
    return x


def axis_nodes(
    breaks: list[float],
    h: float,
    level: int,
    *,
    fillet: float,
    grade: float,
    arc_steps: int = ARC_STEPS,
    centred: bool = False,
) -> np.ndarray:
    """Nodes along one axis through ``breaks`` (faces of the solid), graded toward each.

    ``centred``: breaks symmetric about 0 get a node at 0 (one cell is split in two where
    needed), so that a solid symmetric in that axis gets a mirror-symmetric grid whose cells
    do not straddle the mirror plane. Finer levels keep it (their nodes contain the coarser).
    """
    pieces = [
        interval_nodes(
            breaks[k], breaks[k + 1], h, level, grade=grade, fillet=fillet, arc_steps=arc_steps
        )
        for k in range(len(breaks) - 1)
    ]
    x = np.unique(np.concatenate(pieces))
    span = breaks[-1] - breaks[0]
    x = x[np.concatenate([[True], np.diff(x) > 1e-12 * span])]
    if centred and breaks[0] < 0.0 < breaks[-1] and abs(breaks[0] + breaks[-1]) <= 1e-12 * span:
        # Make the nodes exactly symmetric (the pieces are mirror images up to round-off).
        half = x[x > 1e-12 * span]
        x = np.concatenate([-half[::-1], [0.0], half])
    return x
