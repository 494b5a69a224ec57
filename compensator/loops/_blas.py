"""One BLAS thread for the loops' small dense problems.

Loop analysis works on many small matrices (matrix exponentials of a few
states, eigenvalues of a loop with a delay line of at most
:data:`compensator.loops.sampled.MAX_DELAY_SAMPLES` states, batched 3 x 3
solves). A threaded BLAS spends more time starting and synchronising its
threads on such sizes than computing, and on a busy machine it stalls: the
robust tuning of a long dead time took three times the processor time with
two OpenBLAS threads as with one (``tools/bench/bench_tuning.py`` measures
both). threadpoolctl limits the threads of whichever BLAS numpy and scipy
loaded, for the duration of one call, and restores them afterwards.
"""

from __future__ import annotations

import contextlib

from threadpoolctl import threadpool_limits

__all__ = ["one_blas_thread", "LIMIT_BLAS_THREADS"]

#: Whether loop analysis limits BLAS to one thread (the benchmark turns it off to measure its baseline).
LIMIT_BLAS_THREADS = True


@contextlib.contextmanager
def one_blas_thread():
    """Run the body with one BLAS thread, then restore the previous limits.

    Yields
    ------
    None
    """
    if not LIMIT_BLAS_THREADS:
        yield
        return
    with threadpool_limits(limits=1, user_api="blas"):
        yield
