"""Dask worker preload (test fixture): elopt cannot be imported in this worker, as on a
machine where it was never installed."""

import sys

sys.modules["elopt"] = None  # a later `import elopt...` raises ModuleNotFoundError
