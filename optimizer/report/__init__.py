"""What elopt shows and writes about designs and studies.

Terminal: :func:`render_solve_report` (``solve``), :func:`render_front` (``front``),
:func:`render_trial` (``show``), :class:`PlainProgress` / :class:`RichProgress` (``run``).
Files: front exports (:func:`write_front_csv`, :func:`write_front_json`), figures (PNG and
SVG, matplotlib loaded only when a figure is asked for), the one-page HTML study report and
the calibration sweep.

Names resolve on first use, so importing this package loads none of its modules: the command
line stays quick and works without matplotlib.
"""

from __future__ import annotations

import importlib
from typing import Any

_WHERE = {
    "render_solve_report": "solve_report",
    "render_front": "front_table",
    "FrontView": "front_table",
    "front_scatter": "front_table",
    "render_trial": "trial_view",
    "PlainProgress": "progress",
    "RichProgress": "progress",
    "summary_line": "progress",
    "front_numbers": "study_view",
    "study_counts": "study_view",
    "write_front_csv": "front_export",
    "write_front_json": "front_export",
    "checked_output": "front_export",
    "design_figure": "design_figures",
    "study_figures": "study_figures",
    "write_study_page": "html_page",
    "calibration_sweep": "calibration",
}

__all__ = sorted(_WHERE)


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(f"{__name__}.{module}"), name)
