"""The small family of exceptions dlsim raises on purpose.

Every message is one line a researcher can act on: for case files it names the file, the key in
backticks, the value received and what is allowed.  The CLI prints ``str(error)`` and exits 2.
"""
from __future__ import annotations


class DlsimError(Exception):
    """Base class of every error dlsim raises deliberately."""


class CaseError(DlsimError):
    """A case or sweep file that cannot be used as written.

    Parameters
    ----------
    source : str
        The file (or ``"<dict>"`` for a case given as a dictionary).
    key : str
        Dotted key, e.g. ``"material.poisson_ratio"``; empty for file-level problems.
    problem : str
        What is wrong, including the value received and what is allowed.
    """

    def __init__(self, source: str, key: str, problem: str):
        self.source, self.key, self.problem = str(source), key, problem
        where = f"{self.source}: `{key}`" if key else self.source
        super().__init__(f"{where}: {problem}")


class SimulationError(DlsimError):
    """A simulation that cannot go on (for example a line that outgrows every bound)."""
