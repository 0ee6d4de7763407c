"""The lattice certificate for 16-bit planar models (:mod:`.proof` states and runs it; :mod:`.lattice`
holds the integer states and the bands, :mod:`.lattice_map` the integer map as a graph,
:mod:`.uncertified` the states it cannot vouch for). Text and JSON: ``verify/report/certificate.py``."""

from orbitfix.verify.proofs.certificate.proof import (
    DEFAULT_BAND,
    DEFAULT_TOLERANCE,
    Certificate,
    UncertifiedGroup,
    certify,
)

__all__ = ["DEFAULT_BAND", "DEFAULT_TOLERANCE", "Certificate", "UncertifiedGroup", "certify"]
