"""A small real study searching the insulators of guarded_disk: spacer, potting, target film.

Run as a user would (a real ``elopt run`` process writing the HDF5 study), then read back: every
finished trial lies inside the searched ranges with finite film sensitivities, and the front
reads. Checks of the stored numbers against a direct evaluation keep the study honest: the
value a trial stored is the value its design gives.
"""

from __future__ import annotations

import numpy as np
import pytest
from study_support.cli import run_elopt
from study_support.configs import insulated_probe_study

from elopt.optimizer.cli.main import main
from elopt.optimizer.store import read_study
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskOptions
from elopt.physics.electrodes.pipeline import evaluate_design

SEARCHED = {
    "spacer_eps_r": (2.0, 4.0),
    "potting_depth_mm": (0.2, 1.0),
    "potting_eps_r": (2.5, 4.5),
    "target_layer_um": (20.0, 100.0),
    "target_layer_eps_r": (2.0, 8.0),
}


@pytest.mark.slow
def test_study_over_spacer_potting_and_film_runs_stores_and_reads(tmp_path, capsys):
    cfg = insulated_probe_study(tmp_path, trials=3)
    out = tmp_path / "insulated.h5"
    proc = run_elopt("run", cfg, "--out", out, cwd=tmp_path, timeout=900)
    assert proc.returncode == 0, proc.stderr
    assert "trial budget reached; 3 finished trials" in proc.stdout
    snap = read_study(out)
    done = np.flatnonzero(snap.state_names() == "complete")
    assert len(done) == 3
    names = list(snap.header.parameter_names)
    params = snap.columns["params"]
    for name, (low, high) in SEARCHED.items():
        values = params[done, names.index(name)]
        assert np.all((values >= low) & (values <= high)), (name, values)
        assert np.ptp(values) > 0, name  # the sampler moved it
    metric_names = list(snap.header.metric_names)
    thick = snap.columns["metrics"][
        done, metric_names.index("layer_thickness_sensitivity_fF_per_um")
    ]
    assert np.all(np.isfinite(thick)) and np.all(thick > 0)
    # The first trial's stored signal is what its design gives when evaluated directly.
    family = GuardedDisk()
    i = int(done[0])
    design = family.Params(**{n: float(params[i, k]) for k, n in enumerate(names)})
    direct = evaluate_design(
        family, design, rel_accuracy=0.05, options=GuardedDiskOptions(linearity_points=0)
    )
    assert direct.metrics["layer_thickness_sensitivity_fF_per_um"] == pytest.approx(
        thick[0], rel=1e-9
    )
    assert main(["front", str(out)]) == 0
    text = capsys.readouterr().out
    assert "feasible non-dominated trials" in text
