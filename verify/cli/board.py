"""The ``board`` verb: build the model's firmware for a board, start or connect to it, stream a
run over the serial link and prove every received state bit-exact against the golden model
(layer L4), with the cost of a step on that CPU and the image's size."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli.options import (
    add_fixed_point_options,
    add_junit_option,
    add_model_arguments,
    add_report_option,
    keep,
    model_from_args,
    number,
    ready_report_folder,
)

TIMEOUT = number(0.05)


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
    parser.add_argument("--timeout", type=TIMEOUT, default=5.0, metavar="SECONDS",
                        help="silence after which a stream or a request counts as lost "
                             "(0.05 to 600, default 5)")
    parser.add_argument("--save", type=Path, metavar="FILE",
                        help="also write the report and every received state to FILE (JSON); "
                             "a run that cannot finish is saved in the cache folder anyway")
    add_fixed_point_options(parser)
    add_junit_option(parser)
    add_report_option(parser)
    parser.set_defaults(handler=run)


def _whole(low: int, high: int) -> Any:
    def parse(text: str) -> int:
        try:
            value = int(text.replace("_", ""))
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
        if not low <= value <= high:
            raise argparse.ArgumentTypeError(f"give a whole number from {low} to {high}")
        return value
    parse.__name__ = "whole number"
    return parse


def run(args: argparse.Namespace, partial: dict) -> int:
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.safety import CAUTION
    from orbitfix.verify.link.faults import parse_faults
    from orbitfix.verify.proofs.board_stream import stream_on_board
    from orbitfix.verify.report.board import board_lines
    from orbitfix.verify.report.json_output import json_text
    from orbitfix.verify.targets.board_profiles import load_profile
    from orbitfix.verify.targets.host_build import cache_root

    if args.timeout > 600:
        raise InputError("--timeout: give between 0.05 and 600 seconds")
    ready_report_folder(args)
    faults = parse_faults(args.faults) if args.faults else None
    profile = load_profile(args.board)
    if args.port is None and not profile.tools_installed():
        raise InputError(f"board {profile.name!r} needs {', '.join(profile.missing_tools())}: "
                         f"{profile.install_hint()}")
    model = model_from_args(args)
    partial.update({"model": model.name, "board": profile.name})
    built = design(model)
    keep(args, design=built)
    partial["program_fingerprint"] = built.plan.program.fingerprint()
    if args.port is None and profile.kind == "real":
        _refuse_without_port(built, profile, partial)
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
        print(json_text(report.ok, result))
    else:
        for line in board_lines(report):
            print(line)
        if result.get("saved"):
            print(f"the states received so far are saved in {result['saved']}")
        print(CAUTION)
    return 0 if report.ok else 1


def _refuse_without_port(built: Any, profile: Any, partial: dict) -> None:
    """A real board is flashed by its user: build its image (kept in the JSON), say where it is,
    and ask for the port of the board running it."""
    from orbitfix.verify.proofs.board_stream import build_for_board

    image = build_for_board(built, profile)
    files = [image.path, *(image.path.with_suffix(s) for s in (".bin", ".hex"))]
    files = [f for f in files if f.is_file()]
    partial.update({"image": [str(f) for f in files], "size": {**image.size, "stack": image.stack_bytes}})
    sizes = ", ".join(f"{k} {v}" for k, v in partial["size"].items() if v is not None)
    raise InputError(f"board {profile.name!r} is a real board: its firmware is built ({sizes} bytes): "
                     f"{', '.join(str(f) for f in files)}; flash one of these with your own tool, then "
                     "run again with --port URL (for example --port /dev/ttyACM0)")


def _save(path: Path, result: dict, report: Any) -> None:
    from orbitfix.gen.plain_data import plain_data

    samples = report.samples or {}
    record = {**result, "received_states": [[step, *samples[step]] for step in sorted(samples)]}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(plain_data(record)) + "\n")
    except OSError as exc:
        raise InputError(f"--save: cannot write '{path}': {exc}") from None
