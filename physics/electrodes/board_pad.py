"""Board touch pad: a copper pad in a ground pour on a circuit board, under a cover, sensing a finger.

Geometry (parameters in mm, SI inside; z up, the board's far side at z = 0):

- board: a layer 0 <= z <= t_b of ``board_eps_r``; with ``back_ground`` the far side is a
  grounded plane (z = 0), else the board floats in the medium;
- pad: a thin copper sheet on the board's top face (z = t_b), round (``pad_length_mm`` its
  diameter) or rectangular (``pad_length_mm`` x ``pad_width_mm``), centred on the z axis,
  driven at ``drive_V``;
- pour: grounded copper on the same face, ``clearance_mm`` from the pad all round, out to
  ``pour_size_mm`` (a round pad: the pour's outer diameter; a rectangular pad: the side of its
  square outline); solid, or (``hatch_pitch_mm`` > 0, rectangular pads) a hatch of lines
  ``hatch_line_mm`` wide every ``hatch_pitch_mm`` along x and y with a border track of the
  line width along the outline and around the clearance;
- cover: a layer ``cover_thickness_mm`` thick of ``cover_eps_r``, ``cover_gap_mm`` of medium
  above the board (0: bonded on);
- target: grounded, ``target_distance_mm`` above the cover's top face, ``target_offset_mm``
  off the axis along x: a finger (a capsule ``target_size_mm`` across and
  ``finger_length_mm`` long, standing on its tip) or a plate (a square sheet
  ``target_size_mm`` on a side, parallel to the board);
- water film (false-trigger check): a layer ``film_thickness_um`` thick of ``film_eps_r`` on the
  cover's top face, no target.

A self-capacitance touch controller measures C = Q_pad / V_pad with everything else grounded:
the entry C_pad,pad of the Maxwell matrix. One evaluation solves three designs: the touch (target
present: the main solution, its peak field), the baseline (no target) and the film (no
target, the water film on). Signal = C_touch - C_baseline; film shift = C_film - C_baseline;
the false-trigger margin is signal / film shift (how many times a touch outweighs the film).
Every metric reads the pad's C_pad,pad only, so each layout declares the pad as the conductor
its error estimate and accuracy request cover (``Layout.estimate_covers``): the finger's own
capacitance and the pour's entries are solved and reported but not judged.
The signal is taken on the finest refinement level both solves reached (same pad and pour
mesh: their discretisation errors largely cancel) and its error estimated from how the
difference itself changes from level to level (:func:`level_matched_change`).

Water: eps_r about 80 at 20 C (CRC Handbook of Chemistry and Physics, value from memory); a
grounded finger model of 8-10 mm diameter is common practice, no source.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from elopt.physics.bem3d.surfaces import (
    FrameSheetSurface,
    RectangleSheetSurface,
    Surface,
)
from elopt.physics.electrodes import metrics as m
from elopt.physics.electrodes.base import (
    ElectrodeFamily,
    Measured,
    MetricSpec,
    drive_parameter,
    parameter,
)
from elopt.physics.electrodes.board_copper import (
    EDGE_GRADE,
    HatchedFrameSheetSurface,
    finger,
    flat_ring,
)
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.electrodes.solvers import (
    SolvedByPanels,
    estimated_panels,
    refuse_too_many_panels,
)
from elopt.physics.layout import Layout, driven
from elopt.physics.media import PlanarLayer
from elopt.physics.refinement import SolveOptions, quantity_estimate
from elopt.physics.solution import ChargeSolution

MM = 1e-3
UM = 1e-6
PAD = "pad"
POUR = "pour"
TARGET = "target"
BOARD = "board"
COVER = "cover"
FILM = "water film"
PAD_SHAPES = ("round", "rect")
TARGET_KINDS = ("finger", "plate")
#: Companion designs: the pad with no target, and with no target under the water film.
BASELINE = "baseline"
FILM_CASE = "film"


@dataclass(frozen=True)
class BoardPadParams:
    """Board touch pad parameters (module docstring for the geometry)."""

    pad_shape: str = parameter("", "pad outline: round or rect")
    pad_length_mm: float = parameter(
        "mm", "pad diameter (round) or side along x (rect)", low=0, low_open=True
    )
    clearance_mm: float = parameter("mm", "pad to pour gap", low=0, low_open=True)
    pour_size_mm: float = parameter(
        "mm", "pour outer diameter (round) or side of its square outline (rect)", low=0
    )
    board_thickness_mm: float = parameter("mm", "board thickness", low=0, low_open=True)
    board_eps_r: float = parameter("1", "board permittivity", low=1)
    cover_thickness_mm: float = parameter("mm", "cover thickness (0: none)", low=0)
    cover_eps_r: float = parameter("1", "cover permittivity", low=1)
    target_distance_mm: float = parameter(
        "mm", "cover top to the target's nearest point", low=0, low_open=True, mounting=True
    )
    drive_V: float = drive_parameter("pad potential (pour and target grounded)")
    pad_width_mm: float = parameter(
        "mm", "pad side along y (rect; round: unused)", default=0.0, low=0
    )
    hatch_pitch_mm: float = parameter("mm", "hatch line pitch (0: solid pour)", default=0.0, low=0)
    hatch_line_mm: float = parameter("mm", "hatch and border track width", default=0.0, low=0)
    back_ground: bool = parameter("", "grounded plane on the board's far side", default=True)
    cover_gap_mm: float = parameter(
        "mm", "medium between board and cover", default=0.0, low=0, mounting=True
    )
    target_kind: str = parameter("", "finger or plate", default="finger", mounting=True)
    target_size_mm: float = parameter(
        "mm", "finger diameter or plate side", default=10.0, low=0, low_open=True
    )
    finger_length_mm: float = parameter(
        "mm", "finger length, tip to end", default=40.0, low=0, low_open=True
    )
    target_offset_mm: float = parameter(
        "mm", "target off the pad's axis along x", default=0.0, mounting=True
    )
    film_thickness_um: float = parameter(
        "um", "water film on the cover (0: no film check)", default=0.0, low=0, mounting=True
    )
    film_eps_r: float = parameter("1", "film permittivity (water: about 80)", default=80.0, low=1)


@dataclass(frozen=True)
class BoardPadOptions:
    """How the copper and target are meshed (each refinement level halves the panel size;
    two levels give the error estimate)."""

    mesh_step_mm: float = parameter(
        "mm",
        "coarsest panel size (0: pad's smaller side / 4, at most the pour band and 4 clearances)",
        default=0.0,
        low=0,
    )
    max_level: int = parameter("", "finest refinement level", default=2, low=1, high=4, whole=True)


@dataclass(frozen=True)
class BoardPadCase:
    """One of the three designs an evaluation solves: the params, whether the target is
    present and whether the water film is on the cover."""

    params: BoardPadParams
    target: bool = True
    film: bool = False


# ---------------------------------------------------------------- dimensions (m)


def pad_size_m(p: BoardPadParams) -> tuple[float, float]:
    """The pad's extent along x and y (a round pad: its diameter twice)."""
    a = p.pad_length_mm * MM
    return (a, a) if p.pad_shape == "round" else (a, p.pad_width_mm * MM)


