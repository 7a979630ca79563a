"""Monitoring domain operations: outcomes, calibration report, drift view, alerts.

* :func:`ingest_outcomes` - join outcomes to scores (idempotent; conflicts refused, listed);
* :func:`calibration_view` - every calibration measure of one window;
* :func:`drift_view` - measures in consecutive windows, the CUSUM of the serving version,
  PSI per feature, and the alerts the evaluation raised;
* :func:`alert_public` - an alert row as JSON.
"""

from service.monitoring.alerts import alert_public
from service.monitoring.cusum_limits import LimitCache
from service.monitoring.drift import drift_view
from service.monitoring.outcomes import ingest_outcomes, outcome_status
from service.monitoring.report import Window, calibration_view
from service.monitoring.snapshot import OutcomeSnapshots

__all__ = [
    "LimitCache",
    "OutcomeSnapshots",
    "Window",
    "alert_public",
    "calibration_view",
    "drift_view",
    "ingest_outcomes",
    "outcome_status",
]
