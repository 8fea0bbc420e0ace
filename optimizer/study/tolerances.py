"""Objectives and constraints under manufacturing and mounting tolerances.

A design is evaluated at nominal and across a box of parameter deviations: parameter ``i`` may
lie anywhere in ``[x_i - minus_i, x_i + plus_i]`` (its unit: the parameter's own). Each treated
metric is then taken

* at the **worst case** over the box (worst = the direction its objective or constraint dislikes),
* or at a **quantile** q for independent deviations, uniform over each range or normal with the
  range as +-3 sigma (common practice, no source): the value that a fraction q of parts meets or
  beats.

Two ways to get there, chosen per trial (``method = "auto"`` takes the cheaper in solves):

**First order.** One evaluation at each end of each range (2k for k tolerances) gives the
one-at-a-time changes ``d+_i``, ``d-_i``. The model is additive and linear in each deviation,
slope ``g_i = (d+_i - d-_i) / (plus_i + minus_i)``; its worst case over the box is
``m0 + sum_i worst_i`` and its quantiles follow from the linear combination of independent
deviations (closed form for normal deviations, a seeded Monte-Carlo sum for uniform ones). The
model is trusted only when two stated tests pass:

1. *curvature*: for every parameter, ``|d+_i/plus_i + d-_i/minus_i|`` (the change of slope
   across the range) is at most ``nonlinearity_limit`` times ``|g_i|`` (plus an absolute floor
   from the solver's accuracy);
2. *interaction*: one more evaluation at each predicted worst corner agrees with the model's
   prediction within ``nonlinearity_limit`` times the predicted deviation (plus the floor).

The reported worst case is then the evaluated value at the predicted worst corner, with the
corner check's disagreement as its stated error.

**Corners.** Every corner of the box (2^k evaluations, k <= ``MAX_CORNER_TOLERANCES``); the worst
case is the worst evaluated value (exact for metrics monotone in each parameter, which the
curvature test checks). Used when the first-order model fails a test, or when it is cheaper.

Every evaluation goes through one callable, so the cost per trial is ``evaluations`` solves of
the family's pipeline; :class:`TolerancedValues` reports it with the wall time.
"""

from __future__ import annotations

import itertools
import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import Literal

import numpy as np

Direction = Literal["low", "high"]
Method = Literal["auto", "first_order", "corners"]

#: Largest number of toleranced parameters evaluated by corners (2^8 = 256 solves).
MAX_CORNER_TOLERANCES = 8
#: Seeded Monte-Carlo sample count for quantiles of uniform deviations; the sampling error of
#: a quantile is then about sqrt(q (1 - q) / N) in probability (binomial), 2e-4 at q = 0.99.
QUANTILE_SAMPLES = 200_000
NORMAL_SIGMAS_PER_RANGE = 3.0


@dataclass(frozen=True)
class Tolerance:
    """Parameter ``name`` may deviate by ``-minus`` .. ``+plus`` (>= 0, the parameter's unit)."""

    name: str
    minus: float
    plus: float

    @property
    def width(self) -> float:
        return self.minus + self.plus


@dataclass(frozen=True)
class Treatment:
    """How one metric is taken: ``nominal``, ``worst`` case, or ``quantile`` q in (0.5, 1).

    ``direction`` is the side the designer dislikes: ``low`` for a maximised objective or a
    ``min`` constraint, ``high`` for a minimised objective or a ``max`` constraint.
    """

    kind: Literal["nominal", "worst", "quantile"]
    direction: Direction
    quantile: float | None = None
    distribution: Literal["uniform", "normal"] = "uniform"


@dataclass(frozen=True)
class ToleranceSpec:
    """The tolerances of a study and the treatment of each metric they apply to."""

    tolerances: tuple[Tolerance, ...]
    treatments: Mapping[str, Treatment]
    method: Method = "auto"
    nonlinearity_limit: float = 0.2

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.tolerances)


@dataclass
class TolerancedValues:
    """Nominal and toleranced values of one design.

    ``value[m]`` is the toleranced value of each treated metric; ``driver[m]`` names the
    tolerance (and its sign) that moves it most; ``error[m]`` is the stated error of a
    first-order value (NaN for corners); ``method`` says which way was taken and why.
    """

    nominal: dict[str, float]
    value: dict[str, float] = field(default_factory=dict)
    driver: dict[str, str] = field(default_factory=dict)
    error: dict[str, float] = field(default_factory=dict)
    method: str = "nominal"
    reason: str = ""
    evaluations: int = 1
    seconds: float = 0.0


Evaluate = Callable[[dict[str, float]], dict[str, float]]


