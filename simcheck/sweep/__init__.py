"""Sweeps: many cells of assumptions, stored one by one, resumable, local or on Dask.

``grid``    sweep files, grid expansion, cell keys
``store``   the SQLite store (one transaction per finished cell)
``runner``  execution (joblib processes or a Dask cluster), per-cell seeds, resume
"""

from simcheck.sweep.grid import Cell, SweepSpec, cell_key, expand, load_sweep, read_sweep
from simcheck.sweep.runner import SweepAborted, SweepInterrupted, SweepSummary, cell_seed, run_cell, run_sweep
from simcheck.sweep.store import SweepStore, cells_frame, open_readonly

__all__ = ["Cell", "SweepSpec", "cell_key", "expand", "load_sweep", "read_sweep", "SweepAborted",
           "SweepInterrupted", "SweepSummary", "cell_seed", "run_cell", "run_sweep", "SweepStore",
           "cells_frame", "open_readonly"]
