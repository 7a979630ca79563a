"""The one exception tree of riskfit.

Every error the product raises on purpose derives from :class:`RiskfitError`.
Each carries a human message plus structured details (``field``, ``value``,
``remedy``) so that the HTTP layer can answer with a body that names the field,
the offending value and what to do about it. HTTP status codes are *not*
decided here: ``service/api/errors.py`` maps classes to codes in one place.

This module imports only the standard library, so the pure numerical core in
``service/stats`` may raise these errors without pulling in any web or database
code.

Tree::

    RiskfitError
    ├── InvalidInputError            client sent something unusable
    │   ├── SpecError                feature spec / options malformed
    │   ├── DataError                data values unusable (NaN, <= 0 under log, ...)
    │   │   ├── MissingFeatureError
    │   │   └── UnseenLevelError
    │   └── LimitExceededError       over a configured size limit (413 where it is the body)
    ├── FitError                     the data admit no maximum-likelihood fit
    │   ├── SeparationError
    │   ├── SingleClassError
    │   ├── RankDeficientError
    │   ├── TooFewObservationsError
    │   └── NonConvergenceError
    ├── NotEnoughOutcomesError       a report window holds too few outcomes
    ├── NotFoundError
    │   ├── ModelNotFoundError
    │   ├── VersionNotFoundError
    │   └── ScoreNotFoundError
    ├── ConflictError
    │   ├── DuplicateKeyError
    │   ├── OutcomeConflictError
    │   └── RefitInProgressError
    ├── AuthenticationError          no or unknown key
    ├── PermissionDeniedError        key lacks the role
    └── StoreError                   database down or integrity problem (not the client's fault)
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "AuthenticationError",
    "ConflictError",
    "DataError",
    "DuplicateKeyError",
    "FitError",
    "InvalidInputError",
    "LimitExceededError",
    "MissingFeatureError",
    "ModelNotFoundError",
    "NonConvergenceError",
    "NotEnoughOutcomesError",
    "NotFoundError",
    "OutcomeConflictError",
    "PermissionDeniedError",
    "RankDeficientError",
    "RefitInProgressError",
    "RequestTimeoutError",
    "RiskfitError",
    "ScoreNotFoundError",
    "SeparationError",
    "SingleClassError",
    "SpecError",
    "StoreError",
    "TooFewObservationsError",
    "UnseenLevelError",
    "VersionNotFoundError",
]


class RiskfitError(Exception):
    """Root of every deliberate riskfit error.

    Parameters
    ----------
    message:
        One or two sentences for a person: what is wrong.
    field:
        Dotted path of the offending input (``"spec.features[2].knots"``,
        ``"data.columns.age"``, ``"records[17].material"``), if any.
    value:
        The offending value (kept short; long values are truncated by
        :meth:`to_dict`).
    remedy:
        What the client can do about it.
    details:
        Extra machine-readable facts (e.g. ``{"terms": [...]}``).
    """

    code: str = "riskfit_error"

    def __init__(
        self,
        message: str,
        *,
        field: str | None = None,
        value: Any = None,
        remedy: str | None = None,
        details: dict[str, Any] | None = None,
    ) -> None:
        super().__init__(message)
        self.message = message
        self.field = field
        self.value = value
        self.remedy = remedy
        self.details: dict[str, Any] = dict(details or {})

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready description: ``{"code", "message", "field", "value", "remedy", ...}``."""
        out: dict[str, Any] = {"code": self.code, "message": self.message}
        if self.field is not None:
            out["field"] = self.field
        if self.value is not None:
            out["value"] = _short(self.value)
        if self.remedy is not None:
            out["remedy"] = self.remedy
        if self.details:
            out["details"] = self.details
        return out

    def __str__(self) -> str:
        parts = [self.message]
        if self.field is not None:
            parts.append(f"field: {self.field}")
        if self.value is not None:
            parts.append(f"value: {_short(self.value)!r}")
        if self.remedy is not None:
            parts.append(f"remedy: {self.remedy}")
        return "; ".join(parts)


def _short(value: Any, limit: int = 200) -> Any:
    """Keep JSON-able scalars; render anything else (or anything long) as a short string."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 2**63:
        digits = str(value)  # JSON encoders refuse integers beyond 64 bits: echo as text
        return digits if len(digits) <= 24 else f"{digits[:12]}...({len(digits)} digits)"
    if isinstance(value, bool | int | float) or value is None:
        if isinstance(value, float) and value != value:  # NaN is not valid JSON
            return "NaN"
        if isinstance(value, float) and value in (float("inf"), float("-inf")):
            return "Infinity" if value > 0 else "-Infinity"
        return value
    text = value if isinstance(value, str) else repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


# --- client input -----------------------------------------------------------------------------


class InvalidInputError(RiskfitError):
    """The request or data cannot be used as sent."""

    code = "invalid_input"


class SpecError(InvalidInputError):
    """The feature spec or the fit options are malformed or inconsistent."""

    code = "invalid_spec"


class DataError(InvalidInputError):
    """Data values are unusable: non-finite, wrong type, <= 0 under a log transform, ..."""

    code = "invalid_data"


class MissingFeatureError(DataError):
    """A feature the encoding needs is absent from the records or columns."""

    code = "missing_feature"


class UnseenLevelError(DataError):
    """A categorical value that was not among the levels frozen at fit time."""

    code = "unseen_level"


class LimitExceededError(InvalidInputError):
    """A configured size limit (rows, records, features, levels, string length) is exceeded."""

    code = "limit_exceeded"


# --- fitting ----------------------------------------------------------------------------------


class FitError(RiskfitError):
    """The data admit no (finite, unique) maximum-likelihood estimate."""

    code = "fit_failed"


class SeparationError(FitError):
    """Complete or quasi-complete separation; ``details["terms"]`` names diverging terms."""

    code = "separation"


class SingleClassError(FitError):
    """All outcomes are 0 or all are 1."""

    code = "single_class"


class RankDeficientError(FitError):
    """The design matrix is rank deficient; ``details["terms"]`` names collinear terms."""

    code = "rank_deficient"


class TooFewObservationsError(FitError):
    """Not more observations than terms."""

    code = "too_few_observations"


class NonConvergenceError(FitError):
    """Newton iterations hit the cap without meeting the convergence criteria."""

    code = "not_converged"


class NotEnoughOutcomesError(RiskfitError):
    """A report or refit window holds too few outcomes (``details`` has the counts)."""

    code = "not_enough_outcomes"


# --- resources --------------------------------------------------------------------------------


class NotFoundError(RiskfitError):
    code = "not_found"


class ModelNotFoundError(NotFoundError):
    code = "model_not_found"


class VersionNotFoundError(NotFoundError):
    code = "version_not_found"


class ScoreNotFoundError(NotFoundError):
    code = "score_not_found"


class ConflictError(RiskfitError):
    code = "conflict"


class DuplicateKeyError(ConflictError):
    code = "duplicate_key"


class OutcomeConflictError(ConflictError):
    code = "outcome_conflict"


class RefitInProgressError(ConflictError):
    code = "refit_in_progress"


# --- access -----------------------------------------------------------------------------------


class AuthenticationError(RiskfitError):
    code = "unauthenticated"


class PermissionDeniedError(RiskfitError):
    code = "forbidden"


class RequestTimeoutError(RiskfitError):
    """The client stopped sending its request body (maps to 408; the connection is closed)."""

    code = "request_timeout"


# --- infrastructure ---------------------------------------------------------------------------


class StoreError(RiskfitError):
    """The database failed in a way that is not the client's fault (maps to 503)."""

    code = "store_unavailable"