def evaluate_toleranced(
    spec: ToleranceSpec,
    nominal_params: Mapping[str, float],
    evaluate: Evaluate,
    *,
    rel_floor: float = 1e-6,
    nominal: Mapping[str, float] | None = None,
) -> TolerancedValues:
    """Toleranced values of ``spec.treatments`` for the design ``nominal_params``.

    ``evaluate(params) -> metrics`` runs the family pipeline (it may raise: a deviation that
    breaks a family rule is the caller's to report). ``nominal`` reuses metrics already computed
    at ``nominal_params``. ``rel_floor`` (the solver's relative accuracy) sets the absolute floor
    of both trust tests: deviations below it are noise, not curvature.
    """
    started = time.perf_counter()
    base = dict(nominal) if nominal is not None else evaluate(dict(nominal_params))
    result = TolerancedValues(nominal={k: float(v) for k, v in base.items()})
    treated = {m: t for m, t in spec.treatments.items() if t.kind != "nominal"}
    for m, t in spec.treatments.items():
        if t.kind == "nominal":
            result.value[m] = float(base[m])
    active = tuple(t for t in spec.tolerances if t.width > 0.0)
    if not treated or not active:
        result.value.update({m: float(base[m]) for m in treated})
        result.seconds = time.perf_counter() - started
        return result
    runs = _Runs(nominal_params, evaluate)
    method = spec.method
    if method == "auto":
        method = "corners" if 2 ** len(active) <= 2 * len(active) + 2 else "first_order"
    if method == "first_order":
        reason = _first_order(spec, active, base, treated, runs, result, rel_floor)
        if reason:
            result.reason = reason
            method = "corners"
        else:
            result.method = "first_order"
    if method == "corners":
        _corners(active, base, treated, runs, result)
        result.method = "corners"
    result.evaluations = 1 + runs.count if nominal is None else runs.count
    result.seconds = time.perf_counter() - started
    return result


class _Runs:
    """Evaluations at deviation vectors, cached so no point is solved twice."""

    def __init__(self, nominal_params: Mapping[str, float], evaluate: Evaluate) -> None:
        self.nominal = dict(nominal_params)
        self.evaluate = evaluate
        self.cache: dict[tuple[tuple[str, float], ...], dict[str, float]] = {}

    def at(self, deviation: Mapping[str, float]) -> dict[str, float]:
        key = tuple(sorted((k, float(v)) for k, v in deviation.items() if v != 0.0))
        if key not in self.cache:
            params = dict(self.nominal)
            for name, dv in key:
                params[name] = self.nominal[name] + dv
            self.cache[key] = {k: float(v) for k, v in self.evaluate(params).items()}
        return self.cache[key]

    @property
    def count(self) -> int:
        return len(self.cache)


def _sign(direction: Direction) -> float:
    """+1 when larger values are worse."""
    return 1.0 if direction == "high" else -1.0


def _first_order(
    spec: ToleranceSpec,
    active: tuple[Tolerance, ...],
    base: Mapping[str, float],
    treated: Mapping[str, Treatment],
    runs: _Runs,
    result: TolerancedValues,
    rel_floor: float,
) -> str:
    """Fill ``result`` from the first-order model; return why it is not trusted ('' if it is)."""
    limit = spec.nonlinearity_limit
    ups = {t.name: runs.at({t.name: t.plus}) if t.plus > 0 else dict(base) for t in active}
    downs = {t.name: runs.at({t.name: -t.minus}) if t.minus > 0 else dict(base) for t in active}
    predictions: dict[str, tuple[float, dict[str, float], float]] = {}
    for m, treat in treated.items():
        m0 = float(base[m])
        floor = rel_floor * max(abs(m0), 1e-300) * 4.0
        s = _sign(treat.direction)
        worst_total, corner, slopes = 0.0, {}, {}
        contributions: dict[str, float] = {}
        for t in active:
            d_up = ups[t.name][m] - m0
            d_dn = downs[t.name][m] - m0
            if not (math.isfinite(d_up) and math.isfinite(d_dn)):
                return f"metric '{m}' is not finite within the tolerance of {t.name}"
            g = (d_up - d_dn) / t.width
            curvature = abs(
                (d_up / t.plus if t.plus else 0.0) + (d_dn / t.minus if t.minus else 0.0)
            )
            one_sided = t.plus == 0.0 or t.minus == 0.0
            if not one_sided and curvature * t.width > limit * abs(g) * t.width + floor:
                return (
                    f"curvature test: '{m}' changes slope by {curvature:.3g} per unit across "
                    f"the range of {t.name} (slope {g:.3g}); first order not trusted"
                )
            slopes[t.name] = g
            # the worse end of this range for this metric, under the linear model
            worse_up = s * d_up >= s * d_dn
            corner[t.name] = t.plus if worse_up else -t.minus
            contributions[t.name] = g * corner[t.name]
            worst_total += g * corner[t.name]
        predictions[m] = (m0 + worst_total, corner, 0.0)
        result.driver[m] = _driver(contributions, corner)
        if treat.kind == "quantile":
            result.value[m] = _linear_quantile(m0, slopes, active, treat)
    for m, treat in treated.items():
        predicted, corner, _ = predictions[m]
        m0 = float(base[m])
        checked = runs.at(corner)[m]
        floor = rel_floor * max(abs(m0), 1e-300) * 4.0
        miss = abs(checked - predicted)
        if not math.isfinite(checked) or miss > limit * abs(predicted - m0) + floor:
            return (
                f"interaction test: '{m}' at the predicted worst corner is {checked:.6g}, the "
                f"model said {predicted:.6g}; first order not trusted"
            )
        result.error[m] = miss
        if treat.kind == "worst":
            s = _sign(treat.direction)
            result.value[m] = checked if s * checked >= s * predicted else predicted
    return ""


