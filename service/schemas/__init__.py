"""Request and response schemas, one module per resource (re-exported here)."""

from service.schemas.common import (
    ErrorDetail,
    ErrorResponse,
    HealthPublic,
    ReadinessPublic,
    StrictModel,
)
from service.schemas.models import (
    ChampionChange,
    ChampionChangePublic,
    ChampionPublic,
    RiskModelList,
    RiskModelPublic,
)
from service.schemas.scores import ScoreBatchPublic, ScoreCreate, ScorePublic
from service.schemas.versions import (
    FeatureSpec,
    FitData,
    FitOptions,
    FitStatisticsPublic,
    LineagePublic,
    LRTestPublic,
    TermPublic,
    TermTablePublic,
    VersionCreate,
    VersionList,
    VersionPublic,
    VersionSpec,
    VersionSummary,
)

__all__ = [
    "ChampionChange",
    "ChampionChangePublic",
    "ChampionPublic",
    "ErrorDetail",
    "ErrorResponse",
    "FeatureSpec",
    "FitData",
    "FitOptions",
    "FitStatisticsPublic",
    "HealthPublic",
    "LRTestPublic",
    "LineagePublic",
    "ReadinessPublic",
    "RiskModelList",
    "RiskModelPublic",
    "ScoreBatchPublic",
    "ScoreCreate",
    "ScorePublic",
    "StrictModel",
    "TermPublic",
    "TermTablePublic",
    "VersionCreate",
    "VersionList",
    "VersionPublic",
    "VersionSpec",
    "VersionSummary",
]
