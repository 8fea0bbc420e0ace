"""Every metric an electrode family can report, declared once: name, unit, meaning, sense.

Families list the ones they measure; config checks, the study file, terminal tables and JSON
read names, units and meanings from here, so one name means one thing in every family.
Conventions: the *sensor* is the first conductor of a layout and the *guard* the second; the
target (or the mid-plane of a mirrored pair) is the plane z = 0.

:data:`STANDARD` metrics come from the solve itself and the pipeline fills them for every
family (:func:`elopt.physics.electrodes.pipeline.standard_metrics`).
"""

from __future__ import annotations

from elopt.physics.electrodes.base import MetricSpec

# ---------------------------------------------------------------- from the solve (standard)
PEAK_FIELD = MetricSpec(
    "peak_surface_field_V_per_m",
    "V/m",
    "largest surface field |sigma|/eps on any conductor at the drive",
    "minimize",
)
STANDARD = (PEAK_FIELD,)

# ---------------------------------------------------------------- where the peak sits
PEAK_R = MetricSpec("peak_field_r_mm", "mm", "radius of the peak field", "either")
PEAK_X = MetricSpec("peak_field_x_mm", "mm", "x of the peak field", "either")
PEAK_Y = MetricSpec("peak_field_y_mm", "mm", "y of the peak field", "either")
PEAK_Z = MetricSpec("peak_field_z_mm", "mm", "height of the peak field above z = 0", "either")
#: The peak field and where it sits, for profiles (r, z) and for 3-D layouts (x, y, z).
PEAK_PROFILE = (PEAK_FIELD, PEAK_R, PEAK_Z)
PEAK_3D = (PEAK_FIELD, PEAK_X, PEAK_Y, PEAK_Z)

# ---------------------------------------------------------------- capacitances
SENSE = MetricSpec(
    "sense_capacitance_fF", "fF", "sensor charge / sensor drive (guard driven with it)", "maximize"
)
TOTAL = MetricSpec("total_capacitance_fF", "fF", "sum of the capacitance matrix", "either")
COUPLING = MetricSpec(
    "sensor_guard_coupling_fF", "fF", "sensor-guard mutual capacitance", "minimize"
)
PAIR_CAPACITANCE = MetricSpec(
    "pair_capacitance_pF", "pF", "capacitance between the two electrodes", "either"
)
SPECIMEN_EPS_INFERRED = MetricSpec(
    "specimen_eps_r_inferred",
    "1",
    "specimen eps_r the guarded-electrode effective-area formula infers from the capacitance "
    "(no specimen: nan)",
    "either",
)
SPECIMEN_EPS_ERROR = MetricSpec(
    "specimen_eps_r_error_pct",
    "%",
    "error of that inferred eps_r against the specimen's own (no specimen: nan)",
    "either",
)

# ---------------------------------------------------------------- probe response
SENSITIVITY = MetricSpec(
    "sensitivity_fF_per_um", "fF/um", "-d(sense capacitance)/d(standoff)", "maximize"
)
TILT_SENSITIVITY = MetricSpec(
    "tilt_sensitivity_fF_per_mrad", "fF/mrad", "d(sense capacitance)/d(target tilt)", "either"
)
SPOT = MetricSpec(
    "spot_radius_90_mm", "mm", "target disk holding 90% of the sensitivity", "minimize"
)
LINEARITY = MetricSpec(
    "linearity_error_pct_fs", "%FS", "1/(sense capacitance) off its best line", "minimize"
)
EFFECTIVE_RADIUS = MetricSpec(
    "effective_radius_mm", "mm", "parallel-plate radius giving the sense capacitance", "either"
)
EFFECTIVE_AREA = MetricSpec(
    "effective_area_mm2", "mm^2", "parallel-plate area giving the sense capacitance", "either"
)

LAYER_THICKNESS_SENSITIVITY = MetricSpec(
    "layer_thickness_sensitivity_fF_per_um",
    "fF/um",
    "d(sense capacitance)/d(thickness of the layer on the target) (bare: layer onset)",
    "either",
)
LAYER_EPS_SENSITIVITY = MetricSpec(
    "layer_eps_sensitivity_fF",
    "fF",
    "d(sense capacitance)/d(eps_r of the layer on the target) (bare: 0)",
    "either",
)