def _driver(contributions: Mapping[str, float], corner: Mapping[str, float]) -> str:
    """'name +plus' of the deviation that moves the metric most towards its worse side."""
    name = max(contributions, key=lambda k: abs(contributions[k]))
    dv = corner[name]
    return f"{name} {'+' if dv >= 0 else '-'}{abs(dv):.6g}"


def _linear_quantile(
    m0: float, slopes: Mapping[str, float], active: tuple[Tolerance, ...], treat: Treatment
) -> float:
    """The q-quantile on the worse side of m0 + sum g_i d_i, d_i independent over the ranges."""
    q = float(treat.quantile or 0.5)
    s = _sign(treat.direction)
    if treat.distribution == "normal":
        mean = m0 + sum(slopes[t.name] * (t.plus - t.minus) / 2.0 for t in active)
        sd = math.sqrt(
            sum((slopes[t.name] * t.width / (2.0 * NORMAL_SIGMAS_PER_RANGE)) ** 2 for t in active)
        )
        return mean + s * NormalDist().inv_cdf(q) * sd
    rng = np.random.default_rng(20261202)
    total = np.full(QUANTILE_SAMPLES, m0)
    for t in active:
        total += slopes[t.name] * rng.uniform(-t.minus, t.plus, QUANTILE_SAMPLES)
    return float(np.quantile(total, q if s > 0 else 1.0 - q))


def _corners(
    active: tuple[Tolerance, ...],
    base: Mapping[str, float],
    treated: Mapping[str, Treatment],
    runs: _Runs,
    result: TolerancedValues,
) -> None:
    if len(active) > MAX_CORNER_TOLERANCES:
        raise ValueError(
            f"{len(active)} tolerances need {2 ** len(active)} corner solves; at most "
            f"{MAX_CORNER_TOLERANCES} tolerances are evaluated by corners"
        )
    points = [
        dict(zip([t.name for t in active], signs, strict=True))
        for signs in itertools.product(*[(-t.minus, t.plus) for t in active])
    ]
    values = [(p, runs.at(p)) for p in points]
    for m, treat in treated.items():
        s = _sign(treat.direction)
        worst_point, worst = max(values, key=lambda pv: s * pv[1][m])
        if treat.kind == "worst":
            result.value[m] = float(worst[m])
        else:
            result.value[m] = _corner_quantile(values, m, active, treat)
        result.driver[m] = _driver(_main_effects(values, m, active), worst_point)
        result.error.setdefault(m, math.nan)


def _main_effects(
    values: list[tuple[dict[str, float], dict[str, float]]], m: str, active: tuple[Tolerance, ...]
) -> dict[str, float]:
    """Mean of ``m`` over the corners at +plus minus its mean at -minus, per tolerance."""
    effects = {}
    for t in active:
        up = [v[m] for p, v in values if p[t.name] > 0]
        down = [v[m] for p, v in values if p[t.name] <= 0]
        effects[t.name] = float(np.mean(up) - np.mean(down))
    return effects


def _corner_quantile(
    values: list[tuple[dict[str, float], dict[str, float]]],
    m: str,
    active: tuple[Tolerance, ...],
    treat: Treatment,
) -> float:
    """Quantile from the multilinear interpolant of the corner values (seeded Monte Carlo)."""
    rng = np.random.default_rng(20261202)
    n = QUANTILE_SAMPLES // 4
    unit = np.empty((n, len(active)))
    for j, t in enumerate(active):
        if treat.distribution == "normal":
            centre, sd = (t.plus - t.minus) / 2.0, t.width / (2.0 * NORMAL_SIGMAS_PER_RANGE)
            d = np.clip(rng.normal(centre, sd, n), -t.minus, t.plus)
        else:
            d = rng.uniform(-t.minus, t.plus, n)
        unit[:, j] = (d + t.minus) / t.width
    total = np.zeros(n)
    for corner, metrics in values:
        weight = np.ones(n)
        for j, t in enumerate(active):
            weight *= unit[:, j] if corner[t.name] > 0 else 1.0 - unit[:, j]
        total += weight * metrics[m]
    s = _sign(treat.direction)
    q = float(treat.quantile or 0.5)
    return float(np.quantile(total, q if s > 0 else 1.0 - q))
