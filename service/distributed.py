"""Fit on a Dask cluster: partitions compute sufficient statistics, the client steps.

Each Newton iteration of :mod:`service.stats.newton` needs, at the current ``coef``, the sums
``loglik``, ``score = X'(w (y - mu))`` and ``info = X'WX`` (and for Firth's method the
hat-weighted adjustment ``X'(h (1/2 - mu))`` with ``h_i = w_i mu_i (1 - mu_i) x_i' I^-1 x_i``,
which needs the *total* information: the client sends the Cholesky factor of the summed
information back to the partitions, which return p-vectors). Every partition runs the
single-machine functions (:func:`~service.stats.likelihood.scan`,
:func:`~service.stats.likelihood.loglik_pass`, :func:`~service.stats.firth.hat_score_adjustment`)
on its own rows; only p-vectors and p x p matrices travel. The client sums them and runs the
same Newton driver, so the estimate equals the single-machine fit up to the order of
floating-point summation.

A partition is any picklable zero-argument callable that returns a block source *on the
worker* (e.g. :class:`FilePartition`: a Parquet file or row-group range the workers can
read). With ``persist=True`` (default) each partition is loaded once into worker memory
(``client.submit``) and every pass runs where its rows live; with ``persist=False`` each
pass re-reads the partition (data larger than the cluster's memory).

Columns far from zero are centred on the workers for the fit, as in a local fit
(:mod:`service.stats.centring`: the first scan's means decide, a second scan follows), and
the estimate is returned in the original columns.

The separation check of maximum likelihood (a linear programme over all rows) runs only
where the single-machine engine runs it: for small data or, when Newton shows the
divergence signature, up to 2 million cells; only then are rows gathered to the client.

Dask is optional: ``pip install 'riskfit[distributed]'``.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.linalg import LinAlgError, cholesky
from scipy.special import logit

from service.errors import SpecError
from service.stats.blocks import Block, BlockSource, sub_blocks
from service.stats.centring import column_shifts, shifted_blocks
from service.stats.firth import half_logdet, hat_score_adjustment
from service.stats.fit import LogisticFit, Method, firth_null, fit_from_scan, uncentred
from service.stats.fit_options import fit_options
from service.stats.likelihood import DataSummary, Totals, loglik_pass, scan
from service.stats.newton import Objective, State, newton
from service.stats.row_sample import MAX_ROWS as MAX_SAMPLE_ROWS
from service.stats.row_sample import RowSample
from service.stats.warm_start import start_for

__all__ = ["DaskEngine", "FilePartition", "connect", "file_partitions", "fit_logistic_dask"]

Partition = Callable[[], BlockSource]
EXTRA = "distributed"


def _require_dask() -> Any:
    try:
        import dask.distributed as dd
    except ImportError as exc:  # pragma: no cover - exercised only without the extra
        raise SpecError(
            "the dask engine needs the optional dependency dask.distributed",
            field="engine",
            value="dask",
            remedy=f"pip install 'riskfit[{EXTRA}]', or use the local engine",
        ) from exc
    return dd


def connect(address: str) -> Any:
    """A ``dask.distributed.Client`` for the scheduler at ``address`` (``tcp://host:8786``)."""
    dd = _require_dask()
    try:
        return dd.Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise SpecError(
            f"no Dask scheduler answers at {address}",
            field="scheduler",
            value=address,
            remedy="start one (dask scheduler; dask worker ADDRESS) or fix the address",
        ) from exc


@dataclass(frozen=True)
class FilePartition:
    """Rows of one Parquet/CSV file read on the worker through the encoding (picklable)."""

    path: str
    encoding: dict[str, Any]
    outcome: str
    weights: str | None = None
    offset: str | None = None
    batch_rows: int = 65_536

    def __call__(self) -> BlockSource:
        from service.sources.blocks import file_blocks
        from service.stats.design import Encoding

        enc = Encoding.from_dict(self.encoding)
        return file_blocks(self.path, enc, self.outcome, self.weights, self.offset, self.batch_rows)


def file_partitions(
    path: str | Sequence[str], encoding: dict[str, Any], outcome: str, **kw: Any
) -> list[FilePartition]:
    """One partition per data file: the files given (as checked by the caller), or those of
    ``path`` found by :func:`service.sources.paths.files_under` (every depth, links leading
    out of ``path``'s directory refused; the workers never list a directory themselves).
    """
    from service.sources.paths import files_under

    files = list(files_under(path).files) if isinstance(path, str) else list(path)
    return [FilePartition(f, encoding, outcome, **kw) for f in files]


# --- work done on the workers (module-level functions: picklable) ---


def _source(part: Any, keep: Sequence[int] | None, shift: np.ndarray | None) -> BlockSource:
    blocks: BlockSource = part() if callable(part) else (lambda: iter(part))
    if shift is not None:  # columns far from zero, centred (service.stats.centring)
        blocks = shifted_blocks(blocks, shift)
    return blocks if keep is None else sub_blocks(blocks, keep)


def _load(part: Partition) -> list[Block]:
    return list(part()())


def _cross(s: DataSummary) -> np.ndarray:
    assert s.xtwx is not None  # the partitions' scans keep their cross-products
    return s.xtwx


def _scan(
    part: Any, p: int, names: tuple[str, ...], sample_rows: int, shift: np.ndarray | None
) -> tuple[DataSummary, list[Block]]:
    sample = RowSample(max_rows=sample_rows)
    summary = scan(_source(part, None, shift), p, names, sample)
    return summary, list(sample.source()())


def _totals(
    part: Any,
    keep: Sequence[int] | None,
    coef: np.ndarray,
    want: bool,
    rounded: bool,
    shift: np.ndarray | None,
) -> Totals:
    return loglik_pass(_source(part, keep, shift), coef, want_info=want, rounded=rounded)


def _hat(
    part: Any,
    keep: Sequence[int] | None,
    coef: np.ndarray,
    chol: np.ndarray,
    shift: np.ndarray | None,
) -> np.ndarray:
    return hat_score_adjustment(_source(part, keep, shift), coef, chol)[0]


def _rows(part: Any, shift: np.ndarray | None) -> list[Block]:
    return list(_source(part, None, shift)())


class DaskEngine:
    """Partitions on a cluster and the reductions over them."""

    def __init__(self, client: Any, partitions: Sequence[Partition], persist: bool = True):
        if not partitions:
            raise SpecError(
                "no partitions to fit on",
                field="data.path",
                value=[],
                remedy="point at a file or a non-empty directory",
            )
        self.client = client
        self.persist = persist
        self.shift: np.ndarray | None = None  # column centring (service.stats.centring)
        self.parts: list[Any] = (
            [client.submit(_load, part, pure=False) for part in partitions]
            if persist
            else list(partitions)
        )

    def _map(self, fn: Callable[..., Any], *args: Any) -> list[Any]:
        futures = [self.client.submit(fn, part, *args, pure=False) for part in self.parts]
        return list(self.client.gather(futures))

    def scan_and_sample(self, p: int, names: tuple[str, ...]) -> tuple[DataSummary, list[Block]]:
        """The summed scan, and a systematic sample of every partition's rows (partition order).

        Each partition keeps at most ``row_sample.MAX_ROWS / partitions`` rows (at least 1,024),
        so the client receives about as many rows as a local fit samples.
        """
        cap = max(1024, MAX_SAMPLE_ROWS // len(self.parts))
        scanned: list[tuple[DataSummary, list[Block]]] = self._map(_scan, p, names, cap, self.shift)
        parts = [s for s, _ in scanned]
        sample = [b for _, blocks in scanned for b in blocks]
        return self._summed(parts), sample

    @staticmethod
    def _summed(parts: list[DataSummary]) -> DataSummary:
        return DataSummary(
            sum(s.n_obs for s in parts),
            sum(s.n_positive for s in parts),
            float(sum(s.sum_weights for s in parts)),
            float(sum(s.n_events for s in parts)),
            any(s.has_offset for s in parts),
            sum((_cross(s) for s in parts), np.zeros_like(_cross(parts[0]))),
            sum((s.xtw for s in parts), np.zeros_like(parts[0].xtw)),
            sum((s.xtwy for s in parts), np.zeros_like(parts[0].xtwy)),
            sum((s.sum_wx2 for s in parts), np.zeros_like(parts[0].sum_wx2)),
        )

    def totals(
        self,
        keep: Sequence[int] | None,
        coef: np.ndarray,
        want: bool = True,
        *,
        rounded: bool = False,
    ) -> Totals:
        parts: list[Totals] = self._map(_totals, keep, coef, want, rounded, self.shift)
        return Totals(
            float(sum(t.loglik for t in parts)),
            sum((t.score for t in parts), np.zeros_like(coef)),
            sum((t.info for t in parts), np.zeros_like(parts[0].info)),
            sum(t.n_extreme for t in parts),
            rounded and want,
        )

    def hat(self, keep: Sequence[int] | None, coef: np.ndarray, chol: np.ndarray) -> np.ndarray:
        return sum(self._map(_hat, keep, coef, chol, self.shift), np.zeros_like(coef))

    def gathered(self) -> BlockSource:
        """All rows at the client, fetched lazily (only the separation programme uses it)."""

        def source() -> Iterator[Block]:
            for blocks in self._map(_rows, self.shift):
                yield from blocks

        return source


def _no_local_rows() -> Iterable[Block]:
    raise RuntimeError("the dask objective evaluates on the cluster")  # pragma: no cover


class DaskObjective(Objective):
    """:class:`~service.stats.newton.Objective` whose passes run on the partitions."""

    def __init__(
        self, engine: DaskEngine, keep: Sequence[int] | None, method: str, lam: float, mask: Any
    ) -> None:
        super().__init__(_no_local_rows, method, lam, np.asarray(mask))
        self.engine, self.keep = engine, keep

    def evaluate(self, coef: np.ndarray, *, rounded: bool = False) -> State | None:
        rounded = rounded and self.method != "firth"
        return self.from_totals(coef, self.engine.totals(self.keep, coef, rounded=rounded))

    def evaluate_without_information(self, coef: np.ndarray) -> State | None:
        return self.from_totals(coef, self.engine.totals(self.keep, coef, want=False))

    def from_totals(self, coef: np.ndarray, t: Totals) -> State | None:
        if self.method != "firth":
            return super().from_totals(coef, t)
        if not np.isfinite(t.loglik):
            return None
        try:
            chol = cholesky(t.info, lower=True, check_finite=False)
        except LinAlgError:
            return None
        adj = self.engine.hat(self.keep, coef, chol)
        pen = t.loglik + half_logdet(chol)
        return State(coef, t.loglik, pen, t.score + adj, t.info, t.n_extreme)


def _null(engine: DaskEngine, s: DataSummary, icpt: int | None, method: str) -> tuple[float, float]:
    """(MLE, penalised) log-likelihood of the intercept-only model, as the local engine does
    (Firth: under the full model's penalty, :func:`~service.stats.fit.firth_null`)."""
    if icpt is None:
        ll = engine.totals([], np.zeros(0), want=False).loglik
    elif s.has_offset:
        start = np.array([logit(s.n_events / s.sum_weights)])
        obj = DaskObjective(engine, [icpt], "mle", 0.0, np.zeros(1))
        st = obj.evaluate(start)
        ll = (
            newton(obj, st, np.ones(1, bool), max_iter=100, tol=1e-12).state.loglik
            if st
            else -np.inf
        )
    else:
        ybar = s.n_events / s.sum_weights
        ll = s.n_events * np.log(ybar) + (s.sum_weights - s.n_events) * np.log1p(-ybar)
    if method != "firth":
        return float(ll), float(ll)
    full = DaskObjective(engine, None, "firth", 0.0, np.ones(s.xtw.shape[0]))
    return float(ll), firth_null(full, s, icpt)


def fit_logistic_dask(
    engine: DaskEngine,
    *,
    n_terms: int,
    term_names: Sequence[str] | None = None,
    method: Method = "mle",
    ridge_lambda: float = 0.0,
    intercept_index: int | None = 0,
    max_iter: int = 100,
    tol: float = 1e-10,
) -> LogisticFit:
    """:func:`service.stats.fit.fit_logistic_blocks` with every pass run on the cluster.

    The scan also brings a systematic sample of each partition's rows to the client, whose fit
    there gives Newton its start (:mod:`service.stats.warm_start`), as in a local fit.
    """
    opts = fit_options(n_terms, term_names, method, ridge_lambda, intercept_index, max_iter, tol)
    names = opts.names
    engine.shift = None
    summary, sample = engine.scan_and_sample(n_terms, names)
    shift = column_shifts(summary, intercept_index)
    try:
        if shift is not None:  # columns far from zero: centred on the workers, as locally
            engine.shift = shift
            summary, sample = engine.scan_and_sample(n_terms, names)
        sampled = sum(b.X.shape[0] for b in sample)  # fitted at the client
        start = start_for(method, summary, lambda: iter(sample), sampled, names, intercept_index)
        fit = fit_from_scan(
            lambda mask: DaskObjective(engine, None, method, ridge_lambda, mask),
            summary,
            opts,
            start=start,
            separation_blocks=engine.gathered,
            null_logliks=lambda: _null(engine, summary, intercept_index, method),
            in_memory=engine.persist,  # the partitions held in the workers' memory
        )
    finally:
        engine.shift = None
    if shift is None or intercept_index is None:
        return fit
    return uncentred(fit, shift, intercept_index)
