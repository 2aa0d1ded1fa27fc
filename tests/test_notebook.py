"""The notebook case: a real Jupyter kernel runs the README's sweep recipe with a function defined in
the notebook, shows results as rich HTML, converts them to DataFrames and draws progress in place.

``tests/sweeps`` cover the same engine from scripts; this file proves what only a notebook shows
(functions defined in the kernel's ``__main__``, a multi-threaded kernel process, its output stream).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
pytest.importorskip("ipykernel")

ROOT = Path(__file__).resolve().parents[1]

CELLS = [
    "import sys; sys.path.insert(0, {root!r})\nimport numpy as np\nimport popdens",
    # the README's recipe, defined in the notebook (workers cannot import it: it travels by value)
    "import time\n"
    "def rate_at(params, seed):\n"
    "    time.sleep(0.4)  # long enough (> 1 s in all) for the progress line to appear\n"
    "    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(params['sigma']))\n"
    "    return {{'rate_Hz': float(popdens.gain(pop, params['mu']))}}\n"
    "res = popdens.sweep(rate_at, {{'mu': [10.0, 15.0, 20.0], 'sigma': [2.0, 4.0]}}, {out!r},\n"
    "                    backend='processes', workers=2, figures=False)\n"
    "assert res.complete and not res.failed, res.failed\n"
    "import json; print(json.dumps(res.values('rate_Hz').round(3).tolist()))",
    "res",
    "df = res.to_dataframe(); print(df.shape, list(df.columns))",
    "def broken(params, seed):\n    raise RuntimeError('no data for ' + str(params['mu']))\n"
    "bad = popdens.sweep(broken, {{'mu': [1.0]}}, backend='processes', workers=1, retries=0, figures=False)\n"
    "print(bad.failed[0][2])",
    "from popdens.progress import interactive\nprint('interactive', interactive(sys.stderr))",
    "pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),\n"
    "                         popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))\n"
    "popdens.simulate(pop, popdens.drive.Step(t=10.0, before=15.0, after=20.0), t_end=40.0, dt=0.1)",
]


def test_a_notebook_runs_a_sweep_of_its_own_function_and_displays_results(tmp_path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(c.format(root=str(ROOT), out=str(tmp_path / "gain-map")))
                for c in CELLS]
    client = nbclient.NotebookClient(nb, timeout=300, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    env_before = os.environ.get("PYDEVD_DISABLE_FILE_VALIDATION")
    os.environ["PYDEVD_DISABLE_FILE_VALIDATION"] = "1"  # quiets a debugger warning of some kernels
    try:
        client.execute()
    finally:
        if env_before is None:
            os.environ.pop("PYDEVD_DISABLE_FILE_VALIDATION", None)

    def text(i, name="stdout"):
        return "".join(o.get("text", "") for o in nb.cells[i].outputs
                       if o.get("output_type") == "stream" and o.get("name") == name)

    # Siegert rates (Hz) of the README example, computed in two worker processes
    rates = json.loads(text(1).strip())
    # progress is drawn in the notebook, updating one line in place (carriage returns, no new lines)
    progress = text(1, "stderr")
    assert "sweep: " in progress and "\r" in progress and "points/s" in progress
    assert len(rates) == 3 and len(rates[0]) == 2 and rates[2][1] > rates[0][1] > 0
    html = nb.cells[2].outputs[0]["data"]["text/html"]
    assert "SweepResult" in html and "6 (6 done, 0 failed)" in html and "processes backend" in html
    assert "(12, " in text(3) or "(6, " in text(3)
    assert "RuntimeError: no data for 1.0" in text(4)  # the worker's real cause, in the result
    assert "interactive True" in text(5)
    html = nb.cells[6].outputs[0]["data"]["text/html"]
    assert "refractory-density" in html and "Hz" in html and "status 0: completed" in html
