"""How big a fit will be, known before anything of size ``n x p`` or ``p x p`` is allocated.

The number of terms ``p`` follows from the spec and the levels alone
(:func:`service.stats.design.learn_encoding` / the streamed encoding): a categorical feature
with ``L`` levels gives ``L - 1`` terms, an interaction ``a:b`` the product of the two
features' term counts. Every fit path calls :func:`check_fit_size` after learning the encoding
and before building a design matrix, so a 10 KB request asking for two 200-level features
and their interaction (40,000 terms) is refused in milliseconds instead of allocating a
40,000 x 40,000 information matrix.

Refusals (all 422; none is about the request's bytes, which :mod:`service.limits` bounds):

* more terms than the setting ``max_terms`` (:class:`LimitExceededError`, field the
  largest term group);
* not more rows than terms (:class:`TooFewObservationsError`, as the engine would say later);
* an estimated peak above ``fit_memory_budget_mb`` (:class:`LimitExceededError`).

Memory estimate (bytes), :func:`fit_memory_bytes`, with ``r`` the design rows held at once
(``n`` in memory, one batch when streamed, 0 when a Dask cluster holds them)::

    16 r p              the design (8 r p) and the temporaries building it
  + 16 min(r, 65536) p  per 65,536-row block: the sub-model copy of a drop-term refit or a
                        profile limit (the passes' scaled copies are 2 MB chunks) and slack
  + 64 r                per-row vectors (eta, p, w, working arrays)
  + 160 p^2             ~8 p x p float arrays in the engine (partial X'WX of two lanes, their
                        sum, Newton state, Cholesky factor, identity, inverse, symmetrised
                        copy: 64 B), the stored covariance as Python floats (32 B) and as
                        JSON text twice (driver copy; ~48 B), rounded up

Drop-term refits and profile limits run one after another and reuse the same blocks, so
they fit inside the ``p^2`` and block terms.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from service.config import Settings
from service.errors import LimitExceededError, TooFewObservationsError

__all__ = ["BLOCK_ROWS", "check_fit_size", "fit_memory_bytes"]

BLOCK_ROWS = 65_536  # service.stats.blocks.array_blocks' default block


def fit_memory_bytes(design_rows: int, n_terms: int) -> int:
    """Estimated peak bytes of a fit holding ``design_rows`` design rows of ``n_terms``."""
    r, p = int(design_rows), int(n_terms)
    return 16 * r * p + 16 * min(r, BLOCK_ROWS) * p + 64 * r + 160 * p * p


def _largest(groups: Mapping[str, Sequence[int]]) -> list[tuple[str, int]]:
    sizes = [(name, len(cols)) for name, cols in groups.items() if name != "intercept"]
    return sorted(sizes, key=lambda t: -t[1])[:5]


def _field(name: str, interactions: Sequence[Sequence[str]]) -> str:
    for i, pair in enumerate(interactions):
        if ":".join(pair) == name:
            return f"interactions[{i}]"
    return f"features.{name}"


def check_fit_size(
    settings: Settings,
    *,
    term_groups: Mapping[str, Sequence[int]],
    n_terms: int,
    n_obs: int,
    design_rows: int,
    interactions: Sequence[Sequence[str]] = (),
) -> None:
    """Refuse a fit too large for the settings (see module docstring); nothing allocated."""
    top = _largest(term_groups)
    name = top[0][0] if top else "features"
    field = _field(name, interactions) if top else "features"
    listing = ", ".join(f"{g} {k}" for g, k in top)
    facts = {"terms": n_terms, "rows": n_obs, "largest_term_groups": dict(top)}
    remedy_terms = (
        f"fewer terms: merge rare levels of the largest groups ({listing}), drop an "
        "interaction of many-level features, or use fewer spline knots"
    )
    if n_terms > settings.max_terms:
        raise LimitExceededError(
            f"the spec expands to {n_terms} terms ({listing}) for {n_obs} rows; the limit "
            f"is {settings.max_terms} terms",
            field=field,
            value=n_terms,
            remedy=f"{remedy_terms} (an operator may raise RISKFIT_MAX_TERMS)",
            details={**facts, "limit": settings.max_terms, "setting": "max_terms"},
        )
    if n_terms >= n_obs:
        raise TooFewObservationsError(
            f"the spec expands to {n_terms} terms ({listing}) for {n_obs} rows; "
            "a fit needs more rows than terms",
            field=field,
            value=f"{n_obs} rows, {n_terms} terms",
            remedy=f"add rows, or {remedy_terms}",
            details={**facts, "n_obs": n_obs, "n_terms": n_terms},
        )
    need = fit_memory_bytes(design_rows, n_terms)
    budget = settings.fit_memory_budget_mb * 2**20
    if need > budget:
        mb = -(-need // 2**20)
        raise LimitExceededError(
            f"a fit of {n_terms} terms ({listing}) on {n_obs} rows needs about {mb} MB; "
            f"the budget is {settings.fit_memory_budget_mb} MB",
            field=field,
            value=n_terms,
            remedy=f"{remedy_terms}, or fit on a sample of the rows or from a server-side "
            "file (data.path streams it) (an operator may raise RISKFIT_FIT_MEMORY_BUDGET_MB)",
            details={
                **facts,
                "estimated_mb": mb,
                "limit": settings.fit_memory_budget_mb,
                "setting": "fit_memory_budget_mb",
            },
        )
