"""Does the Monte Carlo twin agree with the prediction?  Statistics that can say no.

Up to three tests, each with a p-value, and one verdict at level ``alpha``:

* **Chi-square over all bins** (Pearson).  Under the hypothesis that the prediction is right, the
  twin's spike count in a bin of width ``w`` is a sum over ``N`` independent neurons with mean
  ``E = N w r_pred`` and variance at most ``E`` (at most one spike per neuron and bin when ``w`` is
  shorter than the refractory period; Poisson otherwise).  ``X2 = sum (O - E)^2 / E`` over bins,
  with neighbouring bins pooled until ``E >= 5`` (Cochran's rule, common practice), is compared with
  the chi-square distribution with one degree of freedom per pooled bin.  Bins of one neuron are
  weakly correlated through refractoriness (correlation about ``-r w`` between neighbours), which
  the distribution ignores; the calibration is measured in ``tests/twins/test_agreement.py``.
* **Mean rate.**  The chi-square test spreads a uniform offset over every bin and misses it (a 5 %
  excess over 600 bins of 30 expected spikes moves it by about one standard deviation), so the
  excess of spikes is tested on its own: the run is cut into :data:`MEAN_BLOCKS` consecutive
  blocks, and the blocks' excess counts ``sum(O - E)`` are tested for zero mean with Student's t
  (their spread is estimated from the twin, so spike-count correlations within a neuron, a Fano
  factor other than 1, do not bias it).
* **Modulation** (periodic drives only).  A sinusoid at the drive's frequency,
  ``r(t) = c + a cos(2 pi f t) + b sin(2 pi f t)``, is fitted by weighted least squares (weights
  ``1/var`` from the predicted rate) to the twin and to the prediction over the last whole periods
  (the first period is dropped when there are at least three).  The twin's amplitude and phase get
  confidence intervals at level ``1 - alpha`` (delta method); the Wald statistic of the twin's
  ``(a, b)`` against the prediction's, ``chi-square with 2 degrees of freedom``, gives the p-value.
  This sees a modulation of a fraction of a hertz that is invisible bin by bin.

The verdict is "agrees" when every p-value is at least ``alpha / k`` for ``k`` tests (Bonferroni).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .._display import Displayable, dataframe

__all__ = ["Agreement", "Modulation", "agreement", "DEFAULT_ALPHA"]

#: Default significance level of the verdict.
DEFAULT_ALPHA = 0.01
#: Smallest expected count of a pooled bin in the chi-square test (Cochran's rule; common practice).
MIN_EXPECTED = 5.0
#: Blocks of the mean-rate test (Student's t with MEAN_BLOCKS - 1 degrees of freedom).
MEAN_BLOCKS = 20
#: Periods needed before the first one is dropped from the modulation fit (start-up transient).
DROP_FIRST_PERIOD_FROM = 3


@dataclass(frozen=True)
class Modulation:
    """Sinusoid at the drive's frequency fitted to the twin and to the prediction.

    Amplitudes in Hz, phases in degrees relative to the drive's sine (``r = c + A sin(2 pi f t +
    phi_drive + phase)``; negative: the rate lags), corrected for averaging over the output bins.
    """

    frequency_hz: float
    amplitude_hz: float
    amplitude_ci_hz: tuple[float, float]
    phase_deg: float
    phase_ci_deg: tuple[float, float]
    predicted_amplitude_hz: float
    predicted_phase_deg: float
    wald: float
    p_value: float
    window_ms: tuple[float, float]

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class Agreement(Displayable):
    """The verdict of :func:`agreement` with its statistics.

    Attributes
    ----------
    alpha : float
        Significance level of the verdict.
    agrees : bool
        True when no test rejects the prediction at level ``alpha`` (Bonferroni over the tests).
    chi2, dof, p_value : float, int, float
        Pearson chi-square over all (pooled) bins, its degrees of freedom and p-value; NaN, 0 and NaN
        when the expected counts are too few for the test.
    rate_excess, mean_p_value : float, float
        Relative excess of the twin's spikes over the predicted ones, ``sum(O) / sum(E) - 1``, and the
        p-value of the blocked t-test that it is zero (NaN with fewer than 2 bins per block).
    fraction_within_4_se : float
        Share of bins whose twin rate lies within 4 standard errors of the prediction (descriptive).
    modulation : Modulation or None
        The fitted modulation for a periodic drive.
    t : ndarray
        Bin ends (ms).
    z : ndarray
        Standardised residual of each bin, ``(twin - prediction) / SE`` (SE from the predicted rate).
    """

    alpha: float
    agrees: bool
    chi2: float
    dof: int
    p_value: float
    rate_excess: float
    mean_p_value: float
    fraction_within_4_se: float
    n_neurons: int
    modulation: Modulation | None
    t: np.ndarray = field(repr=False)
    z: np.ndarray = field(repr=False)
    prediction: np.ndarray = field(repr=False)
    twin: np.ndarray = field(repr=False)
    se: np.ndarray = field(repr=False)

    @property
    def verdict(self) -> str:
        """One sentence: agrees or disagrees at level alpha, with the statistics behind it."""
        parts = [f"chi-square {self.chi2:.1f} on {self.dof} bins, p = {self.p_value:.3g}"
                 if self.dof else "too few spikes for the chi-square test"]
        if math.isfinite(self.mean_p_value):
            parts.append(f"mean rate {100 * self.rate_excess:+.2f} %, p = {self.mean_p_value:.3g}")
        if self.modulation is not None:
            m = self.modulation
            parts.append(f"modulation at {m.frequency_hz:g} Hz: {m.amplitude_hz:.3g} Hz "
                         f"[{m.amplitude_ci_hz[0]:.3g}, {m.amplitude_ci_hz[1]:.3g}] against "
                         f"{m.predicted_amplitude_hz:.3g} Hz predicted, p = {m.p_value:.3g}")
        word = "agrees with" if self.agrees else "DISAGREES with"
        return f"the Monte Carlo twin {word} the prediction at level {self.alpha:g} ({'; '.join(parts)})"

    def to_dict(self) -> dict:
        """JSON-ready summary (no arrays)."""
        return {"alpha": self.alpha, "agrees": self.agrees, "chi2": _num(self.chi2), "dof": self.dof,
                "p_value": _num(self.p_value), "rate_excess": _num(self.rate_excess),
                "mean_p_value": _num(self.mean_p_value), "fraction_within_4_se": _num(self.fraction_within_4_se),
                "n_neurons": self.n_neurons, "verdict": self.verdict,
                "modulation": None if self.modulation is None else self.modulation.to_dict()}

    def plot(self):
        """Twin against prediction with a 2-SE band, and the standardised residuals; returns the Figure."""
        from ..plotting import plot_agreement

        return plot_agreement(self)

    def _card(self):
        rows = [("verdict", ("agrees" if self.agrees else "DISAGREES") + f" at level {self.alpha:g}"),
                ("chi-square (pooled bins)", f"{self.chi2:.2f} on {self.dof} bins, p = {self.p_value:.3g}"
                 if self.dof else "n/a"),
                ("mean rate: twin / predicted - 1", f"{100 * self.rate_excess:+.2f} % (p = {self.mean_p_value:.3g})"),
                ("bins within 4 SE", f"{100 * self.fraction_within_4_se:.1f} %"),
                ("twin size", f"{self.n_neurons} neurons")]
        if self.modulation is not None:
            m = self.modulation
            rows += [("modulation frequency", f"{m.frequency_hz:g} Hz"),
                     ("amplitude: twin [CI] / predicted",
                      f"{m.amplitude_hz:.4g} Hz [{m.amplitude_ci_hz[0]:.4g}, {m.amplitude_ci_hz[1]:.4g}] / "
                      f"{m.predicted_amplitude_hz:.4g} Hz"),
                     ("phase: twin [CI] / predicted",
                      f"{m.phase_deg:.1f}° [{m.phase_ci_deg[0]:.1f}, {m.phase_ci_deg[1]:.1f}] / "
                      f"{m.predicted_phase_deg:.1f}°"),
                     ("modulation p-value", f"{m.p_value:.3g}")]
        return "Agreement of the Monte Carlo twin with the prediction", rows, None

    def to_dataframe(self):
        """Per bin: end time (ms), prediction and twin (Hz), standard error (Hz) and standardised residual."""
        return dataframe({"t_ms": self.t, "prediction_Hz": self.prediction, "twin_Hz": self.twin,
                          "se_Hz": self.se, "z": self.z})


def _num(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _pooled_chi2(observed: np.ndarray, expected: np.ndarray) -> tuple[float, int]:
    """Pearson chi-square with neighbouring bins pooled until each expected count is >= MIN_EXPECTED."""
    chi2, groups, o_acc, e_acc = 0.0, 0, 0.0, 0.0
    pending = None
    for o, e in zip(observed, expected):
        o_acc += o
        e_acc += e
        if e_acc >= MIN_EXPECTED:
            if pending is not None:
                chi2 += (pending[0] - pending[1]) ** 2 / pending[1]
                groups += 1
            pending = (o_acc, e_acc)
            o_acc = e_acc = 0.0
    if pending is None:
        return math.nan, 0
    # a short remainder joins the last full group
    o, e = pending[0] + o_acc, pending[1] + e_acc
    return chi2 + (o - e) ** 2 / e, groups + 1


def _mean_test(observed: np.ndarray, expected: np.ndarray) -> tuple[float, float]:
    """Relative excess of spikes and the p-value of Student's t on the excess per block."""
    from scipy import stats

    total = float(expected.sum())
    excess = float(observed.sum()) / total - 1.0 if total > 0 else math.nan
    if observed.size < 2 * MEAN_BLOCKS:
        return excess, math.nan
    d = np.array([o.sum() - e.sum() for o, e in zip(np.array_split(observed, MEAN_BLOCKS),
                                                       np.array_split(expected, MEAN_BLOCKS))])
    sd = float(np.std(d, ddof=1))
    if sd == 0.0:
        return excess, 1.0 if np.all(d == 0) else 0.0
    tval = float(np.mean(d)) / (sd / math.sqrt(MEAN_BLOCKS))
    return excess, float(2.0 * stats.t.sf(abs(tval), MEAN_BLOCKS - 1))


