"""Checks of a fit request that the schema cannot express, and of the fit's outcome.

* :func:`check_spec`: duplicate, reserved and unknown names, options that do not go together;
* :func:`require_converged`: a fit that stopped early is refused (nothing is stored);
* :func:`in_request_terms`: engine errors renamed to the request's fields.
"""

from __future__ import annotations

from service.errors import FitError, NonConvergenceError, SingleClassError, SpecError
from service.schemas import VersionSpec
from service.stats.fit import LogisticFit

__all__ = [
    "RESERVED_NAMES",
    "check_spec",
    "in_request_terms",
    "needed_columns",
    "require_converged",
]

RESERVED_NAMES = frozenset({"key", "passthrough"})  # a score record's own fields: id, echo


def needed_columns(spec: VersionSpec) -> list[str]:
    """Every column the fit reads: features, the outcome, then weights and offset if named."""
    names = [f.name for f in spec.features] + [spec.outcome]
    names += [c for c in (spec.options.weights, spec.options.offset) if c]
    return names


def check_spec(spec: VersionSpec) -> None:
    """Spec consistency the schema cannot express (duplicates, reserved and unknown names)."""
    seen: set[str] = set()
    for i, f in enumerate(spec.features):
        if f.name in RESERVED_NAMES:
            raise SpecError(
                f"{f.name!r} is reserved: score records use it for the client's own "
                "record key or passthrough values",
                field=f"features[{i}].name",
                value=f.name,
                remedy="rename the column, e.g. to segment_key",
            )
        if f.name in seen or f.name == spec.outcome:
            raise SpecError(
                f"feature {f.name!r} is named twice (or is also the outcome)",
                field=f"features[{i}].name",
                value=f.name,
                remedy="give every feature one entry and keep the outcome separate",
            )
        seen.add(f.name)
    for j, pair in enumerate(spec.interactions):
        for name in pair:
            if name not in seen:
                raise SpecError(
                    f"interaction names {name!r}, which is not a feature",
                    field=f"interactions[{j}]",
                    value=list(pair),
                    remedy="list both features of an interaction under features",
                )
    if spec.options.method != "ridge" and spec.options.ridge_lambda:
        raise SpecError(
            "ridge_lambda is only used with method='ridge'",
            field="options.ridge_lambda",
            value=spec.options.ridge_lambda,
            remedy="set options.method to 'ridge', or drop ridge_lambda",
        )


def _not_converged_remedy(fit: LogisticFit, method: str) -> str:
    """A remedy that addresses the likely cause, by method and how Newton stopped."""
    capped = fit.stop_reason.startswith("iteration cap")
    if method == "firth" and capped and fit.iterations < 100:  # below the default cap
        return (
            f"Newton stopped at options.max_iter = {fit.iterations}: raise it (default 100); "
            "Firth fits of full-rank designs settle well within the default"
        )
    if method == "firth":
        return (
            "Firth's penalised likelihood has a maximum for any full-rank design, so this "
            "points at a numerically degenerate one: look for nearly collinear terms (a level "
            "almost equal to another, a feature that nearly duplicates a combination of "
            "others) or a feature on an extreme scale (rescale it, e.g. to thousands or "
            "per-mille units) and remove or rescale it; options.method='ridge' with a small "
            "ridge_lambda also fits such designs"
        )
    if method == "ridge":
        return (
            "raise options.ridge_lambda (a larger penalty makes the problem better "
            "conditioned), or remove nearly collinear terms"
        )
    return (
        "estimates that keep growing mean quasi-separation (a level or range with only one "
        "outcome): use options.method='firth', which has a finite estimate there, or merge "
        "rare levels"
        + ("; if the estimates were settling, a larger options.max_iter" if capped else "")
    )


def require_converged(fit: LogisticFit, method: str) -> None:
    """:class:`NonConvergenceError` when Newton stopped early (nothing is stored then)."""
    if not fit.converged:
        raise NonConvergenceError(
            f"the fit did not converge after {fit.iterations} iterations: {fit.stop_reason}",
            field="options.method",
            value=method,
            remedy=_not_converged_remedy(fit, method),
            details={"iterations": fit.iterations, "stop_reason": fit.stop_reason},
        )


def in_request_terms(exc: FitError, spec: VersionSpec) -> FitError:
    """Name the request's fields instead of the engine's arrays ``y`` and ``X``."""
    if isinstance(exc, SingleClassError):
        exc.field = f"data.{spec.outcome}"
    elif exc.field == "X" or (exc.field or "").startswith("X["):
        exc.field = "features"
    return exc
