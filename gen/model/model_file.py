"""Reading model files (TOML, our own layout) and finding built-in models by name.

Every error names the file, the line, the offending text and what would be accepted.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.gen.model import limits
from orbitfix.gen.model.definition import (
    OUTPUT_HINT,
    FixedPointRequest,
    Model,
    Output,
    Parameter,
    Rhythm,
    State,
    make_output,
)
from orbitfix.gen.model.expressions import ACCEPTED, ExpressionError
from orbitfix.gen.model.gaits import GAITS, LIMBS
from orbitfix.gen.model.networks import (
    LINKS,
    OSCILLATORS,
    PATTERNS,
    build_diffusive_network,
    build_network,
    chain_lags,
    gait_lags,
    link_pairs,
    switch_problem,
)

MODELS_FOLDER = Path(__file__).parent / "library"
SHOWN_LINE = 160  # an offending line longer than this is shown shortened in messages

TOP_KEYS = {"name", "description", "states", "parameters", "equations", "rhythm", "fixed_point",
            "outputs"}
STATE_KEYS = {"initial", "meaning", "angle"}
PARAMETER_KEYS = {"value", "meaning", "runtime", "min", "max", "rate"}
RHYTHM_KEYS = {"cycle_hz", "loop_hz"}
FIXED_POINT_KEYS = {"fraction_bits", "margin", "integrator", "word_bits", "rounding", "overflow"}
NETWORK_TOP_KEYS = {"name", "description", "network", "parameters", "rhythm", "fixed_point",
                    "outputs"}
NETWORK_KEYS = {"oscillator", "pattern", "count", "waves", "lags", "links", "labels", "coupling",
                "coupled_state", "switch_to", "switch_waves", "switch_rate"}

RUNTIME_HINT = ("{name} = {{ value = 1.0, runtime = true, min = 0.5, max = 2.0, rate = 0.25 }} "
                "(rate: the fastest change per second; leave it out to change in one step)")

NETWORK_HINT = (
    "a network file has: name, description, [network] oscillator = \"hopf\" or \"phase_amplitude\" "
    f"and either pattern = one of {', '.join(PATTERNS)} (chain also takes count and waves) or lags = "
    "[0, 0.5, ...] in cycles (with links = \"all\" or \"neighbours\" and optional labels; to "
    "switch pattern at run time, switch_to = another gait or, for a chain, switch_waves = another "
    "wave count, with switch_rate per second), then "
    "optional [parameters] (hopf: mu, omega, gamma, k; phase_amplitude: nu, R, a, w); or "
    "oscillator = the name of a single built-in model (e.g. \"vanderpol\") with coupling = [[0, k], "
    "[k, 0]] (diffusive, s_i' += sum_j k_ij (s_j - s_i)) and coupled_state = \"y\", optional lags "
    "(default all 0) and labels, optional [parameters] of that model; then [rhythm] cycle_hz and "
    "loop_hz, optional [fixed_point]"
)

LAYOUT_HINT = (
    "a model file has: name = \"...\", description = \"...\", [states] x = { initial = 0.5 } "
    "(add angle = true for an angle in radians, modulo 2 pi), "
    "[parameters] mu = 1.0, [equations] x = \"...\", [rhythm] cycle_hz = ..., loop_hz = ..., "
    "and optionally [fixed_point] fraction_bits, margin, integrator, and [outputs] " + OUTPUT_HINT
)


class ModelFileError(InputError):
    """A model file is broken; the message carries file, line and offending text."""


def builtin_names() -> list[str]:
    """Names of the models shipped inside the tool."""
    return sorted(p.stem for p in MODELS_FOLDER.glob("*.toml"))


def load_model(name_or_path: str) -> Model:
    """Load a model from a file path, or a built-in model by name."""
    path = Path(name_or_path)
    if path.suffix == ".toml" or path.exists():
        if not path.is_file():
            raise InputError(f"model file '{name_or_path}' does not exist (give a .toml model "
                             f"file or one of the built-in names: {', '.join(builtin_names())})")
        return read_model_file(path)
    builtin = MODELS_FOLDER / f"{name_or_path}.toml"
    if builtin.is_file():
        model = read_model_file(builtin)
        return _as_builtin(model)
    raise InputError(f"unknown model '{name_or_path}': not a file, and not a built-in model "
                     f"(built-in: {', '.join(builtin_names())})")


def _is_single(name: str) -> bool:
    """A built-in model that is one oscillator, not a network file (read without building it)."""
    try:
        return "network" not in tomllib.loads((MODELS_FOLDER / f"{name}.toml").read_text("utf-8"))
    except (OSError, tomllib.TOMLDecodeError):
        return False


def _as_builtin(model: Model) -> Model:
    return replace(model, source=f"built-in:{model.name}")


def read_model_file(path: Path) -> Model:
    """Parse one model file into a :class:`Model`."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelFileError(f"{path}: cannot read the model file ({exc})") from None
    reader = _Reader(path, text)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line = _line_from_message(str(exc))
        raise reader.error(line, f"not valid TOML ({exc})", LAYOUT_HINT) from None
    return reader.build(data)


