"""The layered ring kernel (exact images + Hankel remainder) against the image series of a
grounded film, for rings of probe size: the J0(k r) J0(k r') oscillation of the remainder's
Hankel rule is resolved wherever its envelope has not decayed."""

from __future__ import annotations

import numpy as np
import pytest

from elopt.physics.bem_axi.layered_kernel import LayeredKernel, mirror_mesh
from elopt.physics.bem_axi.mesh import build_mesh
from elopt.physics.bem_axi.operators import potential_matrix
from elopt.physics.geometry import Curve, Segment
from elopt.physics.layout import Layout, driven
from elopt.physics.media import LayerStack, PlanarLayer

MM = 1e-3


def _probe_mesh():
    """A flat sensor disk and a guard ring (radii up to 4 mm) 0.5 mm above the plane."""
    z = 0.5 * MM
    disk = Curve((Segment((0.0, z), (2.0 * MM, z)),))
    ring = Curve((Segment((2.2 * MM, z), (4.0 * MM, z)),))
    layout = Layout((driven("sensor", disk, 1.0), driven("guard", ring, 1.0)), ground_plane=True)
    return build_mesh(layout, 1, 4)


@pytest.mark.parametrize("eps", [4.0, 80.0])
def test_film_ring_kernel_against_image_series(eps):
    # Film (thickness d, eps) on a grounded plane, sources in the air above. Images by repeated
    # reflection with the coefficients of docs/references.md item 15 (Jackson sec. 4.4) at the
    # film face and -1 at the plane (textbook series, from memory), each image a ring:
    #   G(z - z') + r G(z + z' - 2d) - (1 - r^2) sum_n r^(n-1) G(z + z' + 2(n-1) d),
    # r = (1 - eps)/(1 + eps). |r| <= 0.976: 1500 terms leave a tail below 1e-15.
    d = 0.05 * MM
    mesh = _probe_mesh()
    stack = LayerStack((PlanarLayer("film", eps, 0.0, d),), 1.0, True)
    kernel = LayeredKernel(stack, mesh.points_m[:, 1], 4.0 * MM, "probe")
    # the remainder is integrated on the panels' Gauss nodes (smooth there), so the targets
    # keep a few panel lengths from every image ring, where the reference's rules are exact too
    targets = (
        np.array([[0.0, 1.5], [1.0, 1.2], [2.1, 0.45], [3.9, 0.52], [6.0, 1.5], [5.0, 0.3]]) * MM
    )
    r = (1 - eps) / (1 + eps)
    ref = potential_matrix(mesh, targets, False)
    ref += r * potential_matrix(mirror_mesh(mesh, d), targets, False)
    n = np.arange(1, 1501)
    for coef, plane in zip(-(1 - r * r) * r ** (n - 1), -(n - 1) * d, strict=True):
        ref += coef * potential_matrix(mirror_mesh(mesh, plane), targets, False)
    got = kernel.potential(mesh, targets)
    assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))
