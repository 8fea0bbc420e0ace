"""Every guarded_disk design the family's rules accept builds a valid cross-section.

Fillets at and just inside their limits (half the thickness, half the guard width, the sensor
radius) leave straights far shorter than the probe; spacer, sleeve and potting rest on the
walls between the fillets. A design is either refused by ``validate`` in one line naming the
parameters, or it builds, and its regions pass the dielectric solver's geometry checks.
"""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from elopt.physics.bem_axi.dielectric_solve import dielectric_model
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.errors import ElectrodeError

FAMILY = GuardedDisk()
#: Distances just inside a limit: exactly at it, then 1e-15 .. 1e-3 below (relative).
SHAVES = (0.0, 1e-15, 1e-13, 1e-11, 1e-10, 1e-9, 3e-9, 1e-8, 1e-7, 1e-6, 1e-4, 1e-3)


@st.composite
def designs(draw) -> GuardedDiskParams:
    t = draw(st.sampled_from([1e-3, 0.3, 1.0, 1.5, 7.77]))
    a = draw(st.sampled_from([t / 2, t, 2.5, 3 * t]))
    w = draw(st.sampled_from([t, 2.0, t / 3]))
    limit = draw(st.sampled_from(["thickness", "width", "radius", "free"]))
    shave = draw(st.sampled_from(SHAVES))
    top = {"thickness": t / 2, "width": w / 2, "radius": a, "free": 0.37 * t}[limit]
    fillet = min(top * (1 - shave), t / 2, w / 2, a)
    return GuardedDiskParams(
        sensor_radius_mm=a,
        guard_gap_mm=draw(st.sampled_from([0.05 * t, 0.25, 3 * t])),
        guard_width_mm=w,
        thickness_mm=t,
        fillet_mm=fillet,
        standoff_mm=max(0.8, t / 100),
        drive_V=5.0,
        spacer_eps_r=draw(st.sampled_from([1.0, 2.1])),
        housing_width_mm=draw(st.sampled_from([0.0, 0.5 * t])),
        potting_depth_mm=draw(st.sampled_from([0.0, 2.0 * t])),
    )


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(designs())
def test_accepted_designs_build_and_their_regions_are_valid(params):
    try:
        FAMILY.validate(params)
    except ElectrodeError as exc:
        msg = str(exc)
        assert msg.startswith("guarded_disk: ") and "\n" not in msg
        assert "no valid cross-section" not in msg
        return
    layout = FAMILY.build(params)
    if layout.regions:
        dielectric_model(layout)
