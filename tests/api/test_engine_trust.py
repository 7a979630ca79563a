"""Engine trust through the API: Firth with a level seen once and a calendar-year column, the
global test's rule, drop-term kinds and the marginality-respecting test.

References: statsmodels ``Logit`` on a design built with pandas (not the engine), reduced
models refitted there; the global-test rule as Heinze & Schemper (2002) state it.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import statsmodels.api as sm

from tests.api._data import MATERIALS, SOILS, fit_body, segments
from tests.api.conftest import ApiClient

URL = "/risk-models/engine-trust/versions"


def test_firth_with_a_singleton_level_and_a_year_column_is_stored(api: ApiClient) -> None:
    cols = segments(600, seed=21)
    cols["material"][0] = "copper"  # a level seen once, with an event: separation
    cols["outcome"][0] = 1
    rng = np.random.default_rng(22)
    cols["installed"] = (1950 + rng.integers(0, 70, 600)).tolist()  # a calendar year
    body = fit_body(cols, options={"method": "firth"})
    body["features"] = [*body["features"], {"name": "installed", "kind": "numeric"}]
    r = api.post(URL, json=body)
    assert r.status_code == 201, r.text
    stats = r.json()["fit_statistics"]
    assert stats["converged"] is True
    assert "full model's penalty" in stats["global_test_rule"]
    assert {d["kind"] for d in stats["drop_term_tests"]} == {"main effect"}


def _design(cols: dict[str, list[Any]]) -> pd.DataFrame:
    df = pd.DataFrame(cols)
    X = pd.DataFrame({"intercept": 1.0, "age": df["age_years"].astype(float)})
    X["log_diameter"] = np.log(df["diameter_mm"].astype(float))
    for level in MATERIALS[1:]:
        X[f"m={level}"] = (df["material"] == level).astype(float)
        X[f"age:m={level}"] = X["age"] * X[f"m={level}"]
    for level in SOILS[1:]:
        X[f"s={level}"] = (df["soil"] == level).astype(float)
    X["prior"] = df["prior_breaks_5y"].astype(float)
    return X


def test_drop_term_rows_say_their_kind_and_match_statsmodels(api: ApiClient) -> None:
    cols = segments(1500, seed=23)
    r = api.post(URL, json=fit_body(cols, interactions=[["age_years", "material"]]))
    assert r.status_code == 201, r.text
    rows = {d["name"]: d for d in r.json()["fit_statistics"]["drop_term_tests"]}
    assert rows["age_years"]["kind"] == "main effect, interactions kept"
    assert rows["soil"]["kind"] == "main effect"
    assert rows["age_years:material"]["kind"] == "interaction"
    marginal = rows["material with interactions"]
    assert marginal["kind"] == "main effect with its interactions"
    assert marginal["dropped"] == ["material", "age_years:material"] and marginal["df"] == 6
    X = _design(cols)
    y = np.asarray(cols["outcome"], dtype=float)
    full = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=0)  # statsmodels reference
    drops = {
        "material with interactions": [c for c in X if c.startswith(("m=", "age:m="))],
        "age_years with interactions": ["age"] + [c for c in X if c.startswith("age:m=")],
        "age_years": ["age"],
        "age_years:material": [c for c in X if c.startswith("age:m=")],
    }
    for name, gone in drops.items():
        red = sm.Logit(y, X.drop(columns=gone)).fit(method="newton", tol=1e-12, disp=0)
        assert rows[name]["df"] == len(gone)
        assert np.isclose(rows[name]["statistic"], 2 * (full.llf - red.llf), rtol=1e-6, atol=1e-7)
