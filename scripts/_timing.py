"""The one timing rule of the benchmark scripts."""

import time

import numpy as np


def best_time(fn, repeats: int) -> float:
    """Fastest of ``repeats`` runs (s): on a machine shared with other work the minimum is the least disturbed
    estimate, and every route in a table is measured the same way."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.min(times))
