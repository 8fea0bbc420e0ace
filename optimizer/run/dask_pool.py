"""Trials on a Dask distributed cluster: :class:`DaskExecutor` behind the Executor contract.

``--cluster tcp://HOST:PORT`` connects to a running Dask scheduler; ``--cluster local:N``
starts a scheduler and N single-threaded worker processes on this machine (loopback only).
The coordinator stays the only writer of the study file: workers get a :class:`TrialTask` (as
a plain dict) and send back plain data (:mod:`elopt.optimizer.run.cluster_worker`).

Failure handling, in the terms of the Executor contract:

- A worker that dies while holding a trial: the scheduler runs the trial again on another
  worker (elopt sets the scheduler's ``allowed-failures`` to 1); a second loss gives Dask's
  ``KilledWorker`` and the trial comes back failed with that reason.
- Each submission has its own key (``pure=False``), and an outcome is handed back once per
  key however often the trial ran.
- The scheduler lost, or a worker that cannot run elopt's task (elopt missing, versions other
  than the coordinator's): the executor calls ``on_lost(reason)`` and delivers nothing more;
  the coordinator stops and :meth:`cancel_all` returns the tasks still out. Without an
  ``on_lost``, :meth:`poll` raises :class:`ClusterError` once nothing is left to deliver.
"""

from __future__ import annotations

import dataclasses
import logging
import re
import threading
import time
import uuid
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from elopt.optimizer.run.cluster_worker import (
    WorkerReply,
    local_versions,
    make_worker_entry,
    probe_worker,
    version_differences,
)
from elopt.optimizer.run.local_pool import Executor
from elopt.optimizer.study import TrialOutcome, TrialTask
from elopt.physics.errors import ElOptError

INSTALL_HINT = "pip install 'elopt[cluster]' (or pip install 'dask[distributed]>=2024.1')"
ADDRESS_RULE = (
    "give tcp://HOST:PORT (or tls://HOST:PORT) of a running Dask scheduler, or local:N for N "
    "worker processes on this machine (1 <= N <= 256)"
)
_ADDRESS = re.compile(r"^(tcp|tls)://(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.-]+):(\d{1,5})$")
_LOCAL = re.compile(r"^local:(\d+)$")
#: Scheduler-side retries after a worker dies holding a trial: one, then the trial fails.
ALLOWED_FAILURES = 1
#: For ``local:N``: one retry, and each single-threaded worker holds only the trial it solves
#: (the rest wait at the scheduler), so a dying worker takes no queued trial's retry with it.
#: Worker processes get one BLAS thread each, and not Dask's MALLOC_TRIM_THRESHOLD_ (see
#: :func:`elopt.optimizer.run.cluster_worker.relax_malloc_trim`).
LOCAL_SCHEDULER_CONFIG = {
    "distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
    "distributed.scheduler.worker-saturation": 1.0,
    "distributed.nanny.pre-spawn-environ": {
        "OMP_NUM_THREADS": 1,
        "MKL_NUM_THREADS": 1,
        "OPENBLAS_NUM_THREADS": 1,
        "NUMBA_NUM_THREADS": 1,
    },
}


_ENTRY = make_worker_entry()


class ClusterError(ElOptError, RuntimeError):
    """The Dask cluster cannot be reached, cannot run elopt's tasks, or was lost."""


@dataclass(frozen=True)
class ClusterAddress:
    """A checked ``--cluster`` value: a scheduler address or ``local:N``."""

    text: str
    n_local: int | None  # N for local:N, None for a scheduler address


def parse_cluster_address(text: str, *, key: str = "--cluster") -> ClusterAddress:
    m = _LOCAL.match(text)
    if m:
        n = int(m.group(1))
        if not 1 <= n <= 256:
            raise ClusterError(f"{key} {text}: N = {n} is outside the allowed range [1, 256]")
        return ClusterAddress(text, n)
    m = _ADDRESS.match(text)
    if not m or not 1 <= int(m.group(3)) <= 65535:
        raise ClusterError(f"{key} {text!r}: not a cluster address; {ADDRESS_RULE}")
    return ClusterAddress(text, None)


def import_distributed() -> Any:
    """The ``distributed`` module, or a one-line ClusterError saying how to install it."""
    try:
        import distributed
    except ImportError:
        raise ClusterError(
            f"--cluster needs Dask distributed, which is not installed: {INSTALL_HINT}"
        ) from None
    return distributed


