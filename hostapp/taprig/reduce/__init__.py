"""taprig.reduce — counts → calibrated pressures → Cp → section coefficients, with flags and uncertainties. Pure.

Build a :class:`Reducer` once per run from the rig, its calibration, the ambient conditions and the options; then
``reducer.reduce(block)`` turns each :class:`taprig.protocol.RawBlock` into a :class:`ReducedBlock` (per scan:
pressures, Cp, q, speed, Re, Mach, plain-trapezoid coefficients, flags) and ``reducer.reduce_mean(block)`` gives
a :class:`ReducedMean` (block mean with GUM uncertainties, plain and shape-aware integrals, wall corrections).
See docs/reduction.md.
"""

from taprig.reduce.ambient import Ambient, FluidProperties, ReduceOptions
from taprig.reduce.block import ReducedBlock, finite_mean
from taprig.reduce.flags import ChannelFlag, ScanFlag, count_flags, flag_names
from taprig.reduce.mean import Coefficients, ReducedMean, reduce_mean
from taprig.reduce.reducer import Reducer, ambient_for, stated_assumptions
from taprig.reduce.references import ReduceError

__all__ = [
    "Ambient", "ChannelFlag", "Coefficients", "FluidProperties", "ReduceError", "ReduceOptions", "ReducedBlock",
    "ReducedMean", "Reducer", "ScanFlag", "ambient_for", "count_flags", "finite_mean", "flag_names", "reduce_mean",
    "stated_assumptions",
]
