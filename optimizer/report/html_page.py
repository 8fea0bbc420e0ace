"""The study report: one self-contained HTML page (figures embedded as PNG data, no script, no
link outside the page), readable in any browser with no network."""

from __future__ import annotations

import base64
import datetime as dt
import html
import io
from pathlib import Path
from typing import Any

from elopt.optimizer import __version__
from elopt.optimizer.report import figure_files as ff
from elopt.optimizer.report.numbers import ARROW, short_number, shown_unit
from elopt.optimizer.report.study_figures import FIGURE_MAKERS
from elopt.optimizer.report.study_view import (
    fixed_words,
    front_numbers,
    study_caution,
    study_counts,
)
from elopt.optimizer.store import StudySnapshot

#: Rows of the front table on the page (the CSV/JSON exports hold them all).
PAGE_FRONT_ROWS = 100

FIGURE_CAPTIONS = {
    "front": "Every complete trial: the Pareto front (filled), feasible but dominated trials "
    "(open) and trials that break a constraint (crosses); dashed lines are constraint limits.",
    "constraints": "Each constrained metric against the first objective; the shaded side is "
    "not allowed.",
    "history": "Each objective trial by trial, and the best feasible value found so far.",
    "importance": "How strongly each searched parameter sets each objective among the feasible "
    "trials: how differently it is spread in the best 10 % than in all of them (optuna's "
    "PED-ANOVA importance evaluator), normalised to sum 1 per objective.",
}

STYLE = """
body { font: 15px/1.45 system-ui, sans-serif; color: #1d2433; margin: 0; background: #f6f4ef; }
main { max-width: 1080px; margin: 0 auto; padding: 24px 28px 48px; background: #fff; }
h1 { font-size: 1.6em; margin: 0 0 4px; color: #14213d; }
h2 { font-size: 1.15em; margin: 28px 0 8px; padding-bottom: 3px; border-bottom: 2px solid #2a9d8f; }
.sub { color: #5a6270; margin: 0 0 14px; }
.counts span { display: inline-block; margin: 0 14px 6px 0; padding: 3px 10px;
  background: #eef5f4; border-radius: 10px; }
.caution { background: #fff3d6; border-left: 5px solid #e9a23b; padding: 8px 12px; }
figure { margin: 10px 0 22px; }
figure img { max-width: 100%; height: auto; border: 1px solid #dcdcdc; }
figcaption { color: #5a6270; font-size: 0.9em; }
table { border-collapse: collapse; font-size: 0.88em; margin: 6px 0 10px; }
th, td { padding: 3px 9px; text-align: right; border-bottom: 1px solid #e3e3e3; }
.wide { overflow-x: auto; }
th { background: #14213d; color: #fff; vertical-align: bottom; }
th small { font-weight: normal; opacity: 0.8; }
td:first-child, th:first-child { text-align: left; }
pre { background: #f3f3f3; padding: 10px; overflow-x: auto; font-size: 0.85em; }
footer { margin-top: 30px; color: #7a808a; font-size: 0.85em; }
"""


def figure_png_base64(fig: Any) -> str:
    buf = io.BytesIO()
    plt = ff.pyplot()
    try:
        fig.savefig(buf, format="png", dpi=ff.PNG_DPI)
    finally:
        plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _e(text: Any) -> str:
    return html.escape(str(text))


def _name(text: str) -> str:
    """A snake_case name that may break after its underscores."""
    return _e(text).replace("_", "_<wbr>")


def _front_table(snap: StudySnapshot) -> str:
    h = snap.header
    c = snap.columns
    front = front_numbers(snap)
    if front.size == 0:
        return "<p>No feasible trial yet, so no Pareto front.</p>"
    constrained = [m for m in dict.fromkeys(h.constraint_metrics) if m not in h.objective_names]
    searched = [k for k, s in enumerate(h.parameter_searched) if s]
    head = ["<th>trial</th>"]
    head += [
        f"<th>{_name(n)}<br><small>{ARROW[d]}{_unit_tag(u)}</small></th>"
        for n, d, u in zip(
            h.objective_names, h.objective_directions, h.objective_units, strict=True
        )
    ]
    head += [
        f"<th>{_name(m)}<br><small>{_unit_tag(h.metric_units[h.metric_names.index(m)])}</small></th>"
        for m in constrained
    ]
    head += [
        f"<th>{_name(h.parameter_names[k])}<br><small>{_unit_tag(h.parameter_units[k])}</small></th>"
        for k in searched
    ]
    rows = []
    for i in front[:PAGE_FRONT_ROWS]:
        cells = [str(int(i))]
        cells += [short_number(v) for v in c["objectives"][i]]
        cells += [short_number(c["metrics"][i, h.metric_names.index(m)]) for m in constrained]
        cells += [short_number(c["params"][i, k]) for k in searched]
        rows.append("<tr>" + "".join(f"<td>{_e(x)}</td>" for x in cells) + "</tr>")
    more = (
        f"<p>The first {PAGE_FRONT_ROWS} of {front.size} front trials; "
        "<code>elopt front FILE --csv OUT</code> writes them all.</p>"
        if front.size > PAGE_FRONT_ROWS
        else ""
    )
    return (
        f"<p>{front.size} feasible non-dominated trials, best first by "
        f"{_e(h.objective_names[0])}. <code>elopt show {_e(snap.path)} TRIAL</code> gives one "
        'in full.</p><div class="wide"><table><tr>'
        + "".join(head)
        + "</tr>"
        + "".join(rows)
        + "</table></div>"
        + more
    )


