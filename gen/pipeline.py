"""The generation pipeline in one call: model -> analysis -> timing -> fixed-point plan ->
integer program, each stage reading only what the one before produced."""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.limit_cycle import LimitCycle, find_limit_cycle
from orbitfix.gen.analysis.near_rest import near_rest_starts
from orbitfix.gen.analysis.summary import Analysis, analyse
from orbitfix.gen.errors import InputError, OrbitfixError
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program.fixed_point import FixedPointPlan, plan_fixed_point
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.program.outputs import plan_outputs
from orbitfix.gen.program.plan_checks import refuse_vanished_constants
from orbitfix.gen.timing.integrators import Integrator, get_integrator
from orbitfix.gen.timing.step_size import Timing, plan_timing
from orbitfix.gen.work_size import float_run, golden_run


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


class CornerError(OrbitfixError):
    """At a corner of the runtime parameters' ranges the model has no stable cycle (exit 1)."""

    exit_code = 1


MOST_RUNTIME_PARAMETERS = 4  # 2**4 corners, each a limit-cycle search


@dataclass(frozen=True)
class Design:
    """Everything the C emitter and the verifiers need for one model."""

    model: Model
    analysis: Analysis
    timing: Timing
    integrator: Integrator
    plan: FixedPointPlan
    corners: tuple[tuple[dict[str, float], LimitCycle], ...] = ()


def design(model: Model, analysis: Analysis | None = None) -> Design:
    """Run the pipeline up to the planned integer program; raises if there is no stable cycle."""
    integrator = get_integrator(model.fixed_point.integrator)
    analysis = analysis if analysis is not None else analyse(model)
    if not analysis.ok:
        raise NoStableCycleError(analysis)
    timing = plan_timing(model, analysis.cycle.period)
    corners = corner_cycles(model)
    samples = np.hstack([analysis.cycle.samples, *(cycle.samples for _, cycle in corners)])
    near, _ = near_rest_starts(analysis)
    plan = plan_step(model, integrator, timing.step, samples, path_steps=start_path_steps(model),
                     extra_starts=np.stack([s.point for s in near], axis=1) if near else None)
    return Design(model=model, analysis=analysis, timing=timing, integrator=integrator, plan=plan,
                  corners=corners)


START_PATH_CYCLES = 3  # cycles of the float step map from every start the plan covers
CHECKED_PATH_CYCLES = 2  # cycles of golden beside the float step map (gen/study/start_path.py)
DESIGN_SECONDS = 60.0  # the longest a design may take to plan and check its start-up path


def start_path_steps(model: Model, cycles: float = START_PATH_CYCLES) -> int:
    """Steps of the start-up path the plan covers: ``cycles`` wanted cycles at the loop rate."""
    return math.ceil(cycles * model.rhythm.loop_hz / model.rhythm.cycle_hz)


def plan_step(model: Model, integrator: Integrator, step: float,
              samples: np.ndarray, path_steps: int = 0,
              extra_starts: np.ndarray | None = None) -> FixedPointPlan:
    """The one lower-then-plan path: the step of ``model`` at ``step`` (model time units) lowered
    to an integer program and planned from ``samples`` (shape (n_states, k), the model's states
    only) with the model's fixed-point request and its runtime parameters' ranges, and over the
    float step map's path of ``path_steps`` steps from every start (the initial state, the runtime
    corners, ``extra_starts``: the proof's starts near the unstable equilibria, shape (n_states, k);
    see fixed_point.start_paths). A plan with a
    step constant that rounds to zero is refused (gen/program/plan_checks.py)."""
    request = model.fixed_point
    program = lower_step(model, integrator, step)
    extra = 0 if extra_starts is None else np.shape(extra_starts)[1]
    if path_steps > 0:
        _refuse_slow_path(model, len(program.ops), path_steps, extra)
    plan = plan_fixed_point(program, samples, model.initial_state,
                            margin=request.margin, fraction_bits=request.fraction_bits,
                            word_bits=request.word_bits, rounding=request.rounding,
                            overflow=request.overflow, runtime=model.runtime_parameters,
                            path_steps=path_steps, extra_starts=extra_starts)
    refuse_vanished_constants(plan, model.name, model.rhythm.loop_hz / model.rhythm.cycle_hz)
    return plan_outputs(model, plan, model.rhythm.loop_hz)


def _refuse_slow_path(model: Model, operations: int, path_steps: int, extra: int = 0) -> None:
    """Size the start-up path before it runs: the float step map over ``path_steps`` steps from
    every start, and golden beside it over the checked cycles. Refused beyond DESIGN_SECONDS."""
    starts = 1 + 2 ** len(model.runtime_parameters) + extra
    checked = path_steps * CHECKED_PATH_CYCLES / START_PATH_CYCLES
    work = (float_run("planning the start-up path", operations, path_steps, columns=2 * starts)
            + golden_run("checking it", operations, checked))
    if work.seconds > DESIGN_SECONDS:
        steps_per_cycle = model.rhythm.loop_hz / model.rhythm.cycle_hz
        raise InputError(
            f"model {model.name!r}: {work.what} at {steps_per_cycle:,.0f} steps per cycle would need "
            f"{work.describe()}, more than the {DESIGN_SECONDS:g} s a design may take; give a lower "
            "loop_hz (fewer steps per cycle) or a higher cycle_hz")


def program_states(model: Model, samples: np.ndarray) -> np.ndarray:
    """Samples of the model's states, shape (n, k), extended with the rows the program also
    carries: each runtime parameter's current value and target, both held at the model's value.
    Shape (n + 2 * runtime parameters, k): what a run of the program starts from."""
    samples = np.asarray(samples, dtype=float)
    held = [v for p in model.runtime_parameters for v in (p.value, p.value)]
    if not held:
        return samples
    rows = np.repeat(np.reshape(np.asarray(held, dtype=float), (-1, 1)), samples.shape[1], axis=1)
    return np.vstack([samples, rows])


def corner_cycles(model: Model) -> tuple[tuple[dict[str, float], LimitCycle], ...]:
    """The limit cycle at every corner of the runtime parameters' ranges: the plan must hold
    there too. Raises CornerError where a corner has no stable cycle."""
    runtime = model.runtime_parameters
    if len(runtime) > MOST_RUNTIME_PARAMETERS:
        raise InputError(f"model '{model.name}' has {len(runtime)} runtime parameters; the plan "
                         f"checks every corner of their ranges, so at most "
                         f"{MOST_RUNTIME_PARAMETERS} are supported")
    found = []
    for values in itertools.product(*((p.low, p.high) for p in runtime)):
        corner = dict(zip((p.name for p in runtime), values, strict=True))
        cycle = find_limit_cycle(model.with_parameters(corner))
        if not (cycle.found and cycle.stable and cycle.isolated):
            where = ", ".join(f"{k} = {v:g}" for k, v in corner.items())
            raise CornerError(f"model '{model.name}' at {where} (a corner of its runtime ranges) "
                              f"has no stable limit cycle: {cycle.verdict} Narrow the runtime "
                              "range so the rhythm holds over all of it.")
        found.append((corner, cycle))
    return tuple(found) if runtime else ()