def connect_cluster(
    text: str,
    *,
    family_ref: str | None = None,
    connect_timeout_s: float = 5.0,
    log: Callable[[str], None] | None = None,
    on_lost: Callable[[str], None] | None = None,
) -> DaskExecutor:
    """Connect to (or, for ``local:N``, start) a Dask cluster and check it can run elopt.

    Refuses with a one-line :class:`ClusterError` when no scheduler answers within
    ``connect_timeout_s`` seconds, when a worker's elopt/numpy/scipy/numba/distributed/Python
    versions differ from this process's, or when a worker cannot load ``family_ref``.
    """
    address = parse_cluster_address(text)
    distributed = import_distributed()
    import dask

    _quiet_dask_logging()
    say = log or (lambda _line: None)
    cluster = None
    client = None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # Dask's own version warnings: we check below
            if address.n_local is not None:
                with dask.config.set(LOCAL_SCHEDULER_CONFIG):
                    cluster = distributed.LocalCluster(
                        n_workers=address.n_local,
                        threads_per_worker=1,
                        processes=True,
                        host="127.0.0.1",
                        dashboard_address=None,
                        silence_logs=logging.ERROR,
                        preload=["elopt.optimizer.run.cluster_worker"],
                    )
                client = distributed.Client(cluster, set_as_default=False)
            else:
                try:
                    client = distributed.Client(
                        text, timeout=connect_timeout_s, set_as_default=False
                    )
                except (OSError, TimeoutError) as exc:
                    raise ClusterError(
                        f"--cluster {text}: no Dask scheduler answered within "
                        f"{connect_timeout_s:g} s ({_first_line(exc)}); start one with "
                        "`dask scheduler` and give the address it prints"
                    ) from None
        expected = local_versions()
        _check_workers(client, text, expected, family_ref)
        retries_note = _one_retry(client)
        n = sum(client.nthreads().values())
        kind = f"{address.n_local} local worker processes" if cluster else f"scheduler {text}"
        waiting = "" if n else " (none yet: trials wait until `dask worker` processes join)"
        threads = f"{n} worker thread{'s' if n != 1 else ''}"
        say(f"elopt: Dask cluster: {kind}, {threads}{waiting}{retries_note}")
        return DaskExecutor(
            client, address=text, expected=expected, cluster=cluster, log=log, on_lost=on_lost
        )
    except BaseException:
        _close_quietly(client, cluster)
        raise


def _check_workers(
    client: Any, text: str, expected: dict[str, str | None], family_ref: str | None
) -> None:
    replies = client.run(probe_worker, family_ref, on_error="return")
    problems = []
    for addr, reply in sorted(replies.items()):
        if isinstance(reply, BaseException):
            problems.append(f"worker {addr} cannot run elopt ({_first_line(reply)})")
            continue
        diffs = version_differences(expected, reply["versions"])
        if diffs:
            problems.append(f"worker {addr} has {', '.join(diffs)}")
        elif reply["family_error"]:
            problems.append(f"worker {addr} cannot load the family: {reply['family_error']}")
    if problems:
        shown = "; ".join(problems[:2])
        more = f"; and {len(problems) - 2} more workers" if len(problems) > 2 else ""
        raise ClusterError(
            f"--cluster {text}: {shown}{more}; install elopt {expected['elopt']} with the same "
            "numpy, scipy, numba and distributed as this coordinator on every worker "
            "(pip install 'elopt[cluster]')"
        )


def _one_retry(client: Any) -> str:
    """Set the scheduler to retry a trial once after losing its worker; a note if changed."""

    def set_allowed_failures(dask_scheduler: Any, value: int = ALLOWED_FAILURES) -> int:
        before = dask_scheduler.allowed_failures
        dask_scheduler.allowed_failures = value
        return before

    try:
        before = client.run_on_scheduler(set_allowed_failures)
    except Exception as exc:  # a scheduler that refuses pickled functions keeps its setting
        return f"; the scheduler's retry setting was left as it is ({_first_line(exc)})"
    if before == ALLOWED_FAILURES:
        return ""
    return f"; scheduler allowed-failures set from {before} to {ALLOWED_FAILURES} (one retry)"


