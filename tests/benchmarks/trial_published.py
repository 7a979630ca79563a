"""Trial of the whole fit path on published data sets and awkward seeded data (run on demand).

    PYTHONPATH=$PWD python tests/benchmarks/trial_published.py [case-name ...]

Each case (tests/api/_published_cases.py) is fitted through HTTP against the real app on a
fresh SQLite file, read back with GET and scored; the table gives the reference solver, the
worst relative difference of the coefficients and of the standard errors, the worst absolute
difference of probability and interval limits of the scored records, the reference's maximum
of the (penalised) log-likelihood minus the engine's ("ll gap"), the time of the fit's POST,
and a status (ok, refused-ok for separated data refused with 422 separation, FAIL/WRONG).
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from service.app import create_app
from service.config import Settings
from tests.api._published_cases import all_cases
from tests.api._published_trial import run_case, status_of
from tests.api.conftest import ApiClient
from tests.store.dbfixtures import sqlite_url


def main(argv: list[str]) -> int:
    wanted = set(argv)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        api = ApiClient(
            create_app(Settings(database_url=sqlite_url(Path(tmp)), auth_required=False))
        )
        try:
            for i, case in enumerate(all_cases()):
                if wanted and case.name not in wanted:
                    continue
                trial = run_case(api, case, f"trial-{i}")
                ref = trial.reference
                has = trial.coef is not None and ref is not None
                rows.append(
                    (
                        case.name,
                        case.method,
                        case.source,
                        ref.solver if ref else "-",
                        f"{trial.coef_rel:.1e}" if has else "-",
                        f"{trial.se_rel:.1e}" if has else "-",
                        f"{trial.prob_abs:.1e}" if has and trial.scores else "-",
                        f"{trial.objective_gap:+.1e}" if has else "-",
                        f"{trial.fit_seconds:.2f}",
                        status_of(trial),
                    )
                )
        finally:
            api.close()
    head = (
        "case",
        "method",
        "data",
        "reference",
        "coef rel",
        "SE rel",
        "prob abs",
        "ll gap",
        "s",
        "status",
    )
    widths = [max(len(str(r[k])) for r in [head, *rows]) for k in range(len(head))]
    for r in [head, *rows]:
        print("  ".join(str(v).ljust(w) for v, w in zip(r, widths, strict=True)).rstrip())
    return 0 if all(r[-1] in ("ok", "refused-ok") for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
