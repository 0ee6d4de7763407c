"""Angle states on the circle: one turn, and wrapping in radians and in turns.

A state marked ``angle`` (a phase, in radians) lives on the circle, so two values a whole number of
turns apart are the same point. The analysis compares and reports angles in radians; the integer
program holds them as turns (a word that wraps at one turn). Every module that wraps an angle does
it through these few functions, so the ranges ([0, 2 pi), [-pi, pi), [-1/2, 1/2)) are chosen once.
"""

from __future__ import annotations

import math

import numpy as np

TURN = 2.0 * math.pi   # one turn of an angle state, radians


def wrap_angles(state: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """A state (shape (n,) or (n, k)) with its angle rows (``angles``: bool, shape (n,)) wrapped
    into [0, 2 pi). Returns a new array when anything is wrapped, ``state`` itself otherwise."""
    if not angles.any():
        return state
    wrapped = np.array(state, dtype=float)
    wrapped[angles] = wrapped[angles] % TURN
    return wrapped


def wrap_difference(difference: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """A difference of states (shape (n,) or (n, k)) with its angle rows wrapped into
    [-pi, pi): two states a whole number of turns apart are the same point."""
    if not angles.any():
        return difference
    wrapped = np.array(difference, dtype=float)
    wrapped[angles] = (wrapped[angles] + math.pi) % TURN - math.pi
    return wrapped


def whole_turns(difference: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """Whole turns in a difference of states: per angle state, 0 elsewhere (int array, (n,))."""
    return np.where(angles, np.rint(np.asarray(difference, dtype=float) / TURN), 0.0).astype(int)


def wrap_turns(turns: np.ndarray | float) -> np.ndarray | float:
    """A value in turns (or cycles) wrapped into [-1/2, 1/2): the nearest way round the circle."""
    return np.mod(turns + 0.5, 1.0) - 0.5


def radians_to_turns(radians: np.ndarray) -> np.ndarray:
    """Angles in radians as turns wrapped into [-1/2, 1/2)."""
    return wrap_turns(np.asarray(radians, dtype=float) / TURN)


def part_of_turn(turns: np.ndarray | float) -> np.ndarray | float:
    """A value in turns (or cycles) reduced to the part of a turn, in [0, 1)."""
    return turns % 1.0
