"""Metrics shared by the guarded probe families (disk and pad): declared once, so every
family, config check, study file and table reads the same names, units and senses."""

from __future__ import annotations

from elopt.physics.electrodes.base import MetricSpec

SENSE = MetricSpec("sense_capacitance_fF", "fF", "Q_sensor / V (driven guard)", "maximize")
TOTAL = MetricSpec("total_capacitance_fF", "fF", "(Q_sensor + Q_guard) / V", "either")
COUPLING = MetricSpec(
    "sensor_guard_coupling_fF", "fF", "sensor-guard mutual capacitance", "minimize"
)
PEAK_FIELD = MetricSpec(
    "peak_surface_field_V_per_m", "V/m", "largest surface field at drive", "minimize"
)
PEAK_Z = MetricSpec("peak_field_z_mm", "mm", "height of the peak field", "either")
SENSITIVITY = MetricSpec("sensitivity_fF_per_um", "fF/um", "-dC_sense / d(standoff)", "maximize")
SPOT = MetricSpec("spot_radius_90_mm", "mm", "target disk with 90% of it", "minimize")
EFFECTIVE_RADIUS = MetricSpec("effective_radius_mm", "mm", "plate radius giving C_sense", "either")
