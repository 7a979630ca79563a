"""Reusable database helpers for any test suite (store, api, load): import, don't copy.

* :func:`sqlite_url` — URL of a fresh SQLite file under a pytest ``tmp_path``.
* :func:`fresh_postgres_url` — context manager creating a uniquely named PostgreSQL database
  (``CREATE DATABASE riskfit_t_<random>``) on the server of ``base_url`` and dropping it
  (``WITH (FORCE)``) afterwards, so parallel runs never collide and nothing is left behind.
* :func:`version_fields` — minimal valid column values for ``add_version``.
"""

from __future__ import annotations

import contextlib
import math
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url
from sqlalchemy.pool import NullPool

__all__ = ["fresh_postgres_url", "sqlite_url", "version_fields"]


def sqlite_url(tmp_path: Path, name: str = "riskfit.db") -> str:
    """``sqlite:///<tmp_path>/<name>`` (the file does not exist yet)."""
    return f"sqlite:///{tmp_path / name}"


@contextlib.contextmanager
def fresh_postgres_url(base_url: str) -> Iterator[str]:
    """Yield the URL of a new, empty database on ``base_url``'s server; drop it on exit."""
    base = make_url(base_url)
    if base.drivername in ("postgresql", "postgres"):
        base = base.set(drivername="postgresql+psycopg")
    name = f"riskfit_t_{uuid.uuid4().hex[:16]}"
    admin = create_engine(base, isolation_level="AUTOCOMMIT", poolclass=NullPool)
    try:
        with admin.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
        try:
            yield base.set(database=name).render_as_string(hide_password=False)
        finally:
            with admin.connect() as conn:
                conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        admin.dispose()


def _term(name: str, b: float, se: float) -> dict[str, Any]:
    lo, hi = b - 1.959964 * se, b + 1.959964 * se
    z = b / se
    return {
        "name": name,
        "estimate": b,
        "std_error": se,
        "z": z,
        "p_value": math.erfc(abs(z) / math.sqrt(2.0)),
        "ci_lower": lo,
        "ci_upper": hi,
        "odds_ratio": math.exp(b),
        "odds_ratio_ci_lower": math.exp(lo),
        "odds_ratio_ci_upper": math.exp(hi),
    }


# A stored version must read back through GET .../versions/{n} (tests/conftest.py checks every
# version a test commits), so the store-level version is a complete one.
_TERM_TABLE: dict[str, Any] = {
    "confidence_level": 0.95,
    "ci_method": "wald",
    "n_obs": 400,
    "n_events": 22.0,
    "terms": [_term("intercept", -3.0, 0.2), _term("age", 0.02, 0.00316)],
}
_FIT_STATS: dict[str, Any] = {
    "n_obs": 400,
    "n_events": 22.0,
    "sum_weights": 400.0,
    "method": "mle",
    "ridge_lambda": 0.0,
    "loglik": -120.5,
    "penalized_loglik": -120.5,
    "null_loglik": -130.0,
    "deviance": 241.0,
    "null_deviance": 260.0,
    "aic": 245.0,
    "bic": 253.0,
    "mcfadden_r2": 1 - 120.5 / 130.0,
    "converged": True,
    "iterations": 6,
    "stop_reason": "converged",
    "global_lr_test": {"name": "global", "statistic": 19.0, "df": 1, "p_value": 1.3e-5},
    "drop_term_tests": [{"name": "age", "statistic": 19.0, "df": 1, "p_value": 1.3e-5}],
}


def version_fields(**overrides: Any) -> dict[str, Any]:
    """Column values of a small valid version (intercept + one slope), for store-level tests."""
    fields: dict[str, Any] = {
        "spec": {"features": [{"name": "age", "kind": "numeric"}]},
        "encoding": {"features": [{"name": "age", "kind": "numeric"}], "interactions": []},
        "term_names": ["intercept", "age"],
        "coef": [-3.0, 0.02],
        "cov": [[0.04, -0.0005], [-0.0005, 0.00001]],
        "fit_stats": _FIT_STATS,
        "term_table": _TERM_TABLE,
        "method": "mle",
        "options": {"confidence_level": 0.95},
        "training_ranges": {"age": [1.0, 90.0]},
        "reference_distributions": {"age": {"edges": [1.0, 30.0, 60.0, 90.0]}},
        "data_fingerprint": "ab" * 32,
        "n_obs": 400,
        "n_events": 22.0,
    }
    fields.update(overrides)
    return fields
