"""Fit cases for the published-data trial: data sets shipped by statsmodels and scikit-learn,
and seeded textbook-style awkward data, each with an independent reference.

Shared by ``tests/api/test_published_datasets.py`` and ``tests/benchmarks/trial_published.py``.
Nothing here calls the engine: the reference design (treatment coding, products for
interactions) is built with pandas from the spec, and the references are statsmodels'
``GLM(Binomial)`` (IRLS) for maximum likelihood and ``scipy.optimize`` for the penalised
likelihoods (Firth, ridge), written out below from their definitions.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy.optimize import minimize
from scipy.special import expit
from scipy.stats import norm


@dataclass
class Case:
    """One trial: training columns, the fit spec, records to score, the expected outcome."""

    name: str
    source: str  # where the data come from (named beside every check)
    columns: dict[str, list[Any]]
    spec: dict[str, Any]  # features, interactions, outcome, options (method etc.)
    score_records: list[dict[str, Any]] = field(default_factory=list)
    # "fit": the estimate exists; "separation": maximum likelihood must be refused
    expect: str = "fit"
    separated_terms: tuple[str, ...] = ()  # terms the refusal must name (at least these)

    @property
    def method(self) -> str:
        return str(self.spec.get("options", {}).get("method", "mle"))

    def with_options(self, name: str, **options: Any) -> Case:
        spec = {**self.spec, "options": {**self.spec.get("options", {}), **options}}
        return Case(name, self.source, self.columns, spec, self.score_records, "fit")


# --- independent design (pandas), named as the API names its terms -------------------------


def _level_text(v: Any) -> str:
    """A categorical cell as text: a whole number sent as 1.0 or 1 is the level "1" (JSON has
    one number type; common practice), other numbers as Python writes them."""
    if isinstance(v, str):
        return v
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return repr(v)


# Harrell, Regression Modeling Strategies, 2nd ed., Table 2.3: default knot quantiles for 3-5
# knots (quoted from memory)
SPLINE_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.5, 0.725, 0.95),
}


def _rcs(x: np.ndarray, t: np.ndarray) -> list[np.ndarray]:
    """Restricted cubic spline terms s_1..s_{k-2} (Harrell 2nd ed. eq. 2.25), each divided by
    (t_k - t_1)^2 as riskfit documents (service/stats/splines.py)."""
    k = len(t)

    def cube(u: np.ndarray) -> np.ndarray:
        return np.maximum(u, 0.0) ** 3

    out = []
    for j in range(k - 2):
        s = (
            cube(x - t[j])
            - cube(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
            + cube(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2])
        )
        out.append(s / (t[k - 1] - t[0]) ** 2)
    return out


def reference_design(
    spec: dict[str, Any], columns: dict[str, list[Any]], train_rows: int | None = None
) -> pd.DataFrame:
    """Intercept, numeric columns (``log`` if asked), treatment dummies ``g=level`` for every
    level but the reference (the spec's, else the first in string order), restricted cubic
    splines ``x, x_s1, ..`` with knots at Harrell's quantiles of the first ``train_rows`` rows
    (numpy's linear interpolation), and every product of the two features' columns for an
    interaction ``a:b`` (common practice)."""
    df = pd.DataFrame(columns)
    train = len(df) if train_rows is None else train_rows
    parts: dict[str, pd.DataFrame] = {}
    for f in spec["features"]:
        name = f["name"]
        if f["kind"] == "spline":
            x = df[name].astype(float).to_numpy()
            if f.get("transform") == "log":
                x = np.log(x)
            knots = np.quantile(x[:train], SPLINE_QUANTILES[int(f.get("knots", 4))])
            cols = {name: x} | {
                f"{name}_s{j + 1}": s for j, s in enumerate(_rcs(x, np.asarray(knots)))
            }
            parts[name] = pd.DataFrame(cols)
        elif f["kind"] == "numeric":
            x = df[name].astype(float)
            parts[name] = pd.DataFrame({name: np.log(x) if f.get("transform") == "log" else x})
        else:
            text = df[name].map(_level_text)
            levels = sorted(text.unique())
            ref = f.get("reference", levels[0])
            parts[name] = pd.DataFrame(
                {f"{name}={lv}": (text == lv).astype(float) for lv in levels if lv != ref}
            )
    X = pd.DataFrame({"intercept": np.ones(len(df))})
    for f in spec["features"]:
        X = pd.concat([X, parts[f["name"]]], axis=1)
    for a, b in spec.get("interactions", []):
        for ca in parts[a]:
            for cb in parts[b]:
                X[f"{ca}:{cb}"] = parts[a][ca] * parts[b][cb]
    return X


def arrays(case: Case, columns: dict[str, list[Any]] | None = None) -> dict[str, Any]:
    """Reference design, outcome, weights, offset of ``columns`` (default: the training data)."""
    cols = case.columns if columns is None else columns
    opts = case.spec.get("options", {})
    X = reference_design(case.spec, cols)
    n = len(X)
    out = case.spec.get("outcome", "outcome")
    y = np.asarray(cols[out], dtype=float) if out in cols else None
    wname, oname = opts.get("weights"), opts.get("offset")
    w = np.asarray(cols[wname], dtype=float) if wname in cols else np.ones(n)
    off = np.asarray(cols[oname], dtype=float) if oname in cols else np.zeros(n)
    return {"X": X, "y": y, "w": w, "offset": off}


# --- references ------------------------------------------------------------------------------


@dataclass
class Reference:
    """A reference solution held in centred coordinates: ``Xc = X - shift`` (every column but
    the intercept, column 0, minus its mean). Centring only moves the intercept (the same
    model; common practice), and keeps ``x' C x`` of raw-unit records free of cancellation
    (an id-like column ~1e9 loses six digits in it otherwise)."""

    coef_c: np.ndarray
    cov_c: np.ndarray
    shift: np.ndarray  # length p, shift[0] = 0
    solver: str
    converged: bool
    objective: float  # the maximised (penalised) log-likelihood
    note: str = ""
    glm: Any = None  # the statsmodels results (centred design), when statsmodels is the reference

    @property
    def _back(self) -> np.ndarray:
        """``A`` with ``b = A c``: b_0 = c_0 - sum_j shift_j c_j, b_j = c_j."""
        A = np.eye(self.shift.shape[0])
        A[0, :] -= self.shift
        A[0, 0] = 1.0
        return A

    @property
    def coef(self) -> np.ndarray:
        return self._back @ self.coef_c

    @property
    def cov(self) -> np.ndarray:
        A = self._back
        return A @ self.cov_c @ A.T

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def predict(self, X: np.ndarray, offset: np.ndarray, level: float) -> dict[str, np.ndarray]:
        """Wald interval on the logit scale mapped by expit (common practice); with statsmodels
        as the reference, its ``get_prediction`` gives the probability and the interval."""
        Xc = X - self.shift
        eta = Xc @ self.coef_c + offset
        se = np.sqrt(np.einsum("ij,jk,ik->i", Xc, self.cov_c, Xc))
        if self.glm is not None:
            pr = self.glm.get_prediction(Xc, offset=offset)
            ci = pr.conf_int(alpha=1 - level)
            return {
                "eta": eta,
                "se_eta": se,
                "probability": np.asarray(pr.predicted_mean),
                "ci_lower": ci[:, 0],
                "ci_upper": ci[:, 1],
            }
        z = norm.ppf(0.5 + level / 2)
        return {
            "eta": eta,
            "se_eta": se,
            "probability": expit(eta),
            "ci_lower": expit(eta - z * se),
            "ci_upper": expit(eta + z * se),
        }


def _centre(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    assert np.all(X[:, 0] == 1.0), "column 0 must be the intercept"
    shift = X.mean(axis=0)
    shift[0] = 0.0
    return X - shift, shift


def statsmodels_mle(X: np.ndarray, y: np.ndarray, w: np.ndarray, offset: np.ndarray) -> Reference:
    """statsmodels GLM(Binomial), IRLS to tol 1e-13 with frequency weights and the offset, on
    the centred design."""
    Xc, shift = _centre(X)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = sm.GLM(y, Xc, family=sm.families.Binomial(), freq_weights=w, offset=offset).fit(
            tol=1e-13, maxiter=500
        )
    note = "; ".join(sorted({type(c.message).__name__ for c in caught}))
    return Reference(
        np.asarray(res.params),
        np.asarray(res.cov_params()),
        shift,
        "statsmodels GLM(Binomial)",
        bool(res.converged),
        float(res.llf),
        note,
        res,
    )


def _information(Xs: np.ndarray, w: np.ndarray, mu: np.ndarray) -> np.ndarray:
    return (Xs * (w * mu * (1 - mu))[:, None]).T @ Xs


def scipy_penalised(
    X: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    offset: np.ndarray,
    method: str,
    lam: float = 0.0,
) -> Reference:
    """Maximise the penalised log-likelihood with ``scipy.optimize`` (an independent solver).

    * firth: ``l(b) + 1/2 log det(X'WX)`` (Firth 1993), gradient from d/db_j 1/2 log det I =
      1/2 tr(I^-1 dI/db_j), dI/db_j = X' diag(w mu (1-mu)(1-2mu) x_j) X; covariance
      ``(X'WX)^-1`` at the estimate. Firth's estimate is equivariant under an invertible
      linear map of the columns (the penalty changes by a constant), so the optimiser works on
      centred, scaled columns and the result is mapped back.
    * ridge: ``l(b) - lam/2 sum_{j != intercept} b_j^2`` in the units of X, covariance
      ``(X'WX + lam M)^-1``. Centring moves only the unpenalised intercept, so it is solved
      on centred columns (not scaled: the penalty is not scale-invariant).
    Solved with BFGS, then polished with Newton steps on the analytic gradient and a
    finite-difference Hessian of that gradient until the step is below 1e-13 (relative).
    """
    p = X.shape[1]
    Xc, shift = _centre(X)
    scale = np.ones(p)
    if method == "firth":
        sd = Xc[:, 1:].std(axis=0)
        scale[1:] = np.where(sd > 0, sd, 1.0)
    Xs = Xc / scale
    mask = np.ones(p)
    mask[0] = 0.0

    def value_grad(c: np.ndarray) -> tuple[float, np.ndarray]:
        eta = Xs @ c + offset
        mu = expit(eta)
        ll = float(np.sum(w * (y * eta - np.logaddexp(0.0, eta))))
        g = Xs.T @ (w * (y - mu))
        if method == "firth":
            info = _information(Xs, w, mu)
            sign, logdet = np.linalg.slogdet(info)
            if sign <= 0 or not np.isfinite(logdet):  # far from the maximum: W underflowed
                return 1e300, -g
            inv = np.linalg.inv(info)
            # sum_i h_i (1/2 - mu_i) x_i = 1/2 tr(I^-1 dI/db), h_i = w_i mu_i (1-mu_i) x_i'I^-1 x_i
            h = ((Xs @ inv) * Xs).sum(axis=1) * w * mu * (1 - mu)
            ll += 0.5 * logdet
            g = g + Xs.T @ (h * (0.5 - mu))
        else:
            c_raw = c / scale
            ll -= 0.5 * lam * float(np.sum(mask * c_raw**2))
            g = g - lam * mask * c_raw / scale
        return -ll, -g

    c0 = np.zeros(p)
    ybar = np.average(y, weights=w)
    c0[0] = np.log(ybar / (1 - ybar))
    res = minimize(
        value_grad, c0, jac=True, method="BFGS", options={"gtol": 1e-10, "maxiter": 5000}
    )
    c = res.x
    for _ in range(50):
        g = value_grad(c)[1]
        eps = 1e-6 * np.maximum(1.0, np.abs(c))
        H = np.empty((p, p))
        for j in range(p):
            e = np.zeros(p)
            e[j] = eps[j]
            H[:, j] = (value_grad(c + e)[1] - value_grad(c - e)[1]) / (2 * eps[j])
        step = np.linalg.solve(0.5 * (H + H.T), g)
        f0 = value_grad(c)[0]
        while value_grad(c - step)[0] > f0 + 1e-12 * abs(f0) and np.max(np.abs(step)) > 1e-15:
            step = step / 2  # Newton step halved until it does not descend (-objective)
        c = c - step
        if np.max(np.abs(step) / np.maximum(1.0, np.abs(c))) < 1e-13:
            break
    value, grad = value_grad(c)
    coef_c = c / scale  # coefficients of the centred, unscaled columns
    mu = expit(Xc @ coef_c + offset)
    info = _information(Xc, w, mu)
    if method == "ridge":
        info = info + lam * np.diag(mask)
    if method == "firth":  # the objective in raw units: log det changes by 2 sum log(scale)
        value -= float(np.sum(np.log(scale)))
    return Reference(
        coef_c,
        np.linalg.inv(info),
        shift,
        "scipy.optimize (BFGS + Newton polish)",
        bool(np.max(np.abs(grad)) < 1e-6),
        -value,
        f"|grad|max={np.max(np.abs(grad)):.1e}",
    )


def reference_for(case: Case) -> Reference:
    a = arrays(case)
    X = a["X"].to_numpy()
    if case.method == "mle":
        return statsmodels_mle(X, a["y"], a["w"], a["offset"])
    lam = float(case.spec.get("options", {}).get("ridge_lambda", 0.0))
    return scipy_penalised(X, a["y"], a["w"], a["offset"], case.method, lam)


# --- the cases -------------------------------------------------------------------------------


def _num(name: str) -> dict[str, Any]:
    return {"name": name, "kind": "numeric"}


def _cat(name: str, reference: str | None = None) -> dict[str, Any]:
    f: dict[str, Any] = {"name": name, "kind": "categorical"}
    if reference is not None:
        f["reference"] = reference
    return f


def _frame_case(
    name: str,
    source: str,
    df: pd.DataFrame,
    features: list[dict[str, Any]],
    outcome: str = "outcome",
    n_score: int = 5,
    seed: int = 0,
    **spec_extra: Any,
) -> Case:
    cols = {c: df[c].tolist() for c in df.columns}
    rng = np.random.default_rng(seed)
    rows = rng.choice(len(df), size=min(n_score, len(df)), replace=False)
    used = [f["name"] for f in features]
    offset = spec_extra.get("options", {}).get("offset")
    keep = [*used, offset] if offset else used
    records = [{k: cols[k][int(i)] for k in keep} for i in rows]
    spec = {"features": features, "outcome": outcome, **spec_extra}
    return Case(name, source, cols, spec, records)


def _cat_text(s: pd.Series, prefix: str) -> pd.Series:
    return s.map(lambda v: f"{prefix}{int(v)}")


def spector() -> Case:
    """statsmodels.datasets.spector: GRADE ~ GPA + TUCE + PSI (Spector & Mazzeo 1980)."""
    d = sm.datasets.spector.load_pandas().data
    df = pd.DataFrame({"GPA": d.GPA, "TUCE": d.TUCE, "PSI": d.PSI, "outcome": d.GRADE.astype(int)})
    return _frame_case(
        "spector",
        "statsmodels.datasets.spector",
        df,
        [_num("GPA"), _num("TUCE"), _num("PSI")],
    )


def fair() -> Case:
    """statsmodels.datasets.fair: any affair (affairs > 0), ratings as categoricals."""
    d = sm.datasets.fair.load_pandas().data
    df = pd.DataFrame(
        {
            "rate_marriage": _cat_text(d.rate_marriage, "r"),
            "age": d.age,
            "yrs_married": d.yrs_married,
            "children": d.children,
            "religious": _cat_text(d.religious, "rel"),
            "educ": d.educ,
            "occupation": _cat_text(d.occupation, "occ"),
            "occupation_husb": d.occupation_husb,
            "outcome": (d.affairs > 0).astype(int),
        }
    )
    feats = [
        _cat("rate_marriage", "r5"),
        _num("age"),
        _num("yrs_married"),
        _num("children"),
        _cat("religious"),
        _num("educ"),
        _cat("occupation"),
        _num("occupation_husb"),
    ]
    return _frame_case("fair", "statsmodels.datasets.fair", df, feats)


def anes96() -> Case:
    """statsmodels.datasets.anes96: the 1996 vote (Dole = 1) with party id and education as
    categoricals (PID has 7 levels, educ 7, one of them with 13 voters)."""
    d = sm.datasets.anes96.load_pandas().data
    df = pd.DataFrame(
        {
            "logpopul": d.logpopul,
            "TVnews": d.TVnews,
            "selfLR": d.selfLR,
            "ClinLR": d.ClinLR,
            "DoleLR": d.DoleLR,
            "PID": _cat_text(d.PID, "pid"),
            "age": d.age,
            "educ": _cat_text(d.educ, "ed"),
            "income": d.income,
            "outcome": d.vote.astype(int),
        }
    )
    feats = [_num(c) for c in ("logpopul", "TVnews", "selfLR", "ClinLR", "DoleLR")]
    feats += [_cat("PID"), _num("age"), _cat("educ"), _num("income")]
    return _frame_case("anes96", "statsmodels.datasets.anes96", df, feats)


def anes96_codes() -> Case:
    """statsmodels.datasets.anes96 as shipped: party id and education as numeric codes
    (floats 0.0..6.0, ints 1..7) declared categorical; records scored with int codes."""
    d = sm.datasets.anes96.load_pandas().data
    df = pd.DataFrame(
        {
            "selfLR": d.selfLR,
            "PID": d.PID,
            "educ": d.educ.astype(int),
            "income": d.income,
            "outcome": d.vote.astype(int),
        }
    )
    feats = [_num("selfLR"), _cat("PID"), _cat("educ"), _num("income")]
    case = _frame_case("anes96-codes", "statsmodels.datasets.anes96", df, feats, seed=1)
    for rec in case.score_records:
        rec["PID"] = int(rec["PID"])
    return case


def anes96_empty_cells() -> Case:
    """statsmodels.datasets.anes96, PID x educ: two cells of the interaction are empty (no
    voter with PID 3 or 5 and educ 1), so the design has rank 54 of 56 columns."""
    case = anes96()
    case.name = "anes96-PIDxeduc"
    case.spec = {**case.spec, "interactions": [["PID", "educ"]]}
    case.expect = "rank_deficient"
    return case


def anes96_spline() -> Case:
    """statsmodels.datasets.anes96: age as a restricted cubic spline with 4 knots."""
    case = anes96()
    case.name = "anes96-spline"
    feats = [
        {"name": "age", "kind": "spline", "knots": 4} if f["name"] == "age" else f
        for f in case.spec["features"]
    ]
    case.spec = {**case.spec, "features": feats}
    return case


def modechoice() -> Case:
    """statsmodels.datasets.modechoice: chosen (1) or not, per travel mode; mode x income."""
    d = sm.datasets.modechoice.load_pandas().data
    names = {1: "air", 2: "train", 3: "bus", 4: "car"}
    df = pd.DataFrame(
        {
            "mode": d["mode"].map(lambda v: names[int(v)]),
            "ttme": d.ttme,
            "invc": d.invc,
            "invt": d.invt,
            "hinc": d.hinc,
            "psize": d.psize,
            "outcome": d.choice.astype(int),
        }
    )
    feats = [_cat("mode", "car"), *(_num(c) for c in ("ttme", "invc", "invt", "hinc", "psize"))]
    return _frame_case(
        "modechoice",
        "statsmodels.datasets.modechoice",
        df,
        feats,
        interactions=[["mode", "hinc"]],
    )


def star98_weighted() -> Case:
    """statsmodels.datasets.star98: NABOVE of NABOVE + NBELOW pupils per district, as two
    weighted rows (1 with weight NABOVE, 0 with weight NBELOW): a binomial GLM."""
    d = sm.datasets.star98.load_pandas().data
    xs = ["LOWINC", "PERASIAN", "PERBLACK", "PERHISP", "PERMINTE", "AVYRSEXP", "AVSALK"]
    xs += ["PERSPENK", "PTRATIO", "PCTAF", "PCTCHRT", "PCTYRRND"]
    top = pd.DataFrame({c: d[c] for c in xs})
    df = pd.concat(
        [top.assign(outcome=1, n=d.NABOVE), top.assign(outcome=0, n=d.NBELOW)],
        ignore_index=True,
    )
    return _frame_case(
        "star98-weighted",
        "statsmodels.datasets.star98",
        df,
        [_num(c) for c in xs],
        options={"weights": "n"},
    )


def _sk_frame(data: np.ndarray, names: list[str], y: np.ndarray) -> pd.DataFrame:
    df = pd.DataFrame(data, columns=names)
    df["outcome"] = y.astype(int)
    return df


def _clean(names: Any) -> list[str]:
    return [str(n).replace(" ", "_").replace("(", "").replace(")", "") for n in names]


def breast_cancer_means() -> Case:
    """sklearn load_breast_cancer: malignant/benign on the 10 'mean' columns in raw units."""
    from sklearn.datasets import load_breast_cancer

    b = load_breast_cancer()
    names = _clean(b.feature_names)
    df = _sk_frame(b.data[:, :10], names[:10], b.target)
    return _frame_case(
        "breast-cancer-10", "sklearn load_breast_cancer", df, [_num(c) for c in names[:10]]
    )


def breast_cancer_means_log() -> Case:
    """sklearn load_breast_cancer, the 10 'mean' columns with radius, perimeter and area
    log-transformed (their natural log; all values > 0)."""
    case = breast_cancer_means()
    case.name = "breast-cancer-10-log"
    logged = {"mean_radius", "mean_perimeter", "mean_area"}
    feats = [{**f, "transform": "log"} if f["name"] in logged else f for f in case.spec["features"]]
    case.spec = {**case.spec, "features": feats}
    return case


def breast_cancer_all() -> Case:
    """sklearn load_breast_cancer, all 30 raw-unit columns: quasi-complete separation."""
    from sklearn.datasets import load_breast_cancer

    b = load_breast_cancer()
    names = _clean(b.feature_names)
    df = _sk_frame(b.data, names, b.target)
    case = _frame_case(
        "breast-cancer-30", "sklearn load_breast_cancer", df, [_num(c) for c in names]
    )
    case.expect = "separation"
    return case


def iris_versicolor_virginica() -> Case:
    """sklearn load_iris, versicolor (0) vs virginica (1): overlapping classes, a fit exists."""
    from sklearn.datasets import load_iris

    i = load_iris()
    m = i.target > 0
    names = _clean(i.feature_names)
    df = _sk_frame(i.data[m], names, i.target[m] == 2)
    return _frame_case("iris-vv", "sklearn load_iris", df, [_num(c) for c in names])


def iris_setosa() -> Case:
    """sklearn load_iris, setosa vs versicolor: complete separation (by petal length alone)."""
    from sklearn.datasets import load_iris

    i = load_iris()
    m = i.target < 2
    names = _clean(i.feature_names)
    df = _sk_frame(i.data[m], names, i.target[m] == 0)
    case = _frame_case("iris-setosa", "sklearn load_iris", df, [_num(c) for c in names])
    case.expect = "separation"
    return case


def wine_class0() -> Case:
    """sklearn load_wine, cultivar 0 vs the others, 13 columns: complete separation."""
    from sklearn.datasets import load_wine

    w = load_wine()
    names = _clean(w.feature_names)
    df = _sk_frame(w.data, names, w.target == 0)
    case = _frame_case("wine-0", "sklearn load_wine", df, [_num(c) for c in names])
    case.expect = "separation"
    return case


def digits_wide() -> Case:
    """sklearn load_digits, digit >= 5, the pixels inked in 10-90% of images (39 columns)."""
    from sklearn.datasets import load_digits

    d = load_digits()
    inked = (d.data > 0).mean(axis=0)
    keep = np.flatnonzero((inked > 0.1) & (inked < 0.9))
    names = [f"px{j}" for j in keep]
    df = _sk_frame(d.data[:, keep], names, d.target >= 5)
    return _frame_case("digits-39", "sklearn load_digits", df, [_num(c) for c in names])


def digits_all() -> Case:
    """sklearn load_digits, digit >= 5, every pixel that is ever inked (61 columns): rarely
    inked pixels separate the classes (quasi-complete separation)."""
    from sklearn.datasets import load_digits

    d = load_digits()
    keep = np.flatnonzero(d.data.std(axis=0) > 0)
    names = [f"px{j}" for j in keep]
    df = _sk_frame(d.data[:, keep], names, d.target >= 5)
    case = _frame_case("digits-61", "sklearn load_digits", df, [_num(c) for c in names])
    case.expect = "separation"
    return case


def separable(X: np.ndarray, y: np.ndarray) -> bool:
    """Albert & Anderson (1984): the MLE fails to exist iff some d has s_i x_i'd >= 0 for
    every row (s_i = 2 y_i - 1) with at least one strict. Checked as the feasibility of
    ``s_i x_i'd >= 0, sum_i s_i x_i'd = 1`` with scipy.optimize.linprog (HiGHS), on columns
    scaled to unit range (scaling d does not change feasibility)."""
    from scipy.optimize import linprog

    span = X.max(axis=0) - X.min(axis=0)
    Xs = X / np.where(span > 0, span, 1.0)
    A = (2 * y - 1)[:, None] * Xs
    res = linprog(
        np.zeros(X.shape[1]),
        A_ub=-A,
        b_ub=np.zeros(len(y)),
        A_eq=A.sum(axis=0)[None, :],
        b_eq=[1.0],
        bounds=[(None, None)] * X.shape[1],
        method="highs",
    )
    return bool(res.status == 0)


def awkward(seed: int = 11, n: int = 3000) -> Case:
    """Seeded textbook-style awkward data (common practice in risk data): a calendar year
    ~2000, an id-like number ~1e6, a measurement varying in its third decimal, two
    categoricals and their interaction, case weights and an offset (log exposure)."""
    rng = np.random.default_rng(seed)
    year = rng.integers(1995, 2011, n)
    id_like = 1_000_000 + rng.integers(0, 5000, n)
    gauge = np.round(7.3 + rng.uniform(0, 0.009, n), 4)  # varies in the 3rd decimal
    region = rng.choice(["north", "south", "east"], n)
    tier = rng.choice(["bronze", "silver", "gold"], n, p=[0.5, 0.3, 0.2])
    exposure = rng.uniform(0.2, 3.0, n)
    weight = rng.choice([0.5, 1.0, 2.0, 3.0], n)
    eta = (
        -1.0
        + 0.05 * (year - 2003)
        + 2e-4 * (id_like - 1_002_500)
        + 120.0 * (gauge - 7.3045)
        + np.where(region == "south", 0.4, 0.0)
        + np.where(tier == "gold", -0.6, 0.0)
        + np.where((region == "east") & (tier == "silver"), 0.7, 0.0)
        + np.log(exposure)
    )
    y = (rng.uniform(size=n) < expit(eta)).astype(int)
    df = pd.DataFrame(
        {
            "year": year,
            "id_like": id_like,
            "gauge": gauge,
            "region": region,
            "tier": tier,
            "log_exposure": np.log(exposure),
            "weight": weight,
            "outcome": y,
        }
    )
    feats = [_num("year"), _num("id_like"), _num("gauge"), _cat("region"), _cat("tier", "bronze")]
    return _frame_case(
        "awkward",
        "seeded (common practice)",
        df,
        feats,
        seed=seed,
        interactions=[["region", "tier"]],
        options={"weights": "weight", "offset": "log_exposure"},
    )


def wide(seed: int = 5, n: int = 4000, p: int = 34) -> Case:
    """Seeded: 34 numeric columns on mixed scales (some raw ~1e3, some ~1e-2)."""
    rng = np.random.default_rng(seed)
    scales = np.geomspace(1e-2, 1e3, p)
    Z = rng.normal(size=(n, p))
    beta = rng.normal(0, 0.3, p)
    y = (rng.uniform(size=n) < expit(-0.5 + Z @ beta)).astype(int)
    names = [f"x{j:02d}" for j in range(p)]
    df = pd.DataFrame(Z * scales + 10 * scales, columns=names)
    df["outcome"] = y
    return _frame_case(
        "wide-34", "seeded (common practice)", df, [_num(c) for c in names], seed=seed
    )


def singleton_level(seed: int = 3, n: int = 400) -> Case:
    """Seeded: a categorical level seen once. Its dummy fits that one row exactly, so the
    maximum-likelihood estimate does not exist (quasi-complete separation; Albert & Anderson
    1984); Firth's estimate does."""
    rng = np.random.default_rng(seed)
    site = rng.choice(["A", "B"], n)
    site[17] = "C"
    x = rng.normal(size=n)
    y = (rng.uniform(size=n) < expit(-0.3 + 0.8 * x + np.where(site == "B", 0.5, 0.0))).astype(int)
    df = pd.DataFrame({"x": x, "site": site, "outcome": y})
    case = _frame_case(
        "singleton-level", "seeded (common practice)", df, [_num("x"), _cat("site")], seed=seed
    )
    case.expect = "separation"
    case.separated_terms = ("site=C",)
    return case


def _location(name: str, v: np.ndarray, seed: int, n: int) -> Case:
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    s = (v - v.mean()) / v.std()
    y = (rng.uniform(size=n) < expit(-0.5 + 0.7 * s + 0.5 * z)).astype(int)
    df = pd.DataFrame({"v": v, "z": z, "outcome": y})
    return _frame_case(name, "seeded (common practice)", df, [_num("v"), _num("z")], seed=seed)


def id_narrow(seed: int = 21, n: int = 2000) -> Case:
    """Seeded: an id-like number ~1e6 that varies over only 10 units (common practice: record
    numbers, meter ids). Its information matrix has condition ~1e11 in raw units, but the
    columns are linearly independent: the fit exists."""
    v = 1e6 + np.random.default_rng(seed + 1).uniform(0, 10, n)
    return _location("id-1e6-narrow", v, seed, n)


def gauge_fourth_decimal(seed: int = 22, n: int = 2000) -> Case:
    """Seeded: a gauge reading ~1000 that varies in its fourth decimal (range 0.01)."""
    v = 1000.0 + np.round(np.random.default_rng(seed + 1).uniform(0, 0.01, n), 4)
    return _location("gauge-1e3", v, seed, n)


def id_1e9(seed: int = 23, n: int = 2000) -> Case:
    """Seeded: an id-like integer ~1e9 + [0, 1e5)."""
    v = 1e9 + np.random.default_rng(seed + 1).integers(0, 100_000, n).astype(float)
    return _location("id-1e9", v, seed, n)


FITS: list[Callable[[], Case]] = [
    spector,
    fair,
    anes96,
    anes96_codes,
    anes96_spline,
    modechoice,
    star98_weighted,
    breast_cancer_means,
    breast_cancer_means_log,
    iris_versicolor_virginica,
    digits_wide,
    awkward,
    wide,
    id_narrow,
    gauge_fourth_decimal,
    id_1e9,
]
SEPARATED: list[Callable[[], Case]] = [
    breast_cancer_all,
    iris_setosa,
    wine_class0,
    digits_all,
    singleton_level,
]


def all_cases() -> list[Case]:
    """Every fit the trial asks for: mle where the estimate exists; for separated data the mle
    (refusal expected), then Firth; Firth on spector (small n); ridge once (wine)."""
    out: list[Case] = []
    for make in FITS:
        out.append(make())
    out.append(spector().with_options("spector", method="firth"))
    out.append(awkward().with_options("awkward", method="firth"))
    out.append(id_1e9().with_options("id-1e9", method="firth"))
    for make in SEPARATED:
        c = make()
        out.append(c)
        out.append(c.with_options(c.name, method="firth"))
    out.append(wine_class0().with_options("wine-0", method="ridge", ridge_lambda=1.0))
    out.append(anes96_empty_cells())
    return out