def _unit_tag(unit: str) -> str:
    """ " (mm)" after a column name; nothing for a pure number."""
    return f" ({_e(shown_unit(unit))})" if shown_unit(unit) else ""


def _setup_tables(snap: StudySnapshot) -> str:
    h = snap.header
    words = fixed_words(h.config_toml)  # text and yes/no values are not numbers in the file
    rows = []
    for k, n in enumerate(h.parameter_names):
        if h.parameter_searched[k]:
            rng = f"{h.search_low[k]:g} … {h.search_high[k]:g}" + (
                " (log)" if h.search_log[k] else ""
            )
        else:
            rng = (
                f"fixed at {words[n]}"
                if n in words
                else f"fixed at {short_number(float(snap.columns['params'][0, k]))}"
                if snap.n_trials
                else "fixed"
            )
        rows.append(
            f"<tr><td>{_e(n)}</td><td>{_e(shown_unit(h.parameter_units[k]))}</td><td>{_e(rng)}</td></tr>"
        )
    limits = [
        f"<tr><td>{_e(m)}</td><td>{'≤' if kind == 'max' else '≥'} {lim:g}</td><td>{_e(shown_unit(u))}</td></tr>"
        for m, kind, lim, u in zip(
            h.constraint_metrics,
            h.constraint_kinds,
            h.constraint_limits,
            h.constraint_units,
            strict=True,
        )
    ]
    return (
        "<h2>Search space</h2><table><tr><th>parameter</th><th>unit</th><th>range</th></tr>"
        + "".join(rows)
        + "</table><h2>Constraints</h2>"
        + (
            "<table><tr><th>metric</th><th>limit</th><th>unit</th></tr>"
            + "".join(limits)
            + "</table>"
            if limits
            else "<p>None.</p>"
        )
    )


def study_page(snap: StudySnapshot) -> str:
    """The whole page as text."""
    h = snap.header
    counts = study_counts(snap)
    caution = study_caution(snap)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>elopt study {_e(h.study_name)}</title><style>{STYLE}</style></head><body><main>",
        f"<h1>Study {_e(h.study_name)}</h1>",
        f'<p class="sub">family {_e(h.family)} · file {_e(snap.path)} · created '
        f"{_e(h.created_utc)} with elopt {_e(h.elopt_version)}</p>",
        '<p class="counts">'
        + "".join(
            f"<span>{_e(v)} {_e(k)}</span>"
            for k, v in (
                ("trials", counts["trials"]),
                ("complete", counts["complete"]),
                ("feasible", counts["feasible"]),
                ("failed", counts["failed"]),
                ("interrupted", counts["interrupted"]),
            )
        )
        + "</p>",
    ]
    if caution:
        parts.append(f'<p class="caution">{_e(caution)}</p>')
    parts.append("<h2>Pareto front</h2>" + _front_table(snap))
    for stem, make in FIGURE_MAKERS.items():
        data = figure_png_base64(make(snap))
        parts.append(
            f'<figure id="{stem}"><img alt="{_e(stem)} figure" '
            f'src="data:image/png;base64,{data}"><figcaption>{_e(FIGURE_CAPTIONS[stem])}'
            "</figcaption></figure>"
        )
    parts.append(_setup_tables(snap))
    parts.append(f"<h2>Study config</h2><pre>{_e(h.config_toml)}</pre>")
    stamp = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    parts.append(f"<footer>Written by elopt {_e(__version__)} on {stamp}.</footer>")
    parts.append("</main></body></html>")
    return "\n".join(parts) + "\n"


def write_study_page(snap: StudySnapshot, path: Path) -> int:
    """Write :func:`study_page` to ``path``; its size in bytes."""
    text = study_page(snap)
    path.write_text(text, encoding="utf-8")
    return len(text.encode("utf-8"))
