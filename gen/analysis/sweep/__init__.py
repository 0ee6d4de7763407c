"""The parameter sweep: equilibria along one parameter, the Hopf points on the way and the cycle
born at each (:mod:`.parameter_sweep` runs the steps and holds the result; :mod:`.continuation`
follows the equilibria, :mod:`.hopf_points` finds the crossings, :mod:`.branch` follows the cycles
by pseudo-arclength continuation through folds)."""

from orbitfix.gen.analysis.sweep.branch import BranchPoint, CycleBranch, Fold
from orbitfix.gen.analysis.sweep.hopf_points import BISECTION_TOLERANCE, HopfPoint
from orbitfix.gen.analysis.sweep.parameter_sweep import (
    DEFAULT_SAMPLES,
    DEFAULT_SECONDS,
    Sweep,
    SweepSample,
    sweep,
)

__all__ = ["BISECTION_TOLERANCE", "DEFAULT_SAMPLES", "DEFAULT_SECONDS", "BranchPoint", "CycleBranch",
           "Fold", "HopfPoint", "Sweep", "SweepSample", "sweep"]
