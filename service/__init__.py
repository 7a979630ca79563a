"""riskfit: fit, version, serve and monitor binary-outcome logistic risk models.

This package ``__init__`` stays import-free so that ``service.stats`` (pure
numpy/scipy) can be imported without loading the web or database stack.
"""

__version__ = "0.1.0"
