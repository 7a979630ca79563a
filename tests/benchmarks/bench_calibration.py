"""Benchmark: calibration report, CUSUM and PSI over 1,000,000 outcomes (run on demand).

    python3 tests/benchmarks/bench_calibration.py [n]

Prints the best of 3 wall-clock timings of each piece and ratios against scikit-learn's
brier_score_loss, log_loss and roc_auc_score measured in the same run on the same arrays.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable

import numpy as np
from scipy.special import expit
from sklearn import metrics as skm

from service.stats import calibration as cal
from service.stats.cusum import cusum
from service.stats.discrimination import auc_delong
from service.stats.psi import numeric_reference, psi


def best(fn: Callable[[], object], repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main(n: int) -> None:
    rng = np.random.default_rng(0)
    p = expit(rng.normal(-2.0, 1.0, n))
    y = (rng.random(n) < expit(np.log(p / (1 - p)) + 0.2)).astype(float)
    x_ref, x_new = rng.normal(size=n), rng.normal(0.1, 1.0, n)
    ref = numeric_reference(x_ref)
    peers = {
        "sklearn brier_score_loss": best(lambda: skm.brier_score_loss(y, p)),
        "sklearn log_loss": best(lambda: skm.log_loss(y, p)),
        "sklearn roc_auc_score": best(lambda: skm.roc_auc_score(y, p)),
    }
    ours = {
        "calibration_report (all measures)": best(lambda: cal.calibration_report(y, p)),
        "  auc_delong (AUC + DeLong SE)": best(lambda: auc_delong(y, p)),
        "  probability_scores (Brier, scaled, log loss)": best(
            lambda: cal.probability_scores(y, p)
        ),
        "  calibration_slope (fit_logistic, 2 terms)": best(lambda: cal.calibration_slope(y, p)),
        "  calibration_intercept (fit_logistic, offset)": best(
            lambda: cal.calibration_intercept(y, p)
        ),
        "  hosmer_lemeshow": best(lambda: cal.hosmer_lemeshow(y, p)),
        "  flexible_calibration (loess, ICI)": best(lambda: cal.flexible_calibration(y, p)),
        "cusum (one chart, R = 2)": best(lambda: cusum(y, p, odds_ratio=2.0, h=5.0)),
        "psi (numeric, 10 bins)": best(lambda: psi(ref, x_new)),
    }
    sk_total = sum(peers.values())
    print(f"n = {n:,} outcomes (best of 3, seconds)")
    for name, t in peers.items():
        print(f"  {name:<48s} {t:8.4f}")
    for name, t in ours.items():
        print(f"  {name:<48s} {t:8.4f}")
    report = ours["calibration_report (all measures)"]
    delong = ours["  auc_delong (AUC + DeLong SE)"]
    scores = ours["  probability_scores (Brier, scaled, log loss)"]
    sk_scores = peers["sklearn brier_score_loss"] + peers["sklearn log_loss"]
    print(f"report / (sum of the three sklearn metrics) = {report / sk_total:.2f}")
    print(f"auc_delong / roc_auc_score = {delong / peers['sklearn roc_auc_score']:.2f}")
    print(f"probability_scores / (brier_score_loss + log_loss) = {scores / sk_scores:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000)
