"""Fitted versions: ``VersionSpec`` / ``VersionCreate`` (requests), ``VersionPublic``,
``VersionSummary``, ``VersionList`` and the term-table pieces.

A fit request is a feature spec, fit options and data. Over JSON the data is
``{"columns": {name: [values]}}`` or ``{"rows": [{name: value}]}``; over multipart the
spec is the JSON form part ``spec`` and the data is the file part ``data`` (CSV or Parquet).
"""

from __future__ import annotations

import unicodedata
from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from service.schemas.common import StrictModel

__all__ = [
    "CellValue",
    "DropTermTestPublic",
    "FeatureSpec",
    "FitData",
    "FitOptions",
    "FitStatisticsPublic",
    "LRTestPublic",
    "LineagePublic",
    "TermPublic",
    "TermTablePublic",
    "VersionCreate",
    "VersionList",
    "VersionPublic",
    "VersionSpec",
    "VersionSummary",
]

NAME_PATTERN = r"^[^\x00-\x1f:=]{1,100}$"
# bool is listed so that JSON true/false reach the validation as themselves (pydantic would turn
# them into 1.0 / 0.0): a categorical cell then reads "true" / "false", as the score route and
# the file readers read it, and a numeric cell is refused by name.
CellValue = bool | float | int | str | None


class FeatureSpec(StrictModel):
    """One input feature and how it is encoded."""

    name: str = Field(pattern=NAME_PATTERN, description="Column name (no ':' or '=').")
    kind: Literal["numeric", "categorical", "spline"]
    transform: Literal["log"] | None = Field(None, description="`log`: natural log, values > 0.")
    reference: str | None = Field(None, max_length=200, description="Reference level.")
    levels: list[str] | None = Field(
        None, min_length=1, max_length=1000, description="Allowed levels (default: as seen)."
    )
    knots: int | list[float] | None = Field(
        None, description="Spline knots: a count 3..7 or quantiles in (0, 1)."
    )

    @field_validator("reference", "levels")
    @classmethod
    def _nfc(cls, v: str | list[str] | None) -> str | list[str] | None:
        """Levels are matched in Unicode NFC, as the data's text is (fits and scoring)."""
        if isinstance(v, str):
            return unicodedata.normalize("NFC", v)
        return None if v is None else [unicodedata.normalize("NFC", x) for x in v]


class FitOptions(StrictModel):
    """How the likelihood is maximised and how intervals are computed."""

    method: Literal["mle", "firth", "ridge"] = "mle"
    ridge_lambda: float = Field(0.0, ge=0.0, le=1e6, description="L2 penalty (ridge only).")
    weights: str | None = Field(None, description="Name of a data column of case weights >= 0.")
    offset: str | None = Field(None, description="Name of a data column added to the logit.")
    confidence_level: float | None = Field(
        None, gt=0.0, lt=1.0, description="Interval level (default: the service setting, 0.95)."
    )
    profile_intervals: bool = Field(
        False, description="Profile-likelihood intervals instead of Wald (slower, better)."
    )
    max_iter: int = Field(100, ge=1, le=1000, description="Newton iteration cap.")


class VersionSpec(StrictModel):
    """Everything of a fit request except the data (the multipart `spec` part)."""

    features: list[FeatureSpec] = Field(min_length=1, max_length=200)
    interactions: list[tuple[str, str]] = Field(default_factory=list, max_length=200)
    outcome: str = Field("outcome", pattern=NAME_PATTERN, description="0/1 outcome column.")
    options: FitOptions = Field(default_factory=FitOptions)
    note: str | None = Field(None, max_length=2000)
    description: str | None = Field(
        None, max_length=2000, description="Model description (kept on the first fit)."
    )


class FitData(StrictModel):
    """Training data: exactly one of `columns`, `rows` or `path` (a server-side file)."""

    columns: dict[str, list[CellValue]] | None = None
    rows: list[dict[str, CellValue]] | None = None
    path: str | None = Field(
        None,
        min_length=1,
        max_length=4096,
        description="Parquet file or directory, or CSV file, as the server sees it; only "
        "inside the directories of the setting fit_data_dirs. Streamed, never loaded whole.",
    )
    engine: Literal["local", "dask"] = Field(
        "local", description="With `path`: stream on the server, or fit on a Dask cluster."
    )
    scheduler: str | None = Field(
        None, max_length=500, description="Dask scheduler (one of the setting dask_schedulers)."
    )

    @model_validator(mode="after")
    def _exactly_one(self) -> FitData:
        if sum(v is not None for v in (self.columns, self.rows, self.path)) != 1:
            raise ValueError("give exactly one of data.columns, data.rows or data.path")
        if self.path is None and (self.engine != "local" or self.scheduler is not None):
            raise ValueError("data.engine and data.scheduler apply only with data.path")
        return self


_EXAMPLE_SPEC: dict[str, Any] = {
    "features": [
        {"name": "age_years", "kind": "numeric"},
        {"name": "diameter_mm", "kind": "numeric", "transform": "log"},
        {"name": "material", "kind": "categorical", "reference": "PVC"},
        {"name": "soil", "kind": "categorical", "reference": "low"},
        {"name": "prior_breaks_5y", "kind": "numeric"},
    ],
    "outcome": "outcome",
    "options": {"method": "mle", "confidence_level": 0.95},
    "note": "year-one segments",
}


