"""The data fingerprint against the byte layout documented in service/fingerprint.py, hashed
here independently with hashlib and struct, one row at a time (the obvious way)."""

from __future__ import annotations

import hashlib
import struct

import numpy as np

from service.data_io import training_data
from service.fingerprint import data_fingerprint, fingerprint_columns
from service.stats.columns import CodedLabels


def _by_hand(n: int, floats: dict[str, list[float]], texts: dict[str, list[str]]) -> str:
    h = hashlib.sha256(b"riskfit-training-data/1\n" + struct.pack("<Q", n))
    for name in sorted({**floats, **texts}):
        h.update(name.encode() + b"\x00")
        if name in floats:
            h.update(b"f" + b"".join(struct.pack("<d", v + 0.0) for v in floats[name]))
        else:
            h.update(b"s")
            for v in texts[name]:
                b = v.encode()
                h.update(struct.pack("<I", len(b)) + b)
    return h.hexdigest()


def test_fingerprint_follows_the_documented_bytes() -> None:
    rng = np.random.default_rng(3)
    n = 5000
    levels = ["PVC", "cast iron", "", "Gußeisen", "x" * 70]  # unequal lengths, empty, non-ASCII
    material = [levels[i] for i in rng.integers(0, len(levels), n)]
    age = rng.uniform(-1, 1, n).round(1).tolist()
    age[0] = -0.0  # normalised to 0.0
    y = rng.integers(0, 2, n).astype(float).tolist()
    data = training_data(
        {"age": age, "material": material, "y": y},
        kinds={"age": "numeric", "material": "categorical"},
        outcome="y",
    )
    want = _by_hand(n, {"age": age, "y": y}, {"material": material})
    assert data_fingerprint(data, "y", None, None) == want


def test_fingerprint_of_parts_equals_the_whole_and_row_order_counts() -> None:
    codes = np.array([0, 1, 1, 2, 0, 2, 2], dtype=np.intp)
    labels = CodedLabels(codes, ("a", "bb", "ccc"))
    text = [labels.levels[c] for c in codes]
    x = np.arange(7, dtype=np.float64)
    whole = fingerprint_columns(7, {"g": lambda: [labels], "x": lambda: [x]})
    parts = fingerprint_columns(
        7,
        {
            "g": lambda: [np.array(text[:3], dtype=object), np.array(text[3:], dtype=object)],
            "x": lambda: [x[:4], x[4:]],
        },
    )
    assert whole == parts == _by_hand(7, {"x": x.tolist()}, {"g": text})
    flipped = CodedLabels(codes[::-1].copy(), labels.levels)
    assert fingerprint_columns(7, {"g": lambda: [flipped], "x": lambda: [x]}) != whole
