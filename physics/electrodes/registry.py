"""The electrode families elopt knows, by name: the one place a family is registered."""

from __future__ import annotations

from physics.electrodes.base import ElectrodeFamily
from physics.electrodes.guarded_disk import GuardedDisk
from physics.electrodes.guarded_pad import GuardedPad
from physics.electrodes.mesh_file import MeshFile
from physics.electrodes.uniform_field import UniformField
from physics.errors import ElectrodeError

FAMILIES: dict[str, ElectrodeFamily] = {
    GuardedDisk.name: GuardedDisk(),
    GuardedPad.name: GuardedPad(),
    MeshFile.name: MeshFile(),
    UniformField.name: UniformField(),
}


def get_family(name: str) -> ElectrodeFamily:
    """The registered family called ``name``; ElectrodeError listing the known names."""
    try:
        return FAMILIES[name]
    except KeyError:
        known = ", ".join(sorted(FAMILIES))
        raise ElectrodeError(
            f"unknown electrode family {name!r}; known families: {known}"
        ) from None
