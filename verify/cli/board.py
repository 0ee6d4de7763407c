"""The ``board`` verb: build the model's firmware for a board, start or connect to it, stream a
run over the serial link and prove every received state bit-exact against the golden model
(layer L4), with the cost of a step on that CPU and the image's size."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import design
from orbitfix.gen.program.integer_program import OVERFLOWS, ROUNDINGS, WORD_SIZES
from orbitfix.gen.timing.integrators import INTEGRATORS
from orbitfix.verify.cli.options import CAUTION, add_model_arguments, model_from_args, plain_json
from orbitfix.verify.link.faults import parse_faults
from orbitfix.verify.proofs.board_stream import BoardStreamReport, stream_on_board
from orbitfix.verify.targets.board_profiles import load_profile
from orbitfix.verify.targets.host_build import cache_root


def register(verbs: Any) -> None:
    """Add the ``board`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("board", help="run the firmware on a board over the serial link and "
                                            "prove it bit-exact against the golden model")
    add_model_arguments(parser)
    parser.add_argument("--board", required=True, metavar="NAME",
                        help="a board profile's name (see 'orbitfix boards') or a profile file")
    parser.add_argument("--port", metavar="URL",
                        help="connect to a board already running here (a serial port, or any "
                             "pyserial URL such as socket://127.0.0.1:4000) instead of starting one")
    parser.add_argument("--steps", type=_whole(1, 0xFFFFFFFF), default=100_000, metavar="N",
                        help="steps to run and compare (default 100000)")
    parser.add_argument("--every", type=_whole(1, 0xFFFF), default=1, metavar="K",
                        help="stream the state after every K-th step (default 1: every state)")
    parser.add_argument("--faults", metavar="SPEC",
                        help="damage the link on purpose, e.g. flip=1e-4,drop=1e-5,cut=200000 "
                             "(kinds: flip, drop, dup, repeat, swap, delay, pause, cut, seed)")
    parser.add_argument("--timeout", type=float, default=5.0, metavar="SECONDS",
                        help="silence after which a stream or a request counts as lost (default 5)")
    parser.add_argument("--save", type=Path, metavar="FILE",
                        help="also write the report and every received state to FILE (JSON); "
                             "a run that cannot finish is saved in the cache folder anyway")
    parser.add_argument("--integrator", choices=sorted(INTEGRATORS),
                        help="integrator of the step function (default: the model's, else rk4)")
    parser.add_argument("--fraction-bits", type=int, metavar="N",
                        help="fraction bits of the Q format (default: chosen from the cycle's range)")
    parser.add_argument("--word", dest="word_bits", type=int, choices=WORD_SIZES,
                        help="word size in bits (default 32)")
    parser.add_argument("--rounding", choices=ROUNDINGS, help="rounding after every shift")
    parser.add_argument("--overflow", choices=OVERFLOWS, help="what a result outside the word does")
    parser.set_defaults(handler=_board)


def _whole(low: int, high: int):
    def parse(text: str) -> int:
        try:
            value = int(text.replace("_", ""))
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
        if not low <= value <= high:
            raise argparse.ArgumentTypeError(f"give a whole number from {low} to {high}")
        return value
    return parse


def _board(args: argparse.Namespace, partial: dict) -> int:
    if not 0.05 <= args.timeout <= 600:
        raise InputError("--timeout: give between 0.05 and 600 seconds")
    faults = parse_faults(args.faults) if args.faults else None
    profile = load_profile(args.board)
    if args.port is None and profile.kind == "real":
        raise InputError(f"board {profile.name!r} is a real board: flash it yourself, then give "
                         "--port URL (e.g. --port /dev/ttyACM0)")
    if args.port is None and not profile.tools_installed():
        raise InputError(f"board {profile.name!r} needs {', '.join(profile.missing_tools())}: "
                         f"{profile.install_hint()}")
    model = model_from_args(args)
    partial.update({"model": model.name, "board": profile.name})
    built = design(model)
    partial["program_fingerprint"] = built.plan.program.fingerprint()
    report = stream_on_board(built, profile, steps=args.steps, every=args.every, port=args.port,
                             faults=faults, silence_timeout=args.timeout,
                             reply_timeout=min(args.timeout, 2.0))
    result = {"model": model.name, **report.to_json(),
              "program_fingerprint": built.plan.program.fingerprint()}
    partial.update(result)
    if args.save:
        _save(args.save, result, report)
    elif report.failure and report.samples:
        # a run that could not finish keeps what it received, so nothing already compared is lost
        path = cache_root() / "board-runs" / f"{built.model.name}-{profile.name}-unfinished.json"
        _save(path, result, report)
        result["saved"] = partial["saved"] = str(path)
    if args.json:
        print(json.dumps(plain_json(result), indent=2))
    else:
        for line in describe(report):
            print(line)
        if result.get("saved"):
            print(f"the states received so far are saved in {result['saved']}")
        print(CAUTION)
    return 0 if report.ok else 1


def _save(path: Path, result: dict, report: BoardStreamReport) -> None:
    samples = report.samples or {}
    record = {**result, "received_states": [[step, *samples[step]] for step in sorted(samples)]}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(plain_json(record)) + "\n")
    except OSError as exc:
        raise InputError(f"--save: cannot write '{path}': {exc}") from None


def describe(report: BoardStreamReport) -> list[str]:
    """The report as a few lines for a person."""
    lines = [f"board {report.board}"]
    if report.hello:
        h = report.hello
        lines.append(f"  firmware: {h['build']}; integer program {h['fingerprint']}, {h['word_bits']}-bit "
                     f"words, C int {h['int_bits']} bits, {h['batch']} states per frame")
    if report.size:
        lines.append("  image: " + ", ".join(f"{k} {v} bytes" for k, v in report.size.items()
                                             if v is not None))
    if report.cost:
        c = report.cost
        lines.append(f"  cost of one step: {c['per_step']:.1f} {c['unit']} (least {c['least']}, most "
                     f"{c['most']}, over {c['steps_measured']} steps; {c['method']})")
    f = report.frames
    if f:
        lines.append(f"  frames: {f['received']} received, {f['corrupt']} corrupt, {f['dropped']} "
                     f"dropped, {f['duplicated']} duplicated, {f['out_of_order']} out of order, "
                     f"{f['resent']} resent; {f['timeouts']} timeouts, {f['retries']} retries")
    if report.faults and report.faults.get("injected") is not None:
        injected = ", ".join(f"{v} {k}" for k, v in sorted(report.faults["injected"].items()))
        lines.append(f"  faults injected: {injected or 'none happened'}")
    t = report.throughput
    if t:
        lines.append(f"  throughput: {t['samples_per_second']:,.0f} states/s, "
                     f"{t['bytes_per_second']:,.0f} bytes/s"
                     + (f" ({100 * t['fraction_of_link']:.0f} % of the line rate)"
                        if t.get("fraction_of_link") else ""))
    lines.append(f"  compared: {report.states_compared:,} states covering {report.steps_compared:,} of "
                 f"{report.last_sample:,} steps" + (f"; {report.missing_states} states never arrived"
                                                    if report.missing_states else ""))
    if report.failure:
        lines.append(f"  link failed: {report.failure}; the comparison above covers what arrived")
    m = report.first_mismatch
    if m:
        lines.append(f"  first mismatch at step {m['step']} (from the board's state at step "
                     f"{m['from_step']}: {m['state_before']}): expected {m['expected']}, got {m['got']}")
    if report.conflicts:
        lines.append(f"  {report.conflicts} states differed when sent again: the board is not "
                     "deterministic")
    if report.ok:
        lines.append("result: bit-exact on the board: every received state is the golden model's")
    elif report.bit_exact:
        lines.append("result: NOT complete: every state received is bit-exact, but the run did not "
                     "finish")
    else:
        lines.append("result: NOT bit-exact on the board")
    return lines
