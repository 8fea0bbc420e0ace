"""The families' level-0 size check counts the level 0 the solve then meshes (same order and
rule), so that the solve reuses its grading."""

from __future__ import annotations

import functools

import pytest

from elopt.physics.bem_axi import mesh as axi_mesh
from elopt.physics.electrodes import solvers
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.errors import ElectrodeError
from elopt.physics.refinement import SolveOptions

PROBE = GuardedDiskParams(2.0, 0.1, 1.9, 0.5, 0.05, 0.2, 1.0)


@pytest.mark.parametrize("request_", [1e-3, 1e-4, 1e-6])
def test_the_check_counts_the_solves_level_0(monkeypatch, request_):
    family = GuardedDisk()
    layout = family.build(PROBE)
    options = SolveOptions(rel_accuracy=request_, max_level=1)
    n0 = family.solve(layout, solve_options=options, options=None).levels[0].n_unknowns
    monkeypatch.setattr(solvers, "MAX_COARSE_UNKNOWNS", n0)
    solvers.check_coarse_mesh(family.name, layout, options)  # at the limit: accepted
    monkeypatch.setattr(solvers, "MAX_COARSE_UNKNOWNS", n0 - 1)
    with pytest.raises(ElectrodeError, match=f"has {n0} unknowns, more than {n0 - 1}"):
        solvers.check_coarse_mesh(family.name, layout, options)


def test_the_solve_after_the_check_grades_no_second_time(monkeypatch):
    family = GuardedDisk()
    layout = family.build(PROBE)
    options = SolveOptions(rel_accuracy=1e-4)
    axi_mesh.clear_mesh_cache()
    graded = []
    grade = axi_mesh._base_intervals.__wrapped__
    monkeypatch.setattr(
        axi_mesh,
        "_base_intervals",
        functools.lru_cache(maxsize=8)(lambda lay, rule: graded.append(rule) or grade(lay, rule)),
    )
    family.solve(layout, solve_options=options, options=None)
    assert len(graded) == 1