def hole_size_m(p: BoardPadParams) -> tuple[float, float]:
    """The pour's clearance opening along x and y."""
    ax, ay = pad_size_m(p)
    c = p.clearance_mm * MM
    return ax + 2 * c, ay + 2 * c


def copper_z_m(p: BoardPadParams) -> float:
    return p.board_thickness_mm * MM


def cover_top_m(p: BoardPadParams) -> float:
    return (p.board_thickness_mm + p.cover_gap_mm + p.cover_thickness_mm) * MM


def pour_band_m(p: BoardPadParams) -> float:
    """Narrowest width of the pour between its clearance opening and its outline."""
    return 0.5 * (p.pour_size_mm * MM - max(hole_size_m(p)))


def mesh_step_terms_m(p: BoardPadParams) -> dict[str, float]:
    """The automatic panel size's bounds (m) by the parameter that sets each: a quarter of
    the pad's smaller side, the pour band, four clearances."""
    ax, ay = pad_size_m(p)
    terms = {"pad_length_mm": 0.25 * ax}
    if p.pad_shape == "rect":
        terms["pad_width_mm"] = 0.25 * ay
    terms["pour_size_mm"] = pour_band_m(p)
    terms["clearance_mm"] = 4.0 * p.clearance_mm * MM
    return terms


