"""elopt's optimizer layer: configs, objectives, search, the HDF5 study store, reports, CLI.

Sub-packages by stage: :mod:`.config` (TOML solve and study definitions), :mod:`.study`
(objectives, the optuna coordinator, one trial's evaluation), :mod:`.store` (the HDF5 study
file), :mod:`.run` (where evaluations run: local process pool, Dask), :mod:`.report` (terminal
tables and pictures), :mod:`.cli` (one module per verb). :mod:`.record` is the one schema of a
solved design that ``solve --json``, the study file and the reports share.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("elopt")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0+unknown"
