"""The one safety text: the caution carried by the generated C's banner and printed by the verbs
that write or verify code.

Generated code drives actuators that can pinch, crush or burn, so the user is told, once, in the
same words wherever code leaves the tool. The tool never claims a certification.
"""

from __future__ import annotations

SAFETY_NOTE = (
    "This code can move an actuator. Clamp its outputs to the machine's limits, bench-test with "
    "the load disconnected, keep an independent hardware stop, and follow local codes and the "
    "machine's own safety standard. orbitfix claims no certification."
)

CAUTION = "Caution: " + SAFETY_NOTE