def mesh_step_m(p: BoardPadParams, options: BoardPadOptions) -> float:
    """Panel size (m) on the copper at level 0: the option, or the automatic one."""
    if options.mesh_step_mm > 0:
        return options.mesh_step_mm * MM
    return min(mesh_step_terms_m(p).values())


def target_step_m(p: BoardPadParams, h_m: float) -> float:
    """Panel size on the target: the copper's, at most a quarter of the target's size and
    twice its distance from the copper."""
    reach = cover_top_m(p) - copper_z_m(p) + p.target_distance_mm * MM
    return min(h_m, 0.25 * p.target_size_mm * MM, 2.0 * reach)


# ---------------------------------------------------------------- surfaces and layers


def pad_surface(p: BoardPadParams, h_m: float) -> Surface:
    z = copper_z_m(p)
    if p.pad_shape == "round":
        return flat_ring(0.0, 0.5 * p.pad_length_mm * MM, z, h_m)
    return RectangleSheetSurface(pad_size_m(p), z, h_m, grade=EDGE_GRADE)


def pour_surface(p: BoardPadParams, h_m: float) -> Surface:
    z = copper_z_m(p)
    s = p.pour_size_mm * MM
    if p.pad_shape == "round":
        return flat_ring(0.5 * hole_size_m(p)[0], 0.5 * s, z, h_m)
    if p.hatch_pitch_mm > 0:
        return HatchedFrameSheetSurface(
            (s, s), hole_size_m(p), z, h_m, p.hatch_pitch_mm * MM, p.hatch_line_mm * MM
        )
    return FrameSheetSurface((s, s), hole_size_m(p), z, h_m, grade=EDGE_GRADE)


def target_surface(p: BoardPadParams, h_m: float) -> Surface:
    z = cover_top_m(p) + p.target_distance_mm * MM
    x = p.target_offset_mm * MM
    size = p.target_size_mm * MM
    if p.target_kind == "finger":
        return finger(size, p.finger_length_mm * MM, z, x, h_m)
    plate = RectangleSheetSurface((size, size), z, h_m, grade=EDGE_GRADE)
    return plate if x == 0.0 else plate.transformed(translation_m=np.array([x, 0.0, 0.0]))


def board_layers(p: BoardPadParams, *, film: bool) -> tuple[PlanarLayer, ...]:
    """Board, cover (when thicker than 0) and, with ``film``, the water film on the cover."""
    layers = [PlanarLayer(BOARD, p.board_eps_r, 0.0, copper_z_m(p))]
    top = cover_top_m(p)
    if p.cover_thickness_mm > 0:
        bottom = (p.board_thickness_mm + p.cover_gap_mm) * MM
        layers.append(PlanarLayer(COVER, p.cover_eps_r, max(bottom, copper_z_m(p)), top))
    if film and p.film_thickness_um > 0:
        layers.append(PlanarLayer(FILM, p.film_eps_r, top, top + p.film_thickness_um * UM))
    return tuple(layers)


def film_solved(p: BoardPadParams) -> bool:
    """The film case is solved: a film thicker than 0 whose eps_r is not 1 (a film of air
    changes nothing in air, the medium of every touch design)."""
    return p.film_thickness_um > 0 and p.film_eps_r != 1.0


def panel_size_cause(p: BoardPadParams, options: BoardPadOptions, h_m: float) -> str:
    """Which parameter sets the panel size ``h_m``, with its value, for refusals."""
    if options.mesh_step_mm > 0:
        what = f"mesh_step_mm = {options.mesh_step_mm:.6g}"
    else:
        terms = mesh_step_terms_m(p)
        name = min(terms, key=terms.__getitem__)
        what = f"{name} = {getattr(p, name):.6g} sets the panel size"
    return f"{what} ({h_m / MM:.3g} mm) against a pour of {p.pour_size_mm:.6g} mm"


def neutral_layers_removed(layout: Layout) -> Layout:
    """``layout`` without the layers whose permittivity is the medium's (they change nothing)."""
    kept = tuple(layer for layer in layout.layers if layer.eps_r != layout.eps_r)
    return dataclasses.replace(layout, layers=kept)


# ---------------------------------------------------------------- the family