def _modulation(t, width, pred, twin, var, frequency, phase0, alpha) -> Modulation | None:
    from scipy import stats

    period = 1000.0 / frequency  # ms
    t_end = t[-1]
    n_periods = int(math.floor((t_end - (t[0] - width[0])) / period + 1e-9))
    if n_periods < 1:
        return None
    skip = 1 if n_periods >= DROP_FIRST_PERIOD_FROM else 0
    t0 = t_end - (n_periods - skip) * period
    sel = (t - width) >= t0 - 1e-9 * period
    if sel.sum() < 4:
        return None
    centre = (t - 0.5 * width)[sel]
    w = 2.0 * math.pi * frequency * 1e-3  # rad/ms
    x = np.column_stack([np.ones(centre.size), np.cos(w * centre), np.sin(w * centre)])
    weight = 1.0 / var[sel]
    xtw = x.T * weight
    cov = np.linalg.inv(xtw @ x)
    beta_twin = cov @ (xtw @ twin[sel])
    beta_pred = cov @ (xtw @ pred[sel])
    # averaging a sinusoid over a bin of width h scales it by sinc(f h) (bins share one width here)
    shrink = float(np.sinc(frequency * 1e-3 * np.median(width[sel])))
    c2 = cov[1:, 1:]
    diff = beta_twin[1:] - beta_pred[1:]
    wald = float(diff @ np.linalg.solve(c2, diff))
    p = float(stats.chi2.sf(wald, 2))
    zq = float(stats.norm.ppf(1.0 - alpha / 2.0))

    def amp_phase(beta):
        a, b = beta[1], beta[2]
        amp = math.hypot(a, b)
        # a cos + b sin = amp sin(w t + phi), phi = atan2(a, b); relative to the drive's phase
        phase = math.degrees(math.remainder(math.atan2(a, b) - phase0, 2.0 * math.pi))
        return amp, phase, a, b

    amp, phase, a, b = amp_phase(beta_twin)
    amp_p, phase_p, _, _ = amp_phase(beta_pred)
    grad_amp = np.array([a, b]) / amp if amp > 0 else np.array([1.0, 0.0])
    se_amp = math.sqrt(float(grad_amp @ c2 @ grad_amp))
    grad_ph = np.array([b, -a]) / amp**2 if amp > 0 else np.array([math.inf, math.inf])
    se_ph = math.degrees(math.sqrt(float(grad_ph @ c2 @ grad_ph))) if amp > 0 else 180.0
    return Modulation(
        frequency_hz=float(frequency),
        amplitude_hz=amp / shrink, amplitude_ci_hz=(max(amp - zq * se_amp, 0.0) / shrink, (amp + zq * se_amp) / shrink),
        phase_deg=phase, phase_ci_deg=(phase - zq * se_ph, phase + zq * se_ph),
        predicted_amplitude_hz=amp_p / shrink, predicted_phase_deg=phase_p,
        wald=wald, p_value=p, window_ms=(float(t0), float(t_end)))


