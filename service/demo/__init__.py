"""The seeded water-utility demo: scenario generator and the runner that drives the HTTP API."""

from service.demo.scenario import (
    DEFAULT_SEED,
    FEATURES,
    MATERIALS,
    MODEL_NAME,
    SOILS,
    TRUE_MODEL,
    TRUE_MODEL_YEAR2,
    TrueModel,
    feature_spec,
    generate_segments,
    true_model,
)

__all__ = [
    "DEFAULT_SEED",
    "FEATURES",
    "MATERIALS",
    "MODEL_NAME",
    "SOILS",
    "TRUE_MODEL",
    "TRUE_MODEL_YEAR2",
    "TrueModel",
    "feature_spec",
    "generate_segments",
    "true_model",
]
