"""An independent Firth solver for the tests: scipy.optimize on l(b) + 1/2 log det(X'WX).

Written from the definition (Firth 1993, *Biometrika* 80:27-38), with nothing from the engine:
the columns are centred and scaled inside (``X = Z T``, an exact change of parameter with
``b = T^-1 c`` and ``log det I_X = log det I_Z - 2 log|det T|``), BFGS on the standardised
problem, then the score equations solved by ``scipy.optimize.root`` (MINPACK hybrd) with the
gradient from the dense hat matrix, so that the reference is accurate to ~1e-10.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize, root


def _standardise(X: np.ndarray, icpt: int | None) -> tuple[np.ndarray, np.ndarray]:
    """``Z`` with centred, unit-variance non-intercept columns and ``T`` with ``X = Z T``."""
    p = X.shape[1]
    M = np.eye(p)  # Z = X M, so X = Z M^-1
    for j in range(p):
        if j == icpt:
            continue
        c = X[:, j].mean() if icpt is not None else 0.0
        s = X[:, j].std() if icpt is not None else np.sqrt(np.mean(X[:, j] ** 2))
        s = s if s > 0 else 1.0
        M[j, j] = 1.0 / s
        if icpt is not None:
            M[icpt, j] = -c / s
    Z = X @ M
    # recompute centred columns directly (no cancellation from the shift)
    if icpt is not None:
        for j in range(p):
            if j != icpt:
                Z[:, j] = (X[:, j] - X[:, j].mean()) / (1.0 / M[j, j])
    return Z, M


class Penalised:
    """``l*(b) = sum w (y eta - log(1 + e^eta)) + 1/2 log det(X' W X)``, ``eta = X b + offset``,
    over ``b`` restricted to ``free`` (the rest held at ``fixed``), and its maximiser."""

    def __init__(
        self,
        X: np.ndarray,
        y: np.ndarray,
        w: np.ndarray | None = None,
        offset: np.ndarray | None = None,
        intercept: int | None = 0,
    ) -> None:
        self.y = y
        self.w = np.ones(len(y)) if w is None else w
        self.off = np.zeros(len(y)) if offset is None else offset
        self.Z, self.M = _standardise(X, intercept)
        # 1/2 log det I_X = 1/2 log det I_Z - log det M (M triangular with the intercept first)
        self.logdet_shift = -float(np.log(np.abs(np.diag(self.M))).sum())

    def _parts(self, c: np.ndarray) -> tuple[float, np.ndarray]:
        eta = self.Z @ c + self.off
        mu = 1.0 / (1.0 + np.exp(-eta))
        v = self.w * mu * (1.0 - mu)
        info = self.Z.T @ (self.Z * v[:, None])
        _sign, logdet = np.linalg.slogdet(info)
        ll = float(self.w @ (self.y * eta - np.logaddexp(0.0, eta)))
        A = np.linalg.solve(info, self.Z.T)  # I^-1 Z'
        h = v * np.einsum("ij,ji->i", self.Z, A)  # hat diagonal
        grad = self.Z.T @ (self.w * (self.y - mu) + h * (0.5 - mu))
        return ll + 0.5 * logdet, grad

    def gradient(self, b: np.ndarray) -> np.ndarray:
        """The penalised score with respect to the standardised coefficients, at ``b``
        (original columns): zero at the maximum, on a scale that does not depend on units."""
        return self._parts(np.linalg.solve(self.M, b))[1]

    def value(self, b: np.ndarray) -> float:
        """``l*(b)`` in the original columns."""
        return self._parts(np.linalg.solve(self.M, b))[0] + self.logdet_shift

    def maximise(
        self, free: np.ndarray | None = None, fixed: np.ndarray | None = None
    ) -> np.ndarray:
        """The maximiser in the original columns (``free`` mask; others at ``fixed``)."""
        p = self.Z.shape[1]
        free = np.ones(p, bool) if free is None else free
        base = np.zeros(p) if fixed is None else np.linalg.solve(self.M, fixed)

        # restricting b (original) = restricting c only when M maps free to free: the tests
        # fix non-intercept coefficients at 0, which M (diagonal but for the intercept row)
        # keeps at 0; the intercept stays free.
        def full(cf: np.ndarray) -> np.ndarray:
            c = base.copy()
            c[free] = cf
            return c

        res = minimize(
            lambda cf: -self._parts(full(cf))[0],
            base[free],
            jac=lambda cf: -self._parts(full(cf))[1][free],
            method="BFGS",
            options={"gtol": 1e-9, "maxiter": 10000},
        )
        sol = root(lambda cf: self._parts(full(cf))[1][free], res.x, method="hybr", tol=1e-14)
        c = full(sol.x if sol.success else res.x)
        return self.M @ c
