"""elopt's optimizer layer: configs, objectives, search, the HDF5 study store, reports, CLI."""

__version__ = "0.1.0"
