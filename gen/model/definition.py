"""An oscillator model: states, parameters, equations and the wanted rhythm, built in Python or read
from a model file. Everything later in the pipeline reads a :class:`Model` and nothing else."""

from __future__ import annotations

import hashlib
import json
import keyword
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace

import numpy as np
import sympy

from orbitfix.gen.c.naming import check_names
from orbitfix.gen.errors import InputError
from orbitfix.gen.model import limits
from orbitfix.gen.model.compiled import array_function
from orbitfix.gen.model.expressions import ACCEPTED, FUNCTIONS, ExpressionError, parse_expression

NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_]*", re.ASCII)
RESERVED = set(FUNCTIONS) | {"t", "time"}


@dataclass(frozen=True)
class State:
    """One state variable: its name, initial value and what it means to the user.

    angle : bool -- the state is an angle in radians that lives modulo 2 pi (a phase): the
        analysis compares it on the circle, and a cycle may advance it by whole turns.
    """

    name: str
    initial: float
    meaning: str = ""
    angle: bool = False


@dataclass(frozen=True)
class Parameter:
    """One named constant of the equations, with its value.

    A runtime parameter (``runtime`` True) is one the firmware may change between steps, within
    [low, high]: it becomes a field of the generated state with a setter, and the plan must hold
    over the whole range. rate : float, units per second -- the fastest it may move toward a
    new setting (a ramp, so the output does not jump); None moves it in one step.
    """

    name: str
    value: float
    meaning: str = ""
    runtime: bool = False
    low: float | None = None
    high: float | None = None
    rate: float | None = None


@dataclass(frozen=True)
class Output:
    """One output to an actuator: ``value``, an expression of the states and parameters, read
    from the state after each step, brought to the actuator's unit as offset + scale * value,
    clamped to [low, high] and, with a ``slew`` limit (actuator units per second), moved by at
    most slew / loop_hz per step (see gen/program/integer_program.py for the exact semantics).
    ``unit`` is text for people (comments, reports), e.g. "deg"."""

    name: str
    value: str
    low: float
    high: float
    scale: float = 1.0
    offset: float = 0.0
    unit: str = ""
    slew: float | None = None
    meaning: str = ""


OUTPUT_KEYS = ("value", "scale", "offset", "unit", "min", "max", "slew", "meaning")
OUTPUT_HINT = ('hip = { value = "r * cos(theta)", scale = 30.0, offset = 90.0, unit = "deg", '
               "min = 45.0, max = 135.0, slew = 200.0 } (value, min and max are needed; scale "
               "defaults to 1, offset to 0; slew, in units per second, is optional)")


@dataclass(frozen=True)
class Rhythm:
    """The wanted rhythm in physical terms.

    cycle_hz : float, Hz -- frequency of the cycle on the machine.
    loop_hz : float, Hz -- rate at which the control loop calls the step function.
    """

    cycle_hz: float
    loop_hz: float


@dataclass(frozen=True)
class FixedPointRequest:
    """What the user asks of the fixed-point plan; ``None`` leaves a choice to the planner."""

    fraction_bits: int | None = None
    margin: float = 2.0
    integrator: str = "rk4"
    word_bits: int = 32
    rounding: str = "half-up"
    overflow: str = "saturate"


