"""Population stability index: the definition's worked example, references and JSON."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest

from service.errors import DataError, SpecError
from service.stats.psi import (
    UNSEEN,
    categorical_reference,
    numeric_reference,
    psi,
    psi_from_shares,
    reference_from_dict,
)


def test_worked_example_from_the_definition() -> None:
    # Direct from the definition sum (a - r) ln(a / r): 0.13744 + 0.01116 + 0.00912 + 0.07050.
    value = psi_from_shares([0.25, 0.25, 0.25, 0.25], [0.10, 0.20, 0.30, 0.40])
    assert value == pytest.approx(0.2282, abs=5e-5)


def test_numeric_reference_deciles_and_identical_sample() -> None:
    x = np.random.default_rng(0).normal(size=10_000)
    ref = numeric_reference(x)
    assert len(ref.edges) == 9 and ref.n_obs == 10_000
    np.testing.assert_allclose(ref.shares, 0.1, atol=1e-3)  # deciles by construction
    same = psi(ref, x)
    assert same.psi == pytest.approx(0.0, abs=1e-12) and same.band == "stable"
    assert same.n_obs == 10_000 and same.n_reference == 10_000 and len(same.bins) == 10


def test_shifted_sample_matches_direct_share_computation() -> None:
    rng = np.random.default_rng(1)
    ref = numeric_reference(rng.normal(size=5_000))
    new = rng.normal(loc=0.5, size=3_000)
    res = psi(ref, new)
    # independent binning by direct comparison with the same right-closed edges
    edges = np.r_[-np.inf, ref.edges, np.inf]
    counts = np.array([np.sum((new > lo) & (new <= hi)) for lo, hi in itertools.pairwise(edges)])
    assert [b.actual_count for b in res.bins] == counts.tolist()
    assert res.psi == pytest.approx(psi_from_shares(ref.shares, counts / counts.sum()), rel=1e-12)
    assert res.band in ("moderate shift", "major shift")  # a half-SD shift is far from stable
    assert res.psi == pytest.approx(sum(b.contribution for b in res.bins), rel=1e-12)


def test_heavily_tied_values_get_deduplicated_edges() -> None:
    x = np.r_[np.zeros(900), np.ones(80), np.full(20, 2.0)]
    ref = numeric_reference(x)
    # deciles 1..9 are all 0 ("lower" quantiles), so one edge remains: (-inf, 0], (0, inf)
    assert ref.edges == (0.0,)
    np.testing.assert_allclose(ref.shares, [0.9, 0.1])


def test_categorical_with_unseen_level_and_epsilon_floor() -> None:
    ref = categorical_reference(["a"] * 50 + ["b"] * 30 + ["c"] * 20)
    res = psi(ref, ["a"] * 40 + ["b"] * 40 + ["z"] * 20, epsilon=1e-4)
    labels = [b.label for b in res.bins]
    assert labels == ["a", "b", "c", UNSEEN]
    # definition with floors: c has a = 0 -> 1e-4; unseen has r = 0 -> 1e-4
    expected = psi_from_shares([0.5, 0.3, 0.2, 0.0], [0.4, 0.4, 0.0, 0.2], epsilon=1e-4)
    assert res.psi == pytest.approx(expected, rel=1e-12)
    assert res.band == "major shift" and res.epsilon == 1e-4


def test_json_round_trip() -> None:
    for ref in (numeric_reference(np.arange(100.0)), categorical_reference(["x", "y", "x"])):
        back = reference_from_dict(json.loads(json.dumps(ref.to_dict())))
        assert back == ref


def test_bad_input_errors() -> None:
    with pytest.raises(DataError) as exc:
        numeric_reference([1.0, np.nan])
    assert exc.value.field == "values[1]"
    with pytest.raises(SpecError):
        reference_from_dict({"kind": "histogram"})
    with pytest.raises(SpecError):
        numeric_reference([1.0, 2.0], n_bins=1)
