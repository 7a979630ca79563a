"""The demo scenario: water-main break risk for a municipal utility (invented, seeded data).

A utility ranks its pipe segments by the risk of a break within the next twelve months.
Every figure here is invented for the demo; none is measured on a real network. The
generator draws a network of segments with plausible joint distributions and then the
outcome of one year from a known *true* logistic model

    logit P(break) = b0 + b_age * age_years + b_diam * log(diameter_mm)
                     + b_material[material] + b_soil[soil] + b_prior * prior_breaks_5y

with PVC and low-corrosivity soil as reference levels. With the year-one coefficients the
annual break probability runs from well under 1 % (young PVC in benign soil, about 0.5 %)
to roughly 20-30 % (cast iron older than 90 years with earlier breaks in highly corrosive
soil), about 4-6 % on average (4.4 % measured on a large draw of year one; 7.7 % in year
two), so a few thousand segments give a couple of hundred breaks: enough to fit a model and
to monitor it.

Year two is a harsher winter: every segment's log-odds rise (an intercept shift) and the
age effect steepens, so a year-one model under-predicts, most of all for old pipes.

Network (shared by both years for one seed):

* material shares: cast iron 30 %, ductile iron 22 %, PVC 33 %, asbestos cement 15 %;
* age in year one (years, triangular by material, rounded): cast iron 55-115 (mode 80),
  ductile iron 15-55 (35), PVC 1-45 (18), asbestos cement 38-75 (55); one year older in
  year two;
* diameter: log-normal around 190 mm (sigma 0.45 on the log scale) clipped to 100-600 mm and
  snapped to the nominal sizes 100, 150, ..., 600;
* soil corrosivity: low 50 %, moderate 35 %, high 15 %.

Per year: ``prior_breaks_5y`` ~ Poisson(6 * p_hist) capped at 6, where ``p_hist`` is the
year-one probability without the prior-breaks term (five years of the past climate, with some
clustering of breaks); then ``outcome`` ~ Bernoulli(true probability).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

from service.errors import InvalidInputError

__all__ = [
    "DEFAULT_SEED",
    "FEATURES",
    "MATERIALS",
    "MODEL_NAME",
    "SOILS",
    "TRUE_MODEL",
    "TRUE_MODEL_YEAR2",
    "TrueModel",
    "feature_spec",
    "generate_segments",
    "true_model",
]

MODEL_NAME = "water-mains"
DEFAULT_SEED = 20240601
MATERIALS: tuple[str, ...] = ("cast iron", "ductile iron", "PVC", "asbestos cement")
SOILS: tuple[str, ...] = ("low", "moderate", "high")
FEATURES: tuple[str, ...] = ("age_years", "diameter_mm", "material", "soil", "prior_breaks_5y")

_MATERIAL_SHARES = (0.30, 0.22, 0.33, 0.15)
_AGE_TRIANGLE = {  # material -> (low, mode, high) age in year one, years
    "cast iron": (55.0, 80.0, 115.0),
    "ductile iron": (15.0, 35.0, 55.0),
    "PVC": (1.0, 18.0, 45.0),
    "asbestos cement": (38.0, 55.0, 75.0),
}
_NOMINAL_DIAMETERS_MM = np.array([100.0, 150.0, 200.0, 250.0, 300.0, 400.0, 500.0, 600.0])
_SOIL_SHARES = (0.50, 0.35, 0.15)
_PRIOR_BREAKS_CAP = 6


@dataclass(frozen=True)
class TrueModel:
    """The known truth of one year: log-odds coefficients by term name.

    Term names follow the service's convention: ``intercept``, a numeric feature's own name
    (``diameter_mm`` is the coefficient on ``log(diameter_mm)``), ``name=level`` for a
    categorical level other than the reference (PVC for material, low for soil).
    """

    year: int
    coef: Mapping[str, float]
    description: str

    def linear_predictor(self, columns: Mapping[str, Any]) -> np.ndarray:
        """eta (n,) = b0 + sum of terms, from columns named as in :data:`FEATURES`."""
        c = self.coef
        material = np.asarray(columns["material"])
        soil = np.asarray(columns["soil"])
        eta = (
            c["intercept"]
            + c["age_years"] * np.asarray(columns["age_years"], dtype=float)
            + c["diameter_mm"] * np.log(np.asarray(columns["diameter_mm"], dtype=float))
            + c["prior_breaks_5y"] * np.asarray(columns["prior_breaks_5y"], dtype=float)
        )
        for level in MATERIALS[:2] + MATERIALS[3:]:
            eta = eta + c[f"material={level}"] * (material == level)
        for level in SOILS[1:]:
            eta = eta + c[f"soil={level}"] * (soil == level)
        return np.asarray(eta, dtype=float)

    def probability(self, columns: Mapping[str, Any]) -> np.ndarray:
        """Annual break probability (n,) = expit(eta)."""
        return _expit(self.linear_predictor(columns))


_YEAR_ONE = {
    "intercept": -3.3,
    "age_years": 0.028,
    "diameter_mm": -0.45,
    "material=cast iron": 0.70,
    "material=ductile iron": 0.30,
    "material=asbestos cement": 0.50,
    "soil=moderate": 0.35,
    "soil=high": 0.65,
    "prior_breaks_5y": 0.28,
}
WINTER_INTERCEPT_SHIFT = 0.25
WINTER_AGE_SLOPE = 0.033

TRUE_MODEL = TrueModel(
    year=1,
    coef=MappingProxyType(dict(_YEAR_ONE)),
    description="an ordinary winter",
)
TRUE_MODEL_YEAR2 = TrueModel(
    year=2,
    coef=MappingProxyType(
        _YEAR_ONE
        | {
            "intercept": _YEAR_ONE["intercept"] + WINTER_INTERCEPT_SHIFT,
            "age_years": WINTER_AGE_SLOPE,
        }
    ),
    description=(
        f"a harsher winter: log-odds +{WINTER_INTERCEPT_SHIFT} for every segment and an age "
        f"effect of {WINTER_AGE_SLOPE} instead of {_YEAR_ONE['age_years']} per year"
    ),
)


def true_model(year: int) -> TrueModel:
    """The true model of ``year`` (1 or 2)."""
    if year == 1:
        return TRUE_MODEL
    if year == 2:
        return TRUE_MODEL_YEAR2
    raise InvalidInputError(
        "the demo scenario has two years", field="year", value=year, remedy="use 1 or 2"
    )


def feature_spec() -> list[dict[str, Any]]:
    """The feature spec the demo fits (a fresh JSON-ready list on every call)."""
    return [
        {"name": "age_years", "kind": "numeric"},
        {"name": "diameter_mm", "kind": "numeric", "transform": "log"},
        {"name": "material", "kind": "categorical", "reference": "PVC"},
        {"name": "soil", "kind": "categorical", "reference": "low"},
        {"name": "prior_breaks_5y", "kind": "numeric"},
    ]


def generate_segments(n: int, *, year: int = 1, seed: int = DEFAULT_SEED) -> dict[str, np.ndarray]:
    """Draw ``n`` segments and their outcome in ``year`` (1 or 2), reproducibly from ``seed``.

    Returns columns of shape (n,): ``segment_id`` (str, ``WM-000001``...), ``age_years``
    (float), ``diameter_mm`` (float), ``material`` (str), ``soil`` (str),
    ``prior_breaks_5y`` (int), ``outcome`` (int 0/1: a break within the year). The same seed
    gives the same network in both years (segments one year older in year two); the yearly
    draws (prior breaks, outcome) differ by year.
    """
    truth = true_model(year)
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 1:
        raise InvalidInputError(
            "the number of segments must be a positive integer",
            field="n",
            value=n,
            remedy="pass e.g. n=3000",
        )
    network = _draw_network(int(n), np.random.default_rng([seed, 0]))
    rng = np.random.default_rng([seed, year])
    columns: dict[str, np.ndarray] = dict(network)
    columns["age_years"] = network["age_years"] + (year - 1)
    p_hist = _expit(TRUE_MODEL.linear_predictor(columns | {"prior_breaks_5y": np.zeros(n)}))
    prior = np.minimum(rng.poisson(6.0 * p_hist), _PRIOR_BREAKS_CAP)
    columns["prior_breaks_5y"] = prior.astype(np.int64)
    p = truth.probability(columns)
    columns["outcome"] = (rng.random(n) < p).astype(np.int64)
    return columns


def _draw_network(n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Static attributes of ``n`` segments: ids, material, year-one age, diameter, soil."""
    material_idx = rng.choice(len(MATERIALS), size=n, p=_MATERIAL_SHARES)
    low, mode, high = (
        np.array([_AGE_TRIANGLE[m][k] for m in MATERIALS])[material_idx] for k in range(3)
    )
    age = np.round(rng.triangular(low, mode, high))
    raw = np.clip(np.exp(rng.normal(np.log(190.0), 0.45, size=n)), 100.0, 600.0)
    nearest = np.abs(np.log(raw)[:, None] - np.log(_NOMINAL_DIAMETERS_MM)[None, :]).argmin(axis=1)
    soil_idx = rng.choice(len(SOILS), size=n, p=_SOIL_SHARES)
    return {
        "segment_id": np.array([f"WM-{i + 1:06d}" for i in range(n)]),
        "age_years": age.astype(float),
        "diameter_mm": _NOMINAL_DIAMETERS_MM[nearest],
        "material": np.array(MATERIALS)[material_idx],
        "soil": np.array(SOILS)[soil_idx],
    }


def _expit(eta: np.ndarray) -> np.ndarray:
    """Logistic function 1 / (1 + exp(-eta)), elementwise."""
    return np.asarray(1.0 / (1.0 + np.exp(-eta)), dtype=float)
