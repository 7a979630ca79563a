"""Worst relative differences of the engine against its references on the awkward cases.

    PYTHONPATH=$PWD python -m tests.stats._engine_trust_figures

Firth: the independent scipy solver of tests/stats/_penalised_reference.py; ML on shifted
columns: statsmodels Logit on the centred design mapped back (tests/stats/
test_location_invariance.py). Prints one line per case.
"""

from __future__ import annotations

import warnings

import numpy as np
import statsmodels.api as sm

from service.stats.fit import fit_logistic
from tests.stats._penalised_reference import Penalised
from tests.stats.test_firth_convergence import CASES


def _rel(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), 1e-300)))


def main() -> None:
    warnings.simplefilter("ignore")
    for name, make in CASES.items():
        X, y, w, off = make()
        fit = fit_logistic(X, y, weights=w, offset=off, method="firth")
        ref = Penalised(X, y, w, off)
        b = ref.maximise()
        print(
            f"firth {name:28s} p={X.shape[1]:2d} iters={fit.iterations:3d} "
            f"coef rel {_rel(fit.coef, b):.1e}  pen-loglik abs "
            f"{abs(fit.penalized_loglik - ref.value(b)):.1e}  (scipy BFGS+hybr)"
        )
    rng = np.random.default_rng(31)
    n = 600
    Z = rng.normal(size=(n, 3))
    y = (rng.random(n) < 1 / (1 + np.exp(-(-0.4 + Z @ [0.8, -0.5, 0.3])))).astype(float)
    for offset in (1e3, 1e6, 1e9):
        shift = np.array([0.0, offset, 0.0, 2026.0])
        X = np.column_stack([np.ones(n), Z]) + shift
        Xc = X - shift
        fit = fit_logistic(X, y)
        r = sm.Logit(y, Xc).fit(method="newton", tol=1e-12, disp=False)
        A = np.eye(4)
        A[0, 1:] = -shift[1:]
        b = A @ r.params
        se = np.sqrt(np.diag(A @ np.asarray(r.cov_params()) @ A.T))
        print(
            f"mle   shifted {offset:.0e}+year          coef rel {_rel(fit.coef, b):.1e}  "
            f"se rel {_rel(fit.std_error, se):.1e}  (statsmodels Logit, centred, mapped back)"
        )


if __name__ == "__main__":
    main()
