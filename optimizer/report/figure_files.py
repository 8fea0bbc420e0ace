"""Shared ground of elopt's figures: loading matplotlib only when a figure is asked for, the
output paths (PNG and SVG), and the project's own colours.

Every terminal path works without matplotlib; asking for a figure without it is one line.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from elopt.optimizer.errors import ConfigError

FIGURE_SUFFIXES = (".png", ".svg")
PNG_DPI = 110

#: Conductor fills, in layout order (our own palette: slate blue, copper, moss, plum, ochre).
CONDUCTOR_COLOURS = ("#3d5a80", "#b5651d", "#5b7f3a", "#7b4b7a", "#c9a227")
TARGET_COLOUR = "#3a3a3a"
DIELECTRIC_COLOUR = "#e9dcc0"
PEAK_COLOUR = "#d7263d"
LIMIT_COLOUR = "#d7263d"
FRONT_COLOUR = "#1b6f8a"
FEASIBLE_COLOUR = "#8fb8c9"
INFEASIBLE_COLOUR = "#a9a9a9"
#: Field-magnitude ramp, low to high: ink, deep teal, sea green, straw, coral.
FIELD_RAMP = ("#14213d", "#1d4e6b", "#2a9d8f", "#e9c46a", "#f4a261", "#e76f51")


def pyplot() -> Any:
    """matplotlib.pyplot on the file-only Agg backend; ConfigError when it is not installed."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise ConfigError(
            "figures need matplotlib, which is not installed: pip install 'elopt[figures]'"
        ) from None
    return plt


def field_colormap() -> Any:
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("elopt_field", FIELD_RAMP)


def figure_paths(target: str | Path, flag: str = "--figure") -> list[Path]:
    """Where a figure goes: ``NAME.png`` or ``NAME.svg`` as given, both for a bare ``NAME``."""
    path = Path(target)
    if not path.parent.is_dir():
        raise ConfigError(f"{flag} {target}: directory {path.parent} does not exist")
    suffix = path.suffix.lower()
    if suffix in FIGURE_SUFFIXES:
        return [path]
    if suffix:
        raise ConfigError(
            f"{flag} {target}: a figure ends in .png or .svg (no suffix: both are written)"
        )
    return [path.with_name(path.name + s) for s in FIGURE_SUFFIXES]


def refuse_existing(paths: list[Path], flag: str, force: bool) -> None:
    """ConfigError when one of ``paths`` exists and ``force`` is not set."""
    for p in paths:
        if p.exists() and not force:
            raise ConfigError(f"{flag} {p}: file exists; add --force to replace it")


def save_figure(fig: Any, paths: list[Path]) -> list[Path]:
    """Write ``fig`` to every path (format from the suffix), close it, return the paths."""
    plt = pyplot()
    try:
        for p in paths:
            fig.savefig(p, dpi=PNG_DPI, metadata={"Date": None} if p.suffix == ".svg" else None)
    finally:
        plt.close(fig)
    return paths
