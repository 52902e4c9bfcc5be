"""dlsim: the critical resolved shear stress of a dislocation line gliding through obstacles."""
from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("dlsim")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

from .errors import CaseError, DlsimError, SimulationError

__all__ = ["CaseError", "DlsimError", "SimulationError", "__version__"]
