"""Run ``elopt`` as a user would: a real process, output captured (test helper)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

TESTS_DIR = Path(__file__).resolve().parent.parent
ENV = {
    **os.environ,
    "PYTHONPATH": os.pathsep.join([str(TESTS_DIR), os.environ.get("PYTHONPATH", "")]),
    "COLUMNS": "160",
}


def elopt_cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "elopt.optimizer.cli", *map(str, args)]


def start_elopt(*args: str, cwd: Path, **kw) -> subprocess.Popen:
    return subprocess.Popen(
        elopt_cmd(*args),
        cwd=cwd,
        env=ENV,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **kw,
    )


def run_elopt(*args: str, cwd: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run(
        elopt_cmd(*args), cwd=cwd, env=ENV, capture_output=True, text=True, timeout=timeout
    )


def reported_complete(stdout: str) -> set[int]:
    """Trial numbers a plain-progress run (--log-every 0) reported as stored complete."""
    out = set()
    for line in stdout.splitlines():
        if line.startswith("trial ") and " stored (complete)" in line:
            out.add(int(line.split()[1]))
    return out


def run_study(tmp: Path, *, trials: int) -> tuple[Path, Path]:
    """A small real guarded-disk study run as a user would; (config, study file)."""
    from study_support.configs import guarded_disk_study

    cfg = guarded_disk_study(tmp, trials=trials)
    out = tmp / "probe.h5"
    proc = run_elopt("run", cfg, "--out", out, cwd=tmp, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return cfg, out
