"""Image series of a point charge over planar layers, for checks of the layered kernels."""

from __future__ import annotations

import numpy as np


def slab_on_substrate_images(h, eps1, eps2, eps3, d, pts):
    """4 pi eps0 phi / q (M,) at points (M, 2) of a point charge at height h in eps1 over a
    slab eps2 (-d < z < 0) on a half-space eps3 (z < -d).

    Images by repeated reflection with the coefficients of docs/references.md item 15
    (Jackson sec. 4.4): reflection r_ab = (eps_a - eps_b)/(eps_a + eps_b) seen from a,
    transmission 1 + r_ab, in units of the source's 1/eps1 (the series is textbook; from
    memory). Each round trip in the slab multiplies by r23 r21 (|r23 r21| < 1): 4000 trips
    leave less than 1e-30 at the contrasts used here."""
    r12, r21 = (eps1 - eps2) / (eps1 + eps2), (eps2 - eps1) / (eps1 + eps2)
    r23 = (eps2 - eps3) / (eps2 + eps3)
    n = np.arange(4000)[None, :]
    trip = (r23 * r21) ** n
    rho, z = pts[:, :1], pts[:, 1:]

    def inv(a):
        return 1.0 / np.hypot(rho, a)

    above = inv(z - h)[:, 0] + r12 * inv(z + h)[:, 0]
    above += (1 + r12) * (1 + r21) * r23 * np.sum(trip * inv(h + z + 2 * d + 2 * n * d), axis=1)
    inside = (1 + r12) * np.sum(
        trip * (inv(h - z + 2 * n * d) + r23 * inv(h + z + 2 * d + 2 * n * d)), axis=1
    )
    below = (1 + r12) * (1 + r23) * np.sum(trip * inv(h - z + 2 * n * d), axis=1)
    zz = z[:, 0]
    return np.where(zz >= 0, above, np.where(zz > -d, inside, below)) / eps1
