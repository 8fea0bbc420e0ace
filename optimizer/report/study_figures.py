"""Figures of a study (PNG and SVG), read from its file: the Pareto front with the infeasible
trials and the constraint limits, each constraint against the first objective, the history of
the best values, and the importance of each searched parameter (optuna's PED-ANOVA evaluator, which needs no extra package)."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from elopt.optimizer.report import figure_files as ff
from elopt.optimizer.report.front_table import trial_groups
from elopt.optimizer.report.study_view import (
    axis_label,
    constraint_limits_of,
    default_axes,
    front_numbers,
    is_log_sampled,
    value_of,
)
from elopt.optimizer.store import StudySnapshot

#: The figures of :func:`study_figures`, by file-name stem.
STUDY_FIGURES = ("front", "constraints", "history", "importance")
#: Fewest complete feasible trials for a parameter-importance estimate.
MIN_TRIALS_FOR_IMPORTANCE = 8


def _scatter_groups(ax: Any, snap: StudySnapshot, x: str, y: str) -> None:
    xv, yv = value_of(snap, x), value_of(snap, y)
    front = front_numbers(snap)
    g = trial_groups(snap, front)
    ax.scatter(
        xv[g["infeasible"]],
        yv[g["infeasible"]],
        marker="x",
        s=16,
        lw=0.9,
        color=ff.INFEASIBLE_COLOUR,
        label=f"infeasible ({int(g['infeasible'].sum())})",
    )
    ax.scatter(
        xv[g["dominated"]],
        yv[g["dominated"]],
        marker="o",
        s=18,
        facecolors="none",
        edgecolors=ff.FEASIBLE_COLOUR,
        lw=1.0,
        label=f"feasible, dominated ({int(g['dominated'].sum())})",
    )
    ax.scatter(
        xv[g["front"]],
        yv[g["front"]],
        marker="D",
        s=26,
        color=ff.FRONT_COLOUR,
        zorder=4,
        label=f"Pareto front ({int(g['front'].sum())})",
    )
    for axis, name in (("x", x), ("y", y)):
        if is_log_sampled(snap, name):
            (ax.set_xscale if axis == "x" else ax.set_yscale)("log")
        for kind, limit in constraint_limits_of(snap, name):
            line = ax.axvline if axis == "x" else ax.axhline
            line(
                limit,
                color=ff.LIMIT_COLOUR,
                ls="--",
                lw=1.8,
                label=f"{name} {'<=' if kind == 'max' else '>='} {limit:g}",
            )
    ax.set_xlabel(axis_label(snap, x))
    ax.set_ylabel(axis_label(snap, y))
    ax.grid(alpha=0.3)


def _nominal_of_front(ax: Any, snap: StudySnapshot, front: np.ndarray, x: str, y: str) -> None:
    """In a study judged across tolerances: each front trial's nominal point, joined to its
    toleranced (plotted) point, so the margin the tolerances cost is visible."""
    h = snap.header
    names = list(h.metric_names)
    if x not in names or y not in names:
        return
    metrics = snap.columns["metrics"]
    xn = metrics[front, names.index(x)]
    yn = metrics[front, names.index(y)]
    xt, yt = value_of(snap, x)[front], value_of(snap, y)[front]
    for a, b, c, d in zip(xn, yn, xt, yt, strict=True):
        ax.plot([a, c], [b, d], color=ff.FRONT_COLOUR, lw=0.7, alpha=0.5, zorder=2)
    ax.scatter(
        xn,
        yn,
        marker="D",
        s=22,
        facecolors="none",
        edgecolors=ff.FRONT_COLOUR,
        lw=0.9,
        zorder=4,
        label="front trials at nominal (filled: toleranced)",
    )


def front_figure(snap: StudySnapshot, x: str | None = None, y: str | None = None):
    """``y`` against ``x`` for every complete trial, front marked and joined in order."""
    plt = ff.pyplot()
    xd, yd = default_axes(snap)
    x, y = x or xd, y or yd
    fig, ax = plt.subplots(figsize=(7.5, 5.2), layout="constrained")
    _scatter_groups(ax, snap, x, y)
    front = front_numbers(snap)
    h = snap.header
    if front.size > 1 and x in h.objective_names and y in h.objective_names:
        xv, yv = value_of(snap, x)[front], value_of(snap, y)[front]
        order = np.argsort(xv)
        ax.plot(xv[order], yv[order], color=ff.FRONT_COLOUR, lw=1.0, alpha=0.7, zorder=3)
    if "[tolerance" in h.config_toml and front.size:
        _nominal_of_front(ax, snap, front, x, y)
    ax.set_title(f"study {h.study_name}: {snap.n_trials} trials", fontsize=10)
    ax.legend(fontsize=8, loc="best")
    return fig


def constraints_figure(snap: StudySnapshot):
    """One panel per constrained metric against the first objective, the limit drawn and the
    forbidden side shaded."""
    plt = ff.pyplot()
    h = snap.header
    metrics = list(dict.fromkeys(h.constraint_metrics))
    if not metrics:
        fig, ax = plt.subplots(figsize=(6, 2), layout="constrained")
        ax.text(0.5, 0.5, "this study has no constraints", ha="center", va="center")
        ax.set_axis_off()
        return fig
    cols = min(3, len(metrics))
    rows = math.ceil(len(metrics) / cols)
    fig, axes = plt.subplots(
        rows, cols, figsize=(4.6 * cols, 3.8 * rows), layout="constrained", squeeze=False
    )
    first = h.objective_names[0]
    for ax, m in zip(axes.ravel(), metrics, strict=False):
        _scatter_groups(ax, snap, first, m)
        for kind, limit in constraint_limits_of(snap, m):
            lo, hi = ax.get_ylim()
            if kind == "max":
                ax.axhspan(limit, max(hi, limit), color=ff.LIMIT_COLOUR, alpha=0.07, lw=0)
            else:
                ax.axhspan(min(lo, limit), limit, color=ff.LIMIT_COLOUR, alpha=0.07, lw=0)
            ax.set_ylim(lo, hi)
        ax.set_title(m, fontsize=9)
        ax.legend(fontsize=6, loc="best")
    for ax in axes.ravel()[len(metrics) :]:
        ax.set_axis_off()
    fig.suptitle("constraints against the first objective (shaded: not allowed)", fontsize=10)
    return fig


def best_history(values: np.ndarray, ok: np.ndarray, maximize: bool) -> np.ndarray:
    """Best value among the ``ok`` trials up to each trial (N,); NaN before the first."""
    v = np.where(ok, values, -np.inf if maximize else np.inf)
    best = np.maximum.accumulate(v) if maximize else np.minimum.accumulate(v)
    return np.where(np.isfinite(best), best, np.nan)


def history_figure(snap: StudySnapshot):
    """Each objective per trial (feasible, infeasible) and the best feasible value so far."""
    plt = ff.pyplot()
    h = snap.header
    c = snap.columns
    names = snap.state_names()
    feasible = (names == "complete") & (c["feasible"] == 1)
    infeasible = (names == "complete") & ~feasible
    n_obj = len(h.objective_names)
    fig, axes = plt.subplots(
        n_obj, 1, figsize=(8, 2.9 * n_obj), layout="constrained", squeeze=False, sharex=True
    )
    number = c["number"]
    for k, (name, d) in enumerate(zip(h.objective_names, h.objective_directions, strict=True)):
        ax = axes[k, 0]
        v = c["objectives"][:, k]
        ax.scatter(
            number[infeasible],
            v[infeasible],
            marker="x",
            s=12,
            lw=0.8,
            color=ff.INFEASIBLE_COLOUR,
            label="infeasible",
        )
        ax.scatter(
            number[feasible],
            v[feasible],
            marker="o",
            s=12,
            color=ff.FEASIBLE_COLOUR,
            label="feasible",
        )
        ax.step(
            number,
            best_history(v, feasible, d == "maximize"),
            where="post",
            color=ff.FRONT_COLOUR,
            lw=1.6,
            label=f"best feasible ({d[:3]})",
        )
        ax.set_ylabel(axis_label(snap, name))
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7, loc="best")
    axes[-1, 0].set_xlabel("trial number")
    fig.suptitle(f"study {h.study_name}: objectives trial by trial", fontsize=10)
    return fig


def parameter_importances(snap: StudySnapshot) -> dict[str, dict[str, float]]:
    """Objective name -> {searched parameter: importance} from optuna's PED-ANOVA evaluator
    over the complete feasible trials (how differently each parameter is spread in the best
    10 % than in all of them); {} when there are too few trials."""
    import warnings

    import optuna
    from optuna.distributions import FloatDistribution
    from optuna.importance import PedAnovaImportanceEvaluator, get_param_importances

    h = snap.header
    c = snap.columns
    ok = np.flatnonzero((snap.state_names() == "complete") & (c["feasible"] == 1))
    if len(ok) < MIN_TRIALS_FOR_IMPORTANCE:
        return {}
    searched = [k for k, s in enumerate(h.parameter_searched) if s]
    dists = {
        h.parameter_names[k]: FloatDistribution(
            h.search_low[k], h.search_high[k], log=h.search_log[k]
        )
        for k in searched
    }
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    out: dict[str, dict[str, float]] = {}
    for j, name in enumerate(h.objective_names):
        study = optuna.create_study(direction=h.objective_directions[j])
        study.add_trials(
            [
                optuna.trial.create_trial(
                    params={h.parameter_names[k]: float(c["params"][i, k]) for k in searched},
                    distributions=dists,
                    value=float(c["objectives"][i, j]),
                )
                for i in ok
            ]
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out[name] = get_param_importances(study, evaluator=PedAnovaImportanceEvaluator())
    return out


def importance_figure(snap: StudySnapshot):
    """Bars of each searched parameter's importance for each objective (PED-ANOVA)."""
    plt = ff.pyplot()
    imp = parameter_importances(snap)
    h = snap.header
    params = [n for n, s in zip(h.parameter_names, h.parameter_searched, strict=True) if s]
    fig, ax = plt.subplots(
        figsize=(7.5, 0.32 * len(params) * max(len(imp), 1) + 1.8), layout="constrained"
    )
    if not imp:
        ax.text(
            0.5,
            0.5,
            f"fewer than {MIN_TRIALS_FOR_IMPORTANCE} feasible trials: no importance estimate yet",
            ha="center",
            va="center",
        )
        ax.set_axis_off()
        return fig
    height = 0.8 / len(imp)
    y = np.arange(len(params))
    for j, (obj, values) in enumerate(imp.items()):
        share = [values.get(p, 0.0) for p in params]
        colour = (ff.FRONT_COLOUR, ff.CONDUCTOR_COLOURS[1], ff.CONDUCTOR_COLOURS[2])[j % 3]
        ax.barh(
            y + (j - (len(imp) - 1) / 2) * height, share, height=height, color=colour, label=obj
        )
    ax.set_yticks(y, params)
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel("importance, normalised to sum 1 per objective (PED-ANOVA, feasible trials)")
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=8, loc="lower right")
    ax.set_title("which parameters matter", fontsize=10)
    return fig


FIGURE_MAKERS = {
    "front": front_figure,
    "constraints": constraints_figure,
    "history": history_figure,
    "importance": importance_figure,
}


def study_figures(snap: StudySnapshot, folder: Path, suffixes=(".png", ".svg")) -> list[Path]:
    """Write every study figure into ``folder`` as STEM.png and STEM.svg; the paths."""
    written = []
    for stem, make in FIGURE_MAKERS.items():
        paths = [folder / f"{stem}{s}" for s in suffixes]
        written += ff.save_figure(make(snap), paths)
    return written
