"""Benchmark of the lattice certificate: the time to certify a 16-bit Van der Pol (the planner's
default Q format, the default box and bands), with the states it stepped, each phase's share, the
peak memory, and a coarser format beside it. Prints figures; asserts nothing.

Run: python tests/bench/bench_certificate.py [--quick]   (--quick: the coarse 8-fraction-bit
format only)
"""

from __future__ import annotations

import resource

from quick_mode import quick

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.proofs.certificate import certify

EXCLUDE_RADIUS = 0.1


def run(fraction_bits: int | None) -> None:
    built = design(load_model("vanderpol").with_fixed_point(word_bits=16,
                                                             fraction_bits=fraction_bits))
    cert = certify(built, exclude_radius=EXCLUDE_RADIUS)
    formats = ", ".join(cert.state_formats)
    rate = cert.states_checked / cert.seconds / 1e6
    print(f"{formats:>14}  {cert.states_checked:>12,}  {cert.seconds:8.1f} s  {rate:6.2f} M/s  "
          f"proved={cert.proved}  steps bound={cert.steps_bound}  "
          f"uncertified={cert.exception_count}")
    print("                phases: " + ", ".join(f"{name} {seconds:.1f} s"
                                                 for name, seconds in cert.phase_seconds.items()))


def main() -> None:
    print(f"lattice certificate, 16-bit Van der Pol at 1 kHz, exclusion radius {EXCLUDE_RADIUS}")
    print(f"{'formats':>14}  {'states':>12}  {'time':>10}  {'rate':>8}")
    run(8)
    if not quick():
        run(None)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"peak memory of the run: {peak:.2f} GiB")


if __name__ == "__main__":
    main()
