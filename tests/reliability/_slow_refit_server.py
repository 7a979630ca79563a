"""``riskfit serve`` whose refits pause before deciding: a test-only entry point.

    python -m tests.reliability._slow_refit_server serve --host 127.0.0.1 --port P ...

The pause (``TEST_REFIT_DELAY_S`` seconds, read at each refit) sits between the refit's
claim of the lock and its decision, so a test can ``kill -9`` the process while a refit is
certainly running and its heartbeat renewing the lease. Nothing else changes: the pause
wraps ``service.refitting.operation.decide`` in this process only.
"""

from __future__ import annotations

import os
import sys
import time
from typing import Any

from service.cli import main
from service.refitting import operation

_decide = operation.decide


def _slow_decide(*args: Any, **kwargs: Any) -> Any:
    time.sleep(float(os.environ.get("TEST_REFIT_DELAY_S", "0")))
    return _decide(*args, **kwargs)


if __name__ == "__main__":
    operation.decide = _slow_decide
    sys.exit(main(sys.argv[1:]))
