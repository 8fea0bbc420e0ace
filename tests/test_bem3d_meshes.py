"""Triangle meshes: generators, refinement, import from files, and every bad-input check."""

from __future__ import annotations

import math

import numpy as np
import pytest
import trimesh

from elopt.physics.bem3d import (
    BoxSurface,
    RevolvedSurface,
    TorusSurface,
    load_mesh_surface,
    solve_3d,
    sphere,
)
from elopt.physics.bem3d.checks import check_above_plane, check_apart, check_surface, winding_number
from elopt.physics.bem3d.generators import box_mesh, frame_mesh, icosphere, torus_mesh
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.surfaces import MeshSurface
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.layout import Layout, driven


def test_generated_surfaces_are_closed_outward_and_measure_right():
    # Exact areas and volumes of the shapes (elementary geometry, common practice).
    s = icosphere(4)
    check_surface(s, "sphere")
    assert s.area_m2 == pytest.approx(4 * math.pi, rel=2e-3)
    assert s.volume_m3 == pytest.approx(4 * math.pi / 3, rel=4e-3)
    t = torus_mesh(2.0, 0.5, 96, 32)
    check_surface(t, "torus")
    # Inscribed polygons: the tube's 32-gon and the 96-gon around shrink the volume by
    # n sin(2 pi / n) / (2 pi) each (Pappus).
    shrink = (32 * math.sin(2 * math.pi / 32) * 96 * math.sin(2 * math.pi / 96)) / (
        2 * math.pi
    ) ** 2
    assert t.volume_m3 == pytest.approx(2 * math.pi**2 * 2.0 * 0.25 * shrink, rel=1e-3)
    b = box_mesh((1.0, 2.0, 0.5), 0.2)
    check_surface(b, "box")
    assert b.volume_m3 == pytest.approx(1.0, rel=1e-12)
    assert b.area_m2 == pytest.approx(2 * (2 + 0.5 + 1), rel=1e-12)
    r = 0.1
    rb = box_mesh((1.0, 2.0, 0.5), 0.2, 2, fillet_m=r)
    check_surface(rb, "rounded box")
    edges = (4 - math.pi) * r**2 * ((1 - 2 * r) + (2 - 2 * r) + (0.5 - 2 * r))
    corners = (8 - 4 * math.pi / 3) * r**3
    assert rb.volume_m3 == pytest.approx(1.0 - edges - corners, rel=3e-4)
    f = frame_mesh((4.0, 3.0), (2.0, 1.5), 0.1, 0.3, 0.25)
    check_surface(f, "frame")
    assert f.volume_m3 == pytest.approx((12 - 3) * 0.3, rel=1e-12)


def test_levels_quadruple_the_panels_and_are_bit_identical():
    for surface in (
        sphere(1.0, subdivisions=1),
        BoxSurface((1, 1, 1), 0.5),
        TorusSurface(2.0, 0.5),
    ):
        a, b = surface.build(0), surface.build(1)
        assert b.n_triangles == 4 * a.n_triangles
        again = surface.build(1)
        assert np.array_equal(again.vertices_m, b.vertices_m)
        assert np.array_equal(again.triangles, b.triangles)


def test_subdivision_keeps_a_watertight_mesh_and_its_area():
    m = box_mesh((1.0, 1.0, 1.0), 0.5)
    s = m.subdivided()
    check_surface(s, "box")
    assert s.n_triangles == 4 * m.n_triangles
    assert s.area_m2 == pytest.approx(m.area_m2, rel=1e-12)
    assert s.volume_m3 == pytest.approx(m.volume_m3, rel=1e-12)


