"""Compilation of the kernels: announced, timed apart from the run, done ahead of time by ``popdens compile``."""

from __future__ import annotations

import importlib
import io
import sys

import numba
import numpy as np

import popdens
from popdens import drive, hazard
from popdens._warm_up import TASKS, compile_all, uncompiled_kernels
from popdens.model._jit import Stopwatch, compile_seconds


def test_first_compilation_is_announced_and_timed_apart(capsys):
    @numba.njit  # a fresh kernel (no disk cache), so calling it compiles
    def fresh(x):
        return x * 2.0 + 1.0

    watch = Stopwatch()
    before = compile_seconds()
    assert fresh(1.0) == 3.0
    spent = compile_seconds() - before
    err = capsys.readouterr().err
    assert "compiling" in err and "popdens compile" in err and "compiled" in err
    assert spent > 0.0
    times = watch.times()
    assert times["compile_time_s"] == spent
    fresh(2.0)  # already compiled: no notice, no time
    assert compile_seconds() - before == spent
    assert capsys.readouterr().err == ""


def test_run_times_exclude_compilation():
    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
    res = popdens.simulate(pop, drive.Constant(16.0), t_end=5.0, dt=0.1, progress=False)
    assert set(res.diagnostics) >= {"wall_time_s", "compile_time_s"}
    assert "compile_time_s" not in res.settings()  # volatile, like the wall time: not in the output files


def test_warm_up_reaches_every_kernel():
    out = io.StringIO()
    seconds = compile_all(1, stream=out)
    assert sorted(seconds) == sorted(TASKS)
    assert len(out.getvalue().splitlines()) == len(TASKS)
    assert uncompiled_kernels() == []


def test_the_coverage_check_sees_an_uncompiled_kernel(tmp_path, monkeypatch):
    pkg = tmp_path / "madeup"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "kernels.py").write_text("import numba\n\n@numba.njit\ndef never_called(x):\n    return x\n\n"
                                    "@numba.njit\ndef called(x):\n    return x\n\ncalled(1.0)\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    module = importlib.import_module("madeup")
    try:
        assert uncompiled_kernels(module) == ["madeup.kernels.never_called"]
    finally:
        for name in ("madeup", "madeup.kernels"):
            sys.modules.pop(name, None)


def test_compile_command_reports_each_group(capsys):
    from popdens.cli import main

    assert main(["compile", "--jobs", "1"]) == 0
    text = capsys.readouterr().out
    for name in TASKS:
        assert name in text
    assert np.isfinite(float(text.strip().splitlines()[-1].split()[2]))
