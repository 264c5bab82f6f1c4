"""Broken promises: a reported answer that fails its own checks is a bug, not a result.

The solver checks every design it is about to report against every rule and mandate of
the problem, and a "proven" answer against its own bound. A failure raises
:class:`InvariantViolation`, which the command line turns into one internal-error line
(exit code 3) instead of printing a wrong answer.
"""

from __future__ import annotations


class InvariantViolation(RuntimeError):
    """An answer broke a rule it must keep (a bug in dieplan, never bad input)."""
