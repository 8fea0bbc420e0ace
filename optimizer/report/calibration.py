"""A calibration table: one design solved at a row of values of one parameter (the standoff, or
any other), with C, 1/C, the sensitivity and each point's deviation from the best straight line.

The straight line is fitted, by least squares, to the quantity the electronics reads: 1/C for
a gap gauge read through 1/C (an ideal parallel-plate probe has 1/C proportional to the gap),
or C itself. Deviations are in per cent of the line's full-scale span, so the largest of them
is the family's ``linearity_error_pct_fs`` over the same points.
"""

from __future__ import annotations

import csv
import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np

from elopt.optimizer.config.solve_config import SolveSpec
from elopt.optimizer.errors import ConfigError
from elopt.optimizer.report.numbers import unit_from_name
from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.errors import ElectrodeError

Straight = Literal["inverse", "direct"]
#: Evaluation options switched off in a sweep: the sweep is itself the linearity measurement.
SKIPPED_OPTIONS = {"linearity_points": 0}


@dataclass(frozen=True)
class Calibration:
    """Sweep results, each (N,) in the order of ``values``; SI inside, the parameter in its own
    unit. ``sensitivity_F_per_unit`` is dC/d(parameter) from the sweep (central differences);
    ``solver_sensitivity_F_per_m`` is the solver's -dC/d(standoff) per point when the family
    reports one and the parameter is the standoff (else None)."""

    parameter: str
    unit: str
    values: np.ndarray
    capacitance_F: np.ndarray
    sensitivity_F_per_unit: np.ndarray
    solver_sensitivity_F_per_m: np.ndarray | None
    deviation_pct_fs: np.ndarray
    straight: Straight
    rel_error_estimate: np.ndarray
    accuracy_met: np.ndarray


