"""build -> solve -> metrics for one design of a family: the one place designs are solved.

``elopt solve``, every study trial and any sweep or tolerance study call
:func:`evaluate_design`; a sweep multiplies solves by calling it (or :func:`solve_design`)
once per design, so how a design is turned into numbers lives here only. The family supplies
the stages (:class:`~elopt.physics.electrodes.base.ElectrodeFamily`); the pipeline runs
them in order, solves the designs the family's metrics lean on (its companion designs), and
adds the metrics every solve yields (:data:`~elopt.physics.electrodes.metrics.STANDARD`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation
from elopt.physics.electrodes.metrics import PEAK_FIELD
from elopt.physics.errors import ElectrodeError
from elopt.physics.refinement import SolveOptions
from elopt.physics.solution import ChargeSolution


def resolved_options(family: ElectrodeFamily, options: Any | None) -> Any:
    """``options`` checked against the family's rules; the declared defaults when None."""
    options = family.Options() if options is None else options
    if not isinstance(options, family.Options):
        raise ElectrodeError(
            f"{family.name}: evaluation options must be {family.Options.__name__}, "
            f"got {type(options).__name__}"
        )
    family.validate_options(options)
    return options


def solve_design(
    family: ElectrodeFamily,
    params: Any,
    *,
    solve_options: SolveOptions,
    eps_r: float,
    options: Any,
) -> ChargeSolution:
    """Build and solve one design (``options`` already resolved)."""
    layout = family.build(params, eps_r=eps_r, options=options)
    return family.solve(layout, solve_options=solve_options, options=options)


def standard_metrics(solution: ChargeSolution) -> dict[str, float]:
    """The metrics every solve yields, whatever the family (names from the metric registry)."""
    return {PEAK_FIELD.name: float(solution.peak_field.field_V_per_m)}


def evaluate_design(
    family: ElectrodeFamily,
    params: Any,
    *,
    rel_accuracy: float = 1e-4,
    peak_rel_accuracy: float | None = None,
    eps_r: float = 1.0,
    options: Any | None = None,
) -> Evaluation:
    """Every metric of ``family.metric_catalog()`` for one design.

    ``params``: the family's Params; ``rel_accuracy``: requested relative accuracy of the
    capacitance matrix; ``peak_rel_accuracy``: a separate request on the peak surface field
    (None: none) (the solver contract's defaults otherwise, not strict: the solution says
    whether the requests were met); ``eps_r``: relative permittivity of the medium; ``options``: the
    family's Options (None: the declared defaults). Raises ElectrodeError for a design or
    options that break the family's rules, SolverError when a solve fails.
    """
    options = resolved_options(family, options)
    family.validate_design(params, options)
    settings = SolveOptions(rel_accuracy=rel_accuracy, peak_rel_accuracy=peak_rel_accuracy)
    solution = solve_design(family, params, solve_options=settings, eps_r=eps_r, options=options)
    companions = {
        key: solve_design(family, p, solve_options=settings, eps_r=eps_r, options=options)
        for key, p in family.companion_designs(params, options).items()
    }
    measured = family.measure(params, options, solution, companions)
    values = {**standard_metrics(solution), **measured.metrics}
    catalog = family.metric_catalog()
    missing = [m.name for m in catalog if m.name not in values]
    if missing:
        raise ElectrodeError(f"{family.name}: measured no value for {', '.join(missing)}")
    metrics = {m.name: float(values[m.name]) for m in catalog}
    peak = solution.peak_field
    extra = {
        "layout": solution.layout,
        "peak_conductor": peak.conductor,
        "peak_singular": bool(peak.singular),
        **measured.extra,
    }
    return Evaluation(metrics=metrics, solution=solution, extra=extra)


def design_metrics(
    family: ElectrodeFamily,
    *,
    rel_accuracy: float = 1e-4,
    peak_rel_accuracy: float | None = None,
    eps_r: float = 1.0,
    options: Any | None = None,
) -> Callable[[Mapping[str, Any]], dict[str, float]]:
    """``parameters by name -> metrics`` at fixed settings: what a sweep or a tolerance study
    calls once per design (each call is one :func:`evaluate_design`)."""
    resolved = resolved_options(family, options)

    def metrics_at(values: Mapping[str, Any]) -> dict[str, float]:
        params = family.Params(**values)
        return evaluate_design(
            family,
            params,
            rel_accuracy=rel_accuracy,
            peak_rel_accuracy=peak_rel_accuracy,
            eps_r=eps_r,
            options=resolved,
        ).metrics

    return metrics_at
