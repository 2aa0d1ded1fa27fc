"""Neuron models, escape functions, noise models and populations, input drives, the safe expression
parser and the compiled building blocks they share (the bottom layer above the shared ground floor)."""

from . import drive, hazard
from .adaptation import Adaptation, MovingThreshold
from .conductance import ConductanceNoise
from .neurons import EIF, LIF, PIF, QIF, CustomNeuron, NeuronBase
from .noise import EscapeNoise, Population, WhiteNoise
from .shot import ShotNoise
from .synaptic import ColouredNoise

__all__ = [
    "Adaptation", "ColouredNoise", "ConductanceNoise", "CustomNeuron", "EIF", "EscapeNoise", "LIF", "MovingThreshold", "NeuronBase", "PIF",
    "Population", "QIF", "ShotNoise", "WhiteNoise", "drive", "hazard",
]
