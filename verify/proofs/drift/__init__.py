"""The long-run drift proof in compiled C (:mod:`.proof` runs and judges it; :mod:`.harness` the C
harness and the calls into it, :mod:`.references` the starts and the float step map). Text and
JSON: ``verify/report/drift.py``."""

from orbitfix.verify.proofs.drift.harness import (
    build_drift_module,
    cycle_start,
    harness_statistics,
    integer_period,
)
from orbitfix.verify.proofs.drift.proof import (
    DriftReport,
    DriftRun,
    DriftTolerances,
    drift_size,
    run_drift,
)
from orbitfix.verify.proofs.drift.references import Start, choose_starts, given_starts

__all__ = ["DriftReport", "DriftRun", "DriftTolerances", "Start", "build_drift_module",
           "choose_starts", "cycle_start", "drift_size", "given_starts", "harness_statistics",
           "integer_period", "run_drift"]
