"""The generation pipeline in one call: model -> analysis -> timing -> fixed-point plan ->
integer program, each stage reading only what the one before produced."""

from __future__ import annotations

from dataclasses import dataclass

from gen.analysis import Analysis, analyse
from gen.errors import OrbitfixError
from gen.fixed_point import FixedPointPlan, plan_fixed_point
from gen.integrators import Integrator, get_integrator
from gen.lowering import lower_step
from gen.model import Model
from gen.timing import Timing, plan_timing


class NoStableCycleError(OrbitfixError):
    """The continuous model has no stable, isolated limit cycle to put on a controller (exit 1).

    Carries the analysis so the caller can still show what was found.
    """

    exit_code = 1

    def __init__(self, analysis: Analysis) -> None:
        self.analysis = analysis
        super().__init__(f"model '{analysis.to_json()['model']}' has no stable limit cycle: "
                         f"{analysis.cycle.verdict} Change the parameters (for example with "
                         "--set) so that the cycle is stable before generating code.")


@dataclass(frozen=True)
class Design:
    """Everything the C emitter and the verifiers need for one model."""

    model: Model
    analysis: Analysis
    timing: Timing
    integrator: Integrator
    plan: FixedPointPlan


def design(model: Model, analysis: Analysis | None = None) -> Design:
    """Run the pipeline up to the planned integer program; raises if there is no stable cycle."""
    integrator = get_integrator(model.fixed_point.integrator)
    analysis = analysis if analysis is not None else analyse(model)
    if not analysis.ok:
        raise NoStableCycleError(analysis)
    timing = plan_timing(model, analysis.cycle.period)
    program = lower_step(model, integrator, timing.step)
    request = model.fixed_point
    plan = plan_fixed_point(program, analysis.cycle.samples, model.initial_state,
                            margin=request.margin, fraction_bits=request.fraction_bits,
                            word_bits=request.word_bits, rounding=request.rounding,
                            overflow=request.overflow)
    return Design(model=model, analysis=analysis, timing=timing, integrator=integrator, plan=plan)
