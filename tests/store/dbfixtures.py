"""Reusable database helpers for any test suite (store, api, load): import, don't copy.

* :func:`sqlite_url` — URL of a fresh SQLite file under a pytest ``tmp_path``.
* :func:`fresh_postgres_url` — context manager creating a uniquely named PostgreSQL database
  (``CREATE DATABASE riskfit_t_<random>``) on the server of ``base_url`` and dropping it
  (``WITH (FORCE)``) afterwards, so parallel runs never collide and nothing is left behind.
* :func:`version_fields` — minimal valid column values for ``add_version``.
"""

from __future__ import annotations

import contextlib
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


def version_fields(**overrides: Any) -> dict[str, Any]:
    """Column values of a small valid version (intercept + one slope), for store-level tests."""
    fields: dict[str, Any] = {
        "spec": {"features": [{"name": "age", "kind": "numeric"}]},
        "encoding": {"features": [{"name": "age", "kind": "numeric"}], "interactions": []},
        "term_names": ["intercept", "age"],
        "coef": [-3.0, 0.02],
        "cov": [[0.04, -0.0005], [-0.0005, 0.00001]],
        "fit_stats": {"loglik": -120.5, "n_obs": 400},
        "term_table": {"rows": [], "confidence_level": 0.95, "ci_method": "wald"},
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