def _line_from_message(message: str) -> int | None:
    found = re.search(r"line (\d+)", message)
    return int(found.group(1)) if found else None


class _Reader:
    """Turns parsed TOML into a model, locating every complaint in the text."""

    def __init__(self, path: Path, text: str) -> None:
        self.path = path
        self.lines = text.splitlines()

    def error(self, line: int | None, problem: str, accepted: str) -> ModelFileError:
        where = f"{self.path}:{line}" if line else str(self.path)
        text = self.lines[line - 1].strip() if line and line <= len(self.lines) else ""
        text = text if len(text) <= SHOWN_LINE else text[:SHOWN_LINE - 20] + " ... " + text[-15:]
        shown = f"\n    {text}" if text else ""
        return ModelFileError(f"{where}: {problem}{shown}\n  accepted: {accepted}")

    def line_of(self, section: str | None, key: str | None = None) -> int | None:
        """Line of ``key`` inside ``[section]`` (or at top level), or of the section header."""
        current: str | None = None
        header_line = None
        for number, raw in enumerate(self.lines, start=1):
            stripped = raw.strip()
            header = re.match(r"^\[([^\]]+)\]", stripped)
            if header:
                current = header.group(1).strip()
                if current == section:
                    header_line = number
                continue
            if current == section and key is not None and re.match(
                    rf"^\"?{re.escape(key)}\"?\s*=", stripped):
                return number
        return header_line

    def table(self, data: dict, section: str, required: bool = True) -> dict:
        value = data.get(section)
        if value is None:
            if required:
                raise self.error(None, f"the section [{section}] is missing", LAYOUT_HINT)
            return {}
        if not isinstance(value, dict):
            raise self.error(self.line_of(None, section), f"'{section}' must be a section",
                             LAYOUT_HINT)
        return value

    def number(self, value: Any, section: str, key: str, what: str,
               limit: limits.Limit | None = None) -> float:
        """A number of the file, inside ``limit``'s range when one is given (gen/model/limits.py)."""
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(self.line_of(section, key), f"{what} must be a number, got {value!r}",
                             "an integer or decimal number, e.g. 0.5")
        if limit is not None:
            complaint = limits.problem(value, limit)
            if complaint:
                raise self.error(self.line_of(section, key), f"{what}: {complaint}",
                                 limit.accepted())
        return float(value)

    def check_keys(self, table: dict, allowed: set[str], section: str | None,
                   entry: str | None = None) -> None:
        for key in table:
            if key not in allowed:
                where = entry or key
                raise self.error(self.line_of(section, where), f"unknown key '{key}'",
                                 ", ".join(sorted(allowed)))

    def entries(self, data: dict, section: str, value_key: str, allowed: set[str]
                ) -> list[tuple[str, float, str]]:
        result = []
        for name, entry in self.table(data, section, required=(section == "states")).items():
            if isinstance(entry, dict):
                self.check_keys(entry, allowed, section, name)
                if value_key not in entry:
                    raise self.error(self.line_of(section, name),
                                     f"'{name}' needs '{value_key}'",
                                     f"{name} = {{ {value_key} = 0.5, meaning = \"...\" }} or "
                                     f"{name} = 0.5")
                value, meaning = entry[value_key], entry.get("meaning", "")
            else:
                value, meaning = entry, ""
            limit = limits.INITIAL if value_key == "initial" else limits.PARAMETER
            result.append((name, self.number(value, section, name, f"'{name}'", limit),
                           str(meaning)))
        return result

    def parameter(self, data: dict, name: str, value: float, meaning: str) -> Parameter:
        """A parameter, with its runtime range when it has ``runtime = true``."""
        entry = data["parameters"][name]
        if not isinstance(entry, dict) or not entry.get("runtime", False):
            if isinstance(entry, dict) and any(k in entry for k in ("min", "max", "rate")):
                raise self.error(self.line_of("parameters", name),
                                 f"'{name}' has min, max or rate but is not runtime = true",
                                 RUNTIME_HINT.format(name=name))
            return Parameter(name, value, meaning)
        if entry["runtime"] is not True or "min" not in entry or "max" not in entry:
            raise self.error(self.line_of("parameters", name),
                             f"the runtime parameter '{name}' needs runtime = true, min and max",
                             RUNTIME_HINT.format(name=name))
        low = self.number(entry["min"], "parameters", name, f"min of '{name}'", limits.PARAMETER)
        high = self.number(entry["max"], "parameters", name, f"max of '{name}'", limits.PARAMETER)
        rate = entry.get("rate")
        if rate is not None:
            rate = self.number(rate, "parameters", name, f"rate of '{name}'", limits.RATE)
        return Parameter(name, value, meaning, runtime=True, low=low, high=high, rate=rate)

    def angle_flag(self, data: dict, name: str) -> bool:
        """``angle = true`` on a state: it is an angle in radians, living modulo 2 pi."""
        entry = data["states"][name]
        flag = entry.get("angle", False) if isinstance(entry, dict) else False
        if not isinstance(flag, bool):
            raise self.error(self.line_of("states", name), f"'angle' of '{name}' must be true or "
                             f"false, got {flag!r}",
                             f"{name} = {{ initial = 0.0, angle = true }} (an angle in radians, "
                             "modulo 2 pi)")
        return flag

    def build(self, data: dict) -> Model:
        if "network" in data:
            network = self.build_network(data)
            outputs = self.outputs(data)
            if not outputs:
                return network
            try:
                return replace(network, outputs=outputs)
            except InputError as exc:
                raise self.located(exc) from None
        self.check_keys(data, TOP_KEYS, None)
        name = data.get("name")
        if not isinstance(name, str):
            raise self.error(self.line_of(None, "name"), "the model needs a name string",
                             "name = \"my_oscillator\"")
        states = [State(n, v, m, angle=self.angle_flag(data, n)) for n, v, m in
                  self.entries(data, "states", "initial", STATE_KEYS)]
        parameters = [self.parameter(data, n, v, m) for n, v, m in
                      self.entries(data, "parameters", "value", PARAMETER_KEYS)]
        equations = self.table(data, "equations")
        state_names = [s.name for s in states]
        for key, text in equations.items():
            if key not in state_names:
                raise self.error(self.line_of("equations", key),
                                 f"equation for '{key}', which is not a state",
                                 f"one equation per state: {', '.join(state_names)}")
            if not isinstance(text, str):
                raise self.error(self.line_of("equations", key),
                                 f"the equation for '{key}' must be a quoted string",
                                 f"{key} = \"...\"")
        for state in state_names:
            if state not in equations:
                raise self.error(self.line_of("equations"), f"no equation for state '{state}'",
                                 f"{state} = \"...\" under [equations]")
        rhythm = self.rhythm(data)
        fixed = self.table(data, "fixed_point", required=False)
        self.check_keys(fixed, FIXED_POINT_KEYS, "fixed_point")
        request = self.fixed_point_request(fixed)
        description = data.get("description", "")
        outputs = self.outputs(data)
        try:
            return Model(
                name=name,
                description=str(description),
                states=tuple(states),
                parameters=tuple(parameters),
                equation_text=tuple(equations[s] for s in state_names),
                rhythm=rhythm,
                fixed_point=request,
                source=str(self.path),
                outputs=outputs,
            )
        except ExpressionError as exc:
            state = next((s for s in state_names if f"'{s}'" in exc.problem), None)
            line = self.line_of("equations", state) if state else self.line_of("equations")
            raise self.error(line, f"{exc.problem}: '{exc.offending}' (column {exc.column + 1} "
                             f"of the expression)", ACCEPTED) from None
        except InputError as exc:
            raise self.located(exc) from None

    def outputs(self, data: dict) -> tuple[Output, ...]:
        """The [outputs] table: one inline table per output (see definition.OUTPUT_HINT)."""
        found = []
        for name, entry in self.table(data, "outputs", required=False).items():
            try:
                found.append(make_output(name, entry, str(self.path)))
            except InputError as exc:
                problem, _, _ = str(exc).partition("; accepted: ")
                problem = problem.removeprefix(f"{self.path}, ")
                raise self.error(self.line_of("outputs", name), problem, OUTPUT_HINT) from None
        return tuple(found)

    def located(self, exc: InputError) -> ModelFileError:
        """A model's own complaint, placed at the line of the section and key it names (as
        '[rhythm] loop_hz'), with what it accepts, or else the file's layout."""
        message = str(exc)
        problem, _, accepted = message.partition("; accepted: ")
        place = re.search(r"\[(\w+)\] '?(\w+)", problem)
        line = self.line_of(place.group(1), place.group(2)) if place else None
        hint = OUTPUT_HINT if place and place.group(1) == "outputs" else LAYOUT_HINT
        return self.error(line, problem, accepted or hint)

    def rhythm(self, data: dict) -> Rhythm:
        rhythm = self.table(data, "rhythm")
        self.check_keys(rhythm, RHYTHM_KEYS, "rhythm")
        for key in sorted(RHYTHM_KEYS):
            if key not in rhythm:
                raise self.error(self.line_of("rhythm"), f"[rhythm] needs '{key}'",
                                 "cycle_hz = 1.5 (cycle frequency) and loop_hz = 1000 "
                                 "(control-loop rate)")
        return Rhythm(self.number(rhythm["cycle_hz"], "rhythm", "cycle_hz", "cycle_hz",
                                  limits.CYCLE_HZ),
                      self.number(rhythm["loop_hz"], "rhythm", "loop_hz", "loop_hz",
                                  limits.LOOP_HZ))

    def build_network(self, data: dict) -> Model:
        """A network file: N coupled oscillators described by pattern or lags (gen/networks.py)."""
        self.check_keys(data, NETWORK_TOP_KEYS, None)
        name = data.get("name")
        if not isinstance(name, str):
            raise self.error(self.line_of(None, "name"), "the network needs a name string",
                             "name = \"my_gait\"")
        spec = self.table(data, "network")
        self.check_keys(spec, NETWORK_KEYS, "network")
        oscillator = spec.get("oscillator", "hopf")
        singles = [n for n in builtin_names() if n not in OSCILLATORS and _is_single(n)]
        if oscillator not in OSCILLATORS and oscillator not in singles:
            raise self.error(self.line_of("network", "oscillator"),
                             f"unknown oscillator {oscillator!r}",
                             f"{', '.join(OSCILLATORS)} (coupled from the wanted lags), or with a "
                             f"coupling matrix one of: {', '.join(singles)}")
        if oscillator not in OSCILLATORS:
            return self.build_diffusive(data, name, spec, oscillator)
        for key in ("coupling", "coupled_state"):
            if key in spec:
                raise self.error(self.line_of("network", key), f"'{key}' is for networks of "
                                 f"single built-in models; a {oscillator} network is coupled from "
                                 "its wanted lags", NETWORK_HINT)
        pattern = spec.get("pattern")
        labels = spec.get("labels")
        links = spec.get("links", "neighbours" if pattern == "chain" else "all")
        if links not in LINKS:
            raise self.error(self.line_of("network", "links"), f"unknown links {links!r}",
                             ", ".join(LINKS))
        if pattern is not None and "lags" in spec:
            raise self.error(self.line_of("network", "lags"), "give either a pattern or lags, "
                             "not both", NETWORK_HINT)
        if pattern in GAITS:
            lags = gait_lags(pattern)
            labels = labels if labels is not None else LIMBS
        elif pattern == "chain":
            count = spec.get("count", 8)
            if (isinstance(count, bool) or not isinstance(count, int)
                    or not limits.OSCILLATORS.accepts(count)):
                raise self.error(self.line_of("network", "count"),
                                 f"count must be a whole number of oscillators, got {count!r}",
                                 f"count = 8 ({limits.OSCILLATORS.accepted()})")
            waves = self.number(spec.get("waves", 1.0), "network", "waves", "waves", limits.LAG)
            lags = chain_lags(count, waves)
        elif pattern is None:
            lags = spec.get("lags")
            if not isinstance(lags, list) or len(lags) < 2:
                raise self.error(self.line_of("network", "lags") or self.line_of("network"),
                                 "a network without a pattern needs lags, a list of at least two "
                                 "numbers of cycles", "lags = [0, 0.5, 0.5, 0]")
            if len(lags) > limits.OSCILLATORS.high:
                raise self.error(self.line_of("network", "lags"), f"{len(lags)} lags is more "
                                 "oscillators than a network may have",
                                 limits.OSCILLATORS.accepted())
            lags = [self.number(v, "network", "lags", "every lag", limits.LAG) for v in lags]
            pattern = "custom"
        else:
            raise self.error(self.line_of("network", "pattern"), f"unknown pattern {pattern!r}",
                             ", ".join(PATTERNS))
        switch = self.pattern_switch(spec, pattern, lags, links)
        parameters, request, rhythm = self.network_common(data, labels, len(lags),
                                                          "labels = [\"head\", \"tail\"]")
        runtime = {n: self.parameter(data, n, v, m) for n, v, m in
                   self.entries(data, "parameters", "value", PARAMETER_KEYS)}
        try:
            return build_network(name, lags=lags, cycle_hz=rhythm.cycle_hz, loop_hz=rhythm.loop_hz,
                                 oscillator=oscillator, links=links, parameters=parameters,
                                 labels=labels, pattern=pattern,
                                 description=str(data.get("description", "")),
                                 fixed_point=request, source=str(self.path),
                                 runtime={n: p for n, p in runtime.items() if p.runtime}, **switch)
        except InputError as exc:
            raise self.error(None, str(exc), NETWORK_HINT) from None

    def pattern_switch(self, spec: dict, pattern: str, lags: Sequence[float], links: str) -> dict:
        """switch_to (another gait, for a gait network) or switch_waves (another wave count, for a
        chain), and switch_rate (per second): a network that switches pattern at run time, as
        build_network's keywords; {} when it has none."""
        if not any(key in spec for key in ("switch_to", "switch_waves", "switch_rate")):
            return {}
        gait_example = "pattern = \"walk\", switch_to = \"trot\", switch_rate = 0.5"
        chain_example = ("pattern = \"chain\", count = 8, waves = 1.0, switch_waves = -1.0, "
                         "switch_rate = 0.5 (-1.0: the wave running the other way)")
        where = self.line_of("network")
        if pattern == "chain":
            if "switch_to" in spec:
                raise self.error(self.line_of("network", "switch_to") or where, "a chain switches "
                                 "to another wave count with switch_waves, not switch_to",
                                 chain_example)
            if "switch_waves" not in spec:
                raise self.error(self.line_of("network", "switch_rate") or where, "switching a "
                                 "chain needs switch_waves, the wave count to switch to",
                                 chain_example)
            waves = self.number(spec["switch_waves"], "network", "switch_waves", "switch_waves",
                                limits.LAG)
            target = chain_lags(len(lags), waves)
            if all(abs((a - b + 0.5) % 1.0 - 0.5) < 1e-12 for a, b in zip(lags, target, strict=True)):
                raise self.error(self.line_of("network", "switch_waves"), f"switch_waves = "
                                 f"{waves:g} gives the same lags as waves on a chain of "
                                 f"{len(lags)} (they differ by a multiple of count): nothing to "
                                 "switch to", chain_example)
            name, key, example = f"chain of {waves:g} waves", "switch_waves", chain_example
        elif pattern in GAITS:
            if "switch_waves" in spec:
                raise self.error(self.line_of("network", "switch_waves"), "switch_waves is for a "
                                 "chain (pattern = \"chain\"); a gait network switches to another "
                                 "gait with switch_to", gait_example)
            name = spec.get("switch_to")
            if name not in GAITS or name == pattern:
                raise self.error(self.line_of("network", "switch_to") or where,
                                 f"switch_to must name another gait than {pattern!r}, got {name!r}",
                                 f"{gait_example} (gaits: {', '.join(GAITS)})")
            target = gait_lags(name)
            key, example = "switch_to", f"{gait_example} (gaits: {', '.join(GAITS)})"
        else:
            key = next(k for k in ("switch_to", "switch_waves", "switch_rate") if k in spec)
            raise self.error(self.line_of("network", key) or where, "only a network with a gait "
                             "or a chain pattern switches pattern at run time",
                             f"{gait_example}; or {chain_example}")
        # build_network refuses it too, but here the message can name the line
        problem = switch_problem(lags, target, link_pairs(len(lags), links), pattern, name)
        if problem:
            raise self.error(self.line_of("network", key), problem, example)
        if "switch_rate" not in spec:
            raise self.error(where, "switching pattern needs switch_rate, the fraction of the "
                             "change made per second",
                             gait_example if pattern in GAITS else chain_example)
        rate = self.number(spec["switch_rate"], "network", "switch_rate", "switch_rate",
                           limits.RATE)
        return {"switch_to": target, "switch_pattern": name, "switch_rate": rate}

    def build_diffusive(self, data: dict, name: str, spec: dict, oscillator: str) -> Model:
        """N copies of a single built-in model with a diffusive coupling matrix on one state."""
        for key in ("pattern", "count", "waves", "links", "switch_to", "switch_waves", "switch_rate"):
            if key in spec:
                raise self.error(self.line_of("network", key), f"'{key}' is for hopf and "
                                 "phase_amplitude networks; a network of "
                                 f"'{oscillator}' copies takes a coupling matrix", NETWORK_HINT)
        coupling = spec.get("coupling")
        if not isinstance(coupling, list) or not all(isinstance(row, list) for row in coupling):
            raise self.error(self.line_of("network", "coupling") or self.line_of("network"),
                             "a network of single oscillators needs coupling, a square matrix "
                             "(a list of rows)", "coupling = [[0, 0.5], [0.5, 0]]")
        if len(coupling) > limits.OSCILLATORS.high:
            raise self.error(self.line_of("network", "coupling"), f"a coupling matrix of "
                             f"{len(coupling)} rows is more oscillators than a network may have",
                             limits.OSCILLATORS.accepted())
        for row in coupling:
            for value in row:
                self.number(value, "network", "coupling", "every coupling strength",
                            limits.COUPLING)
        base = load_model(oscillator)
        coupled = spec.get("coupled_state")
        if not isinstance(coupled, str) or coupled not in base.state_names:
            raise self.error(self.line_of("network", "coupled_state") or self.line_of("network"),
                             f"coupled_state must name a state of '{oscillator}', got {coupled!r}",
                             f"one of: {', '.join(base.state_names)}")
        lags = spec.get("lags")
        if lags is not None:
            if not isinstance(lags, list):
                raise self.error(self.line_of("network", "lags"), "lags must be a list of numbers "
                                 "of cycles, one per oscillator", "lags = [0, 0]")
            lags = [self.number(v, "network", "lags", "every lag", limits.LAG) for v in lags]
        labels = spec.get("labels")
        for key, entry in self.table(data, "parameters", required=False).items():
            if isinstance(entry, dict) and entry.get("runtime", False):
                raise self.error(self.line_of("parameters", key), f"'{key}' is declared runtime, "
                                 "but a network of single built-in models has no runtime "
                                 "parameters yet (hopf and phase_amplitude networks have)",
                                 f"{key} = 1.0")
        parameters, request, rhythm = self.network_common(data, labels, len(coupling),
                                                          "labels = [\"left\", \"right\"]")
        try:
            return build_diffusive_network(
                name, base, coupling=coupling, coupled_state=coupled, cycle_hz=rhythm.cycle_hz,
                loop_hz=rhythm.loop_hz, lags=lags, parameters=parameters, labels=labels,
                description=str(data.get("description", "")),
                fixed_point=request, source=str(self.path))
        except InputError as exc:
            line = self.line_of("network", "coupling") if "coupling" in str(exc) else None
            raise self.error(line, str(exc), NETWORK_HINT) from None

    def network_common(self, data: dict, labels: object, count: int, example: str
                       ) -> tuple[dict[str, float], FixedPointRequest, Rhythm]:
        """What every network file shares: labels (checked), parameter values, the fixed-point
        request and the rhythm."""
        if labels is not None and (not isinstance(labels, list | tuple) or len(labels) != count
                                   or not all(isinstance(v, str) for v in labels)):
            raise self.error(self.line_of("network", "labels"),
                             f"labels must be a list of {count} names, one per oscillator", example)
        parameters = {n: v for n, v, _ in self.entries(data, "parameters", "value", PARAMETER_KEYS)}
        fixed = self.table(data, "fixed_point", required=False)
        self.check_keys(fixed, FIXED_POINT_KEYS, "fixed_point")
        return parameters, self.fixed_point_request(fixed), self.rhythm(data)

    def fixed_point_request(self, fixed: dict) -> FixedPointRequest:
        bits = fixed.get("fraction_bits")
        if bits is not None and (isinstance(bits, bool) or not isinstance(bits, int)
                                 or not limits.FRACTION_BITS.accepts(bits)):
            raise self.error(self.line_of("fixed_point", "fraction_bits"),
                             "fraction_bits must be a whole number of bits",
                             f"fraction_bits = 24 ({limits.FRACTION_BITS.accepted()})")
        margin = self.number(fixed.get("margin", 2.0), "fixed_point", "margin", "margin",
                             limits.MARGIN)
        integrator = fixed.get("integrator", "rk4")
        if not isinstance(integrator, str):
            raise self.error(self.line_of("fixed_point", "integrator"),
                             "integrator must be a quoted name", "integrator = \"rk4\"")
        word_bits = fixed.get("word_bits", 32)
        if word_bits not in limits.WORD_SIZES or isinstance(word_bits, bool):
            raise self.error(self.line_of("fixed_point", "word_bits"),
                             f"word_bits must be 16 or 32, got {word_bits!r}", "word_bits = 16")
        choices = {"rounding": limits.ROUNDINGS, "overflow": limits.OVERFLOWS}
        chosen = {}
        for key, allowed in choices.items():
            chosen[key] = fixed.get(key, allowed[1] if key == "rounding" else allowed[0])
            if chosen[key] not in allowed:
                raise self.error(self.line_of("fixed_point", key),
                                 f"{key} must be one of {', '.join(allowed)}, got {chosen[key]!r}",
                                 f"{key} = \"{allowed[0]}\"")
        return FixedPointRequest(fraction_bits=bits, margin=margin, integrator=integrator,
                                 word_bits=word_bits, rounding=chosen["rounding"],
                                 overflow=chosen["overflow"])
