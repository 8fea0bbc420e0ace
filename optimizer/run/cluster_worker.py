"""What runs on a Dask worker for elopt: the trial task, the version probe, the worker setup.

Kept apart from the coordinator side (:mod:`elopt.optimizer.run.dask_pool`) so that a worker imports
nothing but this module, :mod:`elopt.optimizer.study.trial_eval` and the electrode family. Every function
here returns plain picklable data and never raises for a bad design.

Also a Dask preload module (``dask worker ADDR --preload elopt.optimizer.run.cluster_worker``): its
:func:`dask_setup` makes the worker ignore SIGINT, since Ctrl-C belongs to the coordinator.
"""

from __future__ import annotations

import ctypes
import importlib
import os
import signal
import sys
import threading
from dataclasses import dataclass
from typing import Any

from elopt.optimizer.study import TrialOutcome, TrialTask, evaluate_task
from elopt.physics.threads import limit_blas_threads

#: Distributions whose versions must agree between the coordinator and every worker, by the
#: module that reports them: a different solver or numerical stack gives different numbers
#: for the same trial, and a different distributed cannot talk to the scheduler reliably.
COMPARED_MODULES: dict[str, str] = {
    "elopt": "elopt.optimizer",
    "numpy": "numpy",
    "scipy": "scipy",
    "numba": "numba",
    "distributed": "distributed",
}

_LOCAL_VERSIONS: dict[str, str | None] = {}
_MALLOC_RELAXED: list[bool] = []
# glibc mallopt parameters (malloc.h)
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3


@dataclass
class WorkerReply:
    """A worker's answer to one task: the outcome, or why this worker refused to solve."""

    outcome: TrialOutcome | None
    refusal: str | None
    worker_address: str


def local_versions() -> dict[str, str | None]:
    """``{"python": "3.11", "elopt": "0.1.0", "numpy": ...}`` of this process (None: missing)."""
    if not _LOCAL_VERSIONS:
        found: dict[str, str | None] = {"python": "{}.{}".format(*sys.version_info[:2])}
        for name, module in COMPARED_MODULES.items():
            try:
                found[name] = str(importlib.import_module(module).__version__)
            except Exception:  # a missing or broken package is reported, not raised
                found[name] = None
        _LOCAL_VERSIONS.update(found)
    return dict(_LOCAL_VERSIONS)


def version_differences(expected: dict[str, str | None], found: dict[str, str | None]) -> list[str]:
    """One phrase per package whose version on a worker differs from the coordinator's."""
    return [
        f"{name} {found.get(name) or 'missing'} (coordinator: {want or 'missing'})"
        for name, want in expected.items()
        if found.get(name) != want
    ]


def probe_worker(family_ref: str | None = None) -> dict[str, Any]:
    """Versions of this worker and, with ``family_ref``, whether the family loads here."""
    report: dict[str, Any] = {"versions": local_versions(), "family_error": None}
    if family_ref is not None:
        from elopt.optimizer.config import resolve_family

        try:
            resolve_family(family_ref)
        except Exception as exc:  # reported to the coordinator, which refuses to start
            report["family_error"] = str(exc)
    return report


def run_trial(task_fields: dict[str, Any], expected: dict[str, str | None]) -> WorkerReply:
    """Solve one trial (``task_fields``: a :class:`TrialTask` as a dict) unless this worker's
    versions differ from the coordinator's."""
    task = TrialTask(**task_fields)
    relax_malloc_trim()
    address = worker_address()
    diffs = version_differences(expected, local_versions())
    if diffs:
        return WorkerReply(None, f"Dask worker {address} has {', '.join(diffs)}", address)
    return WorkerReply(evaluate_task(task), None, address)


def relax_malloc_trim() -> None:
    """Undo Dask's ``MALLOC_TRIM_THRESHOLD_=65536`` for this process (glibc only, once).

    A Dask nanny starts its worker with that setting, so glibc hands every freed block above
    64 KiB back to the OS and the next allocation faults its pages in again. A solve allocates
    and frees its matrices many times: measured here, a guarded_disk trial took ~20 % longer in
    such a process. Larger fixed thresholds (64 MiB mmap, 256 MiB trim) restore the speed.
    """
    if _MALLOC_RELAXED or "MALLOC_TRIM_THRESHOLD_" not in os.environ:
        return
    _MALLOC_RELAXED.append(True)
    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(_M_MMAP_THRESHOLD, 64 << 20)
        libc.mallopt(_M_TRIM_THRESHOLD, 256 << 20)
    except (OSError, AttributeError):  # not glibc: nothing to undo
        pass


def make_worker_entry() -> Any:
    """The function Dask runs for each trial, pickled by value (it is a closure): a worker
    without elopt can still run it and say so, where a task that refers to elopt's modules
    would fail to unpickle and take the worker's connection down with it. Its argument is a
    plain dict for the same reason."""

    def elopt_trial(task_fields: dict, expected: dict) -> Any:
        try:
            from elopt.optimizer.run.cluster_worker import run_trial as run
        except Exception as exc:
            try:
                from distributed import get_worker

                where = get_worker().address
            except Exception:
                where = "?"
            return {"worker": where, "error": f"{type(exc).__name__}: {exc}"}
        return run(task_fields, expected)

    return elopt_trial


def worker_address() -> str:
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except (ImportError, ValueError):
        return "(not a Dask worker)"


def dask_setup(worker: Any) -> None:
    """Dask preload hook: one BLAS thread, and SIGINT ignored (the coordinator owns Ctrl-C)."""
    limit_blas_threads()
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.SIG_IGN)