def test_revolved_guarded_disk_is_valid():
    layout = GuardedDisk().build(GuardedDiskParams(2.0, 0.2, 1.5, 1.0, 0.1, 0.5, 10.0))
    for c in layout.conductors:
        m = RevolvedSurface(c.shape, 0.5e-3).mesh(0)
        check_surface(m, c.name)
        # Volumes of the solids of revolution (Pappus), against the polyhedra.
        pts = c.shape.sample(400)
        r, z = pts[:, 0], pts[:, 1]
        area = 0.5 * np.sum(r[:-1] * z[1:] - r[1:] * z[:-1]) + 0.5 * (r[-1] * z[0] - r[0] * z[-1])
        centroid_r = np.sum((r[:-1] + r[1:]) * (r[:-1] * z[1:] - r[1:] * z[:-1])) / (6 * area)
        assert m.volume_m3 == pytest.approx(abs(2 * math.pi * centroid_r * area), rel=0.02)


@pytest.mark.parametrize("suffix", ["stl", "obj", "ply"])
def test_import_welds_vertices_applies_units_and_checks(tmp_path, suffix):
    m = box_mesh((10.0, 20.0, 5.0), 2.5)
    path = tmp_path / f"block.{suffix}"
    trimesh.Trimesh(m.vertices_m, m.triangles, process=False).export(path)
    surf = load_mesh_surface(path, length_unit="mm")
    got = surf.mesh(0)
    assert got.n_triangles == m.n_triangles
    assert got.n_vertices == m.n_vertices
    assert got.volume_m3 == pytest.approx(1e-9 * 1000.0, rel=1e-9)
    assert surf.mesh(1).n_triangles == 4 * m.n_triangles


def _write(tmp_path, vertices, faces, name="bad.stl"):
    path = tmp_path / name
    trimesh.Trimesh(np.asarray(vertices, float), np.asarray(faces), process=False).export(path)
    return path


def test_import_errors_name_file_unit_and_rule(tmp_path):
    m = box_mesh((1.0, 1.0, 1.0), 0.5)
    good = _write(tmp_path, m.vertices_m, m.triangles, "cube.stl")
    with pytest.raises(GeometryError, match="length_unit 'inch' is not one of m, cm, mm, um, in"):
        load_mesh_surface(good, length_unit="inch")
    with pytest.raises(GeometryError, match="no such file"):
        load_mesh_surface(tmp_path / "missing.stl", length_unit="mm")
    with pytest.raises(GeometryError, match=r"file type \.step is not supported"):
        load_mesh_surface(tmp_path / "part.step", length_unit="mm")
    garbage = tmp_path / "garbage.ply"
    garbage.write_bytes(b"ply\nformat nonsense\n\x00\x01")
    with pytest.raises(GeometryError, match="mesh 'garbage.ply'"):
        load_mesh_surface(garbage, length_unit="mm")
    # Open but declared closed: drop two faces of the cube.
    holed = _write(tmp_path, m.vertices_m, m.triangles[2:], "holed.stl")
    with pytest.raises(GeometryError, match="declared closed but the mesh is open"):
        load_mesh_surface(holed, length_unit="mm")
    sheet = load_mesh_surface(holed, length_unit="mm", closed=False)
    assert not sheet.closed


def test_bad_meshes_get_one_clear_message_each():
    m = box_mesh((1.0, 1.0, 1.0), 0.5)
    v, t = m.vertices_m, m.triangles
    cases = {
        "inverted": (TriangleMesh(v, t[:, ::-1]), "inverted"),
        "inconsistent": (
            TriangleMesh(v, np.concatenate([t[:1, ::-1], t[1:]])),
            "not oriented consistently",
        ),
        "degenerate": (
            TriangleMesh(
                np.concatenate([v, v[t[0, :2]].mean(axis=0)[None]]),
                np.concatenate([t, [[t[0, 0], t[0, 1], len(v)]]]),
            ),
            "degenerate",
        ),
        "duplicate": (TriangleMesh(v, np.concatenate([t, t[:1]])), "appear more than once"),
        "nonmanifold": (
            TriangleMesh(
                np.concatenate([v, [[0.0, 0.0, 3.0]]]),
                np.concatenate([t, [[t[0, 0], t[0, 1], len(v)]]]),
            ),
            "non-manifold",
        ),
        "bad index": (
            TriangleMesh(v, np.concatenate([t, [[0, 1, len(v) + 5]]])),
            "indices must lie in",
        ),
        "nan": (
            TriangleMesh(np.where(np.arange(len(v))[:, None] == 0, np.nan, v), t),
            "must be finite",
        ),
    }
    for name, (mesh, words) in cases.items():
        with pytest.raises(GeometryError) as err:
            check_surface(mesh, name)
        assert words in str(err.value), name
        assert f"'{name}'" in str(err.value)