def straight_line_deviation_pct_fs(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(y - least-squares line) at each x, in % of the line's span over x; (N,), N >= 3."""
    slope, intercept = np.polyfit(x, y, 1)
    full_scale = abs(slope) * (np.max(x) - np.min(x))
    return 100.0 * (y - (slope * x + intercept)) / full_scale


def sweep_values(
    nominal: float, start: float | None, stop: float | None, points: int
) -> np.ndarray:
    """``points`` evenly spaced values from start to stop (default nominal x 0.5 .. x 1.5)."""
    lo = 0.5 * nominal if start is None else start
    hi = 1.5 * nominal if stop is None else stop
    if not lo < hi:
        raise ConfigError(f"--from {lo:g} --to {hi:g}: the sweep must run from low to high")
    return np.linspace(lo, hi, points)


def _sweep_options(options: Any) -> Any:
    if options is None:
        return None
    names = {f.name for f in dataclasses.fields(options)}
    return dataclasses.replace(options, **{k: v for k, v in SKIPPED_OPTIONS.items() if k in names})


def calibration_sweep(
    spec: SolveSpec,
    family: ElectrodeFamily,
    parameter: str,
    values: np.ndarray,
    *,
    straight: Straight = "inverse",
    on_point: Callable[[int, float], None] | None = None,
) -> Calibration:
    """Solve ``spec``'s design at each value of ``parameter`` (its unit as in the config)."""
    names = [f.name for f in dataclasses.fields(spec.params)]
    if parameter not in names:
        raise ConfigError(
            f"--param {parameter}: not a parameter of {spec.family}; choose from {', '.join(names)}"
        )
    if len(values) < 3:
        raise ConfigError(f"--points {len(values)}: a straight-line fit needs at least 3 points")
    options = _sweep_options(spec.options)
    kwargs = {} if options is None else {"options": options}
    caps, errs, met, solver_sens = [], [], [], []
    for k, v in enumerate(values):
        params = dataclasses.replace(spec.params, **{parameter: float(v)})
        try:
            family.validate(params)
        except ElectrodeError as exc:
            raise ConfigError(f"--param {parameter} = {v:g}: {exc}") from None
        if on_point:
            on_point(k, float(v))
        ev = family.evaluate(params, rel_accuracy=spec.rel_accuracy, eps_r=spec.eps_r, **kwargs)
        caps.append(float(ev.extra["sense_capacitance_F"]))
        errs.append(float(ev.solution.rel_error_estimate))
        met.append(bool(ev.solution.accuracy_met))
        # fF/um -> F/m: 1e-15 / 1e-6.
        solver_sens.append(ev.metrics.get("sensitivity_fF_per_um", np.nan) * 1e-9)
    x = np.asarray(values, dtype=float)
    c = np.asarray(caps)
    y = 1.0 / c if straight == "inverse" else c
    standoff = parameter == "standoff_mm" and np.all(np.isfinite(solver_sens))
    return Calibration(
        parameter=parameter,
        unit=unit_from_name(parameter),
        values=x,
        capacitance_F=c,
        sensitivity_F_per_unit=np.gradient(c, x),
        solver_sensitivity_F_per_m=np.asarray(solver_sens) if standoff else None,
        deviation_pct_fs=straight_line_deviation_pct_fs(x, y),
        straight=straight,
        rel_error_estimate=np.asarray(errs),
        accuracy_met=np.asarray(met),
    )


def calibration_rows(cal: Calibration) -> tuple[list[str], list[list[float | str]]]:
    """CSV header and rows (the table the electronics designer needs)."""
    unit = f"_{cal.unit}" if cal.unit and not cal.parameter.endswith(cal.unit) else ""
    header = [
        f"{cal.parameter}{unit}",
        "capacitance_fF",
        "inverse_capacitance_per_pF",
        f"dC_d_{cal.parameter}_fF_per_{cal.unit or 'unit'}",
    ]
    if cal.solver_sensitivity_F_per_m is not None:
        header.append("solver_sensitivity_fF_per_um")
    header += [
        f"deviation_from_line_{'1_over_C' if cal.straight == 'inverse' else 'C'}_pct_fs",
        "rel_error_estimate",
        "accuracy_met",
    ]
    rows = []
    for k in range(len(cal.values)):
        row: list[float | str] = [
            float(cal.values[k]),
            cal.capacitance_F[k] * 1e15,
            1e-12 / cal.capacitance_F[k],
            cal.sensitivity_F_per_unit[k] * 1e15,
        ]
        if cal.solver_sensitivity_F_per_m is not None:
            row.append(cal.solver_sensitivity_F_per_m[k] * 1e9)
        row += [
            float(cal.deviation_pct_fs[k]),
            float(cal.rel_error_estimate[k]),
            str(bool(cal.accuracy_met[k])).lower(),
        ]
        rows.append(row)
    return header, rows


def terminal_headers(cal: Calibration) -> list[str]:
    """Short column headers, unit on a line of its own, in the order of :func:`calibration_rows`."""
    unit = cal.unit or "unit"
    from elopt.optimizer.report.numbers import wrapped_name

    heads = [f"{wrapped_name(cal.parameter, 10)}\n({unit})", "C\n(fF)", "1/C\n(1/pF)"]
    heads.append(f"dC/dx\n(fF/{unit})")
    if cal.solver_sensitivity_F_per_m is not None:
        heads.append("solver\n-dC/dd\n(fF/um)")
    what = "1/C" if cal.straight == "inverse" else "C"
    return heads + [f"{what} off\nline\n(% FS)", "error\nestimate"]


def write_calibration_csv(path: Path, cal: Calibration) -> None:
    header, rows = calibration_rows(cal)
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(header)
        for r in rows:
            w.writerow([f"{v:.10g}" if isinstance(v, float) else v for v in r])


def calibration_figure(cal: Calibration, title: str):
    """C and 1/C against the parameter with the fitted line, the deviation (% FS) and the
    sensitivity."""
    from elopt.optimizer.report import figure_files as ff

    plt = ff.pyplot()
    x = cal.values
    label = (
        f"{cal.parameter} ({cal.unit})"
        if cal.unit and not cal.parameter.endswith(cal.unit)
        else cal.parameter
    )
    fig, axes = plt.subplots(1, 3, figsize=(13.5, 4.2), layout="constrained")
    ax = axes[0]
    y = 1e-12 / cal.capacitance_F if cal.straight == "inverse" else cal.capacitance_F * 1e15
    slope, intercept = np.polyfit(x, y, 1)
    ax.plot(x, y, "o", color=ff.FRONT_COLOUR, label="solved")
    ax.plot(x, slope * x + intercept, "--", color=ff.LIMIT_COLOUR, lw=1, label="best straight line")
    ax.set_ylabel("1/C (1/pF)" if cal.straight == "inverse" else "C (fF)")
    twin = ax.twinx()
    other = cal.capacitance_F * 1e15 if cal.straight == "inverse" else 1e-12 / cal.capacitance_F
    twin.plot(x, other, "s-", color=ff.CONDUCTOR_COLOURS[1], ms=3, lw=0.8, alpha=0.8)
    twin.set_ylabel(
        "C (fF)" if cal.straight == "inverse" else "1/C (1/pF)", color=ff.CONDUCTOR_COLOURS[1]
    )
    ax.set_title(
        f"{'1/C' if cal.straight == 'inverse' else 'C'} and its straight line "
        f"({'C' if cal.straight == 'inverse' else '1/C'} in copper)",
        fontsize=9,
    )
    ax.legend(fontsize=7, loc="upper left")
    ax = axes[1]
    ax.axhline(0.0, color="#888888", lw=0.8)
    ax.plot(x, cal.deviation_pct_fs, "o-", color=ff.FRONT_COLOUR)
    worst = float(np.max(np.abs(cal.deviation_pct_fs)))
    ax.set_title(f"deviation from the line: largest {worst:.3g} % of full scale", fontsize=9)
    ax.set_ylabel("% of full scale")
    ax = axes[2]
    ax.plot(
        x,
        -cal.sensitivity_F_per_unit * 1e15,
        "o-",
        color=ff.FRONT_COLOUR,
        label=f"-dC/d{cal.parameter} from the sweep",
    )
    if cal.solver_sensitivity_F_per_m is not None:
        # F/m -> fF/mm: 1e15 * 1e-3.
        ax.plot(
            x,
            cal.solver_sensitivity_F_per_m * 1e12,
            "x",
            color=ff.LIMIT_COLOUR,
            ms=8,
            label="solver's -dC/dd per point",
        )
    ax.set_ylabel(f"fF per {cal.unit or 'unit'}")
    ax.set_title("sensitivity", fontsize=9)
    ax.legend(fontsize=7)
    for ax in axes:
        ax.set_xlabel(label)
        ax.grid(alpha=0.3)
    fig.suptitle(title, fontsize=11)
    return fig
