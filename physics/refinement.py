"""The one refinement loop every solver runs, with its error estimate and stop reasons.

A solver hands :func:`refine` a callable that plans one refinement level (how many unknowns,
how much memory, and a thunk that solves it). The loop here decides which levels are solved,
estimates the error of the finest one, says why it stopped, and raises in strict mode.

Error estimate. For a quantity X solved on levels 0..L (the capacitance matrix, or the peak
surface field), let d_k be the scaled change between levels k-1 and k (capacitance entry (i, j)
scaled by sqrt(C_ii C_jj), the peak by its own value). With the observed ratio r = d_L / d_(L-1)
(not below :data:`RATIO_FLOOR`, for peaks :data:`PEAK_RATIO_FLOOR`) the remaining error of
level L is, as in Richardson extrapolation with the observed order, the geometric tail
d_L r / (1 - r). With two levels only, the ratio is the solver's prior (:data:`PRIOR_RATIO`
unless it measured its own); when the changes do not shrink (r above :data:`RATIO_CEILING`) the
tail is d_L itself, and when they collapse (r below the solver's ``collapse_ratio``: a coarse first
level far off, the next ones converging slowly) the prior ratio is used instead of r. A solver
whose peak field does not converge regularly (the 3-D peak is the largest panel value, whose
panel moves between levels) says so, and its peak estimate is the larger of the last two
changes; a regular peak's is at least :data:`PEAK_RATIO_FLOOR` times the previous change. Every
estimate is multiplied by :data:`SAFETY` and kept above the solver's measured noise floor
(quadrature and round-off errors that refinement does not reduce). The capacitance matrix is not
symmetrised: half its largest scaled asymmetry |C_ij - C_ji| is added, since the exact matrix is
symmetric.

Covered entries. A layout may name the conductors its design is measured on
(``Layout.estimate_covers``); the solvers pass their indices as ``covered``, and the changes and
asymmetry above are then taken over the entries (i, j) with i and j both covered (e.g. only
C_pad,pad when a grounded finger's own C_tt is read by no metric). The request and the stop
test judge that estimate; the same estimate over every entry is kept as ``matrix``.

SAFETY, PRIOR_RATIO and each solver's :class:`Convergence` (noise floors) were measured on the
published cases (and a guarded probe against its own fine solve) by
tests/benchmarks/measure_error_estimate.py (the conductors-only coarse axisymmetric solve's
prior and collapse ratios on a grid of guarded probes, measure_error_estimate_probes.py);
tests/test_error_estimate_honesty.py checks the result: true error <= estimate in >= 95 % of the
cases, never above 3x.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Literal, Protocol

import numpy as np

from elopt.physics.errors import SolverError

#: Multiplier of every estimate: the largest true / bare-estimate ratio of C measured on the
#: published cases (3+ levels, above the noise floors) was 1.58 (axisymmetric sphere 0.1 R over
#: the plane, two times above the noise floor; 1.03 for 3-D), median 1.0; 2 leaves room. The
#: estimates of C_00 alone beside a grounded second conductor (published_cases.COVERED_CASES)
#: reached 1.41 (3-D disk beside a grounded coaxial disk, level 2; measured 3 Dec 2026).
SAFETY = 2.0
#: Smallest ratio of successive changes the tail estimate of C uses (measured ratios: 0.03 for
#: the axisymmetric panels, 0.25 for flat triangles), against a change that vanishes by chance.
RATIO_FLOOR = 0.02
#: The same for the peak field, whose changes are less regular: on a filleted guarded probe
#: the peak moved 20 times less on one level than on the one before while its error stayed,
#: then fell 2000-fold. Its remaining error is also taken as at least this share of the
#: previous change.
PEAK_RATIO_FLOOR = 0.1
#: Ratio above which the changes are taken as not (yet) converging geometrically.
RATIO_CEILING = 0.8
#: Ratio of successive changes assumed with two levels; with SAFETY the two-level estimate is
#: the change itself. Largest error / first change measured: 0.71 (C, 3-D sphere), 0.81 (peak,
#: 3-D sphere), 1.0 (C) and 0.88 (peak) on filleted guarded probes, whose first levels are not
#: yet asymptotic.
PRIOR_RATIO = 1.0 / 3.0
#: Share of the memory the OS reports available that a level may use.
MEMORY_SHARE = 0.8

StopReason = Literal["met", "max_level", "max_unknowns", "memory"]


@dataclass(frozen=True, kw_only=True)
class Convergence:
    """How a solver's levels converge, measured by tests/benchmarks/measure_error_estimate.py.

    ``capacitance_floor`` / ``peak_floor``: relative errors refinement does not reduce
    (quadrature tolerances, round-off); ``peak_regular``: the peak converges geometrically;
    ``prior_ratio``: ratio of successive changes assumed with only two levels;
    ``collapse_ratio``: an observed ratio of the changes of C below it is a pre-asymptotic
    collapse (a coarse first level far off, the next ones converging slowly), not a rate, and
    the prior ratio is used instead (0: every observed ratio is taken, floored at RATIO_FLOOR).
    """

    capacitance_floor: float
    peak_floor: float
    peak_regular: bool = True
    prior_ratio: float = PRIOR_RATIO
    collapse_ratio: float = 0.0


@dataclass(frozen=True)
class SolveOptions:
    """What a solve is asked for; the same names and defaults in every solver.

    ``rel_accuracy``: estimated relative error of the capacitance matrix (entry (i, j)
    relative to sqrt(C_ii C_jj); only the entries among the conductors the layout names in
    ``estimate_covers``, when it names any) at which refinement stops.
    ``peak_rel_accuracy``: a separate request on the peak surface field (None: none; a peak at
    a sharp edge, which has no limit, is exempt). ``max_level``: finest level solved (levels
    from 0). ``max_unknowns``: largest system solved. ``order``: solver-specific
    discretisation order (axisymmetric: nodes per panel), None = chosen from the accuracy.
    ``strict``: raise :class:`SolverError` when a request is not met instead of returning with
    ``accuracy_met`` False.
    """

    rel_accuracy: float = 1e-4
    peak_rel_accuracy: float | None = None
    max_level: int = 6
    max_unknowns: int = 1_200_000
    order: int | None = None
    strict: bool = False

    def __post_init__(self) -> None:
        if not (0.0 < self.rel_accuracy < 1.0):
            raise SolverError(f"rel_accuracy must lie in (0, 1), got {self.rel_accuracy}")
        if self.peak_rel_accuracy is not None and not (0.0 < self.peak_rel_accuracy < 1.0):
            raise SolverError(
                f"peak_rel_accuracy must lie in (0, 1) or be None, got {self.peak_rel_accuracy}"
            )
        if not isinstance(self.max_level, int) or self.max_level < 0:
            raise SolverError(f"max_level must be a whole number >= 0, got {self.max_level}")
        if not isinstance(self.max_unknowns, int) or self.max_unknowns < 1:
            raise SolverError(f"max_unknowns must be a whole number >= 1, got {self.max_unknowns}")


def make_options(options: SolveOptions | None, overrides: dict[str, Any]) -> SolveOptions:
    """``options`` (default :class:`SolveOptions`) with keyword ``overrides`` of its fields."""
    base = SolveOptions() if options is None else options
    names = {f.name for f in dataclasses.fields(SolveOptions)}
    unknown = sorted(set(overrides) - names)
    if unknown:
        raise SolverError(
            f"unknown solve option {unknown[0]!r}; the options are {', '.join(sorted(names))}"
        )
    return dataclasses.replace(base, **overrides) if overrides else base


@dataclass(frozen=True)
class LevelPeak:
    """The largest surface field (V/m) on one conductor at the excitation, where it is
    (a point of the solver's dimension, m), and whether it sits at a sharp edge."""

    conductor: str
    field_V_per_m: float
    location_m: tuple[float, ...]
    singular: bool


def peaks_per_conductor(
    names: Sequence[str],
    owner: np.ndarray,
    field_V_per_m: np.ndarray,
    points_m: np.ndarray,
    singular: np.ndarray,
) -> tuple[LevelPeak, ...]:
    """The largest of candidate surface fields per conductor.

    ``owner`` (K,) conductor index of each candidate, ``field_V_per_m`` (K,), ``points_m``
    (K, d), ``singular`` (K,) bool: the candidate lies at a sharp edge or corner.
    """
    out = []
    for k, name in enumerate(names):
        sel = np.nonzero(owner == k)[0]
        m = sel[int(np.argmax(field_V_per_m[sel]))]
        out.append(
            LevelPeak(
                name,
                float(field_V_per_m[m]),
                tuple(float(x) for x in points_m[m]),
                bool(singular[m]),
            )
        )
    return tuple(out)


class SolvedLevel(Protocol):
    """What the loop needs of one solved level (solvers' level results carry more)."""

    capacitance_F: np.ndarray  # (n, n); column j: charges with conductor j at 1 V

    @property
    def n_unknowns(self) -> int: ...

    def peaks(self) -> tuple[LevelPeak, ...]:
        """Per conductor, layout order; the solver caches it."""
        ...


@dataclass(frozen=True)
class LevelPlan:
    """One level before it is solved: its size, its memory need (bytes, with a short note
    such as "dense solve") and the thunk that solves it given the previous level (or None)."""

    level: int
    n_unknowns: int
    memory_bytes: int
    memory_note: str
    solve: Callable[[Any], Any]


@dataclass(frozen=True)
class ErrorEstimate:
    """Relative error estimates of the finest level.

    ``capacitance``: of the covered entries of the capacitance matrix (tail estimate plus half
    the asymmetry; every entry unless the layout names conductors); ``asymmetry``: largest
    |C_ij - C_ji| / sqrt(C_ii C_jj) over them; ``ratio``: observed ratio of the last two
    changes (None below three levels); ``peaks``: per conductor; ``peak``: of the largest peak
    over all conductors (the design number); ``matrix``: ``capacitance``'s estimate over every
    entry; ``covered``: the conductor indices whose entries (i, j) ``capacitance`` covers
    (None: all). The peak estimates need the levels' peak searches, so ``peak_source``
    computes them on first use.
    """

    capacitance: float
    asymmetry: float
    ratio: float | None
    peak_source: Callable[[], tuple[tuple[float, ...], float]] = field(repr=False, compare=False)
    matrix: float = math.inf
    covered: tuple[int, ...] | None = None

    @cached_property
    def _peak_pair(self) -> tuple[tuple[float, ...], float]:
        return self.peak_source()

    @property
    def peaks(self) -> tuple[float, ...]:
        return self._peak_pair[0]

    @property
    def peak(self) -> float:
        return self._peak_pair[1]


@dataclass(frozen=True)
class Refinement:
    """What the loop did: the levels solved (coarse to fine), the estimate of the finest,
    the options and the solver's convergence data it used, whether every request was met, and
    why it stopped."""

    levels: tuple[Any, ...]
    estimate: ErrorEstimate
    options: SolveOptions
    convergence: Convergence
    accuracy_met: bool
    stop_reason: StopReason


#: Seconds a reading of the available memory is reused: reading /proc/meminfo costs about
#: 0.06 ms CPU, 2 % of a guarded-probe solve at 1e-4, which a study pays on every trial.
MEMORY_READING_AGE_S = 1.0
_memory_reading: list[float] = [-math.inf, 0.0]  # (monotonic time s, bytes) of the last one


def available_memory_bytes() -> int:
    """Memory the OS can give (MemAvailable) as read at most :data:`MEMORY_READING_AGE_S`
    ago, or 4 GiB when it cannot say."""
    now = time.monotonic()
    if now - _memory_reading[0] > MEMORY_READING_AGE_S:
        _memory_reading[:] = [now, _read_available_memory_bytes()]
    return int(_memory_reading[1])


def _read_available_memory_bytes() -> int:
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 4 * 1024**3


def scaled_asymmetry(capacitance_F: np.ndarray) -> float:
    """Largest |C_ij - C_ji| / sqrt(C_ii C_jj) of a capacitance matrix (n, n)."""
    c = np.asarray(capacitance_F, dtype=float)
    d = np.sqrt(np.abs(np.outer(np.diag(c), np.diag(c))))
    return float(np.max(np.abs(c - c.T) / d))


def relative_change(c_new: np.ndarray, c_old: np.ndarray) -> float:
    """Largest |change| of a capacitance matrix, entry (i, j) scaled by sqrt(C_ii C_jj)."""
    d = np.sqrt(np.abs(np.outer(np.diag(c_new), np.diag(c_new))))
    return float(np.max(np.abs(c_new - c_old) / d))


def tail_estimate(
    changes: Sequence[float],
    prior_ratio: float,
    ratio_floor: float = RATIO_FLOOR,
    collapse_ratio: float = 0.0,
) -> tuple[float, float | None]:
    """Bare error estimate (no safety factor, no noise floor) of the last level from the scaled
    changes d_1..d_L between levels, and the observed ratio (None with one change); the ratio
    used is at least ``ratio_floor``, and ``prior_ratio`` when the observed one is below
    ``collapse_ratio``."""
    if not changes:
        return math.inf, None
    d = float(changes[-1])
    observed = None
    r = prior_ratio
    if len(changes) >= 2:
        prev = float(changes[-2])
        observed = d / prev if prev > 0 else (0.0 if d == 0 else math.inf)
        if observed > RATIO_CEILING:
            return d, observed
        r = prior_ratio if observed < collapse_ratio else max(observed, ratio_floor)
    return d * r / (1.0 - r), observed


def _scaled_changes(values: Sequence[float]) -> list[float]:
    last = abs(values[-1])
    if last == 0:
        return [0.0] * (len(values) - 1)
    return [abs(b - a) / last for a, b in zip(values, values[1:], strict=False)]


def bare_peak_estimate(changes: Sequence[float], regular: bool) -> float:
    """Peak-field estimate from the scaled changes, before safety factor and noise floor."""
    if not regular:
        return max(changes[-2:])
    bare = tail_estimate(changes[-2:], PRIOR_RATIO, PEAK_RATIO_FLOOR)[0]
    if len(changes) >= 2:
        bare = max(bare, PEAK_RATIO_FLOOR * changes[-2])
    return bare


def peak_estimate(fields_V_per_m: Sequence[float], convergence: Convergence) -> float:
    """Relative error estimate of the last of a conductor's peak fields over the levels."""
    changes = _scaled_changes(fields_V_per_m)
    if not changes:
        return math.nan
    bare = bare_peak_estimate(changes, convergence.peak_regular)
    return max(SAFETY * bare, convergence.peak_floor)


def capacitance_estimate(
    caps: Sequence[np.ndarray], convergence: Convergence
) -> tuple[float, float, float | None]:
    """(estimate, scaled asymmetry, observed ratio) of the finest of the capacitance matrices
    ``caps`` (coarse to fine, each (n, n)) over all their entries."""
    changes = [relative_change(b, a) for a, b in zip(caps, caps[1:], strict=False)]
    bare, ratio = tail_estimate(
        changes[-2:], convergence.prior_ratio, collapse_ratio=convergence.collapse_ratio
    )
    asym = scaled_asymmetry(caps[-1])
    return max(SAFETY * bare, convergence.capacitance_floor) + 0.5 * asym, asym, ratio


def estimate_error(
    levels: Sequence[SolvedLevel],
    convergence: Convergence,
    covered: Sequence[int] | None = None,
) -> ErrorEstimate:
    """The :class:`ErrorEstimate` of the finest of ``levels`` (coarse to fine) over the
    entries (i, j) with i and j in ``covered`` (conductor indices; None: every entry); its
    peak estimates run the levels' peak searches when first asked for."""
    caps = [np.asarray(lv.capacitance_F, dtype=float) for lv in levels]
    matrix_est, asym, ratio = capacitance_estimate(caps, convergence)
    cap_est = matrix_est
    kept = None if covered is None else tuple(int(i) for i in covered)
    if kept is not None and len(kept) < len(caps[-1]):
        sub = np.ix_(kept, kept)
        cap_est, asym, ratio = capacitance_estimate([c[sub] for c in caps], convergence)
    last = tuple(levels[-3:])

    def peak_estimates() -> tuple[tuple[float, ...], float]:
        fields = np.array([[p.field_V_per_m for p in lv.peaks()] for lv in last])  # (k, n)
        per = tuple(peak_estimate(fields[:, c], convergence) for c in range(fields.shape[1]))
        return per, peak_estimate(fields.max(axis=1), convergence)

    return ErrorEstimate(cap_est, asym, ratio, peak_estimates, matrix_est, kept)


def quantity_estimate(
    values: Sequence[float], floor: float, prior_ratio: float = PRIOR_RATIO
) -> float:
    """Error estimate, in the values' unit, of the last of one quantity's values over the
    levels (coarse to fine), from its own changes: SAFETY times the larger of their geometric
    tail (:func:`tail_estimate` with ``prior_ratio`` for two levels) and ``floor`` (the
    solvers' noise floor in the quantity's unit); NaN with fewer than two values."""
    if len(values) < 2:
        return math.nan
    changes = [abs(b - a) for a, b in zip(values, values[1:], strict=False)]
    return SAFETY * max(tail_estimate(changes[-2:], prior_ratio)[0], floor)


def combination_estimate(
    levels: Sequence[SolvedLevel],
    convergence: Convergence,
    value: Callable[[np.ndarray], float],
) -> float:
    """Relative error estimate of ``value(C)`` on the finest of ``levels``, a linear
    combination of a few capacitance entries (e.g. a mutual capacitance -(C_10 + C_12)),
    from how that combination itself changes over the levels (:func:`quantity_estimate`,
    floor: the noise floor of each entry, sqrt(C_ii C_jj) times ``capacitance_floor``, summed
    through ``value``); NaN with one level. A small combination of large entries can carry a
    larger relative error than any entry of the matrix estimate."""
    caps = [np.asarray(lv.capacitance_F, dtype=float) for lv in levels]
    values = [float(value(c)) for c in caps]
    d = np.sqrt(np.abs(np.diag(caps[-1])))
    floor = convergence.capacitance_floor * abs(float(value(np.outer(d, d))))
    return quantity_estimate(values, floor, convergence.prior_ratio) / abs(values[-1])


def peak_request_met(level: SolvedLevel, estimate: ErrorEstimate, request: float | None) -> bool:
    """Whether the largest peak is within ``request`` (a peak at a sharp edge is exempt)."""
    if request is None:
        return True
    top = max(level.peaks(), key=lambda p: p.field_V_per_m)
    return top.singular or estimate.peak <= request


def refine(
    plan_level: Callable[[int], LevelPlan],
    options: SolveOptions,
    convergence: Convergence,
    *,
    start_level: int = 0,
    memory_limit_bytes: int | None = None,
    covered: Sequence[int] | None = None,
) -> Refinement:
    """Solve levels ``start_level``, ... until the estimate meets the requests.

    ``covered``: the conductor indices whose capacitance entries the estimate and the request
    cover (None: every entry; see :func:`estimate_error`).

    Stops before a level whose unknowns exceed ``options.max_unknowns`` or whose memory need
    exceeds ``memory_limit_bytes`` (default :data:`MEMORY_SHARE` of the available memory);
    when that happens to the first level, raises :class:`SolverError` with the numbers.
    With ``options.strict``, a request not met is a SolverError too.
    """
    if start_level < 0 or start_level > options.max_level:
        raise SolverError(
            f"levels must satisfy 0 <= start_level <= max_level, got start_level={start_level}, "
            f"max_level={options.max_level}"
        )
    limit = (
        int(MEMORY_SHARE * available_memory_bytes())
        if memory_limit_bytes is None
        else int(memory_limit_bytes)
    )
    levels: list[Any] = []
    estimate = ErrorEstimate(math.inf, 0.0, None, lambda: ((), math.inf))
    stop: StopReason = "max_level"
    for level in range(start_level, options.max_level + 1):
        plan = plan_level(level)
        if plan.n_unknowns > options.max_unknowns:
            if not levels:
                raise SolverError(
                    f"level {level} needs {plan.n_unknowns} unknowns, more than max_unknowns = "
                    f"{options.max_unknowns}, before an error estimate exists; simplify the "
                    "geometry or start from a coarser mesh"
                )
            stop = "max_unknowns"
            break
        if plan.memory_bytes > limit:
            if not levels:
                raise SolverError(
                    f"level {level} has {plan.n_unknowns} unknowns and would need about "
                    f"{plan.memory_bytes / 1e9:.2f} GB ({plan.memory_note}) but only "
                    f"{limit / 1e9:.2f} GB may be used; ask for a coarser mesh, fewer levels "
                    "(max_level) or fewer unknowns (max_unknowns)"
                )
            stop = "memory"
            break
        levels.append(plan.solve(levels[-1] if levels else None))
        if len(levels) >= 2:
            estimate = estimate_error(levels, convergence, covered)
            if estimate.capacitance <= options.rel_accuracy and peak_request_met(
                levels[-1], estimate, options.peak_rel_accuracy
            ):
                stop = "met"
                break
    met = (
        len(levels) >= 2
        and estimate.capacitance <= options.rel_accuracy
        and peak_request_met(levels[-1], estimate, options.peak_rel_accuracy)
    )
    if options.strict and not met:
        raise SolverError(_not_met_message(levels, estimate, options, stop))
    return Refinement(tuple(levels), estimate, options, convergence, met, stop)


def _not_met_message(
    levels: list[Any], estimate: ErrorEstimate, options: SolveOptions, stop: StopReason
) -> str:
    fine = levels[-1]
    covered = estimate.covered
    scope = (
        ""
        if covered is None or len(covered) == len(fine.capacitance_F)
        else f" (entries among conductors {', '.join(map(str, covered))}, layout order from 0)"
    )
    what = (
        f"rel_accuracy = {options.rel_accuracy:g} was not met: the capacitance's estimated "
        f"error{scope} is {estimate.capacitance:.2g}"
    )
    if estimate.capacitance <= options.rel_accuracy:
        what = (
            f"peak_rel_accuracy = {options.peak_rel_accuracy:g} was not met: the peak field's "
            f"estimated error is {estimate.peak:.2g}"
        )
    return (
        f"{what} after {len(levels)} level(s), the finest with {fine.n_unknowns} unknowns "
        f"(stopped: {stop}); allow more levels (max_level) or unknowns (max_unknowns), give a "
        "finer mesh, or ask for less"
    )