@dataclass(frozen=True)
class Model:
    """A continuous-time oscillator model dx/dt = f(x; p) with its wanted rhythm."""

    name: str
    description: str
    states: tuple[State, ...]
    parameters: tuple[Parameter, ...]
    equation_text: tuple[str, ...]
    rhythm: Rhythm
    fixed_point: FixedPointRequest = field(default_factory=FixedPointRequest)
    source: str = "python"
    # for a network of coupled oscillators (gen/networks.py): which states belong to which
    # oscillator and the wanted phase lags; None for a single oscillator
    network: object | None = field(default=None, compare=False, repr=False)
    outputs: tuple[Output, ...] = ()

    def __post_init__(self) -> None:
        _check_names(self)
        _check_numbers(self)
        if len(self.equation_text) != len(self.states):
            raise InputError(f"model '{self.name}': {len(self.states)} states but "
                             f"{len(self.equation_text)} equations; give one equation per state")
        _check_runtime(self)
        self.equations  # noqa: B018 -- parse now so a broken equation fails at construction
        _check_outputs(self)

    # -- symbols and expressions ---------------------------------------------------------------

    @property
    def state_names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.states)

    @property
    def parameter_values(self) -> dict[str, float]:
        return {p.name: p.value for p in self.parameters}

    @property
    def state_symbols(self) -> tuple[sympy.Symbol, ...]:
        return tuple(sympy.Symbol(n, real=True) for n in self.state_names)

    @property
    def parameter_symbols(self) -> tuple[sympy.Symbol, ...]:
        return tuple(sympy.Symbol(p.name, real=True) for p in self.parameters)

    @property
    def equations(self) -> tuple[sympy.Expr, ...]:
        """Right-hand sides with parameters kept as symbols."""
        cached = self.__dict__.get("_equations")
        if cached is None:
            table = {s.name: s for s in self.state_symbols + self.parameter_symbols}
            parsed = []
            for state, text in zip(self.states, self.equation_text, strict=True):
                try:
                    parsed.append(parse_expression(text, table))
                except ExpressionError as exc:
                    raise ExpressionError(exc.text, exc.column, exc.offending,
                                          f"model '{self.name}', equation for '{state.name}': "
                                          f"{exc.problem}") from None
            cached = tuple(parsed)
            object.__setattr__(self, "_equations", cached)
        return cached

    @property
    def resolved_equations(self) -> tuple[sympy.Expr, ...]:
        """Right-hand sides with every parameter replaced by its value."""
        values = {sym: _number(p.value) for sym, p in zip(self.parameter_symbols,
                                                           self.parameters, strict=True)}
        return tuple(eq.xreplace(values) for eq in self.equations)

    def output_expression(self, output: Output) -> sympy.Expr:
        """An output's value with every parameter but the runtime ones replaced by its value (the
        same symbols as ``fixed_equations``)."""
        table = {s.name: s for s in self.state_symbols + self.parameter_symbols}
        values = {sym: _number(p.value) for sym, p in zip(self.parameter_symbols,
                                                           self.parameters, strict=True)
                  if not p.runtime}
        return parse_expression(output.value, table).xreplace(values)

    @property
    def runtime_parameters(self) -> tuple[Parameter, ...]:
        return tuple(p for p in self.parameters if p.runtime)

    @property
    def fixed_equations(self) -> tuple[sympy.Expr, ...]:
        """Right-hand sides with every parameter but the runtime ones replaced by its value (the
        runtime ones stay symbols: the firmware sets them)."""
        values = {sym: _number(p.value) for sym, p in zip(self.parameter_symbols,
                                                           self.parameters, strict=True)
                  if not p.runtime}
        return tuple(eq.xreplace(values) for eq in self.equations)

    @property
    def initial_state(self) -> np.ndarray:
        return np.array([s.initial for s in self.states], dtype=float)

    @property
    def dimension(self) -> int:
        return len(self.states)

    @property
    def angle_states(self) -> tuple[int, ...]:
        """The indices of the states that are angles."""
        return tuple(i for i, s in enumerate(self.states) if s.angle)

    @property
    def angle_mask(self) -> np.ndarray:
        """Boolean array, shape (n,): True for the states that are angles (modulo 2 pi)."""
        return np.array([s.angle for s in self.states], dtype=bool)

    # -- numeric functions ---------------------------------------------------------------------

    def vector_field(self) -> Callable[[float, np.ndarray], np.ndarray]:
        """f(t, x) for scipy's solvers, parameters folded in. x : ndarray, shape (n,) or (n, k)."""
        f = array_function(self.state_symbols, self.resolved_equations)
        return lambda t, x: f(x)

    def jacobian(self) -> Callable[[np.ndarray], np.ndarray]:
        """J(x) = df/dx, shape (n, n), from the symbolic derivative."""
        matrix = sympy.Matrix(self.resolved_equations).jacobian(sympy.Matrix(self.state_symbols))
        rows = [matrix[i, j] for i in range(self.dimension) for j in range(self.dimension)]
        flat = array_function(self.state_symbols, tuple(rows))
        n = self.dimension
        return lambda x: flat(np.asarray(x, dtype=float)).reshape(n, n)

    def divergence(self) -> Callable[[np.ndarray], float]:
        """Trace of the Jacobian: the rate at which phase-space volume grows."""
        trace = sum((sympy.diff(eq, s) for eq, s in zip(self.resolved_equations,
                                                        self.state_symbols, strict=True)),
                    sympy.Integer(0))
        f = array_function(self.state_symbols, (trace,))
        return lambda x: float(f(np.asarray(x, dtype=float))[0])

    # -- variants and identity -----------------------------------------------------------------

    def with_parameters(self, overrides: Mapping[str, float]) -> Model:
        """A copy with some parameter values replaced; unknown names are an input error."""
        known = self.parameter_values
        for name, value in overrides.items():
            if name not in known:
                choices = ", ".join(known) or "none"
                raise InputError(f"model '{self.name}' has no parameter '{name}' "
                                 f"(its parameters are: {choices})")
            limits.check(value, limits.PARAMETER,
                         f"model '{self.name}', parameter '{name}' (given as an override, --set)")
        parameters = tuple(replace(p, value=float(overrides.get(p.name, p.value)))
                           for p in self.parameters)
        for p in parameters:
            if p.runtime and not p.low <= p.value <= p.high:
                raise InputError(f"model '{self.name}': {p.name} = {p.value:g} lies outside its "
                                 f"runtime range [{p.low:g}, {p.high:g}]")
        return replace(self, parameters=parameters)

    def with_fixed_point(self, **changes: object) -> Model:
        return replace(self, fixed_point=replace(self.fixed_point, **changes))

    def describe(self) -> dict:
        """A plain-data description (the model's canonical form, used for its fingerprint)."""
        outputs = {"outputs": {o.name: {"value": o.value, "scale": o.scale, "offset": o.offset,
                                        "unit": o.unit, "min": o.low, "max": o.high,
                                        "slew": o.slew, "meaning": o.meaning}
                               for o in self.outputs}} if self.outputs else {}
        return {**outputs,
            "name": self.name,
            "description": self.description,
            "states": [{"name": s.name, "initial": s.initial, "meaning": s.meaning,
                        **({"angle": True} if s.angle else {})}
                       for s in self.states],
            "parameters": [{"name": p.name, "value": p.value, "meaning": p.meaning,
                            **({"runtime": {"min": p.low, "max": p.high, "rate": p.rate}}
                               if p.runtime else {})}
                           for p in self.parameters],
            "equations": {s.name: t for s, t in zip(self.states, self.equation_text, strict=True)},
            "rhythm": {"cycle_hz": self.rhythm.cycle_hz, "loop_hz": self.rhythm.loop_hz},
            "fixed_point": {"fraction_bits": self.fixed_point.fraction_bits,
                            "margin": self.fixed_point.margin,
                            "integrator": self.fixed_point.integrator,
                            "word_bits": self.fixed_point.word_bits,
                            "rounding": self.fixed_point.rounding,
                            "overflow": self.fixed_point.overflow},
        }

    def fingerprint(self) -> str:
        """A short hash of the canonical description: same model, same fingerprint."""
        canonical = json.dumps(self.describe(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()[:16]


def define_model(
    name: str,
    states: Mapping[str, float],
    equations: Mapping[str, str],
    parameters: Mapping[str, float] | None = None,
    *,
    cycle_hz: float,
    loop_hz: float,
    description: str = "",
    fraction_bits: int | None = None,
    integrator: str = "rk4",
    angles: tuple[str, ...] | list[str] = (),
    runtime: Mapping[str, Mapping[str, float]] | None = None,
    outputs: Mapping[str, Mapping[str, object]] | None = None,
) -> Model:
    """Build a model in Python: ``define_model("osc", {"x": 1, "y": 0}, {"x": "y", "y": "-x"}, ...)``.

    ``equations`` maps each state name to the text of its time derivative; ``angles`` names the
    states that are angles in radians, living modulo 2 pi (phases); ``outputs`` maps each output's
    name to its ``value``, ``min``, ``max`` and optional ``scale``, ``offset``, ``unit``,
    ``slew`` and ``meaning``, as the model file's [outputs] table.
    """
    unknown_angles = [a for a in angles if a not in states]
    if unknown_angles:
        raise InputError(f"model '{name}': angles must name states (unknown: {unknown_angles})")
    missing = [s for s in states if s not in equations]
    extra = [e for e in equations if e not in states]
    if missing or extra:
        raise InputError(f"model '{name}': equations must name exactly the states "
                         f"(missing: {missing or 'none'}, unknown: {extra or 'none'})")
    return Model(
        name=name,
        description=description,
        states=tuple(State(n, float(v), angle=n in angles) for n, v in states.items()),
        parameters=tuple(_parameter(n, float(v), (runtime or {}).get(n))
                         for n, v in (parameters or {}).items()),
        equation_text=tuple(equations[n] for n in states),
        rhythm=Rhythm(float(cycle_hz), float(loop_hz)),
        fixed_point=FixedPointRequest(fraction_bits=fraction_bits, integrator=integrator),
        outputs=tuple(make_output(name, entry, f"model '{name}'")
                      for name, entry in (outputs or {}).items()),
    )


def make_output(name: str, entry: Mapping[str, object], where: str) -> Output:
    """An output from its table (the keys of the model file's [outputs] entries); what is missing,
    unknown or of the wrong type is an input error naming ``where`` and the output."""
    place = f"{where}, [outputs] '{name}'"
    if not isinstance(entry, Mapping):
        raise InputError(f"{place}: an output is a table of its value and limits; accepted: "
                         f"{OUTPUT_HINT}")
    unknown = sorted(set(entry) - set(OUTPUT_KEYS))
    missing = [k for k in ("value", "min", "max") if k not in entry]
    if unknown or missing:
        raise InputError(f"{place}: unknown keys {unknown or 'none'}, missing keys "
                         f"{missing or 'none'}; accepted: {OUTPUT_HINT}")
    for key in ("value", "unit", "meaning"):
        if key in entry and not isinstance(entry[key], str):
            raise InputError(f"{place}: {key} must be a quoted string, got {entry[key]!r}; "
                             f"accepted: {OUTPUT_HINT}")
    numbers = {}
    for key, default in (("min", None), ("max", None), ("scale", 1.0), ("offset", 0.0)):
        numbers[key] = limits.check(entry.get(key, default), limits.OUTPUT_NUMBER,
                                    f"{place}, {key}")
    slew = entry.get("slew")
    if slew is not None:
        slew = limits.check(slew, limits.SLEW, f"{place}, slew")
    return Output(name=name, value=str(entry["value"]), low=numbers["min"], high=numbers["max"],
                  scale=numbers["scale"], offset=numbers["offset"], unit=str(entry.get("unit", "")),
                  slew=slew, meaning=str(entry.get("meaning", "")))


def _check_outputs(model: Model) -> None:
    """Every output: a safe, unused name; finite numbers in range; min < max; a nonzero scale; a
    positive slew; a value that parses and reads only the model's states and parameters."""
    where = _where(model)
    taken = {n.upper(): n for n in [*model.state_names, *(p.name for p in model.parameters)]}
    taken.update({f"{p.name}_target".upper(): f"{p.name}_target" for p in model.runtime_parameters})
    for output in model.outputs:
        place = f"{where}, [outputs] '{output.name}'"
        name = output.name
        if (not isinstance(name, str) or not NAME_PATTERN.fullmatch(name) or keyword.iskeyword(name)
                or name in RESERVED):
            raise InputError(f"{place}: {name!r} cannot be an output name (use letters, digits and "
                             "underscores, start with a letter, and avoid "
                             f"{', '.join(sorted(RESERVED))} and Python keywords); rename it")
        if name.upper() in taken:
            raise InputError(f"{place}: the name is already taken by '{taken[name.upper()]}' (the "
                             "state struct field or its macro in capitals); rename the output")
        taken[name.upper()] = name
        for key, value in (("min", output.low), ("max", output.high), ("scale", output.scale),
                           ("offset", output.offset)):
            limits.check(value, limits.OUTPUT_NUMBER, f"{place}, {key}")
        if not output.low < output.high:
            raise InputError(f"{place}: min ({output.low:g}) must be below max ({output.high:g}); "
                             "give the actuator's lower limit as min and its upper limit as max")
        if output.scale == 0:
            raise InputError(f"{place}: scale is 0, so the output would never move; give the "
                             "actuator's units per unit of the value (e.g. scale = 30.0)")
        if output.slew is not None:
            if not (math.isfinite(output.slew) and output.slew > 0):
                raise InputError(f"{place}: slew must be a positive number of {output.unit or 'units'}"
                                 f" per second, got {output.slew}; leave it out for no slew limit")
            limits.check(output.slew, limits.SLEW, f"{place}, slew")
        try:
            model.output_expression(output)
        except ExpressionError as exc:
            raise InputError(f"{place}: value {exc.problem}: '{exc.offending}' (column "
                             f"{exc.column + 1} of '{exc.text}'); accepted: {ACCEPTED}") from None
    check_names(model.name, model.state_names, [p.name for p in model.parameters],
                [p.name for p in model.runtime_parameters], [o.name for o in model.outputs])


def _parameter(name: str, value: float, runtime: Mapping[str, float] | None) -> Parameter:
    if runtime is None:
        return Parameter(name, value)
    unknown = set(runtime) - {"min", "max", "rate"}
    if unknown or "min" not in runtime or "max" not in runtime:
        raise InputError(f"runtime parameter '{name}': give min and max (and optionally rate), "
                         f"e.g. {{'min': 0.5, 'max': 2.0, 'rate': 0.5}}")
    rate = runtime.get("rate")
    return Parameter(name, value, runtime=True, low=float(runtime["min"]),
                     high=float(runtime["max"]), rate=None if rate is None else float(rate))


def _check_runtime(model: Model) -> None:
    for p in model.runtime_parameters:
        for value, key in ((p.low, "min"), (p.high, "max")):
            if value is not None:
                limits.check(value, limits.PARAMETER, f"{_where(model)}, {key} of '{p.name}'")
        finite = all(v is not None and math.isfinite(v) for v in (p.low, p.high))
        if not finite or not p.low < p.high:
            raise InputError(f"model '{model.name}': runtime parameter '{p.name}' needs finite "
                             f"min < max, got [{p.low}, {p.high}]")
        if not p.low <= p.value <= p.high:
            raise InputError(f"model '{model.name}': {p.name} = {p.value:g} lies outside its "
                             f"runtime range [{p.low:g}, {p.high:g}]")
        if p.rate is not None and not (math.isfinite(p.rate) and p.rate > 0):
            raise InputError(f"model '{model.name}': the rate of '{p.name}' must be a positive "
                             f"number of units per second, got {p.rate}")
        if p.rate is not None:
            limits.check(p.rate, limits.RATE, f"{_where(model)}, rate of '{p.name}'")


def _check_names(model: Model) -> None:
    if not isinstance(model.name, str) or not NAME_PATTERN.fullmatch(model.name):
        raise InputError(f"model name {model.name!r} must start with a letter and hold only "
                         "letters, digits and underscores")
    seen: set[str] = set()
    for name in [s.name for s in model.states] + [p.name for p in model.parameters]:
        if (not isinstance(name, str) or not NAME_PATTERN.fullmatch(name)
                or keyword.iskeyword(name) or name in RESERVED):
            raise InputError(f"model '{model.name}': {name!r} cannot be a state or parameter "
                             "name (use letters, digits and underscores, start with a letter, "
                             f"and avoid {', '.join(sorted(RESERVED))} and Python keywords)")
        if name in seen:
            raise InputError(f"model '{model.name}': the name '{name}' is used twice")
        seen.add(name)
    if not model.states:
        raise InputError(f"model '{model.name}' has no states")
    check_names(model.name, model.state_names, [p.name for p in model.parameters],
                [p.name for p in model.parameters if p.runtime])


def _where(model: Model) -> str:
    """The model and where it came from, for messages."""
    source = "" if model.source in ("python", "") else f" ({model.source})"
    return f"model '{model.name}'{source}"


def _check_numbers(model: Model) -> None:
    """Every number of the model inside its accepted range (gen/model/limits.py)."""
    where = _where(model)
    for value, limit, key in ((model.rhythm.cycle_hz, limits.CYCLE_HZ, "cycle_hz"),
                              (model.rhythm.loop_hz, limits.LOOP_HZ, "loop_hz")):
        limits.check(value, limit, f"{where}, [rhythm] {key}")
    if model.rhythm.loop_hz < 4 * model.rhythm.cycle_hz:
        raise InputError(f"{where}: the loop rate ({model.rhythm.loop_hz:g} Hz) must "
                         f"be at least 4 times the cycle frequency ({model.rhythm.cycle_hz:g} Hz) "
                         "to step the cycle at all")
    limits.check(model.rhythm.loop_hz / model.rhythm.cycle_hz, limits.STEPS_PER_CYCLE,
                 f"{where}, [rhythm] loop_hz / cycle_hz")
    for s in model.states:
        limits.check(s.initial, limits.INITIAL, f"{where}, [states] initial value of '{s.name}'")
    for p in model.parameters:
        limits.check(p.value, limits.PARAMETER, f"{where}, [parameters] '{p.name}'")
    request = model.fixed_point
    limits.check(request.margin, limits.MARGIN, f"{where}, [fixed_point] margin")
    if request.fraction_bits is not None:
        limits.check(request.fraction_bits, limits.FRACTION_BITS,
                     f"{where}, [fixed_point] fraction_bits")


def _number(value: float) -> sympy.Expr:
    """Whole numbers stay exact integers, so a parameter of 1 folds away instead of costing a
    multiplication."""
    return sympy.Integer(int(value)) if float(value).is_integer() else sympy.Float(value)
