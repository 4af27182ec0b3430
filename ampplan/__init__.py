"""ampplan: plan the DC bias of multi-stage bipolar-transistor amplifiers.

The core (devices, circuit, solver, stages, plan, analyses, plan files) imports numpy and scipy
only; notebook widgets and the canvas load when first used.
"""

from . import errors, eseries
from .circuit import Circuit
from .devices import PRESETS, Transistor, preset, thermal_voltage
from .plan import Plan
from .solver import Check, OperatingPoint, TransistorResult
from .stages import CommonBase, CommonCollector, CommonEmitter, CustomStage

__all__ = ["errors", "eseries", "Circuit", "Transistor", "thermal_voltage", "preset", "PRESETS", "OperatingPoint",
           "TransistorResult", "Check", "Plan", "CommonEmitter", "CommonCollector", "CommonBase", "CustomStage"]
__version__ = "0.1.0"


def load_ipython_extension(ipython) -> None:
    """``%load_ext ampplan``: BokehJS from the local Jupyter server and the display hooks.

    Imports the notebook layer only when IPython calls it, so ``import ampplan`` stays light.
    """
    from .notebook.extension import load_ipython_extension as load

    load(ipython)
