"""Potential and field of coaxial rings of charge (free space, no 1/eps factor).

A ring of radius r' at height z' carrying line density sigma * ds' per unit of arc of the
generating curve contributes, at (r, z), the potential

    phi = (sigma / eps) * r' K(m) / (pi rho_plus) ds',
    rho_plus^2 = (r + r')^2 + (z - z')^2,  m = 4 r r' / rho_plus^2,

with K the complete elliptic integral of the first kind (parameter m). The functions here
return the factor multiplying ``sigma ds' / eps``. K is evaluated through ``ellipkm1`` on
m1 = 1 - m = rho_minus^2 / rho_plus^2, which has no cancellation near the source.

The logarithmic singularity is split exactly by K(m) = A(m1) - K(m1) ln(m1) / pi with A
analytic, A(0) = ln 4 (DLMF 19.12.1); the self-panel quadrature uses that split.
"""

from __future__ import annotations

import numpy as np
from scipy.special import ellipe, ellipkm1

#: Below this parameter m the radial field uses its small-radius expansion (error O(m)).
_SMALL_M = 1e-7


def ring_potential(r: np.ndarray, z: np.ndarray, rs: np.ndarray, zs: np.ndarray) -> np.ndarray:
    """r' K(m) / (pi rho_plus); broadcasts target (r, z) against source (rs, zs); 1/m^0."""
    dz2 = (z - zs) ** 2
    rp2 = (r + rs) ** 2 + dz2
    rm2 = (r - rs) ** 2 + dz2
    with np.errstate(divide="ignore"):
        k = ellipkm1(rm2 / rp2)
    return rs * k / (np.pi * np.sqrt(rp2))


def ring_field(
    r: np.ndarray, z: np.ndarray, rs: np.ndarray, zs: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(E_r, E_z) factors of a ring: -grad of :func:`ring_potential` w.r.t. the target.

    E_z = r' (z - z') E(m) / (pi rho_plus rho_minus^2),
    E_r = r' [K(m) - E(m) (r'^2 - r^2 + (z - z')^2) / rho_minus^2] / (2 pi r rho_plus),
    with the small-radius expansion E_r = (r/2) d2phi_axis/dz2 where m is tiny.
    """
    dz = z - zs
    rp2 = (r + rs) ** 2 + dz**2
    rm2 = (r - rs) ** 2 + dz**2
    m1 = rm2 / rp2
    m = 1.0 - m1
    rp = np.sqrt(rp2)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = ellipkm1(m1)
        e = ellipe(m)
        ez = rs * dz * e / (np.pi * rp * rm2)
        er_full = rs * (k - e * (rs**2 - r**2 + dz**2) / rm2) / (2 * np.pi * r * rp)
        rho2 = rs**2 + dz**2
        er_axis = r * rs * (2 * dz**2 - rs**2) / (4 * rho2**2.5)
    er = np.where(m < _SMALL_M, er_axis, er_full)
    return er, ez
