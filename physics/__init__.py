"""elopt's physics layer: geometry, electrode families, boundary-element solvers, fields.

Usable on its own (a notebook needs nothing from ``optimizer``).

Importing it limits BLAS to one thread per process (``ELOPT_BLAS_THREADS`` overrides):
studies run one solver process per core, and a multi-threaded BLAS competing with them for the
same cores is many times slower (measured: a 736-unknown LU took 0.2 s with two BLAS threads
on a loaded 2-core machine, 0.016 s with one).
"""

import os as _os

_threads = _os.environ.get("ELOPT_BLAS_THREADS", "1")
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, _threads)

from threadpoolctl import threadpool_limits as _threadpool_limits  # noqa: E402

_threadpool_limits(limits=int(_threads), user_api="blas")
