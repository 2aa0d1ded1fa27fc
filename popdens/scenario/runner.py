"""Run a scenario and write its outputs (one function serves the CLI, tests and scripts)."""

from __future__ import annotations

import json
import math
import shutil
import tempfile
from pathlib import Path

import numpy as np

from .._files import jsonable, live_temporaries, remove_stale_temporaries, stale_temporaries, temp_prefix
from .._version import __version__
from ..model._jit import Stopwatch
from ..exceptions import ScenarioError
from ..result import STATUS_INTERRUPTED
from ..solvers.frontend import simulate
from ..twins.agreement import agreement
from ..twins.population import montecarlo
from .report import html_report
from .single import Scenario

__all__ = ["run_scenario"]


#: File written beside the outputs with the wall times: the only output that differs
#: between two runs of the same scenario and seed.
TIMING_FILE = "timing.json"


def run_scenario(scenario: Scenario, output: str | Path | None = None, *, overwrite: bool = False,
                 progress: bool | None = None) -> dict:
    """Run ``scenario``: the time-domain prediction (and Monte Carlo twin) and the analyses it names.

    Outputs go to a temporary folder next to the destination, which is renamed
    into place only when complete, so an interrupted or failed run leaves no
    partial output (and an existing folder being replaced stays intact until
    the new one is complete).  An existing folder is replaced only with
    ``overwrite=True`` and only if it is a popdens output folder (it holds the
    ``summary.json`` of a run).  Without ``output`` the destination is the
    scenario's ``output``, which must lie inside the scenario's folder, also
    after following symbolic links.

    Every file except ``timing.json`` is bit-identical between runs of the
    same scenario with the same seed.

    Returns
    -------
    dict
        The summary written to ``summary.json``, plus ``output`` (the folder)
        and ``timing`` (wall times, s).

    Raises
    ------
    ScenarioError
        If the scenario's output folder leads outside the scenario's folder.
    FileExistsError
        If the destination exists and may not be replaced.
    KeyboardInterrupt
        If the user interrupted the run (nothing is written then).
    """
    if output is not None:
        dest = Path(output)
    else:
        base = scenario.source.parent
        dest = base / scenario.output
        inside = dest.resolve()
        if not inside.is_relative_to(base.resolve()) or inside == base.resolve():
            raise ScenarioError(f"{scenario.source}: [scenario] key `output` = {str(scenario.output)!r} leads "
                                f"to {inside}, outside the scenario's folder (through a symbolic link); "
                                f"give the folder with --out instead")
    if dest.parent.is_dir():
        _clean_leftovers(dest)
    if dest.exists() or dest.is_symlink():
        if not overwrite:
            raise FileExistsError(f"output folder {dest} exists; choose another, or replace it with --overwrite "
                                  "(overwrite=True in Python)")
        if dest.is_symlink() or not _is_output_folder(dest):
            raise FileExistsError(f"{dest} exists and is not a popdens output folder (no summary.json of a "
                                  f"run); refusing to replace it")
    dest.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=temp_prefix(dest.name), dir=dest.parent))
    live_temporaries.add(tmp)
    try:
        header = {"scenario": str(scenario.source.name), "scenario_sha256_16": scenario.digest,
                  "popdens_version": __version__}
        summary = {
            "title": scenario.title,
            "scenario": str(scenario.source),
            "scenario_sha256_16": scenario.digest,
            "version": __version__,
            "caution": "model predictions for a research tool; not for clinical or safety decisions",
        }
        timing = {}
        whole = Stopwatch()
        figures = []  # (file name, caption) pairs for the report
        if hasattr(scenario, "circuit"):  # a network scenario
            figures += _network(scenario, tmp, header, summary, timing, progress)
        elif scenario.runs_in_time:
            figures += _time_domain(scenario, tmp, header, summary, timing, progress)
        for name, analysis in getattr(scenario, "analyses", ()):
            watch = Stopwatch()
            summary[name] = analysis.write(scenario.population, tmp, header)
            timing[f"{name}_s"] = watch.times()["wall_time_s"]
            png = next(f for f in summary[name]["figures"] if f.endswith(".png"))
            figures.append((png, CAPTIONS[name]))
        timing["compile_s"] = whole.times()["compile_time_s"]
        summary["files"] = sorted([p.name for p in tmp.iterdir()] + ["report.html", "summary.json", TIMING_FILE])
        (tmp / "summary.json").write_text(json.dumps(jsonable(summary), indent=2, sort_keys=True) + "\n")
        (tmp / "report.html").write_text(html_report(scenario, summary, tmp, figures), encoding="utf-8")
        (tmp / TIMING_FILE).write_text(json.dumps(timing, indent=2, sort_keys=True) + "\n")
        _move_into_place(tmp, dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    finally:
        live_temporaries.discard(tmp)
    summary["output"] = str(dest)
    summary["timing"] = timing
    return summary


#: Report captions of the analysis figures.
CAPTIONS = {"gain": "Gain function: stationary rate against mean drive",
            "stationary": "Stationary interspike-interval densities",
            "transfer": "Transfer function: magnitude and phase against frequency",
            "fit": "Fit to recorded data: data against the fitted model, and the time-rescaling KS plot",
            "approximations": "Monte Carlo twin against each approximation (coloured noise: white noise and the "
                              "effective boundary shift; shot noise: diffusion approximation and the finite-PSP "
                              "theory): rates, and each one's error against the twin"}


def _time_domain(scenario: Scenario, tmp: Path, header: dict, summary: dict, timing: dict, progress) -> list:
    """The density prediction, and the Monte Carlo twin if requested; returns the report figures."""
    pred = simulate(scenario.population, scenario.drive, scenario.t_end, scenario.dt,
                    record_interval=scenario.record_interval, snapshot_interval=scenario.snapshot_interval,
                    progress=progress)
    _stop_if_interrupted(pred)
    header = {**header, "units": "t ms, rate Hz, u mV, drive mV", "t_end_ms": scenario.t_end,
              "record_interval_ms": scenario.record_interval}
    pred.to_csv(tmp / "prediction.csv", header_extra=header)
    timing["prediction_s"] = pred.diagnostics.get("wall_time_s")
    summary["settings"] = {"t_end_ms": scenario.t_end, "dt_ms": pred.dt,
                           "record_interval_ms": scenario.record_interval,
                           "snapshot_interval_ms": scenario.snapshot_interval,
                           "montecarlo_neurons": scenario.montecarlo_neurons, "seed": scenario.seed,
                           **({"population_size": scenario.population_size, "trials": scenario.trials}
                              if scenario.population_size else {})}
    summary["prediction"] = {"method": pred.method, "status": pred.status, "message": pred.message,
                             "peak_rate_hz": _finite_or_none(np.max(pred.rate)),
                             "final_rate_hz": _finite_or_none(pred.rate[-1]),
                             "diagnostics": pred.settings()}
    mc = None
    if scenario.montecarlo_neurons:
        mc = montecarlo(scenario.population, scenario.drive, scenario.t_end, scenario.montecarlo_neurons,
                        dt=pred.dt, seed=scenario.seed, record_interval=scenario.record_interval,
                        progress=progress)
        _stop_if_interrupted(mc)
        mc.to_csv(tmp / "montecarlo.csv", header_extra=header)
        timing["montecarlo_s"] = mc.diagnostics.get("wall_time_s")
        check = agreement(pred, mc, drive=scenario.drive)
        summary["montecarlo"] = {"n_neurons": mc.n_neurons, "seed": scenario.seed,
                                 "status": mc.status, "message": mc.message,
                                 "fraction_within_4_se": _finite_or_none(check.fraction_within_4_se),
                                 "agreement": check.to_dict(),
                                 "diagnostics": mc.settings()}
    figures = _figures(pred, mc, tmp)
    if mc is not None:
        from ..plotting import save_figure

        save_figure(check.plot(), tmp, "agreement")
        figures.append(("agreement.png", "Does the Monte Carlo twin agree? Standardised residuals per bin "
                                         "and the verdict"))
    if scenario.population_size:
        figures += _finite_population(scenario, pred, mc, tmp, header, summary, timing, progress)
    return figures


#: Longest segment (ms) of the spectra estimated in scenario reports (frequency resolution 1 Hz).
SPECTRUM_SEGMENT_MS = 1000.0
#: Most frequencies at which a report evaluates a predicted spectrum.
SPECTRUM_POINTS = 120


def _segment(t_end: float, width: float) -> float | None:
    """Spectrum segment (ms): 1 s, or the longest whole number of bins that fits 4 times in the run."""
    seg = min(SPECTRUM_SEGMENT_MS, t_end / 4.0)
    bins = int(seg // width)
    return bins * width if bins >= 8 else None


def _finite_population(scenario, pred, mc, tmp: Path, header: dict, summary: dict, timing: dict, progress) -> list:
    """Realisations of the finite population: table, trials figure and fluctuation spectra."""
    from ..model.drive import Constant
    from ..plotting import plot_spectra, plot_trials, save_figure
    from ..theory.spectra import population_rate_spectrum
    from .analyses import write_table

    n, m = scenario.population_size, scenario.trials
    fin = simulate(scenario.population, scenario.drive, scenario.t_end, scenario.dt, n=n, trials=m,
                   seed=scenario.seed, record_interval=scenario.record_interval, progress=progress)
    _stop_if_interrupted(fin)
    timing["finite_size_s"] = fin.diagnostics.get("wall_time_s")
    tr = fin.trial_rates
    cols = {"t_ms": fin.t, "trial_mean_Hz": tr.mean(axis=0),
            "trial_sd_Hz": tr.std(axis=0, ddof=1) if m > 1 else np.full(fin.t.size, np.nan),
            **{f"trial_{k + 1}_Hz": tr[k] for k in range(min(m, 5))}}
    write_table(tmp / "finite_size.csv", cols,
                {**header, "units": "t ms, rate Hz", "neurons": n, "trials": m, "seed": scenario.seed,
                 "method": fin.method, "note": "rate[k]: spikes in (t[k-1], t[k]] / (neurons x interval)"})
    save_figure(plot_trials(fin, pred), tmp, "finite_trials")
    figures = [("finite_trials.png", f"Finite population of {n} neurons: single trials over the trial mean ± SD "
                                     f"({m} trials), and the infinite population")]
    info = {"n_neurons": n, "trials": m, "seed": scenario.seed, "status": fin.status, "message": fin.message,
            "mean_rate_hz": _finite_or_none(np.mean(tr[:, 1:])),
            "mean_trial_variance_hz2": _finite_or_none(np.mean(tr[:, 1:].var(axis=0, ddof=1))) if m > 1 else None,
            "diagnostics": fin.settings()}
    width = float(fin.t[1] - fin.t[0])
    seg = _segment(scenario.t_end, width)
    if seg is not None:
        # fluctuations about the infinite population, per neuron (N x spectrum: independent of N)
        est = _residual_spectrum(tr[:, 1:] - pred.rate[None, 1:], width, seg)
        curves = [(est.freqs, n * est.power, n * est.standard_error, f"mesoscopic, {n} neurons")]
        info["spectrum"] = {"segment_ms": seg, "segments": est.segments}
        if mc is not None:
            emc = _residual_spectrum((mc.rate[1:] - pred.rate[1:])[None], width, seg)
            curves.append((emc.freqs, mc.n_neurons * emc.power, mc.n_neurons * emc.standard_error,
                           f"Monte Carlo twin, {mc.n_neurons} neurons"))
        if isinstance(scenario.drive, Constant):
            f = np.unique(np.geomspace(est.freqs[0], est.freqs[-1], SPECTRUM_POINTS))
            curves.insert(0, (f, population_rate_spectrum(scenario.population, scenario.drive.mu, f, 1,
                                                          bin_width=width), None, "renewal theory"))
        save_figure(plot_spectra(curves, "N x spectrum of the rate (Hz)",
                                 f"fluctuations about the infinite population; {width:g} ms bins"), tmp,
                    "finite_spectrum")
        figures.append(("finite_spectrum.png", "Spectrum of the finite-size fluctuations per neuron (N x power "
                        "spectrum of the rate minus the infinite population)"
                        + (" against the Monte Carlo twin" if mc is not None else "")))
    summary["finite_size"] = info
    return figures


def _residual_spectrum(x, width, seg):
    from .._spectral import estimate_spectra

    return estimate_spectra(x, width, seg, channels=False)


def _network(scenario, tmp: Path, header: dict, summary: dict, timing: dict, progress) -> list:
    """Fixed points, their stability, the mean-field run and the spiking twin of a network scenario."""
    from .analyses import write_table
    from ..network.integrate import simulate_network
    from ..network.twin import montecarlo_network
    from ..network.states import fixed_points
    from ..plotting import plot_circuit_comparison, plot_rate_spectrum, save_figure

    c = scenario.circuit
    names = list(c.names)
    figures = []
    summary["settings"] = {"t_end_ms": scenario.t_end, "dt_ms": scenario.dt,
                           "record_interval_ms": scenario.record_interval, "montecarlo": scenario.montecarlo,
                           "seed": scenario.seed, "rate_range_hz": list(scenario.rate_range),
                           **({"finite_size": True} if scenario.finite_size else {})}
    summary["cohorts"] = {a.name: {"size": a.size, "model": type(a.population.neuron).__name__,
                                      "noise": type(a.population.noise).__name__} for a in c.cohorts}
    summary["notes"] = c.density_notes()
    start, start_verdict = None, None
    if scenario.fixed_points:
        watch = Stopwatch()
        states = fixed_points(c, scenario.rate_range)
        verdicts = [_verdict(c, st) for st in states] if scenario.stability else [None] * len(states)
        timing["fixed_points_s"] = watch.times()["wall_time_s"]
        cols = {"state": list(range(len(states)))}
        for k, nm in enumerate(names):
            cols[f"rate_Hz_{nm}"] = [st.rates[k] for st in states]
            cols[f"mu_mV_{nm}"] = [st.mu[k] for st in states]
            cols[f"sigma_mV_{nm}"] = [st.sigma[k] if st.sigma is not None else float("nan") for st in states]
        if scenario.stability:
            nan = float("nan")
            cols["stable"] = [float(v.stable) if v else nan for v in verdicts]
            cols["growth_rate_per_s"] = [v.growth_rate if v else nan for v in verdicts]
            cols["frequency_Hz"] = [v.frequency if v else nan for v in verdicts]
        if states:
            write_table(tmp / "fixed_points.csv", cols,
                        {**header, "units": "rate Hz, mu mV, sigma mV, growth rate 1/s, frequency Hz; "
                                            "stable 1/0"})
        summary["fixed_points"] = [
            {"rates_hz": dict(zip(names, map(float, st.rates))), "mu_mV": dict(zip(names, map(float, st.mu))),
             **({} if v is None else {"stable": bool(v.stable), "leading_growth_rate_per_s": float(v.growth_rate),
                                      "leading_frequency_hz": float(v.frequency), "n_unstable": int(v.n_unstable)})}
            for st, v in zip(states, verdicts)]
        # the mean field starts where the spiking twin's burn-in leads: the first stable state found
        for st, v in zip(states, verdicts):
            if v is None or v.stable:
                start, start_verdict = st, v
                break
    if scenario.stability_grid is not None:
        from ..network.maps import stability_map

        inh, drv = scenario.stability_grid
        watch = Stopwatch()
        smap = stability_map(scenario.circuit_at, inh, drv, x_label="inhibition factor (x inhibitory weights)",
                             y_label="external drive (mV)", rate_range=scenario.rate_range, progress=progress)
        timing["stability_map_s"] = watch.times()["wall_time_s"]
        if not smap.complete:  # only Ctrl-C leaves a map incomplete: not an output
            raise KeyboardInterrupt("interrupted while computing the stability map")
        xx, yy = np.meshgrid(smap.x, smap.y)
        write_table(tmp / "stability_map.csv",
                    {"inhibition_factor": xx.ravel(), "drive_mV": yy.ravel(),
                     "growth_rate_per_s": smap.growth_rate.ravel(), "frequency_Hz": smap.frequency.ravel(),
                     **{f"rate_Hz_{nm}": smap.rates[..., k].ravel() for k, nm in enumerate(names)}},
                    {**header, "units": "drive mV, growth rate 1/s (> 0: unstable), frequency Hz, rate Hz; "
                                        "the least stable fixed point at each point"})
        curves = None
        if scenario.map_curves:
            from ..network.boundaries import boundary_curves

            watch = Stopwatch()
            curves = boundary_curves(c, "inhibition", "drive", (float(inh.min()), float(inh.max())),
                                     (float(drv.min()), float(drv.max())), rate_range=scenario.rate_range,
                                     progress=progress)
            timing["boundary_curves_s"] = watch.times()["wall_time_s"]
            if not curves.complete:
                raise KeyboardInterrupt("interrupted while following the boundary curves")
            raw = curves.columns()
            cols = {"curve": raw.pop("curve"), "kind": [KIND_CODES[k] for k in raw.pop("kind")],
                    "inhibition_factor": raw.pop("x"), "drive_mV": raw.pop("y"), **raw}
            write_table(tmp / "boundary_curves.csv", cols,
                        {**header, "units": "drive mV, frequency Hz (0 on folds), rate Hz; kind 1 fold, 2 onset; "
                                            "boundary 1: the state loses stability across the curve"})
        fig, _ = smap.plot(curves=curves)
        save_figure(fig, tmp, "stability_map")
        figures.append(("stability_map.png", "Linear stability over inhibition and external drive"
                        + (" with the fold and onset curves found by continuation" if curves else "")))
        summary["stability_map"] = {"points": int(smap.growth_rate.size),
                                    "unstable_points": int(np.sum(smap.growth_rate > 0)),
                                    "complete": bool(smap.complete)}
        if curves is not None:
            summary["stability_map"]["curves"] = [
                {"kind": cv.kind, "points": len(cv), "boundary_points": int(np.sum(cv.boundary)),
                 "frequency_range_hz": [float(cv.frequency.min()), float(cv.frequency.max())]}
                for cv in curves.curves]
    if scenario.bifurcation is not None:
        figures += _bifurcation(scenario, tmp, header, summary, timing, progress)
    if scenario.t_end > 0:
        mf = simulate_network(c, scenario.t_end, scenario.dt, record_interval=scenario.record_interval,
                              initial_rates=None if start is None else start.rates, progress=progress)
        _stop_if_interrupted(mf)
        timing["mean_field_s"] = mf.diagnostics.get("wall_time_s")
        cols = {"t_ms": mf.t, **{f"rate_Hz_{nm}": mf.rate[k] for k, nm in enumerate(names)}}
        write_table(tmp / "network_prediction.csv", cols, {**header, "method": mf.method, "units": "t ms, rate Hz"})
        summary["prediction"] = {"method": mf.method, "status": mf.status, "message": mf.message,
                                 "initial_rates_hz": (None if start is None
                                                      else dict(zip(names, map(float, start.rates)))),
                                 "final_rates_hz": dict(zip(names, map(float, mf.rate[:, -1])))}
        mc = None
        if scenario.montecarlo:
            mc = montecarlo_network(c, scenario.t_end, scenario.dt, seed=scenario.seed,
                                    record_interval=scenario.record_interval, progress=progress)
            _stop_if_interrupted(mc)
            timing["montecarlo_s"] = mc.diagnostics.get("wall_time_s")
            cols = {"t_ms": mc.t, **{f"rate_Hz_{nm}": mc.rate[k] for k, nm in enumerate(names)}}
            write_table(tmp / "network_montecarlo.csv", cols,
                        {**header, "method": mc.method, "seed": scenario.seed, "units": "t ms, rate Hz"})
            half = scenario.t_end / 2
            summary["montecarlo"] = {"status": mc.status, "message": mc.message, "seed": scenario.seed,
                                     "sizes": dict(zip(names, mc.sizes)) if mc.sizes else None,
                                     "mean_rates_second_half_hz": dict(zip(names, map(float, mc.mean_rate(half)))),
                                     "mean_field_second_half_hz": dict(zip(names, map(float, mf.mean_rate(half))))}
            spectra = mc.rate_spectrum()
            summary["montecarlo"]["fluctuations"] = _fluctuation_summary(mc, spectra, start_verdict)
            marks = [m for m in _root_marks(start_verdict) if m[0] <= spectra[0][-1]]
            fig = plot_rate_spectrum(spectra, mc.names, marks,
                                     floor={nm: 2.0 * r / n for nm, r, n in zip(names, mc.mean_rate(0.0), mc.sizes)})
            save_figure(fig, tmp, "network_spectrum")
        fin = None
        if scenario.finite_size:
            fin = simulate_network(c, scenario.t_end, scenario.dt, record_interval=scenario.record_interval,
                                   progress=progress, finite_size=True, seed=scenario.seed)
            _stop_if_interrupted(fin)
            timing["finite_size_s"] = fin.diagnostics.get("wall_time_s")
            write_table(tmp / "network_finite_size.csv",
                        {"t_ms": fin.t, **{f"rate_Hz_{nm}": fin.rate[k] for k, nm in enumerate(names)}},
                        {**header, "method": fin.method, "seed": scenario.seed, "units": "t ms, rate Hz",
                         "finite_cohorts": fin.diagnostics["finite_size"]})
            summary["finite_size"] = {"status": fin.status, "message": fin.message, "seed": scenario.seed,
                                      "cohorts": fin.diagnostics["finite_size"],
                                      "mean_rates_hz": dict(zip(names, map(float, fin.mean_rate())))}
        save_figure(plot_circuit_comparison(mf, mc), tmp, "network_rate")
        figures.append(("network_rate.png", "Rates of the cohorts over time"
                        + (" (mean field thick, spiking twin thin)" if mc is not None else "")))
        if mc is not None:
            figures.append(("network_spectrum.png", "Rate fluctuations of the spiking twin: power spectrum, with "
                                                    "the oscillation frequencies the linear stability analysis "
                                                    "predicts and the level of independent neurons"))
        if fin is not None:
            from ..plotting import plot_finite_circuit

            save_figure(plot_finite_circuit(fin, mf, mc if scenario.montecarlo else None), tmp, "network_finite_size")
            figures.append(("network_finite_size.png", "Finite cohorts: one realisation of the finite-size "
                            "integration" + (" beside the spiking twin of the same size" if scenario.montecarlo
                                             else "") + ", and the mean field"))
            figures += _network_spectra(scenario, fin, mc if scenario.montecarlo else None,
                                        states if scenario.fixed_points else [], tmp, summary)
    return figures


def _network_spectra(scenario, fin, mc, states, tmp: Path, summary: dict) -> list:
    """Spectra of the finite cohorts' rates, the spiking twin's and, for one stable state, the prediction."""
    from ..network.linear_stability import stability
    from ..network.spectra import spectral_matrix
    from ..exceptions import ConvergenceError
    from ..model.drive import Constant
    from ..plotting import plot_spectra, save_figure

    c = scenario.circuit
    width = float(fin.t[1] - fin.t[0])
    seg = _segment(scenario.t_end, width)
    if seg is None:
        return []
    est = fin.spectra(seg)
    emc = mc.spectra(seg) if mc is not None else None
    curves = []
    predicted = False
    if len(states) == 1 and all(isinstance(a.drive, Constant) for a in c.cohorts):
        try:
            ok = stability(c, states[0]).stable
        except (ConvergenceError, ValueError):
            ok = False
        if ok:
            f = np.unique(np.geomspace(est.freqs[0], est.freqs[-1], SPECTRUM_POINTS))
            pred = spectral_matrix(c, states[0], f)
            predicted = True
    for k, nm in enumerate(c.names):
        if c.cohorts[k].diffusive:
            continue
        if predicted:
            w = np.sinc(f * width * 1e-3) ** 2  # rates averaged over the record interval
            level = states[0].rates[k] / c.cohorts[k].size
            curves.append((f, pred[:, k, k].real * w + level * (1 - w), None, f"{nm}: linear response"))
        curves.append((est.freqs, est.power[:, k], est.standard_error[:, k], f"{nm}: finite cohorts"))
        if emc is not None:
            curves.append((emc.freqs, emc.power[:, k], emc.standard_error[:, k], f"{nm}: spiking twin"))
    if not curves:
        return []
    save_figure(plot_spectra(curves, "power spectrum of the rate (Hz)", f"{width:g} ms bins, {seg:g} ms segments"),
                tmp, "network_spectra")
    summary["finite_size"]["spectrum"] = {"segment_ms": seg, "segments": est.segments,
                                          "linear_response_prediction": predicted}
    return [("network_spectra.png", "Power spectra of the escape-noise cohorts' rates: finite cohorts"
             + (", spiking twin" if emc is not None else "") + (", linear-response prediction at the stable state"
                                                                if predicted else ""))]


def _root_marks(verdict) -> list:
    """(frequency Hz, label) of the least damped oscillatory roots of a stability verdict."""
    if verdict is None:
        return []
    out = []
    for lam in verdict.roots[:3]:
        f = float(lam.imag) * 1000.0 / (2.0 * math.pi)
        if f > 0.5:
            out.append((f, f"predicted mode {f:.1f} Hz, damping {-1000.0 * float(lam.real):.0f}/s"))
    return out


def _fluctuation_summary(mc, spectra, verdict) -> dict:
    """Rate fluctuations of the twin against independent neurons, and the spectral peak per cohort."""
    freqs, power = spectra
    width_s = float(mc.t[2] - mc.t[1]) * 1e-3 if mc.t.size > 2 else float("nan")  # bin width (s)
    out = {}
    for k, nm in enumerate(mc.names):
        r = mc.rate[k, 1:]
        sel = freqs > 2.0
        peak = float(freqs[sel][np.argmax(power[k][sel])]) if np.any(sel) else float("nan")
        # independent neurons: Poisson-like counts, variance = mean count (short bins; common practice)
        independent = math.sqrt(max(float(np.mean(r)), 0.0) / (mc.sizes[k] * width_s))
        out[nm] = {"sd_hz": float(np.std(r)), "sd_independent_neurons_hz": independent, "spectral_peak_hz": peak}
    marks = _root_marks(verdict)
    out["predicted_mode_hz"] = marks[0][0] if marks else None
    return out


#: Codes of the special points and curves in the CSV tables.
KIND_CODES = {"": 0, "fold": 1, "onset": 2}


def _bifurcation(scenario, tmp: Path, header: dict, summary: dict, timing: dict, progress) -> list:
    """The ``[network.bifurcation]`` table: branches, folds and onsets over one parameter."""
    from .analyses import write_table
    from ..network.continuation import bifurcation_diagram
    from ..plotting import save_figure

    b = scenario.bifurcation
    watch = Stopwatch()
    diag = bifurcation_diagram(scenario.circuit, b["parameter"], b["span"], rate_range=scenario.rate_range,
                               stability=scenario.stability, seeds=b["seeds"], max_step=b["max_step"],
                               max_frequency=b["max_frequency"], progress=progress)
    timing["bifurcation_s"] = watch.times()["wall_time_s"]
    if not diag.complete:
        raise KeyboardInterrupt("interrupted while following the branches")
    cols = diag.columns()
    cols["special"] = [KIND_CODES[k] for k in cols["special"]]
    write_table(tmp / "bifurcation.csv", cols,
                {**header, "parameter": f"{diag.parameter} ({diag.label})",
                 "units": "rate Hz, growth rate 1/s (leading root), frequency Hz; stable 1/0; special 1 fold, "
                          "2 onset (inserted points located precisely); n_unstable -1: not counted"})
    fig, _ = diag.plot()
    save_figure(fig, tmp, "bifurcation")
    summary["bifurcation"] = {
        "parameter": diag.parameter, "span": list(diag.span), "branches": len(diag.branches),
        "points": [{"kind": p.kind, "parameter": float(p.parameter), "branch": p.branch,
                    "rates_hz": dict(zip(diag.names, map(float, p.rates))),
                    "frequency_hz": float(p.frequency), "loses_stability": bool(p.loses_stability)}
                   for p in diag.points]}
    return [("bifurcation.png", f"Fixed points against {diag.label}: folds and oscillation onsets")]


def _verdict(circuit, state):
    """Stability of a fixed point, or None when the root search found nothing (written as NaN)."""
    from ..exceptions import ConvergenceError
    from ..network.linear_stability import stability

    try:
        return stability(circuit, state)
    except ConvergenceError:
        return None


def _finite_or_none(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _stop_if_interrupted(res) -> None:
    """A run the user interrupted is not an output: stop here, the caller removes the temporary folder."""
    if res.status == STATUS_INTERRUPTED:
        raise KeyboardInterrupt(res.message)


def _is_output_folder(path: Path) -> bool:
    """True for a folder written by :func:`run_scenario` (its summary.json names a scenario hash)."""
    try:
        data = json.loads((path / "summary.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and "scenario_sha256_16" in data and "version" in data


def _clean_leftovers(dest: Path) -> None:
    """Remove the hidden folders a killed run (SIGKILL, power loss) left beside ``dest``.

    A run writes into ``.NAME.pPID.xxxxxxxx`` and, when replacing an output, parks the old one in
    ``.NAME.old.pPID.xxxxxxxx`` for a moment; only folders whose process has ended are touched.
    A parked previous output whose replacement never arrived is put back in place."""
    for old in stale_temporaries(dest, "old"):
        if not dest.exists() and not dest.is_symlink() and _is_output_folder(old):
            old.rename(dest)
        else:
            shutil.rmtree(old, ignore_errors=True)
    remove_stale_temporaries(dest)


def _move_into_place(tmp: Path, dest: Path) -> None:
    """Rename the complete folder ``tmp`` to ``dest``; an old ``dest`` is removed only afterwards."""
    if not dest.exists():
        tmp.rename(dest)
        return
    old = Path(tempfile.mkdtemp(prefix=temp_prefix(dest.name, "old"), dir=dest.parent))
    old.rmdir()
    dest.rename(old)
    try:
        tmp.rename(dest)
    except BaseException:
        old.rename(dest)
        raise
    shutil.rmtree(old, ignore_errors=True)


def _figures(pred, mc, folder: Path) -> list:
    from ..plotting import plot_comparison, plot_density_map, plot_rate, save_figure

    if mc is not None:
        fig = plot_comparison(pred, mc)
    else:
        fig = plot_rate(pred).figure
    save_figure(fig, folder, "rate")
    out = [("rate.png", "Population rate over time, with the drive beneath"
            + (" (solver against the Monte Carlo twin)" if mc is not None else ""))]
    if pred.snapshots is not None and len(pred.snapshot_t) >= 2:
        save_figure(plot_density_map(pred).figure, folder, "density")
        out.append(("density.png", f"Density over time ({pred.axis_name})"))
    return out