def test_self_intersection_is_found():
    a = box_mesh((1.0, 1.0, 1.0), 0.5)
    b = box_mesh((1.0, 1.0, 1.0), 0.5, center_m=(0.5, 0.3, 0.2))
    both = TriangleMesh(
        np.concatenate([a.vertices_m, b.vertices_m]),
        np.concatenate([a.triangles, b.triangles + a.n_vertices]),
    )
    with pytest.raises(GeometryError, match="intersects itself"):
        check_surface(both, "blob")


def test_conductors_that_touch_overlap_or_cross_the_plane_are_refused():
    a = icosphere(2)
    with pytest.raises(GeometryError, match="'a' and 'b' intersect"):
        check_apart(a, "a", a.translated((1.5, 0.0, 0.0)), "b")
    with pytest.raises(GeometryError, match="'b' lies inside conductor 'a'"):
        check_apart(a, "a", a.scaled(0.5), "b")
    check_apart(a, "a", a.translated((2.5, 0.0, 0.0)), "b")
    assert winding_number(a, np.array([[0.0, 0.0, 0.0], [3.0, 0.0, 0.0]])) == pytest.approx(
        [1.0, 0.0], abs=1e-9
    )
    with pytest.raises(GeometryError, match="touches or crosses the ground plane"):
        check_above_plane(a.translated((0.0, 0.0, 0.5)), "low")
    layout = Layout((driven("low", sphere(1.0, (0.0, 0.0, 0.9)), 1.0),), ground_plane=True)
    with pytest.raises(GeometryError, match="'low': touches or crosses the ground plane"):
        solve_3d(layout, max_level=1)


def test_solver_refuses_what_it_cannot_do_with_the_numbers():
    layout = Layout((driven("ball", sphere(1.0, subdivisions=2), 1.0),))
    with pytest.raises(
        SolverError, match=r"would need about .* GB \(dense solve\) but only 0.00 GB"
    ):
        solve_3d(layout, method="dense", memory_limit_bytes=1000, max_level=1)
    with pytest.raises(SolverError, match=r"would need about .* GB \(fast solve\)"):
        solve_3d(layout, method="fast", memory_limit_bytes=10_000, max_level=1)
    with pytest.raises(SolverError, match="rel_accuracy must lie in"):
        solve_3d(layout, rel_accuracy=0.0)
    with pytest.raises(SolverError, match="more than max_unknowns = 100"):
        solve_3d(layout, max_unknowns=100)
    # A twelve-triangle cube cannot give 1e-5 within two refinements: in strict mode an error.
    cube = MeshSurface(TriangleMesh(*_cube12()))
    with pytest.raises(SolverError, match=r"rel_accuracy = 1e-05 was not met.*stopped: max_level"):
        solve_3d(Layout((driven("cube", cube, 1.0),)), rel_accuracy=1e-5, max_level=2, strict=True)
    with pytest.raises(GeometryError, match="needs a triangle surface"):
        solve_3d(
            Layout(
                (
                    driven(
                        "c",
                        GuardedDisk()
                        .build(GuardedDiskParams(2, 0.2, 1, 1, 0.1, 0.5, 1))
                        .conductors[0]
                        .shape,
                        1.0,
                    ),
                )
            )
        )


def _cube12() -> tuple[np.ndarray, np.ndarray]:
    m = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    return np.asarray(m.vertices), np.asarray(m.faces)
