"""Fitting population models to recorded data, with uncertainty.

Spike trains (ms), stimuli (mV) and measured gain curves in
(:mod:`~popdens.fitting.data`); maximum-likelihood fits of ISIs under
constant drive, of spike trains under a time-varying stimulus (escape
noise), weighted least squares of gain curves, and the calibration of an
escape-noise population to a white-noise one; standard errors from the
observed information, profile intervals, and the time-rescaling
goodness-of-fit test.
"""

from .bridge import Calibration, calibrate_escape
from .data import GainCurve, SpikeTrains, load_gain_curve, load_spike_trains, load_stimulus
from .estimate import FitResult
from .gain_curve import fit_gain
from .isi import fit_isi, isi_loglik
from .psth import fit_psth, psth_loglik

__all__ = ["Calibration", "FitResult", "GainCurve", "SpikeTrains", "calibrate_escape", "fit_gain", "fit_isi", "fit_psth", "isi_loglik",
           "load_gain_curve", "load_spike_trains", "load_stimulus", "psth_loglik"]
