"""Compiled kernels' on-disk cache kept in step with every kernel source.

numba's ``cache=True`` checks only the file that defines a kernel; a kernel that inlines
another module's kernel (the near pass calls ``ring_sums.subrule_point``) keeps its cached
machine code when only that other file changes. Measured 3 Dec 2026: after an edit of
``ring_sums.py`` alone, the near pass ran the old inlined code from ``__pycache__`` (the same
values, 2.5 times slower); a change of meaning would have run wrong code. Every kernel module
calls :func:`drop_stale_kernel_caches` before defining its kernels: when the digest of all
kernel sources differs from the one stamped beside the caches, the cached kernels of every
kernel module are deleted and compile afresh on first use.

Covers the caches numba keeps beside the sources (``__pycache__``, its choice wherever the
package folder is writable); a cache elsewhere (``NUMBA_CACHE_DIR``, numba's per-user folder
for a read-only install) is the user's to clear.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

#: Every module of ``elopt.physics`` that defines numba kernels, relative to the package
#: folder (tests/test_kernel_cache.py checks the list against the sources).
KERNEL_MODULES = (
    "bem2d/operators.py",
    "bem2d/periodic.py",
    "bem2d/remainder.py",
    "bem3d/checks.py",
    "bem3d/hmatrix.py",
    "bem3d/hmatrix_layered.py",
    "bem3d/layer_tables.py",
    "bem3d/layered_green.py",
    "bem3d/near_pairs.py",
    "bem3d/panel_integrals.py",
    "bem_axi/grading_kernels.py",
    "bem_axi/mesh_kernels.py",
    "bem_axi/near_sums.py",
    "bem_axi/ring_sums.py",
    "geometry_kernels.py",
)
PACKAGE_DIR = Path(__file__).resolve().parent
STAMP_NAME = "kernel-sources.sha256"

_checked = False


def kernel_sources_digest(package_dir: Path = PACKAGE_DIR) -> str:
    """SHA-256 (hex) of the kernel modules' sources, in :data:`KERNEL_MODULES` order."""
    h = hashlib.sha256()
    for rel in KERNEL_MODULES:
        h.update(rel.encode())
        h.update((package_dir / rel).read_bytes())
    return h.hexdigest()


def drop_stale_kernel_caches(package_dir: Path = PACKAGE_DIR, force: bool = False) -> bool:
    """Delete the kernel modules' cached kernels if the sources changed since the stamp
    (``package_dir/__pycache__/kernel-sources.sha256``); once per process unless ``force``.
    Returns True when caches were dropped. A folder that cannot be written is left alone."""
    global _checked
    if _checked and not force:
        return False
    _checked = True
    digest = kernel_sources_digest(package_dir)
    stamp = package_dir / "__pycache__" / STAMP_NAME
    try:
        if stamp.read_text() == digest:
            return False
    except OSError:
        pass
    try:
        for rel in KERNEL_MODULES:
            source = package_dir / rel
            for cached in (source.parent / "__pycache__").glob(f"{source.stem}.*.nb[ic]"):
                cached.unlink(missing_ok=True)
        stamp.parent.mkdir(exist_ok=True)
        part = stamp.with_name(f"{STAMP_NAME}.{os.getpid()}")
        part.write_text(digest)
        os.replace(part, stamp)
    except OSError:
        return False
    return True
