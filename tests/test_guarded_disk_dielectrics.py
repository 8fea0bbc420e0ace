"""guarded_disk with insulators: spacer, sleeve and a layer on the target."""

from __future__ import annotations

import tomllib
from dataclasses import replace
from pathlib import Path

import pytest

from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.electrodes.pipeline import evaluate_design
from elopt.physics.errors import ElectrodeError

CONFIG = Path(__file__).resolve().parents[1] / "configs" / "spindle_runout_probe.toml"


def _params() -> GuardedDiskParams:
    geom = tomllib.loads(CONFIG.read_text())["geometry"]
    return GuardedDiskParams(**{k: v for k, v in geom.items() if k != "family"})


@pytest.mark.slow
def test_film_on_target_sensitivities_follow_the_series_gap():
    # Series formula of docs/references.md item 16: under the sensor the gap acts as
    # d_eff = (d - t) + t / eps_r, C ~ 1/d_eff. So dC/dt = (1 - 1/eps_r) (-dC/dd) and
    # dC/d(eps_r) = (t / eps_r^2) (-dC/dd); the fringe makes both approximate (2 %).
    fam = GuardedDisk()
    film = replace(_params(), target_layer_um=50.0, target_layer_eps_r=4.0)
    ev = evaluate_design(fam, film, options=fam.Options(linearity_points=0))
    s = ev.metrics["sensitivity_fF_per_um"]
    dt = ev.metrics["layer_thickness_sensitivity_fF_per_um"]
    de = ev.metrics["layer_eps_sensitivity_fF"]
    assert dt == pytest.approx((1 - 1 / 4.0) * s, rel=0.02)
    assert de == pytest.approx(50.0 / 4.0**2 * s, rel=0.02)
    errors = ev.extra["layer_derivative_rel_error_estimates"]
    assert max(errors.values()) < 1e-3


@pytest.mark.slow
def test_layer_onset_on_a_bare_target_matches_a_thin_layer():
    # A bare target reports the onset of a layer: dC/dt at t = 0 = (1 - 1/eps_r) (-dC/dd)
    # (the Hadamard energy of a thin sheet of normal field turning dielectric; common
    # practice, no source). A 2 um layer solved with the layered kernel must agree to 1 %.
    fam = GuardedDisk()
    opts = fam.Options(linearity_points=0)
    bare = evaluate_design(fam, _params(), options=opts).metrics
    thin = evaluate_design(
        fam, replace(_params(), target_layer_um=2.0, target_layer_eps_r=4.0), options=opts
    ).metrics
    key = "layer_thickness_sensitivity_fF_per_um"
    assert bare[key] == pytest.approx(0.75 * bare["sensitivity_fF_per_um"], rel=1e-12)
    assert thin[key] == pytest.approx(bare[key], rel=0.01)
    assert bare["layer_eps_sensitivity_fF"] == 0.0


def test_spacer_and_sleeve_build_and_leave_sense_capacitance_nearly_unchanged():
    # Sensor and guard at one potential: no field in the gap, so a spacer there barely moves
    # C_sense while the sensor-guard coupling (C_sg) grows (common practice, no source).
    fam = GuardedDisk()
    p = _params()
    opts = fam.Options(linearity_points=0)
    bare = evaluate_design(fam, p, options=opts).metrics
    ins = evaluate_design(
        fam, replace(p, spacer_eps_r=3.0, housing_width_mm=0.5), options=opts
    ).metrics
    assert ins["sense_capacitance_fF"] == pytest.approx(bare["sense_capacitance_fF"], rel=0.01)
    assert ins["sensor_guard_coupling_fF"] > 2.0 * bare["sensor_guard_coupling_fF"]


def test_layer_that_would_bury_the_probe_face_is_refused_in_one_line():
    fam = GuardedDisk()
    with pytest.raises(ElectrodeError) as exc:
        fam.build(replace(_params(), target_layer_um=600.0))
    msg = str(exc.value)
    assert "\n" not in msg and "target_layer_um = 600" in msg and "bury" in msg