def agreement(prediction, twin, alpha: float = DEFAULT_ALPHA, drive=None) -> Agreement:
    """Test a Monte Carlo twin against a prediction on the same output grid.

    Parameters
    ----------
    prediction : Result
        Density prediction (from :func:`popdens.simulate`).
    twin : Result
        Monte Carlo run of the same population and drive (from :func:`popdens.montecarlo`) with the
        same ``record_interval``.
    alpha : float
        Significance level of the verdict, in (0, 1); default 0.01.
    drive : Drive, optional
        The drive of both runs; a :class:`popdens.drive.Sine` adds the modulation test.  Default: the
        prediction's drive is not stored, so without it only the chi-square test runs.

    Returns
    -------
    Agreement
        Verdict, chi-square test, modulation fit, standardised residuals; ``.plot()`` draws them.

    Raises
    ------
    ValueError
        If ``alpha`` is outside (0, 1), ``twin`` is not a Monte Carlo result or the two time grids
        differ.
    """
    from scipy import stats

    from ..model.drive import Sine

    if not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0):
        raise ValueError(f"`alpha` must lie in (0, 1), got {alpha!r}")
    if getattr(twin, "n_neurons", None) is None:
        raise ValueError("`twin` must be a Monte Carlo result (popdens.montecarlo)")
    n = min(prediction.t.size, twin.t.size)
    if n < 2 or not np.allclose(prediction.t[:n], twin.t[:n], rtol=0.0, atol=1e-9 * max(1.0, twin.t[n - 1])):
        raise ValueError("`prediction` and `twin` must share their output times (same record_interval)")
    t = twin.t[1:n]
    width = np.diff(twin.t[:n])
    pred = np.asarray(prediction.rate[1:n], dtype=float)
    mc = np.asarray(twin.rate[1:n], dtype=float)
    ok = np.isfinite(pred) & np.isfinite(mc)
    t, width, pred, mc = t[ok], width[ok], pred[ok], mc[ok]
    nw = twin.n_neurons * width * 1e-3  # neuron-seconds per bin
    expected = np.maximum(pred, 0.0) * nw
    observed = mc * nw
    chi2, dof = _pooled_chi2(observed, expected)
    p_value = float(stats.chi2.sf(chi2, dof)) if dof else math.nan
    rate_excess, mean_p = _mean_test(observed, expected)
    # variance from the predicted rate (the hypothesis under test), floored at one expected spike
    var = np.maximum(expected, 1.0) / nw**2
    se = np.sqrt(var)
    z = (mc - pred) / se
    se_twin = twin.rate_standard_error()[1:n][ok]
    within = float(np.mean(np.abs(mc - pred) <= 4.0 * np.maximum(se_twin, 1e-12))) if mc.size else math.nan
    modulation = None
    if isinstance(drive, Sine) and drive.frequency > 0 and drive.amplitude != 0 and t.size >= 4:
        phase0 = drive.phase + (math.pi if drive.amplitude < 0 else 0.0)
        modulation = _modulation(t, width, pred, mc, var, drive.frequency, phase0, alpha)
    p_values = [p for p in (p_value, mean_p, modulation.p_value if modulation else None) if p is not None and
                math.isfinite(p)]
    agrees = all(p >= alpha / max(len(p_values), 1) for p in p_values)
    return Agreement(alpha=float(alpha), agrees=bool(agrees), chi2=float(chi2), dof=int(dof),
                     p_value=p_value, rate_excess=rate_excess, mean_p_value=mean_p, fraction_within_4_se=within, n_neurons=int(twin.n_neurons),
                     modulation=modulation, t=t, z=z, prediction=pred, twin=mc, se=se)