class BoardPad(SolvedByPanels, ElectrodeFamily):
    """Copper touch pad in a ground pour on a board, under a cover (module docstring)."""

    name: ClassVar[str] = "board_pad"
    Params: ClassVar[type] = BoardPadParams
    Options: ClassVar[type] = BoardPadOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        m.BASELINE,
        m.TOUCH_SIGNAL,
        m.SIGNAL_TO_BASELINE,
        m.FILM_SHIFT,
        m.FALSE_TRIGGER_MARGIN,
        *m.PEAK_3D,
    )

    def validate(self, params: BoardPadParams) -> None:
        p = params
        rules = RuleBook(self.name, p)
        choices = (("pad_shape", PAD_SHAPES), ("target_kind", TARGET_KINDS))
        for key, allowed in choices:
            value = getattr(p, key)
            if value not in allowed:
                rules.broken.append(f"{key} = {value!r} must be one of {', '.join(allowed)}")
        if not isinstance(p.back_ground, bool):
            rules.broken.append(f"back_ground = {p.back_ground!r} must be true or false")
        numbers_ok = True
        for f in dataclasses.fields(p):
            v = getattr(p, f.name)
            if f.type in ("float", float) and (
                isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)
            ):
                rules.broken.append(f"{f.name} = {v!r} must be a finite number")
                numbers_ok = False
        if numbers_ok:
            rules.declared()
            if not rules.broken:
                self._relations(rules, p)
        rules.raise_if_broken()

    @staticmethod
    def _relations(rules: RuleBook, p: BoardPadParams) -> None:
        rect = p.pad_shape == "rect"
        if rect and not p.pad_width_mm > 0:
            rules.broken.append(f"pad_width_mm = {p.pad_width_mm:.6g} must be > 0 for a rect pad")
        hatched = p.hatch_pitch_mm > 0
        border = 4.0 * p.hatch_line_mm if hatched else 0.0
        opening_mm = max(hole_size_m(p)) / MM if not rect or p.pad_width_mm > 0 else 0.0
        if p.pour_size_mm <= opening_mm + border:
            extra = " + 4 hatch_line_mm (two border tracks a side)" if hatched else ""
            rules.broken.append(
                f"pour_size_mm = {p.pour_size_mm:.6g} must be > the pad's larger side + 2 "
                f"clearance_mm{extra} = {opening_mm + border:.6g} (the pad and its clearance "
                "must fit inside the pour)"
            )
        if hatched:
            if not rect:
                rules.broken.append(
                    f"hatch_pitch_mm = {p.hatch_pitch_mm:.6g} needs pad_shape = 'rect' (a hatched "
                    "pour around a round pad is not modelled; use 0 for a solid pour)"
                )
            if not 0 < p.hatch_line_mm < p.hatch_pitch_mm:
                rules.broken.append(
                    f"hatch_line_mm = {p.hatch_line_mm:.6g} must lie in (0, hatch_pitch_mm = "
                    f"{p.hatch_pitch_mm:.6g}) for a hatched pour"
                )
        if p.target_kind == "finger":
            rules.at_least(
                "finger_length_mm",
                p.target_size_mm,
                "target_size_mm",
                "a finger is at least as long as it is wide",
            )

    def build(
        self,
        params: BoardPadParams | BoardPadCase,
        *,
        eps_r: float = 1.0,
        options: BoardPadOptions | None = None,
    ) -> Layout:
        """The layout of the touch design (Params) or of one companion case (SI units)."""
        case = params if isinstance(params, BoardPadCase) else BoardPadCase(params)
        p = case.params
        self.validate(p)
        options = options or BoardPadOptions()
        h = mesh_step_m(p, options)
        conductors = [
            driven(PAD, pad_surface(p, h), p.drive_V),
            driven(POUR, pour_surface(p, h), 0.0),
        ]
        if case.target:
            conductors.append(driven(TARGET, target_surface(p, target_step_m(p, h)), 0.0))
        layout = Layout(
            tuple(conductors),
            eps_r=eps_r,
            ground_plane=bool(p.back_ground),
            layers=board_layers(p, film=case.film),
            estimate_covers=(PAD,),
        )
        refuse_too_many_panels(self.name, estimated_panels(layout), panel_size_cause(p, options, h))
        return layout

    def solve(
        self, layout: Layout, *, solve_options: SolveOptions, options: BoardPadOptions
    ) -> ChargeSolution:
        # Layers of the medium's permittivity change nothing; without them the solve takes the
        # homogeneous kernel and its fast path.
        return super().solve(
            neutral_layers_removed(layout), solve_options=solve_options, options=options
        )

    def companion_designs(self, params: BoardPadParams, options: BoardPadOptions) -> dict[str, Any]:
        out: dict[str, Any] = {BASELINE: BoardPadCase(params, target=False)}
        if film_solved(params):
            out[FILM_CASE] = BoardPadCase(params, target=False, film=True)
        return out

    def measure(
        self,
        params: BoardPadParams,
        options: BoardPadOptions,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        touch, base = solution, companions[BASELINE]
        k = touch.layout.index(PAD)
        c_touch = float(touch.capacitance_matrix_F[k, k])
        c_base = float(base.capacitance_matrix_F[k, k])
        signal, signal_err = level_matched_change(touch, base, k)
        film = companions.get(FILM_CASE)
        shift = film_err = 0.0
        if film is not None:
            shift, film_err = level_matched_change(film, base, k)
        margin = signal / shift if shift > 0 else math.nan
        peak = touch.peak_field
        metrics = {
            m.BASELINE.name: c_base * 1e12,
            m.TOUCH_SIGNAL.name: signal * 1e15,
            m.SIGNAL_TO_BASELINE.name: 100.0 * signal / c_base,
            m.FILM_SHIFT.name: shift * 1e15,
            m.FALSE_TRIGGER_MARGIN.name: margin,
            m.PEAK_X.name: peak.location_m[0] / MM,
            m.PEAK_Y.name: peak.location_m[1] / MM,
            m.PEAK_Z.name: peak.location_m[2] / MM,
        }
        extra: dict[str, Any] = {
            "sense_capacitance_F": c_touch,
            "sense_capacitance_meaning": "Q_pad / V with the target present, pour and target "
            "grounded",
            "baseline_capacitance_F": c_base,
            "touch_signal_error_estimate_F": signal_err,
            "film_shift_error_estimate_F": film_err,
            "baseline_rel_error_estimate": float(base.rel_error_estimate),
            # for the design figure: the copper is sensed from above, the target is not copper
            "target_side": "above",
            "target_conductors": (TARGET,),
        }
        return Measured(metrics, extra)


#: Ratio of successive changes a level-matched difference assumes with two levels (its tail is
#: then its change; measured below in :func:`level_matched_change`).
TWO_LEVEL_DIFFERENCE_RATIO = 0.5


def level_matched_change(
    changed: ChargeSolution, reference: ChargeSolution, k: int
) -> tuple[float, float]:
    """C_kk(changed) - C_kk(reference) in F on the finest level both solved, and its error
    estimate (nan with one level).

    Both solves mesh the copper alike, so most of their discretisation error cancels in the
    difference; its estimate follows the difference itself from level to level: with three
    levels or more the geometric tail d_L r / (1 - r) of its changes d (observed ratio r,
    floored and capped as in :mod:`elopt.physics.refinement`), with two the change itself;
    never below the solvers' noise floor on both capacitances (errors refinement does not
    reduce, e.g. kernel tables, need not cancel); all times SAFETY
    (:func:`~elopt.physics.refinement.quantity_estimate`). Measured against the
    axisymmetric solver: a water film's shift on a layered board was off by 1.4 to 4.5 times
    its two-level change, and by 1.05 times the floor term.
    """
    common = min(len(changed.levels), len(reference.levels))
    values = [
        float(changed.levels[i].capacitance_F[k, k] - reference.levels[i].capacitance_F[k, k])
        for i in range(common)
    ]
    floor = max(changed.convergence.capacitance_floor, reference.convergence.capacitance_floor)
    c_both = abs(changed.capacitance_matrix_F[k, k]) + abs(reference.capacitance_matrix_F[k, k])
    err = quantity_estimate(values, floor * float(c_both), prior_ratio=TWO_LEVEL_DIFFERENCE_RATIO)
    return values[-1], err


__all__ = [
    "BoardPad",
    "BoardPadCase",
    "BoardPadOptions",
    "BoardPadParams",
    "board_layers",
    "level_matched_change",
]
