"""The four-limb gaits as wanted lags: plain data, importable without the numeric libraries (the
``models`` verb lists networks from their files without building them)."""

from __future__ import annotations

# Four-limb gaits, oscillators in the order left fore, right fore, left hind, right hind (common
# practice: trot pairs the diagonals, pace the same-side legs, bound the fore and the hind legs,
# each pair half a cycle from the other; the walk is the lateral sequence LF, RH, RF, LH, a
# quarter cycle apart).
LIMBS = ("left_fore", "right_fore", "left_hind", "right_hind")
GAITS: dict[str, tuple[float, float, float, float]] = {
    "walk": (0.0, 0.5, 0.75, 0.25),
    "trot": (0.0, 0.5, 0.5, 0.0),
    "pace": (0.0, 0.5, 0.0, 0.5),
    "bound": (0.0, 0.0, 0.5, 0.5),
}
