"""The electrode families elopt knows, by name: the one place a family is registered."""

from __future__ import annotations

from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.electrodes.coplanar import Coplanar
from elopt.physics.electrodes.guarded_disk import GuardedDisk
from elopt.physics.electrodes.guarded_pad import GuardedPad
from elopt.physics.electrodes.interdigitated import Interdigitated
from elopt.physics.electrodes.mesh_file import MeshFile
from elopt.physics.electrodes.uniform_field import UniformField
from elopt.physics.errors import ElectrodeError

FAMILIES: dict[str, ElectrodeFamily] = {
    Coplanar.name: Coplanar(),
    GuardedDisk.name: GuardedDisk(),
    GuardedPad.name: GuardedPad(),
    Interdigitated.name: Interdigitated(),
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