# ---------------------------------------------------------------- touch keys (board_pad)
BASELINE = MetricSpec(
    "baseline_capacitance_pF",
    "pF",
    "sensor charge / sensor drive with no target, every other conductor grounded",
    "either",
)
TOUCH_SIGNAL = MetricSpec(
    "touch_signal_fF", "fF", "rise of that capacitance when the target arrives", "maximize"
)
SIGNAL_TO_BASELINE = MetricSpec(
    "signal_to_baseline_pct", "%", "touch signal / baseline capacitance", "maximize"
)
FILM_SHIFT = MetricSpec(
    "film_shift_fF",
    "fF",
    "rise of the baseline capacitance under a water film on the cover (no film: 0)",
    "minimize",
)
FALSE_TRIGGER_MARGIN = MetricSpec(
    "false_trigger_margin", "1", "touch signal / film shift (no film: nan)", "maximize"
)

# ---------------------------------------------------------------- size
OUTER_RADIUS = MetricSpec("outer_radius_mm", "mm", "outer radius of the guard", "minimize")
OUTER_SIZE = MetricSpec("outer_size_mm", "mm", "longer outer side of the guard", "minimize")
OVERALL_RADIUS = MetricSpec("overall_radius_mm", "mm", "outer radius of one electrode", "minimize")

# ---------------------------------------------------------------- uniform-field gaps
CENTRE_FIELD = MetricSpec("centre_field_V_per_m", "V/m", "|E| at the mid-plane centre", "either")
UNIFORM_RADIUS = MetricSpec(
    "uniform_field_radius_mm", "mm", "mid-plane radius of uniform |E|", "maximize"
)
UNIFORM_FRACTION = MetricSpec(
    "uniform_radius_fraction", "1", "uniform radius / overall radius", "maximize"
)
PEAK_TO_CENTRE = MetricSpec(
    "peak_to_centre_field_ratio", "1", "peak surface / centre field", "minimize"
)

# ---------------------------------------------------------------- planar electrodes (2-D)
PLANAR_CAPACITANCE = MetricSpec(
    "capacitance_pF", "pF", "driven-to-sense capacitance of the whole device", "maximize"
)
PLANAR_CAPACITANCE_PER_LENGTH = MetricSpec(
    "capacitance_per_length_pF_per_m",
    "pF/m",
    "the same per metre of electrode length",
    "either",
)
PLANAR_MUT_SENSITIVITY = MetricSpec(
    "mut_sensitivity_fF_per_eps",
    "fF",
    "dC / d eps_r of the medium above (material under test)",
    "maximize",
)
PLANAR_MUT_RELATIVE_SENSITIVITY = MetricSpec(
    "mut_relative_sensitivity", "1", "d ln C / d ln eps_r of the medium above", "maximize"
)
PLANAR_FILM_SENSITIVITY = MetricSpec(
    "film_sensitivity_fF_per_eps", "fF", "dC / d eps_r of the sensing film", "maximize"
)
PLANAR_FILM_RELATIVE_SENSITIVITY = MetricSpec(
    "film_relative_sensitivity", "1", "d ln C / d ln eps_r of the sensing film", "maximize"
)
PLANAR_FILM_THICKNESS_SENSITIVITY = MetricSpec(
    "film_thickness_sensitivity_fF_per_um", "fF/um", "dC / d(film thickness)", "either"
)
PLANAR_PENETRATION_DEPTH_50 = MetricSpec(
    "penetration_depth_50_um",
    "um",
    "height above the electrode tops holding 50% of the sensitivity above them",
    "either",
)
PLANAR_PENETRATION_DEPTH_90 = MetricSpec(
    "penetration_depth_90_um", "um", "the same for 90%", "either"
)
PLANAR_CELL_CONSTANT = MetricSpec(
    "cell_constant_per_m", "1/m", "eps0 / (dC/d eps_r of the medium above): C = eps/K", "either"
)
PLANAR_INTERIOR_CELL = MetricSpec(
    "interior_cell_pF_per_m",
    "pF/m",
    "charge per finger / volt between neighbours, periodic interior of a comb",
    "either",
)
PLANAR_END_CELL = MetricSpec(
    "end_cell_pF_per_m", "pF/m", "contribution of each outer cell of a comb per metre", "either"
)
PLANAR_FOOTPRINT = MetricSpec(
    "footprint_width_mm", "mm", "width of the electrode set across the strips", "minimize"
)

#: Every declared metric by name.
ALL: dict[str, MetricSpec] = {
    m.name: m for m in list(globals().values()) if isinstance(m, MetricSpec)
}
