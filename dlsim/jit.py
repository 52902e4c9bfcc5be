"""Numba compilation options, defined once for every kernel of the package.

A leaf module (it imports nothing of dlsim), so that any kernel module can import any other.
``cache=True`` keeps compiled kernels between runs; ``nogil`` lets threads of a sweep run kernels
side by side; ``error_model="numpy"`` makes a division by zero give inf/nan instead of raising
(the kernels guard every division that matters).
"""
from __future__ import annotations

JIT = dict(cache=True, nogil=True, error_model="numpy")
JIT_PARALLEL = dict(JIT, parallel=True)
