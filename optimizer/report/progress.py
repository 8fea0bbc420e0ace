"""Progress of a running study: plain lines for logs and batch jobs, a live panel on a terminal."""

from __future__ import annotations

import math
import sys
import time
from typing import IO, TYPE_CHECKING

from rich.console import Console, Group
from rich.live import Live
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

from elopt.optimizer.report.numbers import ARROW, short_number

if TYPE_CHECKING:
    from elopt.optimizer.study.search import RunState


def _hms(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "?"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h{m:02d}m" if h else f"{m}m{s:02d}s"


def _budget_text(state: RunState) -> str:
    t = state.limits.target_trials
    return f"{state.n_finished}/{t}" if t is not None else f"{state.n_finished}"


def _best_text(state: RunState) -> str:
    parts = []
    for o, b, n in zip(state.spec.objectives, state.best, state.best_trial, strict=True):
        parts.append(
            f"{o.metric} {short_number(b) if b is not None else '-'} ({ARROW[o.direction]}, #{n})"
            if b is not None
            else f"{o.metric} -"
        )
    return ", ".join(parts)


def summary_line(state: RunState) -> str:
    return (
        f"[{_hms(state.elapsed_s())}] {_budget_text(state)} trials "
        f"(+{state.finished_this_run} this run), {state.n_feasible} feasible, {state.n_failed} failed, "
        f"{state.in_flight} in flight | best {_best_text(state)} | ETA {_hms(state.eta_s())}"
    )


class PlainProgress:
    """Plain lines for logs and batch jobs: one every ``every_s`` seconds (0: one per trial)."""

    def __init__(self, stream: IO[str] | None = None, every_s: float = 60.0) -> None:
        self._stream = stream or sys.stdout
        self._every_s = every_s
        self._last = 0.0

    def _say(self, text: str) -> None:
        print(text, file=self._stream, flush=True)

    def started(self, state: RunState) -> None:
        self._last = time.monotonic()
        self._say(
            f"elopt: study {state.spec.name}: {state.n_stored} trials stored, target "
            f"{state.limits.target_trials if state.limits.target_trials is not None else '-'}"
            f", {state.workers} worker{'' if state.workers == 1 else 's'}, "
            f"sampler {state.sampler_kind}"
        )

    def trial_stored(self, state: RunState) -> None:
        if self._every_s == 0:
            self._say(
                f"trial {state.last_number} stored ({state.last_state}) | {summary_line(state)}"
            )

    def tick(self, state: RunState) -> None:
        now = time.monotonic()
        if self._every_s > 0 and now - self._last >= self._every_s:
            self._last = now
            self._say(summary_line(state))

    def finished(self, state: RunState, reason: str) -> None:
        self._say(summary_line(state))


class RichProgress:
    """A live panel on a terminal: bar of trials done / budget, counts, best, elapsed, ETA."""

    def __init__(self, console: Console) -> None:
        self._console = console
        self._live: Live | None = None

    def _view(self, state: RunState) -> Group:
        t = state.limits.target_trials
        done = state.n_finished
        if t is not None:
            bar = ProgressBar(total=max(t, 1), completed=min(done, t), width=40)
        elif state.limits.deadline_unix is not None:
            span = state.limits.deadline_unix - state.started_unix
            bar = ProgressBar(
                total=max(span, 1.0), completed=min(state.elapsed_s(), span), width=40
            )
        else:
            bar = ProgressBar(total=None, width=40)
        grid = Table.grid(padding=(0, 2))
        grid.add_column(style="bold")
        grid.add_column()
        grid.add_row("budget", bar)
        grid.add_row(
            "trials",
            f"{_budget_text(state)} (+{state.finished_this_run} this run), {state.in_flight} in flight",
        )
        grid.add_row("feasible", f"{state.n_feasible}   failed {state.n_failed}")
        for o, b, n in zip(state.spec.objectives, state.best, state.best_trial, strict=True):
            grid.add_row(
                f"best {o.metric}",
                f"{short_number(b)} ({ARROW[o.direction]}, trial {n})" if b is not None else "-",
            )
        grid.add_row("elapsed", f"{_hms(state.elapsed_s())}   ETA {_hms(state.eta_s())}")
        grid.add_row("sampler", state.sampler_kind)
        return Group(Text(f"study {state.spec.name}", style="bold"), grid)

    def started(self, state: RunState) -> None:
        self._live = Live(
            self._view(state), console=self._console, refresh_per_second=4, transient=False
        )
        self._live.start()

    def trial_stored(self, state: RunState) -> None:
        if self._live:
            self._live.update(self._view(state))

    def tick(self, state: RunState) -> None:
        if self._live:
            self._live.update(self._view(state))

    def finished(self, state: RunState, reason: str) -> None:
        if self._live:
            self._live.update(self._view(state))
            self._live.stop()
            self._live = None
