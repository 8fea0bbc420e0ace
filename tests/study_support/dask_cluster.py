"""A Dask scheduler and workers as real processes on 127.0.0.1 (test helper).

Started the way CLUSTER.md tells a user to start them (``dask scheduler``, ``dask worker``),
through ``python -m distributed.cli...`` so no console script needs to be on PATH. Every wait
is bounded; :meth:`LoopbackCluster.close` kills exactly the processes it started.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

from study_support.cli import ENV


def free_port() -> int:
    """A TCP port on 127.0.0.1 nobody listens on (at the moment of asking)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class LoopbackCluster:
    """``dask scheduler`` plus ``n_workers`` single-threaded ``dask worker`` processes."""

    def __init__(self, log_dir: Path, n_workers: int = 2, *, nanny: bool = True) -> None:
        self.log_dir = log_dir
        self.port = free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.nanny = nanny
        self.scheduler = self._start(
            "scheduler",
            ["distributed.cli.dask_scheduler", "--host", "127.0.0.1", "--port", str(self.port)],
        )
        self.workers: list[subprocess.Popen] = []
        for _ in range(n_workers):
            self.add_worker()
        self.wait_for_workers(n_workers)

    def _start(self, name: str, module_args: list[str]) -> subprocess.Popen:
        log = open(self.log_dir / f"dask-{name}-{time.monotonic_ns()}.log", "w")
        return subprocess.Popen(
            [sys.executable, "-m", *module_args, "--no-dashboard"],
            env=ENV,
            stdout=log,
            stderr=subprocess.STDOUT,
            start_new_session=True,  # a Ctrl-C meant for a test run must not reach it
        )

    def add_worker(self, *, preload: str | None = None) -> subprocess.Popen:
        args = ["distributed.cli.dask_worker", self.address, "--nthreads", "1"]
        args += ["--host", "127.0.0.1", "--nanny" if self.nanny else "--no-nanny"]
        args += ["--death-timeout", "60"]
        if preload:
            args += ["--preload", preload]
        proc = self._start("worker", args)
        self.workers.append(proc)
        return proc

    def client(self):
        from distributed import Client

        return Client(self.address, timeout=10, set_as_default=False)

    def wait_for_workers(self, n: int, timeout_s: float = 90.0) -> None:
        with self.client() as c:
            c.wait_for_workers(n, timeout=timeout_s)

    def wait_for_exactly(self, n: int, timeout_s: float = 30.0) -> None:
        """Until the scheduler lists exactly ``n`` workers (after one was killed)."""
        with self.client() as c:
            t_end = time.monotonic() + timeout_s
            while len(c.nthreads()) != n:
                if time.monotonic() > t_end:
                    raise TimeoutError(f"the scheduler still lists {len(c.nthreads())} workers")
                time.sleep(0.1)

    def worker_pids(self) -> dict[str, int]:
        """Worker address -> pid of the process that runs its tasks."""
        with self.client() as c:
            return dict(c.run(os.getpid))

    def kill_scheduler(self) -> None:
        self.scheduler.kill()
        self.scheduler.wait(timeout=10)

    def close(self) -> None:
        for proc in [*self.workers, self.scheduler]:
            if proc.poll() is None:
                try:
                    os.killpg(proc.pid, signal.SIGKILL)  # the nanny and its worker process
                except ProcessLookupError:
                    pass
            proc.wait(timeout=10)

    def __enter__(self) -> LoopbackCluster:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
