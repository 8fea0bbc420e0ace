"""Peak surface field of one level of a 3-D panel solve, sampling few sheet faces.

The peak per conductor is the largest face sample (:mod:`.faces`). A closed panel's sample
costs nothing; a sheet face needs a field sum over every panel at a probe just off it, so
sampling every face of a large sheet is most of an evaluation's time. The search bounds each
sheet face by the panel's own density instead and samples only the faces that can win:

- Sign: where no field is applied, a conductor whose potential is the highest (lowest) of
  all conductors and 0 (the ground plane, infinity) carries free charge of one sign on all of
  its surface (weak maximum principle for div(eps grad u) = 0 with piecewise-constant eps:
  Gilbarg & Trudinger, *Elliptic Partial Differential Equations of Second Order*, Thm. 8.1;
  the field points away from (into) such a conductor everywhere).
- Bound: the free charges of the two faces of a sheet panel then add up to the panel's
  density sigma (layered kernel: sigma is free charge; homogeneous: eps_m E . n of the two
  faces adds up to the total density), so a face's field is at most |sigma| / eps_face
  (homogeneous: |sigma| / eps_m).
- Search: the faces of the largest bounds (:data:`FIRST_SHARE` of a conductor's sheet
  panels, at least :data:`FIRST_COUNT`) and every closed panel are sampled first; then every
  sheet panel whose bound times :data:`BOUND_SLACK` reaches the best sample of its conductor.
  Other conductors (and any applied field) have all their faces sampled.

The discrete solution keeps the sign only nearly: on the board demo's levels opposite-sign
faces reached 7.4e-4 of a conductor's largest face density (1.05e-3 on the test's coarser
key) and the faces' sum differed from the panel density by up to 3.6e-4 of it, while the
bound exceeded every face field by a factor of at least 1.28; :data:`BOUND_SLACK` covers such
departures with room to spare. The search returns the exhaustive peak whenever the bound
holds within that slack (``tests/test_bem3d_peak_search.py`` compares both). On the demo's
finest touch level it samples 312 of 6,372 sheet panels.
"""

from __future__ import annotations

import math

import numpy as np

from elopt.physics.bem3d.faces import face_layout, face_samples
from elopt.physics.refinement import LevelPeak, peaks_per_conductor

#: A sheet panel is sampled when this many times its bound reaches its conductor's best.
BOUND_SLACK = 1.25
#: First pass: this share of each bounded conductor's sheet panels, largest bounds first ...
FIRST_SHARE = 0.02
#: ... and at least this many of them.
FIRST_COUNT = 16


def one_signed_conductors(volts: np.ndarray, applied_field_V_per_m: float) -> np.ndarray:
    """(n,) bool: the conductor's free charge has one sign everywhere (potential (n,) V the
    highest or lowest of the conductors' and 0, and no applied field)."""
    if applied_field_V_per_m != 0.0:
        return np.zeros(len(volts), bool)
    top, bottom = max(0.0, float(volts.max())), min(0.0, float(volts.min()))
    return (volts >= top) | (volts <= bottom)


def sheet_face_bounds(panels, layout, sigma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sheet panels (P,) of the conductors and the largest field (P,) V/m either face may
    carry when both faces' free charges share a sign, from the panel densities (N,) C/m^2."""
    sheet = np.nonzero(panels.sheet[: panels.n_conductor_panels])[0]
    f = face_layout(panels, layout, sheet)
    on_sheet = f["face"] != 0
    per_face = np.abs(sigma[f["panel"][on_sheet]])
    if panels.background is not None:
        per_face = per_face / f["eps_F_per_m"][on_sheet]
    else:
        per_face = per_face / layout.eps_F_per_m
    bound = np.zeros(panels.n_conductor_panels)
    np.maximum.at(bound, f["panel"][on_sheet], per_face)
    return sheet, bound[sheet]


def searched_peaks(level) -> tuple[LevelPeak, ...]:
    """Per conductor, the largest face sample of ``level`` (a :class:`.solution.LevelResult3D`)
    at its layout's excitation, sampling the sheet faces that can hold it (module text)."""
    layout, p = level.layout, level.panels
    volts, sigma = level.excitation(layout)
    closed = np.nonzero(~p.sheet[: p.n_conductor_panels])[0]
    sheet, bound = sheet_face_bounds(p, layout, sigma)
    one_signed = one_signed_conductors(volts, layout.applied_field_V_per_m)
    owner = p.owner[sheet]
    first = np.ones(len(sheet), bool)
    for k in np.nonzero(one_signed)[0]:
        mine = owner == k
        if not np.any(mine):
            continue
        count = max(FIRST_COUNT, math.ceil(FIRST_SHARE * int(mine.sum())))
        top = np.sort(bound[mine])[::-1][min(count, int(mine.sum())) - 1]
        # ties keep whole mirror orbits together (their densities are equal)
        first[mine] = bound[mine] >= top
    s = face_samples(level, layout, sigma[:, None], True, np.concatenate([closed, sheet[first]]))
    field = np.abs(s["sigma"][:, 0]) / s["eps_F_per_m"]
    best = np.zeros(len(layout.conductors))
    np.maximum.at(best, s["owner"], field)
    rest = ~first & (BOUND_SLACK * bound >= best[owner])
    if np.any(rest):
        more = face_samples(level, layout, sigma[:, None], True, sheet[rest])
        s = {key: np.concatenate([s[key], more[key]]) for key in ("owner", "points_m", "panel")}
        field = np.concatenate([field, np.abs(more["sigma"][:, 0]) / more["eps_F_per_m"]])
    singular = p.feature[s["panel"]]
    return peaks_per_conductor(layout.names, s["owner"], field, s["points_m"], singular)
