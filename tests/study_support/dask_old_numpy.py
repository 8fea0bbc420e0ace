"""Dask worker preload (test fixture): this worker reports numpy 1.0.0, as an out-of-date
worker environment would."""

import numpy

numpy.__version__ = "1.0.0"
