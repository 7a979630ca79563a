"""Scheduled refits: the smallest update the new outcomes support, gated against the champion.

* :mod:`.data` - scored records with outcomes in a window, encoded like the champion, split
  by time into a development part and a holdout;
* :mod:`.challenger` - the intercept / recalibration / refit update with its covariance;
* :mod:`.decide` - closed testing (Vergouwe et al. 2017) and the holdout gates;
* :mod:`.operation` - :func:`run_refit`: lock, idempotency, one transaction of writes.
"""

from service.refitting.operation import request_fingerprint, run_refit

__all__ = ["request_fingerprint", "run_refit"]
