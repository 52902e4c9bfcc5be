"""dlsim: the critical resolved shear stress of a dislocation line gliding through obstacles.

The public API, re-exported here: load and run cases (:func:`load_case`, :func:`run_case`,
:func:`estimate_case`), sweeps (:func:`run_sweep`), the line model and CRSS driver for scripted
studies (:class:`LineModel`, :class:`Protocol`, :func:`find_crss`, obstacle fields), and the errors.
"""
from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("dlsim")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

from .errors import CaseError, DlsimError, SimulationError
from .case import Case, load_case
from .fields import ObstacleField, random_field, square_field
from .solver import CrssResult, LineModel, Protocol, find_crss
from .api import RunResult, estimate_case, run_case
from .sweep import run_sweep

__all__ = [
    "Case", "CaseError", "CrssResult", "DlsimError", "LineModel", "ObstacleField", "Protocol",
    "RunResult", "SimulationError", "__version__", "estimate_case", "find_crss", "load_case",
    "random_field", "run_case", "run_sweep", "square_field",
]
