"""Dask worker preload (test fixture): elopt cannot be imported in this worker, as on a
machine where it was never installed."""

import sys

for _name in ("optimizer", "physics"):
    sys.modules[_name] = None  # a later `import optimizer` raises ModuleNotFoundError
