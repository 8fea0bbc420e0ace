"""The text picture of a cross-section: fills, the marked point, scale and stretching."""

from __future__ import annotations

from elopt.optimizer.report.section_picture import FILLS, MARK, section_picture
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.electrodes.uniform_field import UniformField, UniformFieldParams

PROBE = GuardedDisk().build(GuardedDiskParams(4.0, 0.5, 3.0, 1.0, 0.2, 1.0, 10.0))
CELL = UniformField().build(UniformFieldParams(12.0, 20.0, 60.0, 20.0, 50.0, 30000.0))


def _grid(picture) -> list[str]:
    """The drawing rows above the plane, without the scale column (8 chars + axis)."""
    rows = [line.plain for line in picture.lines[1:]]
    plane = next(i for i, row in enumerate(rows) if "┷" in row)
    return [row[9:] for row in rows[:plane]]


def test_each_conductor_has_its_own_fill_and_the_gap_stays_open():
    grid = _grid(section_picture(PROBE, width=64))
    text = "".join(grid)
    assert FILLS[0] in text and FILLS[1] in text
    # Along a row through both bodies the sensor comes first, then an empty gap, then the guard.
    row = next(r for r in grid if FILLS[0] in r and FILLS[1] in r)
    first_guard = row.index(FILLS[1])
    last_sensor = row.rindex(FILLS[0])
    assert last_sensor < first_guard - 1 and row[last_sensor + 1 : first_guard].strip() == ""
    # The standoff under the probe is empty.
    assert grid[-1].strip() == ""


def test_marker_lands_on_the_given_point():
    outer_rim = (7.45e-3, 1.5e-3)  # on the guard's outer face, half-way up
    grid = _grid(section_picture(PROBE, marker_m=outer_rim, width=64))
    hits = [(i, row.index(MARK)) for i, row in enumerate(grid) if MARK in row]
    assert len(hits) == 1
    i, j = hits[0]
    # Columns cover 1.06 x 7.5 mm over 64 cells; rows cover 1.1 x 2 mm from the top.
    col_width = 1.06 * 7.5e-3 / 64
    assert abs((j + 1.5) * col_width - outer_rim[0]) <= 1.5 * col_width
    assert 0 < i < len(grid) - 1


def test_flat_layouts_are_stretched_and_say_so():
    flat = GuardedDisk().build(GuardedDiskParams(20.0, 0.5, 20.0, 0.2, 0.05, 0.3, 1.0))
    picture = section_picture(flat, width=64, min_rows=10)
    assert picture.z_stretch > 1
    assert "stretched" in picture.legend.plain
    assert len(_grid(picture)) >= 10


def test_mirror_draws_the_pair_and_fits_the_row_budget():
    picture = section_picture(CELL, mirror=True, max_rows=22, plane_label="mid-plane (0 V)")
    rows = [line.plain for line in picture.lines]
    plane = next(i for i, row in enumerate(rows) if "┷" in row)
    above = rows[1:plane]
    below = rows[plane + 1 : -1]
    assert len(above) == len(below) <= 11
    assert [r[9:] for r in above] == [r[9:] for r in reversed(below)]
    assert "mid-plane (0 V)" in picture.legend.plain
