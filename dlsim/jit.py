"""Numba compilation options, defined once for every kernel of the package.

A leaf module (it imports nothing of dlsim), so that any kernel module can import any other.
``cache=True`` keeps compiled kernels between runs; ``nogil`` lets threads of a sweep run kernels
side by side; ``error_model="numpy"`` makes a division by zero give inf/nan instead of raising
(the kernels guard every division that matters).

Two rules keep numba's on-disk cache safe when many processes share it (numba 0.68):

One function per dispatcher
    A cache entry is named after the Python function (module, qualified name) and keyed by the
    signature, the CPU and the bytecode only (``numba.core.caching._CacheImpl._index_key``), not
    by the options: two dispatchers built from one Python function (a ``parallel=True`` kernel
    and its serial twin) load each other's compiled code, whichever a process wrote first.  Give
    each dispatcher its own ``def`` (``tests/test_jit.py`` checks the package for it).

Start the threads before calling cached code
    A cached kernel that calls a ``parallel=True`` one links the parallel code into its own, but
    when the callee came from the cache while the caller compiled, the caller's cache entry
    records no reloader for the threading layer (numba issue #8578): a later process that loads
    the caller from the cache runs the parallel code on a threading layer nobody started and
    crashes (segmentation fault).  :func:`start_threads` starts it; :mod:`dlsim.kernels` calls it
    on import, before anything can call the stepper.
"""
from __future__ import annotations

JIT = dict(cache=True, nogil=True, error_model="numpy")
JIT_PARALLEL = dict(JIT, parallel=True)
#: For the pair loops of :mod:`dlsim.elastic` only: lets LLVM fuse a multiply and an add into
#: one FMA (one rounding instead of two), which changes results at round-off and nothing else;
#: no reassociation, so every expression keeps the order the code gives it.
JIT_FMA = dict(JIT, fastmath={"contract"})
#: For a plain sum of many terms only (``dlsim.elastic._lane_sum``): lets LLVM reorder the
#: additions into vector partial sums.  The order is fixed by the code and the term count, so the
#: answer does not depend on the thread count; the error bound is that of any summation order.
JIT_SUM = dict(JIT, fastmath={"reassoc"})


def start_threads() -> int:
    """Start numba's threading layer in this process if it is not running; return its threads.

    ``numba.get_num_threads`` launches the layer (it is what numba itself runs when it loads a
    parallel kernel from the cache); starting it twice does nothing.
    """
    import numba
    return numba.get_num_threads()
