"""Run a scenario and write its outputs (one function serves the CLI, tests and scripts)."""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path

import numpy as np

from . import __version__
from .montecarlo import montecarlo
from .result import _jsonable
from .scenario import Scenario
from .simulate import simulate

__all__ = ["run_scenario"]


def run_scenario(scenario: Scenario, output: str | Path | None = None, *, overwrite: bool = False,
                 progress: bool | None = None) -> dict:
    """Run ``scenario``: density prediction, and the Monte Carlo twin if requested.

    Outputs go to a temporary folder next to the destination, which is renamed
    into place only when complete, so an interrupted run leaves no partial
    output.  An existing folder is replaced only with ``overwrite=True``.

    Returns
    -------
    dict
        The summary written to ``summary.json``.
    """
    dest = Path(output) if output is not None else scenario.source.parent / scenario.output
    if dest.exists() and not overwrite:
        raise FileExistsError(f"output folder {dest} exists; choose another or pass overwrite")
    dest.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}.", dir=dest.parent))
    try:
        pred = simulate(scenario.population, scenario.drive, scenario.t_end, scenario.dt,
                        record_interval=scenario.record_interval, progress=progress)
        header = {"scenario": str(scenario.source.name), "scenario_sha256_16": scenario.digest,
                  "units": "t ms, rate Hz, u mV, drive mV"}
        pred.to_csv(tmp / "prediction.csv", header_extra=header)
        summary = {
            "title": scenario.title,
            "scenario": str(scenario.source),
            "scenario_sha256_16": scenario.digest,
            "version": __version__,
            "caution": "model predictions for a research tool; not for clinical or safety decisions",
            "prediction": {"method": pred.method, "status": pred.status, "message": pred.message,
                           "peak_rate_hz": float(np.max(pred.rate)), "final_rate_hz": float(pred.rate[-1]),
                           "diagnostics": pred.diagnostics},
        }
        mc = None
        if scenario.montecarlo_neurons:
            mc = montecarlo(scenario.population, scenario.drive, scenario.t_end, scenario.montecarlo_neurons,
                            dt=pred.dt, seed=scenario.seed, record_interval=scenario.record_interval,
                            progress=progress)
            mc.to_csv(tmp / "montecarlo.csv", header_extra=header)
            se = mc.rate_standard_error()[1:]
            z = np.abs(mc.rate[1:] - pred.rate[1:]) / np.maximum(se, 1e-12)
            summary["montecarlo"] = {"n_neurons": mc.n_neurons, "seed": scenario.seed,
                                     "fraction_within_4_se": float(np.mean(z <= 4.0)),
                                     "diagnostics": mc.diagnostics}
        _figures(pred, mc, tmp)
        (tmp / "summary.json").write_text(json.dumps(_jsonable(summary), indent=2, sort_keys=True) + "\n")
        if dest.exists():
            shutil.rmtree(dest)
        tmp.rename(dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    summary["output"] = str(dest)
    return summary


def _figures(pred, mc, folder: Path) -> None:
    import matplotlib.pyplot as plt

    from .plotting import plot_comparison, plot_rate

    if mc is not None:
        fig = plot_comparison(pred, mc)
    else:
        ax = plot_rate(pred)
        fig = ax.figure
    for ext in ("png", "svg"):
        fig.savefig(folder / f"rate.{ext}", dpi=150)
    plt.close(fig)
