"""Settings: one pydantic-settings class, read from ``RISKFIT_*`` environment variables.

Build it through :func:`get_settings` (cached), never at import time; tests pass
their own :class:`Settings` instance to ``create_app(settings=...)``.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Literal

from pydantic import Field, SecretStr, field_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

__all__ = ["Settings", "get_settings"]


class Settings(BaseSettings):
    """Every setting of the service, with its documented default."""

    model_config = SettingsConfigDict(env_prefix="RISKFIT_", extra="ignore")

    database_url: str = Field(
        "sqlite:///./riskfit.db",
        description="SQLAlchemy URL of the store; PostgreSQL for more than one process or host.",
    )
    sqlite_busy_timeout_ms: int = Field(30_000, ge=0, description="SQLite busy timeout (ms).")
    host: str = Field("127.0.0.1", description="Address `riskfit serve` binds to.")
    port: int = Field(8000, ge=1, le=65535, description="Port `riskfit serve` listens on.")
    default_confidence_level: float = Field(
        0.95, gt=0.0, lt=1.0, description="Confidence level when a request gives none."
    )
    # --- access (service/security.py) ---
    auth_required: bool = Field(
        True,
        description="Every route but health, metrics and the API docs needs an API key; "
        "`riskfit serve --no-auth` turns this off for local development on 127.0.0.1 only.",
    )
    api_key_pepper: SecretStr | None = Field(
        None,
        description="Server secret mixed into stored key hashes (HMAC-SHA256 instead of "
        "SHA-256); changing it invalidates every existing key.",
    )
    dashboard_session_secret: SecretStr | None = Field(
        None,
        description="No longer used: dashboard sign-ins are rows in the store (revocable); "
        "accepted and ignored so existing deployments keep starting.",
    )
    dashboard_session_hours: float = Field(
        8.0, gt=0.0, le=24 * 30, description="How long a dashboard sign-in lasts (hours)."
    )
    # --- web security (service/api/dashboard_session.py, service/web_security.py) ---
    cookie_secure: Literal["auto", "always", "never"] = Field(
        "auto",
        description="`Secure` flag of the dashboard cookies: auto = when the request came over "
        "https (as seen through a trusted proxy's X-Forwarded-Proto), always, or never.",
    )
    trusted_proxies: str = Field(
        "127.0.0.1,::1",
        description="Comma-separated addresses or CIDR ranges of reverse proxies whose "
        "X-Forwarded-Proto/For headers `riskfit serve` believes (uvicorn forwarded_allow_ips); "
        "'*' trusts every peer (only when nothing else can reach the port).",
    )
    metrics_access: Literal["open", "key"] = Field(
        "key",
        description="GET /metrics: key = needs an API key (any role), like every other route; "
        "open = no key (only where the port is reachable by the scraper alone).",
    )
    body_timeout_seconds: float = Field(
        30.0,
        gt=0.0,
        le=3600.0,
        description="Longest wait for the next piece of a request body; a client that stalls "
        "longer gets 408 and the connection is closed.",
    )
    keep_alive_seconds: int = Field(
        5, ge=1, le=300, description="`riskfit serve`: idle keep-alive connections close after."
    )
    limit_concurrency: int | None = Field(
        None,
        ge=1,
        description="`riskfit serve`: most concurrent connections per process before 503 "
        "(unset: no limit).",
    )
    # --- limits (service/limits.py) ---
    max_body_bytes: int = Field(
        32 * 2**20, ge=1024, description="Largest JSON (non-multipart) request body, bytes (413)."
    )
    max_upload_bytes: int = Field(
        512 * 2**20, ge=1024, description="Largest multipart (CSV/Parquet) body, bytes (413)."
    )
    max_records_per_request: int = Field(
        10_000, ge=1, description="Most records (scores) or outcomes in one request."
    )
    max_json_fit_rows: int = Field(
        100_000, ge=1, description="Most training rows sent as JSON; larger fits go as uploads."
    )
    max_fit_rows: int = Field(
        20_000_000, ge=1, description="Most training rows in one fit (uploads included)."
    )
    max_features: int = Field(200, ge=1, description="Most features in one spec.")
    max_levels: int = Field(1_000, ge=2, description="Most levels of one categorical feature.")
    max_string_length: int = Field(
        10_000, ge=64, description="Longest string anywhere in a JSON body or a categorical cell."
    )
    max_json_depth: int = Field(32, ge=4, description="Deepest nesting of a JSON body.")
    max_terms: int = Field(
        1_000,
        ge=2,
        description="Most terms (design columns) a fit may expand to: levels - 1 per categorical "
        "feature, their products for interactions; checked before any matrix is built (422).",
    )
    fit_memory_budget_mb: int = Field(
        4_096,
        ge=64,
        description="Most memory one fit may be estimated to need, MB (design rows x terms and "
        "terms^2 matrices, service/fit_size.py); checked before any matrix is built (422).",
    )
    max_decoded_mb: int = Field(
        1024,
        ge=1,
        description="Most memory (MB) the columns a fit reads may decode to: an upload whole, "
        "a server-side Parquet file per row group; judged from the file's footer before "
        "decoding, and again while reading (422).",
    )
    max_file_columns: int = Field(
        10_000, ge=1, description="Most columns in an uploaded or server-side data file (422)."
    )

    # --- monitoring (outcomes, calibration, drift, alerts) ---
    clock_skew_seconds: int = Field(
        300,
        ge=0,
        le=86_400,
        description="Allowance for disagreeing clocks: an outcome's observed_at may be at most "
        "this far in the future, or this far before the score it resolves (else 422).",
    )
    monitor_min_outcomes: int = Field(
        100, ge=10, description="Fewest outcomes a calibration report or drift window needs."
    )
    monitor_min_events: int = Field(
        10, ge=2, description="Fewest events (and non-events) a report or drift window needs."
    )
    drift_window_records: int = Field(
        1000, ge=10, description="Default drift window size by count (records per window)."
    )
    drift_window_days: int = Field(30, ge=1, description="Default drift window size by time.")
    drift_max_windows: int = Field(
        60, ge=1, le=1000, description="Most recent drift windows computed and shown."
    )
    cusum_odds_ratio_up: float = Field(
        2.0, gt=1.0, description="CUSUM alternative: odds of an event R times predicted (up)."
    )
    cusum_odds_ratio_down: float = Field(
        0.5, gt=0.0, lt=1.0, description="CUSUM alternative for risk below prediction (down)."
    )
    cusum_target_arl: float = Field(
        10_000.0, gt=10.0, description="Target in-control average run length (records) per chart."
    )
    cusum_n_sims: int = Field(
        200, ge=50, le=20_000, description="Simulated in-control streams for the CUSUM limit."
    )
    alert_citl_tolerance: float = Field(
        0.2, gt=0.0, description="Alert when the calibration-in-the-large CI lies beyond +/-."
    )
    alert_slope_low: float = Field(0.8, gt=0.0, description="Alert when the slope CI is below.")
    alert_slope_high: float = Field(1.25, gt=1.0, description="Alert when the slope CI is above.")
    alert_oe_low: float = Field(0.8, gt=0.0, description="Alert when the O/E CI lies below.")
    alert_oe_high: float = Field(1.25, gt=1.0, description="Alert when the O/E CI lies above.")
    alert_psi: float = Field(0.25, gt=0.0, description="Alert when a feature's PSI reaches this.")
    psi_min_records: int = Field(100, ge=10, description="Fewest records for a PSI alert.")
    psi_max_records: int = Field(
        20_000, ge=100, description="Most records of the latest window read for input drift."
    )

    # --- fitting from server-side files and on Dask (service/sources, service/distributed.py) ---
    fit_data_dirs: list[str] = Field(
        default_factory=list,
        description="Directories whose files a fit may read by path (`data.path`, "
        '`riskfit fit --engine local|dask`); JSON list, e.g. ["/data/risk"]. Empty: disabled.',
    )
    dask_schedulers: list[str] = Field(
        default_factory=list,
        description="Dask scheduler addresses a fit may use (`engine: dask`); the first is the "
        "default. Empty: the dask engine is disabled.",
    )

    # --- numerical work (service/compute.py) ---
    fit_threads: int = Field(
        2,
        ge=1,
        le=2,
        description="Threads per pass over the data in a fit (1 or 2; the second is used for "
        "designs of 4 terms or more); the results are the same bit for bit.",
    )
    blas_threads: int = Field(
        1,
        ge=1,
        le=64,
        description="Threads BLAS may use inside one call; 1 leaves the cores to the fit's lanes "
        "and to concurrent requests.",
    )
    tune_gc: bool = Field(
        True,
        description="While the app runs, keep its start-up heap out of the garbage collector's "
        "full collections and raise the young threshold (service/heap.py); off costs "
        "120-140 ms pauses every second or two under load.",
    )
    score_log_process: bool = Field(
        True,
        description="On a SQLite file, append the score-log rows of small requests from a "
        "child process of each server process (service/score_log_child.py) instead of a "
        "thread; off: the writer thread logs every request (about 15% fewer single-record "
        "scores per second).",
    )
    # --- refits (service/refitting/lease.py) ---
    refit_lock_lease_seconds: float = Field(
        60.0,
        ge=1.0,
        le=3600.0,
        description="Lease of a model's refit lock (s), renewed every third of it while the "
        "refit runs; a refit whose process died (kill -9, host lost) is recorded as failed and "
        "the lock taken over by the next refit once its lease runs out.",
    )

    extrapolation_limit: float = Field(
        10.0,
        ge=0.0,
        description="Scoring refuses (422) a numeric value more than this many training "
        "ranges (max - min) outside its feature's training range; milder extrapolation is "
        "scored with a warning. 0 turns the guard off (service/score_guard.py).",
    )

    @field_validator("database_url")
    @classmethod
    def _url_has_scheme(cls, value: str) -> str:
        if "://" not in value:
            raise ValueError(
                f"RISKFIT_DATABASE_URL={value!r} is not an SQLAlchemy URL; "
                "use e.g. sqlite:///./riskfit.db or postgresql+psycopg://user@host/db"
            )
        return value


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, built on first use from the environment."""
    return Settings()
