"""Thread settings for the numerical work of one process, applied once at start-up.

A fit's passes over the data run on two lanes of rows (:mod:`service.stats.lanes`), one per
core. BLAS threads inside each call would compete with the lanes (and, in a server, with
concurrent requests), so BLAS is held to ``RISKFIT_BLAS_THREADS`` threads per call (default 1)
with threadpoolctl, which knows the OpenBLAS, MKL and BLIS builds numpy and scipy ship with.
"""

from __future__ import annotations

from threadpoolctl import threadpool_limits

from service.config import Settings
from service.stats import lanes

__all__ = ["apply_compute_settings"]


def apply_compute_settings(settings: Settings) -> None:
    """Set the threads per fit pass and the BLAS threads per call for this process."""
    lanes.set_pass_threads(settings.fit_threads)
    threadpool_limits(limits=settings.blas_threads, user_api="blas")
