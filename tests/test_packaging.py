"""The distribution installs one import package, ``elopt``, and importing it changes nothing."""

from __future__ import annotations

import subprocess
import sys
import venv
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_fresh_install_adds_only_the_elopt_package(tmp_path: Path) -> None:
    """A regular (non-editable) install into a new venv: no top-level `physics`/`optimizer`.

    Unrelated packages with exactly those names exist on the public index; elopt must not
    shadow them (common practice, no source: one distribution, one top-level import name).
    """
    env_dir = tmp_path / "venv"
    venv.EnvBuilder(system_site_packages=True, with_pip=False).create(env_dir)
    python = env_dir / "bin" / "python"
    site = subprocess.run(
        [str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "install",
            "-q",
            "--no-deps",
            "--no-build-isolation",
            "--target",
            site,
            str(ROOT),
        ],
        check=True,
        capture_output=True,
        cwd=tmp_path,
    )
    top = sorted(
        p.name for p in Path(site).iterdir() if not p.name.endswith((".dist-info", ".pth"))
    )
    assert "elopt" in top
    assert "physics" not in top and "optimizer" not in top, top
    probe = (
        "import importlib.util as u, sys, os\n"
        "import elopt.physics.bem_axi, elopt.optimizer.cli.main\n"
        "assert u.find_spec('physics') is None and u.find_spec('optimizer') is None\n"
        "assert elopt.physics.bem_axi.__file__.startswith(sys.argv[1])\n"
        "print(os.environ.get('OPENBLAS_NUM_THREADS'))\n"
    )
    out = subprocess.run(
        [str(python), "-c", probe, site],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env={"PATH": "/usr/bin:/bin"},
    )
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "None", "importing the library must not set BLAS threads"


def test_import_has_no_process_wide_side_effects() -> None:
    """Importing the physics and optimizer layers sets no thread or logging state."""
    probe = (
        "import os, logging\n"
        "import elopt.physics, elopt.physics.bem_axi, elopt.optimizer.study.search\n"
        "assert 'OPENBLAS_NUM_THREADS' not in os.environ, 'BLAS limit set on import'\n"
        "assert logging.getLogger('optuna').level in (logging.NOTSET, logging.INFO), "
        "'optuna verbosity changed on import'\n"
    )
    env = {"PATH": "/usr/bin:/bin", "HOME": str(ROOT)}
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=env)
    assert out.returncode == 0, out.stderr