class VersionCreate(VersionSpec):
    """JSON body of ``POST /risk-models/{model}/versions``."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    **_EXAMPLE_SPEC,
                    "data": {
                        "columns": {
                            "age_years": [72, 15, 48, 90, 33, 61],
                            "diameter_mm": [150, 200, 100, 150, 300, 100],
                            "material": [
                                "cast iron",
                                "PVC",
                                "ductile iron",
                                "cast iron",
                                "PVC",
                                "asbestos cement",
                            ],
                            "soil": ["high", "low", "moderate", "high", "low", "moderate"],
                            "prior_breaks_5y": [2, 0, 0, 3, 0, 1],
                            "outcome": [1, 0, 0, 1, 0, 0],
                        }
                    },
                }
            ]
        }
    )
    data: FitData


_NOT_FINITE = "null where the value is not a finite number (JSON carries no inf/NaN)"
_OVERFLOW = (
    "null exactly when exp() of the log-odds value overflows a double (log-odds above "
    "709.78, e.g. a raw-unit feature with a tiny range; the version's warnings name the term) "
    "or the log-odds limit itself is null"
)


class TermPublic(BaseModel):
    """One term: log-odds estimate (always finite) and what is derived from it."""

    name: str
    estimate: float = Field(description="Log-odds coefficient; always finite.")
    std_error: float | None = Field(description=f"Standard error; {_NOT_FINITE}.")
    z: float | None = Field(description=f"Wald z; {_NOT_FINITE}.")
    p_value: float | None = Field(description=f"Two-sided Wald p-value; {_NOT_FINITE}.")
    ci_lower: float | None = Field(
        description="Lower log-odds limit; null when a profile limit cannot be bracketed "
        "(-infinity) or the SE is not finite."
    )
    ci_upper: float | None = Field(
        description="Upper log-odds limit; null when a profile limit cannot be bracketed "
        "(+infinity) or the SE is not finite."
    )
    odds_ratio: float | None = Field(description=f"exp(estimate); {_OVERFLOW}.")
    odds_ratio_ci_lower: float | None = Field(description=f"exp(ci_lower); {_OVERFLOW}.")
    odds_ratio_ci_upper: float | None = Field(description=f"exp(ci_upper); {_OVERFLOW}.")


class TermTablePublic(BaseModel):
    confidence_level: float
    ci_method: str = Field(description="`wald` or `profile-likelihood`.")
    n_obs: int
    n_events: float
    terms: list[TermPublic]


class LRTestPublic(BaseModel):
    name: str = Field(description="Feature, interaction `a:b`, or `global`.")
    statistic: float | None = Field(description=f"LR statistic; {_NOT_FINITE}.")
    df: int
    p_value: float | None = Field(description=f"p-value; {_NOT_FINITE}.")


class DropTermTestPublic(LRTestPublic):
    kind: str | None = Field(
        None,
        description="`main effect`, `interaction`, `main effect, interactions kept` (only the "
        "feature's own columns; its interactions stay in the reduced model) or `main effect "
        "with its interactions` (the feature and every interaction containing it, the test "
        "respecting marginality); absent on versions fitted before kinds were recorded.",
    )
    dropped: list[str] | None = Field(
        None, description="The features and interactions whose columns the test sets to 0."
    )


class FitStatisticsPublic(BaseModel):
    n_obs: int
    n_events: float = Field(description="Weighted count of outcome 1.")
    sum_weights: float
    method: str
    ridge_lambda: float
    loglik: float | None = Field(description=f"Log-likelihood; {_NOT_FINITE}.")
    penalized_loglik: float | None = Field(description=f"Penalised log-likelihood; {_NOT_FINITE}.")
    null_loglik: float | None = Field(description=f"Intercept-only log-likelihood; {_NOT_FINITE}.")
    deviance: float | None = Field(description=f"-2 loglik; {_NOT_FINITE}.")
    null_deviance: float | None = Field(description=f"-2 null loglik; {_NOT_FINITE}.")
    aic: float | None = Field(description=f"Akaike information criterion; {_NOT_FINITE}.")
    bic: float | None = Field(description=f"Bayesian information criterion; {_NOT_FINITE}.")
    mcfadden_r2: float | None = Field(description=f"1 - loglik / null_loglik; {_NOT_FINITE}.")
    converged: bool
    iterations: int
    stop_reason: str
    global_lr_test: LRTestPublic | None
    global_test_rule: str | None = Field(
        None,
        description="How the global test's null model is fitted. Firth: under the full "
        "model's penalty (only the intercept free), the rule of the drop-term tests.",
    )
    drop_term_tests: list[DropTermTestPublic] = Field(
        description="Likelihood-ratio test of dropping each feature or interaction (all its "
        "columns; `kind` says which). Firth fits refit the reduced model under the full "
        "model's penalty, l(b) + 1/2 log det I_full(b) (Heinze & Schemper 2002)."
    )
    apparent_auc: float | None = Field(None, description="c-statistic on the training data.")
    apparent_brier: float | None = Field(None, description="Brier score on the training data.")


class LineagePublic(BaseModel):
    parent: int | None
    origin: str = Field(description="`fit`, `intercept`, `recalibrate` or `refit`.")
    details: dict[str, Any] = Field(default_factory=dict)


class VersionSummary(BaseModel):
    number: int
    created_at: datetime
    method: str
    n_obs: int
    n_events: float
    origin: str
    parent: int | None
    is_champion: bool
    note: str | None


class VersionList(BaseModel):
    model: str
    items: list[VersionSummary]
    count: int


class VersionPublic(BaseModel):
    """One stored version: terms, fit statistics, encoding and lineage."""

    model: str
    number: int
    created_at: datetime
    is_champion: bool
    spec: dict[str, Any]
    options: dict[str, Any]
    encoding: dict[str, Any]
    term_table: TermTablePublic
    fit_statistics: FitStatisticsPublic
    warnings: list[str]
    training_ranges: dict[str, Any]
    data_fingerprint: str = Field(description="SHA-256 of the canonical training data.")
    lineage: LineagePublic
    note: str | None
