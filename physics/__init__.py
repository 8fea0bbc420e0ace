"""elopt's physics layer: geometry, electrode families, boundary-element solvers, fields.

Usable on its own (a notebook needs nothing from ``optimizer``).
"""

import os as _os

# One BLAS thread per process: studies run one solver process per core, and a multi-threaded
# BLAS competing with them for the same cores is many times slower (measured: a 736-unknown LU
# took 0.2 s with two BLAS threads on a loaded 2-core machine, 0.016 s with one). Set the
# variables yourself before importing numpy to choose otherwise.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")
