"""A small writer process for the store's crash and live-read tests (test fixture).

Usage: python -m study_support.store_writer PATH N_TRIALS [DELAY_S]
Creates PATH (or reopens it), appends :func:`record_for` trials up to N_TRIALS in total and
prints ``committed <number>`` after each commit.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from elopt.optimizer.store import StudyWriter
from study_support.records import record_for, small_header


def main() -> None:
    path = Path(sys.argv[1])
    total = int(sys.argv[2])
    delay_s = float(sys.argv[3]) if len(sys.argv) > 3 else 0.0
    writer = StudyWriter.open(path) if path.exists() else StudyWriter.create(path, small_header())
    print(f"opened {writer.n_trials}", flush=True)
    while writer.n_trials < total:
        number = writer.append(record_for(writer.n_trials))
        print(f"committed {number}", flush=True)
        if delay_s:
            time.sleep(delay_s)
    writer.close()
    print("done", flush=True)


if __name__ == "__main__":
    main()
