"""Errors that reach the user as a message and an exit code, never as a traceback."""

from __future__ import annotations


class OrbitfixError(Exception):
    """Base of every error the command line turns into a plain message."""

    exit_code = 2


class InputError(OrbitfixError):
    """The user's input is wrong: a model file, a name, an option value (exit code 2)."""

    exit_code = 2


class UnsupportedError(InputError):
    """The input is well formed but asks for something the tool cannot do yet (exit code 2)."""


class ToolchainError(OrbitfixError):
    """A compiler or build step outside our code failed; the message says what to install or fix."""

    exit_code = 2
