"""The ``--cluster ADDR`` option of ``elopt run`` and ``elopt resume``: parse, connect, report."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from elopt.optimizer.config.study_config import StudySpec
    from elopt.optimizer.run.dask_pool import ClusterError, DaskExecutor


def add_cluster_arg(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--cluster",
        metavar="ADDR",
        help="run the trials on a Dask cluster: tcp://HOST:PORT of a running scheduler, or "
        "local:N for N worker processes on this machine (needs elopt[cluster])",
    )


def open_cluster(args: argparse.Namespace, spec: StudySpec) -> DaskExecutor | None:
    """The connected executor for ``--cluster`` (None without the option). Call it before the
    study file is touched: a cluster that cannot run the study then leaves nothing written."""
    from elopt.optimizer.run.dask_pool import ClusterError, connect_cluster

    if getattr(args, "cluster", None) is None:
        return None
    if args.workers is not None:
        raise ClusterError(
            f"--workers {args.workers}: sets the local process pool, not a cluster; with "
            "--cluster the cluster's workers run the trials (N local Dask workers: "
            "--cluster local:N)"
        )
    return connect_cluster(
        args.cluster, family_ref=spec.family_ref, log=lambda line: print(line, flush=True)
    )


def cluster_lost_error(cluster: DaskExecutor, path: Path, state: Any) -> ClusterError:
    """The one line for a session the cluster ended: why, what is safe, how to go on."""
    from elopt.optimizer.run.dask_pool import ClusterError

    return ClusterError(
        f"{cluster.lost_reason}; stopped: {state.n_finished} finished trials are safe in {path} "
        f"({state.n_interrupted} interrupted, re-run on resume). Continue with: "
        f"elopt resume {path} --cluster {cluster.address}"
    )
