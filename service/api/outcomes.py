"""``POST /risk-models/{model}/outcomes``: join observed outcomes to logged scores."""

from __future__ import annotations

from datetime import timedelta

from fastapi import APIRouter

from service.api.deps import ModelDep, ScorerAccess, SessionDep, SettingsDep
from service.api.responses import JSONBytes
from service.monitoring import ingest_outcomes
from service.schemas.common import ErrorResponse
from service.schemas.outcomes import OutcomeBatchPublic, OutcomeCreate, OutcomeRefusedPublic

router = APIRouter(prefix="/risk-models/{model}/outcomes", tags=["outcomes"])

DESCRIPTION = """
Each item names its score by `score_id` (from `POST .../scores`) or by the record's `key`,
and gives `outcome` 0 or 1 and optionally `observed_at` (ISO 8601 with a UTC offset; default:
the time received). `observed_at` may not lie in the future nor before the score was made
(both beyond a clock-skew allowance, setting `RISKFIT_CLOCK_SKEW_SECONDS`, default 300 s).

Every item lands in exactly one list of the answer:
`accepted` (stored now), `duplicates` (this same outcome was already stored, or sent earlier
in the batch: counted once), `conflicts` (the score already has the other outcome: refused,
the first one stands), `unknown` (no score of this model has that id or key).
Accepted outcomes are committed before the answer is sent, whatever the status.

Status:
* **200** - nothing refused (every item accepted or duplicate);
* **207** - some items stood (accepted or duplicate) and some were refused (conflict or
  unknown): read the lists;
* **409** - no item stood and at least one conflicts; the body also has `error`;
* **404** - every item names an unknown score; the body also has `error`;
* **422** - the batch is malformed (nothing stored), with the field, value and remedy:
  e.g. a bad `outcome`, an item naming no score, more items than the setting
  `RISKFIT_MAX_RECORDS_PER_REQUEST`, or any item's `observed_at` out of order as above (the
  field names the first such item, `outcomes[i].observed_at`; `details.indexes` lists them).
"""


@router.post(
    "",
    response_model=OutcomeBatchPublic,
    summary="Record observed outcomes of scored records (idempotent)",
    description=DESCRIPTION,
    responses={
        207: {"model": OutcomeBatchPublic, "description": "Some items refused; see the lists."},
        409: {
            "model": OutcomeRefusedPublic | ErrorResponse,
            "description": "No item stood and some conflict (the lists and `error`), or the "
            "store refused the batch (the error body alone).",
        },
        404: {
            "model": OutcomeRefusedPublic | ErrorResponse,
            "description": "Every item names an unknown score (the lists and `error`), or the "
            "model is unknown (the error body alone).",
        },
    },
)
def post_outcomes(
    body: OutcomeCreate,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    _: ScorerAccess,
) -> JSONBytes:
    items = [item.model_dump(exclude_none=True) for item in body.outcomes]
    skew = timedelta(seconds=settings.clock_skew_seconds)
    status, answer = ingest_outcomes(session=session, model=model, items=items, clock_skew=skew)
    return JSONBytes(answer, status_code=status)
