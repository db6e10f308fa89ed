"""Local worker processes with one BLAS thread each (shared by sweeps and disorder ensembles).

Spawned children read the BLAS/OpenMP thread variables when they import
numpy, which happens when a pool starts them -- lazily, at submit time -- so
the variables must stay set for the whole life of the pool.
"""

from __future__ import annotations

import os

__all__ = ["ONE_THREAD", "OneBlasThread"]

#: The environment of a worker: one BLAS / OpenMP thread (the workers are the parallelism).
ONE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


class OneBlasThread:
    """Context: child processes started inside inherit one BLAS/OpenMP thread each."""

    def __enter__(self):
        self.saved = {k: os.environ.get(k) for k in ONE_THREAD}
        os.environ.update(ONE_THREAD)

    def __exit__(self, *exc):
        for k, v in self.saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
