"""One BLAS thread for the many small matrix products of a spectrum's analysis.

The line fits, the continuum spline and the v sin i grid multiply matrices of a few to a few
hundred rows. A multi-threaded BLAS (numpy's and scipy's OpenBLAS start one thread per
core) spends more time waking and synchronising its threads than computing on such
sizes: measured on the benchmark spectra, the measurement stage takes about twice as long
with two BLAS threads as with one, and more on a loaded machine. Spectra are processed in
parallel by worker processes (:mod:`starlines.engines`), not by BLAS threads.

:func:`one_blas_thread` limits BLAS to one thread inside a ``with`` block and restores
the previous setting afterwards (via ``threadpoolctl``; the controller, which inspects the
loaded libraries, is built once per process).
"""

from __future__ import annotations

import contextlib
from functools import lru_cache

__all__ = ["one_blas_thread"]


@lru_cache(maxsize=1)
def _controller():
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        return None
    return ThreadpoolController()


def one_blas_thread():
    """Context manager: BLAS limited to one thread inside the block.

    Returns
    -------
    contextlib.AbstractContextManager
    """
    ctl = _controller()
    if ctl is None:  # pragma: no cover
        return contextlib.nullcontext()
    return ctl.limit(limits=1, user_api="blas")
