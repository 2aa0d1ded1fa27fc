"""Start-up stays fast: ``import popdens`` and ``popdens --help`` load none of the heavy libraries.

Measured (DEVELOPERS.md, "Heavy imports"): sympy ~1 s, scipy.special ~0.65 s, scipy.optimize ~0.5 s,
numba ~0.5 s, matplotlib ~0.4 s.  Each check runs in a fresh interpreter, since this test process has
imported them all already.  Counting modules, not timing, so the test cannot flake on a busy machine.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("sympy", "scipy.optimize", "scipy.special", "scipy.integrate", "scipy.interpolate", "numba",
         "matplotlib", "dask", "distributed", "pandas")

PROBE = """
import json, sys
{statement}
print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in {roots!r})))
"""


def loaded_after(statement: str) -> set[str]:
    roots = sorted({h.split(".")[0] for h in HEAVY})
    code = PROBE.format(statement=statement, roots=roots)
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True)
    modules = set(json.loads(out.stdout.strip().splitlines()[-1]))
    return {h for h in HEAVY if h in modules}


@pytest.mark.parametrize("statement", [
    "import popdens",
    "import popdens.drive, popdens.hazard; from popdens import LIF, WhiteNoise, Population, drive, hazard",
    "import popdens.cli as c\ntry:\n    c.main(['--help'])\nexcept SystemExit:\n    pass",
    "from popdens.scenario import load_scenario; load_scenario({scenario!r})",
])
def test_start_up_loads_no_heavy_library(statement):
    statement = statement.format(scenario=str(ROOT / "scenarios" / "relay_burst.toml"))
    assert loaded_after(statement) == set()


def test_the_check_sees_a_heavy_import():
    """The probe itself can fail: the first use of a numerical function loads scipy."""
    assert "scipy.special" in loaded_after("import popdens\npopdens.gain")
