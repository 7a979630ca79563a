"""Encoding and design matrix: patsy as the external reference, round trips and errors."""

from __future__ import annotations

import json

import numpy as np
import patsy
import pytest

from service.errors import DataError, MissingFeatureError, SpecError, UnseenLevelError
from service.stats.design import Encoding, design_matrix, learn_encoding


def _columns(seed: int, n: int = 300) -> dict[str, list[object]]:
    rng = np.random.default_rng(seed)
    return {
        "age": rng.uniform(1, 90, n).round(1).tolist(),
        "diameter": rng.lognormal(5, 0.4, n).tolist(),
        "material": rng.choice(["cast iron", "ductile iron", "PVC", "asbestos cement"], n).tolist(),
        "soil": rng.choice(["low", "moderate", "high"], n).tolist(),
    }


SPEC = [
    {"name": "age", "kind": "numeric"},
    {"name": "diameter", "kind": "numeric", "transform": "log"},
    {"name": "material", "kind": "categorical", "reference": "PVC"},
    {"name": "soil", "kind": "categorical", "levels": ["low", "moderate", "high"]},
]
INTER = [("age", "material"), ("material", "soil"), ("age", "diameter")]


@pytest.mark.parametrize("n", [300, 2 * 16384 + 17])  # one slice of rows; several, the last short
def test_columns_match_patsy_treatment_coding(n: int) -> None:
    # Reference: patsy.dmatrix with Treatment contrasts and ':' interactions (Wilkinson-Rogers).
    cols = _columns(1, n)
    enc = learn_encoding(SPEC, cols, INTER)
    X = design_matrix(enc, cols).X
    ref = patsy.dmatrix(
        "age + np.log(diameter) + C(material, Treatment('PVC'))"
        " + C(soil, levels=['low','moderate','high'])"
        " + age:C(material, Treatment('PVC'))"
        " + C(material, Treatment('PVC')):C(soil, levels=['low','moderate','high'])"
        " + age:np.log(diameter)",
        cols,
        return_type="matrix",
    )
    # patsy orders terms its own way: compare column by column after translating its names.
    mat, soil = "C(material, Treatment('PVC'))[T.", "C(soil, levels=['low', 'moderate', 'high'])[T."
    ref_names = [
        n.replace("Intercept", "intercept")
        .replace(mat, "material=")
        .replace(soil, "soil=")
        .replace("np.log(diameter)", "diameter")
        .replace("]", "")
        for n in ref.design_info.column_names
    ]
    assert sorted(ref_names) == sorted(enc.term_names)
    for j, name in enumerate(ref_names):
        np.testing.assert_allclose(
            X[:, enc.term_names.index(name)], np.asarray(ref)[:, j], rtol=1e-14
        )
    assert enc.term_names[:8] == (
        "intercept",
        "age",
        "diameter",
        "material=asbestos cement",
        "material=cast iron",
        "material=ductile iron",
        "soil=moderate",
        "soil=high",
    )
    assert "age:material=cast iron" in enc.term_names
    assert "material=cast iron:soil=high" in enc.term_names
    assert enc.term_groups["material"] == (3, 4, 5)
    assert len(enc.term_groups["material:soil"]) == 6


def test_round_trip_through_json_rebuilds_the_same_matrix() -> None:
    cols = _columns(2)
    spec = [*SPEC, {"name": "depth", "kind": "spline", "knots": 5}]
    cols["depth"] = np.random.default_rng(3).gamma(3, 1, 300).tolist()
    enc = learn_encoding(spec, cols, [("depth", "soil")])
    again = Encoding.from_dict(json.loads(json.dumps(enc.to_dict())))
    assert again == enc
    new = _columns(4, 50)
    new["depth"] = np.linspace(0.1, 20, 50).tolist()
    np.testing.assert_array_equal(design_matrix(again, new).X, design_matrix(enc, new).X)


def test_extrapolation_is_flagged_not_refused() -> None:
    cols = _columns(5)
    enc = learn_encoding(SPEC, cols)
    new = {k: v[:3] for k, v in cols.items()}
    new["age"] = [0.5, 50.0, 120.0]
    d = design_matrix(enc, new)
    assert d.extrapolated["age"].tolist() == [True, False, True]
    assert not d.extrapolated["diameter"].any()
    assert "material" not in d.extrapolated


def test_scoring_errors_name_feature_value_and_row() -> None:
    enc = learn_encoding(SPEC, _columns(6))
    good = {k: v[:4] for k, v in _columns(7).items()}
    with pytest.raises(MissingFeatureError) as e1:
        design_matrix(enc, {k: v for k, v in good.items() if k != "soil"}, field_prefix="records")
    assert e1.value.field == "records.soil"
    with pytest.raises(UnseenLevelError) as e2:
        design_matrix(enc, {**good, "material": ["PVC", "PVC", "copper", "PVC"]})
    assert e2.value.field == "data.columns.material[2]" and e2.value.value == "copper"
    with pytest.raises(DataError) as e3:
        design_matrix(enc, {**good, "age": [1.0, None, 3.0, 4.0]})
    assert e3.value.field == "data.columns.age[1]"
    with pytest.raises(DataError) as e4:
        design_matrix(enc, {**good, "diameter": [100.0, 0.0, 3.0, 4.0]})
    assert e4.value.field == "data.columns.diameter[1]" and "log" in e4.value.message
    with pytest.raises(DataError) as e5:
        design_matrix(enc, {**good, "age": [1.0, "old", 3.0, 4.0]})
    assert e5.value.value == "old"


@pytest.mark.parametrize(
    ("spec", "field"),
    [
        ([{"name": "age", "kind": "number"}], "spec.features[0].kind"),
        ([{"name": "age", "kind": "spline", "knots": 9}], "spec.features[0].knots"),
        ([{"name": "age", "kind": "spline", "knots": [0.5, 0.2, 0.9]}], "spec.features[0].knots"),
        ([{"name": "age", "kind": "numeric", "reference": "x"}], "spec.features[0].reference"),
        (
            [{"name": "material", "kind": "categorical", "reference": "steel"}],
            "spec.features[0].reference",
        ),
        (
            [{"name": "age", "kind": "numeric"}, {"name": "age", "kind": "numeric"}],
            "spec.features[1].name",
        ),
        ([], "spec.features"),
    ],
)
def test_spec_errors_name_the_field(spec: list[dict[str, object]], field: str) -> None:
    with pytest.raises(SpecError) as err:
        learn_encoding(spec, _columns(8))
    assert err.value.field == field and err.value.remedy


def test_bad_interaction_is_a_spec_error() -> None:
    with pytest.raises(SpecError) as err:
        learn_encoding(SPEC, _columns(9), [("age", "colour")])
    assert err.value.field == "spec.interactions[0]"


def test_spline_on_too_few_distinct_values_names_the_count() -> None:
    cols = {"x": [1.0, 2.0] * 50}
    with pytest.raises(DataError) as err:
        learn_encoding([{"name": "x", "kind": "spline", "knots": 4}], cols)
    assert err.value.field == "data.columns.x" and err.value.value == "2 distinct values"
