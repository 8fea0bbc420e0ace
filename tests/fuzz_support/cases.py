"""Careless and unlucky inputs for ``elopt solve`` and ``elopt run``, generated from a chooser.

Every generator takes a :class:`Chooser` (the fuzz benchmark passes one driven by a seeded
``random.Random``, the property tests one driven by hypothesis, so that hypothesis can shrink)
and returns a :class:`Case`: the files to write, the command line, and what must hold. The
base designs are the demo scenarios made cheap (coarse accuracy, few levels, a small mesh),
so that a case that is accepted solves in about a second.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from elopt.optimizer.export.trial_config import toml_key, toml_value

TESTS_DIR = Path(__file__).resolve().parent.parent
STUDY_FILE_SAMPLE = TESTS_DIR / "data" / "study_v1.h5"


class Chooser(Protocol):
    def choice(self, options: Sequence[Any]) -> Any: ...
    def integer(self, low: int, high: int) -> int: ...
    def real(self, low: float, high: float) -> float: ...


@dataclass
class Case:
    """One command line over files written into a fresh directory.

    ``argv`` refers to the directory as ``{dir}``. ``config`` is the config argument (every
    refusal must start with it); ``study_out`` a study file that must not exist after a
    refusal; ``expect_ok`` marks a valid design (a refusal is a false refusal).
    """

    kind: str
    description: str
    argv: list[str]
    config: str
    files: dict[str, bytes] = field(default_factory=dict)
    fifo: str | None = None
    directory: str | None = None
    study_out: str | None = None
    expect_ok: bool = False
    expect_json: bool = False

    def materialise(self, where: Path) -> list[str]:
        """Write the files into ``where``; returns argv with ``{dir}`` filled in."""
        import os

        for name, data in self.files.items():
            (where / name).parent.mkdir(parents=True, exist_ok=True)
            (where / name).write_bytes(data)
        if self.fifo:
            os.mkfifo(where / self.fifo)
        if self.directory:
            (where / self.directory).mkdir()
        return [a.replace("{dir}", str(where)) for a in self.argv]


# -------------------------------------------------------------------------- TOML writing


def toml_text(table: dict[str, Any]) -> str:
    """TOML for a table of scalars, tables (one level) and arrays of tables."""
    lines = [f"{toml_key(k)} = {toml_value(v)}" for k, v in table.items() if not _is_table(v)]
    for name, sub in table.items():
        if isinstance(sub, dict):
            lines.append(f"\n[{toml_key(name)}]")
            for k, v in sub.items():
                if isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
                    continue
                lines.append(f"{toml_key(k)} = {toml_value(v)}")
            for k, v in sub.items():
                if isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
                    for item in v:
                        lines.append(f"\n[[{toml_key(name)}.{toml_key(k)}]]")
                        lines += [f"{toml_key(a)} = {toml_value(b)}" for a, b in item.items()]
        elif isinstance(sub, list) and sub and all(isinstance(x, dict) for x in sub):
            for item in sub:
                lines.append(f"\n[[{toml_key(name)}]]")
                lines += [f"{toml_key(a)} = {toml_value(b)}" for a, b in item.items()]
    return "\n".join(lines) + "\n"


def _is_table(v: Any) -> bool:
    return isinstance(v, dict) or (isinstance(v, list) and bool(v) and isinstance(v[0], dict))


# -------------------------------------------------------------------------- base designs


def octahedron_stl(radius_mm: float = 2.0, center_z_mm: float = 3.0) -> bytes:
    """A binary STL of an octahedron split once (32 outward triangles)."""
    v = np.array([[1, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1]], float)
    faces = [(0, 2, 4), (2, 1, 4), (1, 3, 4), (3, 0, 4), (2, 0, 5), (1, 2, 5), (3, 1, 5), (0, 3, 5)]
    tris = []
    for a, b, c in faces:
        pa, pb, pc = v[a], v[b], v[c]
        ab, bc, ca = (pa + pb) / 2, (pb + pc) / 2, (pc + pa) / 2
        for t in ((pa, ab, ca), (ab, pb, bc), (ca, bc, pc), (ab, bc, ca)):
            tris.append([p / np.linalg.norm(p) * radius_mm + [0, 0, center_z_mm] for p in t])
    out = bytearray(b"elopt fuzz octahedron".ljust(80, b" ") + struct.pack("<I", len(tris)))
    for t in tris:
        out += struct.pack("<3f", 0, 0, 0)
        for p in t:
            out += struct.pack("<3f", *p)
        out += b"\0\0"
    return bytes(out)


def base_solve_configs() -> dict[str, dict[str, Any]]:
    """The demo designs, made cheap to solve."""
    return {
        "guarded_disk": {
            "title": "fuzz guarded disk",
            "geometry": {
                "family": "guarded_disk",
                "sensor_radius_mm": 2.0,
                "guard_gap_mm": 0.2,
                "guard_width_mm": 1.5,
                "thickness_mm": 1.0,
                "fillet_mm": 0.1,
                "standoff_mm": 0.5,
                "drive_V": 10.0,
                "recess_mm": 0.0,
            },
            "solver": {"rel_accuracy": 1e-2},
            "medium": {"eps_r": 1.0, "breakdown_field_V_per_m": 3.0e6},
            "evaluation": {"linearity_range_fraction": 0.5, "linearity_points": 3},
        },
        "guarded_pad": {
            "geometry": {
                "family": "guarded_pad",
                "pad_length_mm": 4.0,
                "pad_width_mm": 3.0,
                "guard_gap_mm": 0.2,
                "guard_width_mm": 1.5,
                "thickness_mm": 0.5,
                "fillet_mm": 0.0,
                "standoff_mm": 0.5,
                "drive_V": 10.0,
                "target_tilt_deg": 0.2,
                "tilt_axis_x_mm": -2.0,
            },
            "solver": {"rel_accuracy": 1e-1},
            "evaluation": {"mesh_step_mm": 1.5, "max_level": 1},
        },
        "mesh_file": {
            "geometry": {
                "family": "mesh_file",
                "ground_plane": True,
                "conductors": [
                    {
                        "name": "tip",
                        "file": "tip.stl",
                        "length_unit": "mm",
                        "potential_V": 5.0,
                    }
                ],
            },
            "solver": {"rel_accuracy": 1e-2},
            "evaluation": {"max_level": 1},
        },
        "uniform_field": {
            "geometry": {
                "family": "uniform_field",
                "gap_mm": 12.0,
                "flat_radius_mm": 20.0,
                "blend_length_mm": 60.0,
                "edge_radius_mm": 20.0,
                "back_thickness_mm": 50.0,
                "drive_V": 300.0,
            },
            "solver": {"rel_accuracy": 1e-2},
            "evaluation": {"uniform_tolerance_pct": 1.0},
        },
    }


def base_study_config() -> dict[str, Any]:
    return {
        "study": {"name": "fuzz", "family": "guarded_disk", "seed": 1},
        "solver": {"rel_accuracy": 0.05},
        "fixed": {"thickness_mm": 1.0, "standoff_mm": 0.5, "drive_V": 10.0, "recess_mm": 0.0},
        "search": {
            "sensor_radius_mm": {"low": 0.5, "high": 4.0},
            "guard_gap_mm": {"low": 0.05, "high": 0.8, "log": True},
            "guard_width_mm": {"low": 0.2, "high": 3.0},
            "fillet_mm": {"low": 0.02, "high": 0.15},
        },
        "objectives": {"sensitivity_fF_per_um": "maximize", "spot_radius_90_mm": "minimize"},
        "constraints": {"peak_surface_field_V_per_m": {"max": 4.0e4}},
        "sampler": {"kind": "tpe"},
        "budget": {"trials": 1},
        "run": {"workers": 1},
    }


# -------------------------------------------------------------------------- mutations

#: Values a careless edit may leave behind.
ODD_VALUES: tuple[Any, ...] = (
    0,
    0.0,
    -1.0,
    1e-9,
    1e-6,
    1e6,
    1e300,
    -1e300,
    5e-324,
    math.inf,
    -math.inf,
    math.nan,
    2**63 - 1,
    -(2**63),
    True,
    "",
    "1.0",
    "guarded_disk",
    [1.0, 2.0],
    {"low": 1.0},
    3,
)
SCALES = (1e-9, 1e-6, 1e-3, 0.5, 1.0 + 1e-12, 2.0, 1e3, 1e6, 1e9)
SEARCH_RANGE_VALUES: tuple[Any, ...] = (
    {"low": 4.0, "high": 0.5},
    {"low": 0.5, "high": 4.0, "step": 1e-300},
    {"low": 0.5, "high": 4.0, "step": 1e-12},
    {"low": 0.5, "high": 4.0, "step": 10.0},
    {"low": 0.5, "high": 4.0, "step": 0.5},
    {"low": 0.0, "high": 4.0, "log": True},
    {"low": 0.5, "high": 1e300},
    {"low": -1e300, "high": 1e300},
    {"low": 0.5, "high": 0.5000000001},
    {"low": 0.5, "high": 4.0, "log": "yes"},
    {"low": 0.5},
    {"low": math.nan, "high": 4.0},
)
FAMILY_REFS = (
    "guarded_disk",
    "guarded_pad",
    "guarded_disc",
    "elopt.physics.layout:Layout",
    "elopt.physics.electrodes.base:MetricSpec",
    "elopt.physics.electrodes.base:ElectrodeFamily",
    "elopt.physics.electrodes.guarded_disk:GuardedDisk",
    "elopt.physics.electrodes.guarded_disk:GuardedDiskParams",
    "elopt.physics.electrodes.registry:FAMILIES",
    "os:getcwd",
    "no.such.module:thing",
    ":",
    "math:pi",
)


def _leaves(table: dict[str, Any], prefix: tuple = ()) -> list[tuple]:
    out = []
    for k, v in table.items():
        if isinstance(v, dict):
            out += _leaves(v, (*prefix, k))
        else:
            out.append((*prefix, k))
    return out


def _set(table: dict[str, Any], path: tuple, value: Any) -> None:
    for k in path[:-1]:
        table = table[k]
    table[path[-1]] = value


def _get(table: dict[str, Any], path: tuple) -> Any:
    for k in path:
        table = table[k]
    return table


def _delete(table: dict[str, Any], path: tuple) -> None:
    for k in path[:-1]:
        table = table[k]
    del table[path[-1]]


def mutate(c: Chooser, table: dict[str, Any]) -> str:
    """One careless edit of ``table`` (in place); returns what was done."""
    paths = _leaves(table)
    path = c.choice(paths)
    action = c.choice(("odd", "odd", "scale", "scale", "delete", "unknown"))
    where = ".".join(map(str, path))
    if action == "odd":
        value = c.choice(ODD_VALUES)
        _set(table, path, value)
        return f"{where} = {value!r}"
    if action == "scale":
        old = _get(table, path)
        if isinstance(old, (int, float)) and not isinstance(old, bool):
            factor = c.choice(SCALES)
            _set(table, path, float(old) * factor)
            return f"{where} x {factor:g}"
        _set(table, path, c.choice(ODD_VALUES))
        return f"{where} replaced"
    if action == "delete":
        _delete(table, path)
        return f"{where} deleted"
    parent = _get(table, path[:-1]) if len(path) > 1 else table
    parent[path[-1] + "x"] = 1.0
    return f"{where}x added"


def _deep_copy(v: Any) -> Any:
    if isinstance(v, dict):
        return {k: _deep_copy(x) for k, x in v.items()}
    if isinstance(v, list):
        return [_deep_copy(x) for x in v]
    return v


def _solve_case(kind: str, what: str, table: dict[str, Any], **kw: Any) -> Case:
    files = {"config.toml": toml_text(table).encode("utf-8"), "tip.stl": octahedron_stl()}
    files.update(kw.pop("files", {}))
    return Case(
        kind=kind,
        description=what,
        argv=["solve", "{dir}/config.toml", "--json"],
        config="{dir}/config.toml",
        files=files,
        expect_json=True,
        **kw,
    )


# -------------------------------------------------------------------------- generators


def solve_mutation(c: Chooser) -> Case:
    """A demo design with one to three careless edits."""
    family = c.choice(sorted(base_solve_configs()))
    table = _deep_copy(base_solve_configs()[family])
    done = [mutate(c, table) for _ in range(c.integer(1, 3))]
    return _solve_case("solve-mutation", f"{family}: " + "; ".join(done), table)


def _flipped(c: Chooser, raw: bytes, most: int) -> bytes:
    """``raw`` with one to ``most`` bytes overwritten at random places."""
    b = bytearray(raw)
    for _ in range(c.integer(1, most)):
        b[c.integer(0, len(b) - 1)] = c.integer(0, 255)
    return bytes(b)


def damaged_bytes(c: Chooser) -> Case:
    """A config file damaged on disk, saved in a foreign encoding, or not a file at all."""
    table = base_solve_configs()["guarded_disk"]
    text = toml_text(table)
    raw = text.encode("utf-8")
    how = c.choice(
        (
            "latin-1",
            "utf-16",
            "bom",
            "truncated",
            "flipped",
            "nul",
            "deep",
            "deep-inline",
            "hdf5",
            "huge",
            "empty",
            "fifo",
            "directory",
            "missing",
        )
    )
    data: bytes | None = raw
    kw: dict[str, Any] = {}
    if how == "latin-1":
        data = raw.replace(b'"fuzz guarded disk"', '"sonde à garde"'.encode("latin-1"))
    elif how == "utf-16":
        data = text.encode("utf-16")
    elif how == "bom":
        data = b"\xef\xbb\xbf" + raw
    elif how == "truncated":
        data = raw[: c.integer(0, len(raw) - 1)]
    elif how == "flipped":
        data = _flipped(c, raw, 4)
    elif how == "nul":
        k = c.integer(0, len(raw))
        data = raw[:k] + b"\0" + raw[k:]
    elif how == "deep":
        depth = c.choice((40, 400, 4000, 100_000))
        data = raw + f"extra = {'[' * depth}{']' * depth}\n".encode()
    elif how == "deep-inline":
        depth = c.choice((40, 400, 4000))
        data = raw + ("x = " + "{a = " * depth + "1" + "}" * depth + "\n").encode()
    elif how == "hdf5":
        data = STUDY_FILE_SAMPLE.read_bytes()
    elif how == "huge":
        data = raw + b"# padding\n" * 200_000
    elif how == "empty":
        data = b""
    elif how == "fifo":
        data = None
        kw["fifo"] = "config.toml"
    elif how == "directory":
        data = None
        kw["directory"] = "config.toml"
    elif how == "missing":
        data = None
    case = _solve_case("damaged-bytes", how, table, **kw)
    if data is None:
        del case.files["config.toml"]
    else:
        case.files["config.toml"] = data
    if c.choice((False, True)):  # the same file given to `run`
        case.argv = ["run", "{dir}/config.toml", "--out", "{dir}/out.h5", "--workers", "1"]
        case.study_out = "{dir}/out.h5"
        case.expect_json = False
        case.description += " (run)"
    return case


def damaged_mesh(c: Chooser) -> Case:
    """The mesh_file design with a damaged or foreign STL file."""
    good = octahedron_stl()
    how = c.choice(("random", "truncated", "flipped", "header-count", "ascii-bad", "empty"))
    if how == "random":
        data = bytes(c.integer(0, 255) for _ in range(c.integer(0, 300)))
    elif how == "truncated":
        data = good[: c.integer(0, len(good) - 1)]
    elif how == "flipped":
        data = _flipped(c, good, 6)
    elif how == "header-count":
        data = good[:80] + struct.pack("<I", c.choice((0, 1, 31, 33, 2**31))) + good[84:]
    elif how == "ascii-bad":
        data = b"solid x\nfacet normal 0 0 1\nouter loop\nvertex 0 0 zz\nendloop\nendsolid\n"
    else:
        data = b""
    table = base_solve_configs()["mesh_file"]
    return _solve_case("damaged-mesh", how, table, files={"tip.stl": data})


def valid_guarded_disk(c: Chooser) -> Case:
    """A guarded disk inside every rule, often with a value exactly at its limit."""
    a = c.real(0.5, 6.0)
    g = c.choice((c.real(0.02, 1.0), 0.05, 0.2))
    w = c.choice((c.real(0.3, 3.0), 1.0))
    t = c.choice((c.real(0.3, 2.0), 1.0))
    limit = min(t / 2, w / 2, a)
    fillet = c.choice((0.0, limit, 0.5 * limit, c.real(0.0, limit)))
    recess = c.choice((0.0, 0.0, t, c.real(0.0, t)))
    d = c.choice((c.real(0.1, 3.0), 0.5, 0.625, 0.375))
    table = _deep_copy(base_solve_configs()["guarded_disk"])
    table["geometry"].update(
        sensor_radius_mm=a,
        guard_gap_mm=g,
        guard_width_mm=w,
        thickness_mm=t,
        fillet_mm=fillet,
        standoff_mm=d,
        recess_mm=recess,
    )
    what = (
        f"a={a:.4g} g={g:.4g} w={w:.4g} t={t:.4g} fillet={fillet:.4g} recess={recess:.4g} d={d:.4g}"
    )
    return _solve_case("valid-design", what, table, expect_ok=True)


def study_mutation(c: Chooser) -> Case:
    """The demo study with one careless edit, run for one trial."""
    table = _deep_copy(base_study_config())
    what = c.choice(("family", "range", "any"))
    if what == "family":
        table["study"]["family"] = c.choice(FAMILY_REFS)
        done = f"study.family = {table['study']['family']!r}"
    elif what == "range":
        name = c.choice(sorted(table["search"]))
        table["search"][name] = _deep_copy(c.choice(SEARCH_RANGE_VALUES))
        done = f"search.{name} = {table['search'][name]!r}"
    else:
        done = mutate(c, table)
    return Case(
        kind="study-mutation",
        description=done,
        argv=["run", "{dir}/study.toml", "--out", "{dir}/study.h5", "--trials", "1"],
        config="{dir}/study.toml",
        files={"study.toml": toml_text(table).encode("utf-8")},
        study_out="{dir}/study.h5",
    )


GENERATORS: dict[str, Callable[[Chooser], Case]] = {
    "solve-mutation": solve_mutation,
    "damaged-bytes": damaged_bytes,
    "damaged-mesh": damaged_mesh,
    "valid-design": valid_guarded_disk,
    "study-mutation": study_mutation,
}
