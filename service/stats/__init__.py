"""Pure numerical core of riskfit: numpy, scipy and the standard library only.

Modules take arrays and return frozen dataclasses; nothing here knows about
HTTP, pydantic or databases (``tests/stats/test_purity.py`` enforces this).
"""
