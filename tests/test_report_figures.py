"""Figures (solve, show, study), the one-page HTML study report, and the figure options' rules.

Figures are checked as files (written, non-empty, the pixel size their layout sets) and by
content: colours only the drawing puts there (the peak marker, the conductor fills) found in
the PNG pixels, the SVG parsed as XML, the HTML opened in headless Chromium where installed.
"""

from __future__ import annotations

import base64
import os
import re
import shutil
import subprocess
import sys
import tempfile
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from study_support.cli import run_elopt, run_study

from elopt.optimizer.cli.main import main

pytest.importorskip("matplotlib")

from elopt.optimizer.report import figure_files as ff  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SPINDLE = ROOT / "configs" / "spindle_runout_probe.toml"


def _png(path: Path) -> np.ndarray:
    import matplotlib.image

    return matplotlib.image.imread(str(path))  # (H, W, 4) floats in [0, 1]


def _has_colour(img: np.ndarray, hex_colour: str, tol: float = 0.02) -> int:
    """Pixels within ``tol`` of ``hex_colour`` in every channel."""
    rgb = np.array([int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    return int(np.count_nonzero(np.all(np.abs(img[..., :3] - rgb) <= tol, axis=-1)))


def _error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    return err[0]


@pytest.fixture(scope="module")
def solved_figure(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("solve_fig")
    assert main(["solve", str(SPINDLE), "--figure", str(tmp / "probe")]) == 0
    return tmp


def test_solve_figure_png_and_svg(solved_figure, capsys):
    png, svg = solved_figure / "probe.png", solved_figure / "probe.svg"
    assert png.stat().st_size > 20_000 and svg.stat().st_size > 20_000
    img = _png(png)
    # Width 10 in at PNG_DPI; the height follows the section's aspect (layout-constrained).
    assert img.shape[1] == round(10.0 * ff.PNG_DPI)
    assert 0.6 * img.shape[1] < img.shape[0] < 1.3 * img.shape[1]
    assert _has_colour(img, ff.PEAK_COLOUR) > 20, "the peak-field marker is drawn"
    for fill in ff.CONDUCTOR_COLOURS[:2]:  # sensor and guard, filled to scale
        assert _has_colour(img, fill) > 2000
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    text = svg.read_text()
    assert "peak |E|" in text and "sensor" in text and "guard" in text
    # An existing figure is kept unless --force.
    assert main(["solve", str(SPINDLE), "--figure", str(solved_figure / "probe.png")]) == 2
    assert "file exists; add --force" in _error_line(capsys)


def test_high_voltage_figure_carries_the_caution(tmp_path):
    out = tmp_path / "cell.svg"
    assert main(["solve", str(ROOT / "configs" / "hv_test_cell.toml"), "--figure", str(out)]) == 0
    assert "High voltage (30 kV): a design aid, not a safety rating" in out.read_text()


def test_figure_option_rules(tmp_path, capsys):
    assert main(["solve", str(SPINDLE), "--figure", str(tmp_path / "x.jpg")]) == 2
    assert "a figure ends in .png or .svg" in _error_line(capsys)
    assert main(["solve", str(SPINDLE), "--figure", str(tmp_path / "no" / "x.png")]) == 2
    assert "does not exist" in _error_line(capsys)


def test_without_matplotlib_a_figure_is_one_line_and_the_rest_works(tmp_path):
    """matplotlib made unimportable: --figure is refused before any solve, --help works."""
    code = (
        "import sys; sys.modules['matplotlib'] = None\n"
        "from elopt.optimizer.cli.main import main\n"
        "sys.exit(main(sys.argv[1:]))\n"
    )
    fig = subprocess.run(
        [sys.executable, "-c", code, "solve", str(SPINDLE), "--figure", str(tmp_path / "f")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert fig.returncode == 2
    assert fig.stderr.strip() == (
        "elopt: error: figures need matplotlib, which is not installed: pip install "
        "'elopt[figures]'"
    )
    assert fig.stdout == "", "refused before the solve"
    ok = subprocess.run(
        [sys.executable, "-c", code, "families", "guarded_disk"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert ok.returncode == 0 and "sensor_radius_mm" in ok.stdout


@pytest.mark.slow
def test_3d_figure(tmp_path):
    """A small guarded pad (coarse mesh): electrodes coloured by field, density on the target."""
    cfg = tmp_path / "pad.toml"
    cfg.write_text(
        'title = "small pad"\n[geometry]\nfamily = "guarded_pad"\npad_length_mm = 2.0\n'
        "pad_width_mm = 1.5\nguard_gap_mm = 0.2\nguard_width_mm = 0.8\nthickness_mm = 0.5\n"
        "fillet_mm = 0.1\nstandoff_mm = 0.5\ndrive_V = 10.0\n[solver]\nrel_accuracy = 0.05\n"
        "[evaluation]\nmesh_step_mm = 0.5\nmax_level = 1\n"
    )
    out = tmp_path / "pad.png"
    assert (
        main(["solve", str(cfg), "--figure", str(out), "--geometry", str(tmp_path / "pad.stl")])
        == 0
    )
    img = _png(out)
    assert img.shape[1] == round(3 * 5.2 * ff.PNG_DPI)  # three panels
    assert _has_colour(img, ff.PEAK_COLOUR) > 20
    trimesh = pytest.importorskip("trimesh")
    scene = trimesh.load(tmp_path / "pad.stl")
    meshes = list(scene.geometry.values()) if hasattr(scene, "geometry") else [scene]
    bounds = np.vstack([m.bounds for m in meshes])
    # In mm: the guard frame's outer edge is 2 / 2 + 0.2 + 0.8 = 2.0 mm from the centre in x.
    assert bounds[:, 0].min() == pytest.approx(-2.0, abs=1e-6)
    assert bounds[:, 2].min() == pytest.approx(0.5, abs=1e-6)  # the standoff


@pytest.fixture(scope="module")
def small_study(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("study_fig")
    _, out = run_study(tmp, trials=12)
    return tmp, out


def test_study_report_page_is_self_contained(small_study):
    tmp, study = small_study
    page = tmp / "report.html"
    proc = run_elopt("report", study, page, "--figures", tmp / "figs", cwd=tmp)
    assert proc.returncode == 0, proc.stderr
    text = page.read_text()
    assert text.startswith("<!DOCTYPE html>") and text.rstrip().endswith("</html>")
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', text)
    assert len(images) == 4
    for data in images:
        assert base64.b64decode(data)[:8] == b"\x89PNG\r\n\x1a\n"
    # Nothing is fetched: no link, script or source outside the page.
    assert not re.search(r'(src|href)="(?!data:)', text)
    assert "<script" not in text
    assert "Pareto front" in text and "Search space" in text
    for stem in ("front", "constraints", "history", "importance"):
        for suffix in (".png", ".svg"):
            assert (tmp / "figs" / f"{stem}{suffix}").stat().st_size > 5_000
    front = _png(tmp / "figs" / "front.png")
    assert _has_colour(front, ff.FRONT_COLOUR) > 50, "front trials drawn in the front colour"
    # The study's limit on peak field is a dashed line on the constraint figure.
    assert _has_colour(_png(tmp / "figs" / "constraints.png"), ff.LIMIT_COLOUR, tol=0.05) > 50
    again = run_elopt("report", study, page, cwd=tmp)
    assert again.returncode == 2 and "file exists; add --force" in again.stderr


def test_study_page_opens_in_headless_chromium(small_study):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed")
    tmp, study = small_study
    page = tmp / "page.html"
    assert run_elopt("report", study, page, "--force", cwd=tmp).returncode == 0
    shot = tmp / "page.png"
    with tempfile.TemporaryDirectory() as profile:
        proc = subprocess.run(
            [
                browser,
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--no-first-run",
                f"--user-data-dir={profile}",
                "--window-size=1100,1400",
                f"--screenshot={shot}",
                page.as_uri(),
            ],
            capture_output=True,
            text=True,
            timeout=120,
            env={**os.environ, "HOME": profile},
        )
    assert shot.exists(), proc.stderr[-2000:]
    img = _png(shot)
    assert img.shape[:2] == (1400, 1100)
    # The page drew its header band (the table head's ink colour #14213d) and a figure.
    assert _has_colour(img, "#14213d", tol=0.03) > 1000
    assert _has_colour(img, ff.FRONT_COLOUR, tol=0.03) > 20


def test_show_figure_and_solve_config(small_study, tmp_path, capsys):
    _, study = small_study
    from elopt.optimizer.store import read_study

    snap = read_study(study)
    i = int(np.flatnonzero(snap.state_names() == "complete")[0])
    cfg = tmp_path / "trial.toml"
    assert (
        main(
            [
                "show",
                str(study),
                str(i),
                "--solve-config",
                str(cfg),
                "--figure",
                str(tmp_path / "t.png"),
            ]
        )
        == 0
    )
    assert (tmp_path / "t.png").stat().st_size > 20_000
    assert f"elopt solve {cfg}" in capsys.readouterr().err
    assert main(["show", str(study), str(i), "--solve-config", str(cfg)]) == 2
    assert "file exists; add --force" in _error_line(capsys)
