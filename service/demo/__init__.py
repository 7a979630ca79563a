"""The seeded water-utility demo: scenario generator and the runner that drives the HTTP API.
Public surface: :func:`run_demo` (drive a running service over HTTP), :func:`seed_database`
(the same, in-process, for ``riskfit serve --demo``), :func:`generate_segments` and the true
models of the scenario.
"""

from service.demo.runner import DemoError, DemoSummary, run_demo, seed_database
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
    "DemoError",
    "DemoSummary",
    "TrueModel",
    "feature_spec",
    "generate_segments",
    "run_demo",
    "seed_database",
    "true_model",
]
