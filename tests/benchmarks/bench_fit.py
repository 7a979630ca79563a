"""Benchmark: riskfit's block-wise Newton fit against statsmodels and scikit-learn.

Run on demand (not collected by pytest):

    python3 tests/benchmarks/bench_fit.py              # n = 1,000,000 x 20 features
    python3 tests/benchmarks/bench_fit.py --wide       # n = 200,000 x 100 features
    python3 tests/benchmarks/bench_fit.py --n 200000 --p 20 --block-rows 16384

All three solvers fit the same seeded arrays. The script checks that coefficients
agree to 1e-8 (relative to max(1, |coef|)), prints wall-clock time ratios measured
in this run, and riskfit's peak extra memory (tracemalloc, numpy allocations)
relative to the size of the design matrix. riskfit also returns the full covariance;
statsmodels computes it too, scikit-learn does not.

Time per pass over the data is set against the memory-bandwidth floor: one numpy reduction
over the same matrix (``X.sum(axis=0)``, reading every byte of X once) measured in this run.
riskfit makes one scan pass, fits every 16th row for a start, then one fused pass per Newton
iteration (one more for the start), on two lanes
(``--threads 1`` runs both lanes in one thread; the sums are the same bit for bit), with BLAS
held to one thread per call as the service holds it (``RISKFIT_BLAS_THREADS``, via
threadpoolctl). The peers run with BLAS free to use every core, as they would by default.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
import warnings

import numpy as np


def make_data(n: int, p: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.empty((n, p + 1))
    X[:, 0] = 1.0
    X[:, 1:] = rng.standard_normal((n, p))
    beta = np.r_[-1.5, rng.normal(0.0, 0.3, p)]
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-(X @ beta)))).astype(np.float64)
    return X, y


def timed(fn):  # type: ignore[no-untyped-def]
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--p", type=int, default=20)
    ap.add_argument("--wide", action="store_true", help="n = 200,000 x 100 features")
    ap.add_argument("--block-rows", type=int, default=65536, help="rows per block (engine default)")
    ap.add_argument("--repeat", type=int, default=2, help="best of this many runs of each solver")
    ap.add_argument("--seed", type=int, default=20240601)
    ap.add_argument("--threads", type=int, default=2, help="threads per riskfit pass (1 or 2)")
    args = ap.parse_args()
    n, p = (200_000, 100) if args.wide else (args.n, args.p)

    from service.stats import lanes
    from service.stats.fit import fit_logistic

    lanes.set_pass_threads(args.threads)
    X, y = make_data(n, p, args.seed)
    print(f"data: n={n:,} rows, {p} features + intercept; X is {X.nbytes / 2**20:.1f} MiB")
    floor = min(timed(lambda: X.sum(axis=0))[1] for _ in range(5))

    from threadpoolctl import threadpool_limits

    ours_t = np.inf
    with threadpool_limits(limits=1, user_api="blas"):
        for _ in range(args.repeat):
            ours, t = timed(lambda: fit_logistic(X, y, block_rows=args.block_rows))
            ours_t = min(ours_t, t)
        tracemalloc.start()
        fit_logistic(X, y, block_rows=args.block_rows)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    print(
        f"riskfit:     {ours_t:8.3f} s  ({ours.iterations} Newton iterations,"
        f" converged={ours.converged}, {lanes.pass_threads()} thread(s) per pass,"
        f" peak extra memory {peak / 2**20:.1f} MiB = {peak / X.nbytes:.3f} x X)"
    )
    from service.stats.blocks import array_blocks
    from service.stats.likelihood import loglik_pass

    blocks = array_blocks(X, y, block_rows=args.block_rows)
    with threadpool_limits(limits=1, user_api="blas"):
        one = min(timed(lambda: loglik_pass(blocks, ours.coef))[1] for _ in range(3))
    print(
        f"one pass:    {one * 1e3:8.1f} ms  = {one / floor:.1f} x the bandwidth floor"
        f" (X.sum(axis=0): {floor * 1e3:.1f} ms); the fit took {ours_t / one:.1f} passes' time"
        " (scan, subsample start, Newton passes)"
    )

    import statsmodels.api as sm

    sm_t = np.inf
    for _ in range(args.repeat):  # best of the same number of runs as riskfit's
        sm_res, t = timed(
            lambda: sm.Logit(y, X).fit(method="newton", tol=1e-12, maxiter=100, disp=0)
        )
        sm_t = min(sm_t, t)
    print(f"statsmodels: {sm_t:8.3f} s  (Logit.fit(method='newton', tol=1e-12))")

    from sklearn.linear_model import LogisticRegression

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sk = LogisticRegression(
            C=np.inf, solver="newton-cholesky", tol=1e-12, max_iter=100, fit_intercept=False
        )
        sk_t = np.inf
        for _ in range(args.repeat):
            sk_res, t = timed(lambda: sk.fit(X, y))
            sk_t = min(sk_t, t)
    print(
        f"sklearn:     {sk_t:8.3f} s  "
        "(LogisticRegression(C=inf, solver='newton-cholesky', tol=1e-12))"
    )

    scale = np.maximum(1.0, np.abs(ours.coef))
    d_sm = float(np.max(np.abs(ours.coef - sm_res.params) / scale))
    d_sk = float(np.max(np.abs(ours.coef - sk_res.coef_.ravel()) / scale))
    d_se = float(np.max(np.abs(ours.std_error - sm_res.bse) / sm_res.bse))
    print(
        f"max coef difference: vs statsmodels {d_sm:.2e}, vs sklearn {d_sk:.2e};"
        f" SE vs statsmodels {d_se:.2e}"
    )
    ok = max(d_sm, d_sk, d_se) <= 1e-8
    print(f"agreement to 1e-8: {'yes' if ok else 'NO'}")
    print(f"speed-up: {sm_t / ours_t:.1f}x statsmodels, {sk_t / ours_t:.1f}x sklearn")
    print(
        f"targets: >= 8x statsmodels {'met' if sm_t / ours_t >= 8 else 'NOT met'}, "
        f">= 3x sklearn {'met' if sk_t / ours_t >= 3 else 'NOT met'}, "
        f"extra memory <= 0.5 x X {'met' if peak <= 0.5 * X.nbytes else 'NOT met'}"
    )


if __name__ == "__main__":
    main()
