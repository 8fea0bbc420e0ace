"""Where trial evaluations run: the :class:`Executor` contract and the local process pool."""

from __future__ import annotations

import collections
import multiprocessing as mp
import os
import signal
from abc import ABC, abstractmethod
from multiprocessing.connection import Connection, wait

from elopt.optimizer.study import TrialOutcome, TrialTask, evaluate_task
from elopt.physics.threads import limit_blas_threads

# Each worker process solves one trial at a time on one core; BLAS/numba threads would only
# fight each other (and the coordinator) for the same cores.
_SINGLE_THREAD_ENV = {
    "OMP_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
    "NUMBA_NUM_THREADS": "1",
}


class Executor(ABC):
    """Runs :class:`TrialTask` evaluations away from the coordinator.

    Contract (every implementation, local or distributed):

    - ``n_workers`` tasks run at once; :meth:`submit` never blocks on a solve and accepts more
      tasks than workers (the extra ones wait; keep about two per worker in flight).
    - Every submitted task comes back exactly once from :meth:`poll` as a
      :class:`TrialOutcome` with the task's ``key`` — unless :meth:`cancel_all` returned it.
      Outcomes arrive in any order. A worker that dies turns its task into an outcome with
      ``ok = False`` and the reason; the executor replaces the worker and goes on.
    - Workers are stateless: a task carries all it needs and the outcome is plain data, so a
      task may run on any worker. A distributed executor may run a task twice after losing a
      worker; it must still hand back one outcome per key (the first).
    - :meth:`poll` waits at most ``timeout_s`` and returns what finished (maybe nothing); it
      must return promptly so the coordinator can react to signals.
    - Workers ignore SIGINT: Ctrl-C is the coordinator's to handle.
    - The coordinator owns the study file; executors and workers never touch it.
    """

    n_workers: int

    @abstractmethod
    def submit(self, task: TrialTask) -> None:
        """Queue ``task`` for evaluation."""

    @abstractmethod
    def poll(self, timeout_s: float) -> list[TrialOutcome]:
        """Outcomes finished since the last call, waiting up to ``timeout_s`` for the first."""

    @abstractmethod
    def cancel_all(self) -> list[TrialTask]:
        """Stop every queued or running task at once; returns them (they did not finish)."""

    @abstractmethod
    def close(self) -> None:
        """Release the workers. Idempotent."""

    @property
    @abstractmethod
    def in_flight(self) -> int:
        """Tasks submitted and not yet returned."""

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class _Worker:
    def __init__(self, ctx: mp.context.BaseContext, index: int) -> None:
        self.index = index
        self.conn, child = ctx.Pipe()
        self.process = ctx.Process(
            target=_worker_main, args=(child, index), name=f"elopt-worker-{index}", daemon=True
        )
        self.process.start()
        child.close()
        self.tasks: collections.deque[TrialTask] = collections.deque()


class LocalProcessPool(Executor):
    """``n_workers`` spawned processes on this machine; each holds up to ``depth`` tasks (one
    solving, the rest waiting in its pipe) so a worker never idles while the coordinator writes.
    """

    def __init__(self, n_workers: int, *, depth: int = 2) -> None:
        if n_workers < 1:
            raise ValueError(f"n_workers must be >= 1, got {n_workers}")
        self.n_workers = n_workers
        self._depth = depth
        self._ctx = mp.get_context("spawn")
        self._backlog: collections.deque[TrialTask] = collections.deque()
        self._workers = [self._spawn(i) for i in range(n_workers)]
        self._closed = False

    @property
    def in_flight(self) -> int:
        return len(self._backlog) + sum(len(w.tasks) for w in self._workers)

    def submit(self, task: TrialTask) -> None:
        self._backlog.append(task)
        self._dispatch()

    def poll(self, timeout_s: float) -> list[TrialOutcome]:
        self._dispatch()
        busy = [w for w in self._workers if w.tasks]
        if not busy:
            return []
        handles = {w.conn: w for w in busy} | {w.process.sentinel: w for w in busy}
        ready = wait(list(handles), timeout=timeout_s)
        outcomes: list[TrialOutcome] = []
        dead: set[int] = set()
        for h in ready:
            w = handles[h]
            if h is w.conn:
                try:
                    while w.conn.poll():
                        outcome: TrialOutcome = w.conn.recv()
                        outcome.worker = w.index
                        w.tasks.popleft()
                        outcomes.append(outcome)
                except (EOFError, OSError):
                    dead.add(w.index)
            else:
                dead.add(w.index)
        for index in dead:
            outcomes.extend(self._replace_dead(index))
        self._dispatch()
        return outcomes

    def cancel_all(self) -> list[TrialTask]:
        cancelled = list(self._backlog)
        self._backlog.clear()
        for i, w in enumerate(self._workers):
            if w.tasks:
                cancelled.extend(w.tasks)
                w.tasks.clear()
                _stop(w)
                self._workers[i] = self._spawn(i) if not self._closed else w
        return cancelled

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        for w in self._workers:
            if w.tasks:
                _stop(w)
            else:
                try:
                    w.conn.send(None)
                except OSError:
                    pass
        for w in self._workers:
            w.process.join(timeout=2.0)
            if w.process.is_alive():
                _stop(w)
            w.conn.close()

    def _spawn(self, index: int) -> _Worker:
        """Start worker ``index`` single-threaded and with SIGINT ignored from its first
        instruction (an ignored signal survives exec, and Python keeps it ignored), so a
        Ctrl-C during its start-up cannot kill it."""
        saved = {k: os.environ.get(k) for k in _SINGLE_THREAD_ENV}
        os.environ.update(_SINGLE_THREAD_ENV)
        previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
        try:
            return _Worker(self._ctx, index)
        finally:
            signal.signal(signal.SIGINT, previous)
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v

    def _replace_dead(self, index: int) -> list[TrialOutcome]:
        w = self._workers[index]
        w.process.join(timeout=1.0)
        code = w.process.exitcode
        lost = list(w.tasks)
        w.conn.close()
        self._workers[index] = self._spawn(index)
        out = []
        for k, task in enumerate(lost):
            if k == 0:
                reason = f"worker process died while solving (exit code {code})"
                out.append(TrialOutcome(key=task.key, ok=False, failure=reason, worker=index))
            else:
                self._backlog.appendleft(task)  # never started: run it elsewhere
        return out

    def _dispatch(self) -> None:
        while self._backlog:
            w = min(self._workers, key=lambda w: len(w.tasks))
            if len(w.tasks) >= self._depth:
                return
            task = self._backlog.popleft()
            try:
                w.conn.send(task)
            except OSError:
                self._backlog.appendleft(task)
                return
            w.tasks.append(task)


def _stop(w: _Worker) -> None:
    if w.process.is_alive():
        w.process.kill()
    w.process.join(timeout=2.0)


def _worker_main(conn: Connection, index: int) -> None:
    limit_blas_threads()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    while True:
        try:
            task = conn.recv()
        except (EOFError, OSError):
            return  # the coordinator is gone
        if task is None:
            return
        outcome = evaluate_task(task)
        try:
            conn.send(outcome)
        except (BrokenPipeError, OSError):
            return
