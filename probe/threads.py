"""The one bound on threads: every estimator and every BLAS/OpenMP call probe makes runs inside it.

scikit-learn's gradient boosting (OpenMP) and nearest neighbours (BLAS, OpenMP) start one thread per
core by default, and joblib workers multiply that; on a small machine several such pools
oversubscribe the cores and run many times slower than one thread. :func:`limited` caps the native
pools with ``threadpoolctl`` (shipped with scikit-learn) for the work inside it, and :data:`N_JOBS`
is the value passed to every estimator's ``n_jobs``.
"""

from __future__ import annotations

from contextlib import contextmanager

__all__ = ["N_JOBS", "limited"]

N_JOBS = 1
"""The ``n_jobs`` every estimator gets: many small fits and predictions gain nothing from workers."""

_NATIVE = 1  # threads per native pool, for the same reason (measured: DEVELOPERS.md, proxies)


@contextmanager
def limited():
    """Run the body with OpenMP and BLAS pools capped at one thread each."""
    # a native pool loaded after the limit is set escapes it: load scikit-learn's first
    import sklearn.ensemble  # noqa: F401
    import sklearn.neighbors  # noqa: F401
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=_NATIVE):
        yield
