"""Errors raised by the tool; the command line maps each kind to its own exit code."""

from __future__ import annotations


class PolicyError(Exception):
    """Base class of every error the tool raises on purpose."""

    exit_code = 1


class InputError(PolicyError, ValueError):
    """A scenario file, a table or an argument is not what the tool expects."""

    exit_code = 2


class InfeasibleError(PolicyError):
    """The constraints on a rule cannot all hold at once."""

    exit_code = 3

    def __init__(self, message: str, conflicts=None):
        super().__init__(message)
        #: pandas.DataFrame naming each conflicting constraint and how far it must loosen
        self.conflicts = conflicts


class SolverError(PolicyError):
    """A solver failed or returned a status other than optimal."""

    exit_code = 4


class RunError(PolicyError):
    """Tasks could not be run to the end where they were sent (a cluster unreachable, a worker
    that died every time it ran a task); nothing is written."""

    exit_code = 5
