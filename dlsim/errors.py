"""The small family of exceptions dlsim raises on purpose, and the exit codes of the command line.

Every message is one line a researcher can act on: for case files it names the file, the key in
backticks, the value received and what is allowed.  The CLI prints ``str(error)`` and exits with
the error's :attr:`DlsimError.exit_code`.

Exit codes of ``dlsim`` (README, "Exit codes"):

- 0: done;
- 2 (:data:`EXIT_BAD_INPUT`): a case, sweep, option or destination that cannot be used as given;
  nothing was computed;
- 3 (:data:`EXIT_NO_RESULT`): the simulation ran but found no CRSS (``result.json`` says why in
  its ``status``), or runs of a sweep failed;
- 4 (:data:`EXIT_RESCUED`): the results could not be written where asked and were saved elsewhere
  (the message says where);
- 130: interrupted.
"""
from __future__ import annotations

EXIT_BAD_INPUT = 2
EXIT_NO_RESULT = 3
EXIT_RESCUED = 4
EXIT_INTERRUPTED = 130


class DlsimError(Exception):
    """Base class of every error dlsim raises deliberately (exit code 2: bad input)."""

    exit_code = EXIT_BAD_INPUT


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


class OutputError(DlsimError):
    """A destination folder that cannot take the results (checked before anything is computed)."""


class RescuedOutput(DlsimError):
    """The results could not be written where asked; they were saved in ``rescue`` instead."""

    exit_code = EXIT_RESCUED

    def __init__(self, message: str, rescue):
        self.rescue = rescue
        super().__init__(message)


class SimulationError(DlsimError):
    """A simulation that cannot go on, or a sweep some of whose runs failed (exit code 3)."""

    exit_code = EXIT_NO_RESULT
