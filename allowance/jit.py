"""The compiled kernels' cache and how their loops run on all cores.

Implements
----------
CACHE        whether ``numba.njit`` may cache compiled code (pass it as ``cache=CACHE``)
cache_dir    the folder compiled code is cached in, or None when it is not cached
in_threads   run a ``nogil`` kernel's blocks of loans on all cores

The folder is chosen by :mod:`allowance.jitcache` (without numba: the command line asks it
before loading numba); this module hands it to numba.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numba

from allowance import jitable
from allowance.jitcache import cache_dir

__all__ = ["CACHE", "cache_dir", "in_threads"]

#: Blocks a thread takes at a time: a core busy with other work then takes fewer blocks
#: instead of holding up the whole pass (static halves would wait for the slower core).
BLOCKS_PER_GRAB = 4


_CACHE_DIR = cache_dir()
if _CACHE_DIR is not None:
    numba.config.CACHE_DIR = str(_CACHE_DIR)  # read by numba's cache locator at each decoration


def _load_array_maths() -> None:
    """Load numba's array maths without its probe for scipy's BLAS, in the command line only.

    The first compiled call of a process loads numba's implementations of numpy, and the
    module of array maths asks at import whether BLAS is there for ``np.dot`` by importing
    ``scipy.linalg`` (0.2-0.5 s on this project's 2-core machine, a tenth of a demo run),
    which no kernel here calls (no ``np.dot``, ``@`` or ``np.linalg`` in compiled code).
    While it loads, ``scipy.linalg.cython_blas`` is marked missing (``None`` in
    ``sys.modules``: the import system's own way to say so), then unmarked, so a later
    ``import scipy.linalg`` (calibration's estimators) works as usual. Not in a library
    user's process (:data:`allowance.jitable.COMMAND_LINE` is False there), where other
    compiled code may want ``np.dot``; nor when scipy.linalg is already loaded (nothing to save).
    """
    probe = "scipy.linalg.cython_blas"
    if not jitable.COMMAND_LINE or "scipy.linalg" in sys.modules or probe in sys.modules:
        return
    sys.modules[probe] = None  # type: ignore[assignment]
    try:
        import numba.np.arraymath  # noqa: F401
    finally:
        del sys.modules[probe]


_load_array_maths()
jitable.register_pending()  # the scalar maths the loops call (allowance.jitable), now numba is here

#: Pass as ``numba.njit(cache=CACHE)``: False when no cache folder is writable.
CACHE: bool = _CACHE_DIR is not None


def in_threads(kernel: Callable[[int, int], object], n: int, block: int) -> None:
    """Run ``kernel(first, last)`` over the blocks of ``block`` loans that hold ``n`` loans.

    The kernels are compiled ``nogil`` and write disjoint rows of their outputs, so threads
    run them side by side: ``numba.get_num_threads()`` threads (``NUMBA_NUM_THREADS``), each
    taking :data:`BLOCKS_PER_GRAB` blocks at a time from a shared queue. The same results as
    one thread, bit for bit: every loan is computed by the same code, alone. Threads rather
    than numba's ``parallel=True``: its lowering made the first run compile the loop
    2.5 times longer, for the same speed once compiled.
    """
    n_blocks = -(-n // block)
    grabs = [(b, min(b + BLOCKS_PER_GRAB, n_blocks)) for b in range(0, n_blocks, BLOCKS_PER_GRAB)]
    threads = min(numba.get_num_threads(), len(grabs))
    if threads <= 1:
        for first, last in grabs:
            kernel(first, last)
        return
    with ThreadPoolExecutor(threads, thread_name_prefix="allowance-loop") as pool:
        for done in pool.map(lambda grab: kernel(*grab), grabs):
            del done  # map re-raises a kernel's error here
