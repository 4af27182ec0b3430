"""Analyses of solved circuits and plans: midband small-signal, load lines, swing, dissipation.

Analyses are functions of an operating point, single or batched; only the Ebers–Moll clipping
search solves again (batched solves of the same circuit with its capacitors held).
"""

from .chain import analyse_compiled, analyse_plan
from .clipping import clipping_batch
from .dissipation import BatchCautions
from .incremental import IncrementalSystem, TransistorModels, Variant, transistor_models
from .results import Clipping, LoadLine, LoadLines, PlanResult, StageResult, Swing
from .smallsignal import IncrementalModel, incremental_models, solve_incremental
from .sweep import clipping_sweep, held_capacitor_circuit

__all__ = ["analyse_plan", "analyse_compiled", "PlanResult", "StageResult", "Swing", "LoadLine", "LoadLines",
           "Clipping", "BatchCautions", "IncrementalSystem", "Variant", "TransistorModels", "transistor_models",
           "clipping_batch", "IncrementalModel", "incremental_models", "solve_incremental", "clipping_sweep",
           "held_capacitor_circuit"]
