"""3-D panel solver: conductors of any shape as triangle surfaces.

Stages, one module each: :mod:`.mesh` (the triangle mesh value), :mod:`.generators` and
:mod:`.revolve` (built-in shapes), :mod:`.mesh_io` (STL/OBJ/PLY import), :mod:`.checks`
(mesh and layout validation), :mod:`.bodies` (dielectric bodies: checks and media), :mod:`.surfaces` (shapes meshed at any refinement level),
:mod:`.panel_integrals` (closed-form and Gauss panel integrals), :mod:`.operators` and
:mod:`.hmatrix` (dense and compressed collocation operators), :mod:`.layered_green` and
:mod:`.layer_tables` (the Green's function of planar layer stacks), :mod:`.solve` (the refinement
driver) and :mod:`.solution3d` (the result, a :class:`elopt.physics.solution.ChargeSolution`).

    from elopt.physics.bem3d import solve_3d, sphere
    layout = Layout((driven("ball", sphere(0.01), 1.0),))
    sol = solve_3d(layout, rel_accuracy=1e-4)
"""

from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.mesh_io import load_mesh_surface
from elopt.physics.bem3d.revolve import RevolvedSurface, revolved_layout
from elopt.physics.bem3d.solution import PanelSolution
from elopt.physics.bem3d.solve import solve_3d
from elopt.physics.bem3d.surfaces import (
    BoxSurface,
    EllipsoidSurface,
    FrameSheetSurface,
    FrameSurface,
    MeshSurface,
    RectangleSheetSurface,
    Surface,
    TorusSurface,
    TransformedSurface,
    sphere,
)

__all__ = [
    "BoxSurface",
    "EllipsoidSurface",
    "FrameSheetSurface",
    "FrameSurface",
    "MeshSurface",
    "PanelSolution",
    "RectangleSheetSurface",
    "RevolvedSurface",
    "Surface",
    "TorusSurface",
    "TransformedSurface",
    "TriangleMesh",
    "load_mesh_surface",
    "revolved_layout",
    "solve_3d",
    "sphere",
]
