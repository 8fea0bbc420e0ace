"""Study config texts for tests (fixture family and the real guarded_disk family)."""

from __future__ import annotations

from pathlib import Path

FIXTURE_FAMILY = "study_support.analytic_family:FAMILY"

FIXTURE_STUDY = """\
[study]
name = "fixture"
family = "study_support.analytic_family:FAMILY"
seed = 3

[fixed]
drive_V = 10.0
delay_s = {delay_s}

[search]
width_mm = {{ low = 0.5, high = 8.0 }}
gap_mm = {{ low = 0.1, high = 3.0, log = true }}

[objectives]
score_fF = "maximize"
size_mm = "minimize"

[constraints]
peak_surface_field_V_per_m = {{ max = 50000.0 }}

[sampler]
kind = "{sampler}"
nsga2_from_trial = {handover}
population_size = 8
startup_trials = 6

[budget]
trials = {trials}
"""

# The real family at a coarse requested accuracy: a cheap but genuine solve per trial.
GUARDED_DISK_STUDY = """\
[study]
name = "probe"
family = "guarded_disk"
seed = 5

[solver]
rel_accuracy = 0.05

[fixed]
thickness_mm = 1.0
standoff_mm = 0.5
drive_V = 10.0

[search]
sensor_radius_mm = {{ low = 0.5, high = 2.0 }}
guard_gap_mm = {{ low = 0.1, high = 0.5 }}
guard_width_mm = {{ low = 0.15, high = 1.5 }}
fillet_mm = {{ low = 0.05, high = 0.1 }}

[objectives]
sensitivity_fF_per_um = "maximize"
outer_radius_mm = "minimize"

[constraints]
peak_surface_field_V_per_m = {{ max = 5.0e4 }}

[budget]
trials = {trials}

[run]
workers = {workers}
"""


# The real family with the insulators searched: spacer, potting and the film on the target,
# at a coarse requested accuracy and no linearity sweep (one solve per trial).
INSULATED_PROBE_STUDY = """\
[study]
name = "insulated"
family = "guarded_disk"
seed = 7

[solver]
rel_accuracy = 0.05

[fixed]
sensor_radius_mm = 1.0
guard_gap_mm = 0.2
guard_width_mm = 0.6
thickness_mm = 0.6
fillet_mm = 0.05
standoff_mm = 0.5
drive_V = 5.0

[search]
spacer_eps_r = {{ low = 2.0, high = 4.0 }}
potting_depth_mm = {{ low = 0.2, high = 1.0 }}
potting_eps_r = {{ low = 2.5, high = 4.5 }}
target_layer_um = {{ low = 20.0, high = 100.0 }}
target_layer_eps_r = {{ low = 2.0, high = 8.0 }}

[objectives]
layer_thickness_sensitivity_fF_per_um = "maximize"
layer_eps_sensitivity_fF = "minimize"

[constraints]
peak_surface_field_V_per_m = {{ max = 1.0e6 }}

[evaluation]
linearity_points = 0

[budget]
trials = {trials}

[run]
workers = 1
"""


def insulated_probe_study(tmp: Path, *, trials: int = 4, name: str = "insulated.toml") -> Path:
    path = tmp / name
    path.write_text(INSULATED_PROBE_STUDY.format(trials=trials))
    return path


def fixture_study(
    tmp: Path,
    *,
    trials: int = 30,
    delay_s: float = 0.0,
    sampler: str = "tpe",
    handover: int = 100000,
    name: str = "fixture.toml",
) -> Path:
    path = tmp / name
    path.write_text(
        FIXTURE_STUDY.format(trials=trials, delay_s=delay_s, sampler=sampler, handover=handover)
    )
    return path


def guarded_disk_study(
    tmp: Path, *, trials: int = 12, workers: int = 2, name: str = "probe.toml"
) -> Path:
    path = tmp / name
    path.write_text(GUARDED_DISK_STUDY.format(trials=trials, workers=workers))
    return path
