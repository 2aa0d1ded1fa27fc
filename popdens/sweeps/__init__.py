"""Parameter sweeps: the engine, its backends (serial, process pool, Dask) and the durable store."""

from .engine import Curve, SweepResult, grid_points, load_sweep, point_seed, sweep

__all__ = [
    "Curve", "SweepResult", "grid_points", "load_sweep", "point_seed", "sweep",
]