def _quiet_dask_logging() -> None:
    # The coordinator turns every cluster event it cares about into its own one-line message;
    # Dask's reconnect tracebacks on stderr would bury them.
    names = [n for n in logging.root.manager.loggerDict if n.startswith("distributed.")]
    for name in ("distributed", "tornado", *names):
        logging.getLogger(name).setLevel(logging.CRITICAL)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0]


def _close_quietly(client: Any, cluster: Any) -> None:
    for thing in (client, cluster):
        if thing is None:
            continue
        try:
            thing.close(timeout=10)
        except Exception:  # closing after a loss may fail; there is nothing left to save
            pass


class DaskExecutor(Executor):
    """Trial tasks on the workers of a Dask ``client``; ``n_workers`` is the cluster's thread
    count (refreshed while polling, at least 1 so the coordinator keeps tasks queued while
    the cluster has none). A cluster that had workers and then none for ``no_worker_limit_s``
    seconds counts as lost. Build it with :func:`connect_cluster`."""

    def __init__(
        self,
        client: Any,
        *,
        address: str,
        expected: dict[str, str | None],
        cluster: Any = None,
        log: Callable[[str], None] | None = None,
        on_lost: Callable[[str], None] | None = None,
        refresh_s: float = 1.0,
        no_worker_limit_s: float = 600.0,
        fetch_timeout_s: float = 30.0,
    ) -> None:
        self._distributed = import_distributed()
        self._client = client
        self._cluster = cluster
        self.address = address
        self._expected = expected
        self._log = log or (lambda _line: None)
        self.on_lost = on_lost
        self.lost_reason: str | None = None
        self._token = uuid.uuid4().hex[:10]
        self._serial = 0
        self._out: dict[str, tuple[Any, TrialTask]] = {}
        self._unsent: list[TrialTask] = []
        self._worker_index: dict[str, int] = {}
        self._workers: dict[str, int] = {}
        self._refresh_s = refresh_s
        self._refreshed_at = -float("inf")
        self._no_worker_limit_s = no_worker_limit_s
        self._no_worker_since: float | None = None
        self._had_workers = False
        self._fetch_timeout_s = fetch_timeout_s
        self._wakeup = threading.Event()
        self._closed = False
        self._refresh_workers(force=True)

    @property
    def n_workers(self) -> int:  # type: ignore[override]
        return max(1, sum(self._workers.values()))

    @property
    def in_flight(self) -> int:
        return len(self._out) + len(self._unsent)

    def submit(self, task: TrialTask) -> None:
        if self.lost_reason is not None:
            self._unsent.append(task)  # returned by cancel_all, stored as interrupted
            return
        # Never a key used before: Dask would hand back that key's old result as this one's.
        self._serial += 1
        key = f"elopt-trial-{self._token}-{self._serial}-{task.key}"
        fields = dataclasses.asdict(task)
        future = self._client.submit(_ENTRY, fields, self._expected, key=key, pure=False)
        future.add_done_callback(self._wake)
        self._out[key] = (future, task)

    def poll(self, timeout_s: float) -> list[TrialOutcome]:
        if self.lost_reason is not None:
            if self.on_lost is None:
                raise ClusterError(self.lost_reason)
            return []
        self._refresh_workers()
        if not self._out or self.lost_reason is not None:
            return []
        self._wakeup.clear()  # before the scan, so a completion during it is not missed
        done = [f for f, _ in self._out.values() if f.status != "pending"]
        if not done and self._wakeup.wait(timeout_s):
            done = [f for f, _ in self._out.values() if f.status != "pending"]
        outcomes = []
        for future in done:
            if future.key in self._out:
                outcome = self._settle(future)
                if outcome is not None:
                    outcomes.append(outcome)
        return outcomes

    def cancel_all(self) -> list[TrialTask]:
        futures = [f for f, _ in self._out.values()]
        tasks = [t for _, t in self._out.values()] + self._unsent
        self._out.clear()
        self._unsent = []
        if futures and self._client.status == "running":
            try:
                self._client.cancel(futures, force=True)
            except Exception:  # the scheduler went away meanwhile: nothing left to cancel
                pass
        return tasks

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        _close_quietly(self._client, self._cluster)

    def _settle(self, future: Any) -> TrialOutcome | None:
        """The outcome of a finished future, or None (not deliverable: kept, or cluster lost)."""
        _, task = self._out[future.key]
        status = future.status
        if status == "finished":
            try:
                reply: WorkerReply = future.result(timeout=self._fetch_timeout_s)
            except TimeoutError:
                return None  # its result died with a worker; Dask computes it again
            except Exception as exc:
                return self._settle_error(future, exc)
            if isinstance(reply, dict):  # the worker could not import elopt
                self._lose(
                    f"Dask worker {reply['worker']} cannot run elopt ({reply['error']}); install "
                    f"elopt {self._expected.get('elopt')} and the same numpy, scipy, numba and "
                    "distributed as here on every worker"
                )
                return None
            if reply.refusal is not None:
                self._lose(f"{reply.refusal}; install the same versions as here on every worker")
                return None
            del self._out[future.key]
            outcome = reply.outcome
            assert outcome is not None
            outcome.worker = self._index_of(reply.worker_address)
            return outcome
        if status == "error":
            return self._settle_error(future, future.exception(timeout=self._fetch_timeout_s))
        if status == "cancelled":
            reason = "cancelled"
            try:
                future.result(timeout=5)  # a cancelled future raises its reason at once
            except Exception as exc:
                reason = getattr(exc, "reason", None) or _first_line(exc)
            if reason == "scheduler-connection-lost":
                self._lose(f"lost the connection to the Dask scheduler at {self.address}")
            else:
                self._lose(
                    f"the Dask scheduler at {self.address} dropped trial {task.key} ({reason})"
                )
        return None

    def _settle_error(self, future: Any, exc: BaseException | None) -> TrialOutcome | None:
        _, task = self._out[future.key]
        if isinstance(exc, self._distributed.KilledWorker):
            del self._out[future.key]
            last = getattr(getattr(exc, "last_worker", None), "address", "?")
            n = int(getattr(exc, "allowed_failures", ALLOWED_FAILURES)) + 1
            reason = (
                f"lost its Dask worker {n} times while solving (the last {last}); "
                "Dask gave up on it (KilledWorker)"
            )
            return TrialOutcome(key=task.key, ok=False, failure=reason, worker=self._index_of(last))
        if self._client.status != "running":
            self._lose(f"lost the connection to the Dask scheduler at {self.address}")
            return None
        # evaluate_task never raises, so an error here is the worker's environment, not the design
        what = f"{type(exc).__name__}: {_first_line(exc)}" if exc is not None else "unknown error"
        self._lose(
            f"a Dask worker could not run elopt's trial task ({what}); install elopt "
            f"{self._expected.get('elopt')} and the same numpy, scipy, numba and distributed "
            "as here on every worker"
        )
        return None

    def _wake(self, _future: Any) -> None:
        self._wakeup.set()  # runs on Dask's callback thread

    def _lose(self, reason: str) -> None:
        if self.lost_reason is not None:
            return
        self.lost_reason = reason
        if self.on_lost is not None:
            self.on_lost(reason)

    def _index_of(self, address: str) -> int:
        return self._worker_index.setdefault(address, len(self._worker_index))

    def _refresh_workers(self, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._refreshed_at < self._refresh_s:
            return
        self._refreshed_at = now
        if self._client.status != "running":
            return  # a lost scheduler shows up as cancelled futures; do not block on it
        try:
            workers = dict(self._client.nthreads())
        except Exception:
            return
        if not force:
            for addr in sorted(set(self._workers) - set(workers)):
                self._log(
                    f"elopt: Dask worker {addr} left, {len(workers)} remain; the trials it "
                    "held run again elsewhere (once)"
                )
            for addr in sorted(set(workers) - set(self._workers)):
                self._log(f"elopt: Dask worker {addr} joined; {len(workers)} now")
        self._workers = workers
        self._had_workers = self._had_workers or bool(workers)
        if workers or not self._had_workers:  # a batch queue may take long to start the first
            self._no_worker_since = None
        elif self._no_worker_since is None:
            self._no_worker_since = now
        elif now - self._no_worker_since > self._no_worker_limit_s and self._out:
            self._lose(
                f"the Dask cluster at {self.address} has had no worker for "
                f"{self._no_worker_limit_s:g} s"
            )
