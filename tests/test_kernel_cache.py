"""The compiled kernels' disk cache is dropped when any kernel source changes (numba's own check
looks only at the defining file; physics/kernel_cache.py says why)."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

from elopt.physics import kernel_cache

NUMBA_IMPORT = re.compile(r"^(import numba|from numba import)", re.MULTILINE)


def test_the_list_holds_every_kernel_module_and_each_checks_the_stamp():
    package = kernel_cache.PACKAGE_DIR
    with_numba = sorted(
        str(p.relative_to(package))
        for p in package.rglob("*.py")
        if "__pycache__" not in p.parts and NUMBA_IMPORT.search(p.read_text())
    )
    assert sorted(kernel_cache.KERNEL_MODULES) == with_numba
    for rel in with_numba:
        assert re.search(r"^drop_stale_kernel_caches\(\)$", (package / rel).read_text(), re.M), rel


def _copy_sources(tmp_path: Path) -> Path:
    for rel in kernel_cache.KERNEL_MODULES:
        dest = tmp_path / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(kernel_cache.PACKAGE_DIR / rel, dest)
    return tmp_path


def _fake_caches(package: Path) -> list[Path]:
    """numba's in-tree cache files (index .nbi, data .nbc) of two kernels, as numba names them."""
    made = []
    for rel, kernel in (
        ("bem_axi/near_sums.py", "_potential_params-190"),
        ("bem3d/checks.py", "f-3"),
    ):
        cache = (package / rel).parent / "__pycache__"
        cache.mkdir(exist_ok=True)
        stem = Path(rel).stem
        for name in (f"{stem}.{kernel}.py311.nbi", f"{stem}.{kernel}.py311.1.nbc"):
            (cache / name).write_bytes(b"compiled")
            made.append(cache / name)
    return made


def test_an_edit_of_one_kernel_file_drops_the_caches_of_the_modules_that_inline_it(tmp_path):
    package = _copy_sources(tmp_path)
    other = package / "bem_axi" / "__pycache__" / "near_sums.cpython-311.pyc"
    other.parent.mkdir(exist_ok=True)
    other.write_bytes(b"bytecode")
    cached = _fake_caches(package)
    assert kernel_cache.drop_stale_kernel_caches(package, force=True)  # no stamp yet
    assert not any(p.exists() for p in cached) and other.exists()
    stamp = package / "__pycache__" / kernel_cache.STAMP_NAME
    assert stamp.read_text() == kernel_cache.kernel_sources_digest(package)

    cached = _fake_caches(package)
    assert not kernel_cache.drop_stale_kernel_caches(package, force=True)  # sources unchanged
    assert all(p.exists() for p in cached)

    ring_sums = package / "bem_axi" / "ring_sums.py"  # near_sums inlines its kernels
    ring_sums.write_text(ring_sums.read_text() + "\n# edited\n")
    assert kernel_cache.drop_stale_kernel_caches(package, force=True)
    assert not any(p.exists() for p in cached)


def test_the_check_runs_once_per_process(tmp_path):
    package = _copy_sources(tmp_path)
    kernel_cache.drop_stale_kernel_caches(package, force=True)
    (package / "bem3d" / "checks.py").write_text("# changed\n")
    cached = _fake_caches(package)
    assert not kernel_cache.drop_stale_kernel_caches(package)  # already checked
    assert all(p.exists() for p in cached)
