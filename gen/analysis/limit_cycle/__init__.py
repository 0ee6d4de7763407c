"""The model's limit cycle: found by following the flow, pinned down by Newton shooting, read off
as period, range and Floquet multipliers (:mod:`.cycle` runs the stages and holds the result;
:mod:`.flow` the budgeted vector field, :mod:`.search` stage 1, :mod:`.shooting` stage 2)."""

from orbitfix.gen.analysis.limit_cycle.cycle import LimitCycle, find_limit_cycle

__all__ = ["LimitCycle", "find_limit_cycle"]
