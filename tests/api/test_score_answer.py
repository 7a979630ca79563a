"""The per-column JSON answer (service.score_answer) is byte for byte what orjson makes of the
dict form: every float shape orjson distinguishes, NaN and infinities, keys that need escaping,
warnings, and the header fields. The reference is orjson itself (serialising the dicts through
service.api.responses.dumps, as the route did before), an implementation outside this module."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import orjson

from service.api.responses import dumps
from service.score_answer import ITEM_KEYS, answer_json
from service.score_log_rows import new_score_ids


def _dict_form(header, ids, keys, columns, warnings):  # type: ignore[no-untyped-def]
    keys = keys if keys is not None else [None] * len(ids)
    lists = [c.tolist() for c in columns]
    scores = [
        dict(zip(ITEM_KEYS, t, strict=True)) for t in zip(ids, keys, *lists, warnings, strict=True)
    ]
    return dumps({**header, "scores": scores})


def test_bytes_equal_the_dict_form_for_awkward_values() -> None:
    rng = np.random.default_rng(11)
    n = 2000
    special = np.array([0.0, -0.0, 1e-300, 5e-324, 1e300, np.nan, np.inf, -np.inf, 0.1, 1 / 3])
    columns = [np.concatenate([special, rng.standard_normal(n - special.size) * 10.0**k])
               for k in (-8, 0, 3, 12, 300)]  # fmt: skip
    ids = new_score_ids(n)
    keys: list[str | None] = [None, 'quote " back \\ slash', "ü ∑ 水", "\n\t", "x"] * (n // 5)
    warnings = [() if i % 7 else ("extrapolation: a=1 is outside [0, 0.5]",) for i in range(n)]
    header = {
        "model": "m-1",
        "version": 3,
        "confidence_level": 0.9,
        "ci_method": "wald-logit",
        "n_records": n,
        "created_at": datetime(2026, 1, 2, 3, 4, 5, 678901, tzinfo=UTC),
    }
    built = answer_json(header, ids, keys, columns, warnings)
    assert built == _dict_form(header, ids, keys, columns, warnings)
    assert orjson.loads(built)["scores"][1]["key"] == keys[1]
    assert answer_json(header, ids, None, columns, warnings) == _dict_form(
        header, ids, None, columns, warnings
    )


def test_few_records_equal_the_dict_form_value_by_value() -> None:
    # A few records are written value by value (service.score_answer._FEW_VALUES): every
    # awkward value in every number column, one and three records per answer.
    rng = np.random.default_rng(12)
    special = [0.0, -0.0, 1e-300, 5e-324, 1e300, np.nan, np.inf, -np.inf, 0.1, 1 / 3, 123456.0]
    header = {
        "model": "m",
        "version": 1,
        "confidence_level": 0.95,
        "ci_method": "wald-logit",
        "n_records": 1,
        "created_at": datetime(2026, 5, 6, 7, 8, 9, tzinfo=UTC),
    }
    for n in (1, 3):
        for value in special:
            columns = [rng.standard_normal(n) * 10.0 ** rng.integers(-20, 20) for _ in range(5)]
            columns[int(rng.integers(5))][int(rng.integers(n))] = value
            ids = new_score_ids(n)
            keys: list[str | None] = ['a "b"', None, "ü"][:n]
            warnings = [("extrapolation: x=2 is outside [0, 1]",), (), ()][:n]
            built = answer_json(header, ids, keys, columns, warnings)
            assert built == _dict_form(header, ids, keys, columns, warnings)
