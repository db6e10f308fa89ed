"""Disorder ensembles from a run config, stored as the HDF5 group ``ensemble``.

``rgftrans ensemble CONFIG --samples N`` builds the config's device at its
base point, takes the width W and the first seed from ``[disorder]``, and
computes T(E) of N samples at the config's energies
(:func:`rgftrans.transport.ensemble.disorder_ensemble`).  The group holds
every sample's conductance (2e^2/h and S) with its seed, and the statistics
with their standard errors; attributes name the width, the solver, the
transport regime at each energy and the units.  Written by
:func:`rgftrans.io.store.write_group` (built under a hidden name and moved
into place: never half written).
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np

from rgftrans.errors import ConfigError, StoreError
from rgftrans.io.store import StoredArray, _plain, write_group
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
from rgftrans.transport.ensemble import EnsembleResult, disorder_ensemble

__all__ = ["ensemble_from_config", "require_disorder", "write_ensemble", "read_ensemble", "GROUP"]

#: The group of a result file that holds an ensemble.
GROUP = "ensemble"
_FORMAT = "rgftrans-disorder-ensemble"


def ensemble_from_config(cfg, samples: int, *, width_meV: float | None = None, solver: str = "auto",
                         progress: bool = False, workers: int = 1) -> EnsembleResult:
    """The ensemble of the config's device (base point) at its energies; ``[disorder]`` gives W and the first seed."""
    require_disorder(cfg)
    device = cfg.build_device(cfg.base_point())
    return disorder_ensemble(device, cfg.energies(), samples=samples, width_meV=width_meV, solver=solver,
                             progress=progress, workers=workers)


def require_disorder(cfg) -> None:
    """Refuse (one ConfigError line) a config without a ``[disorder]`` table: it names no ensemble."""
    if cfg.disorder is None:
        raise ConfigError(f"{cfg.source}: no [disorder] table; add one, e.g. [disorder] width_meV = 2.0, seed = 0 "
                          "(the width of the ensemble and its first seed)")


def write_ensemble(result: EnsembleResult, path, *, overwrite: bool = False, group: str = GROUP) -> None:
    """Store an ensemble as ``group`` (beside a sweep's results, or in a new file of its own)."""
    samples = ("seed", "energy")
    items = {
        "energy": StoredArray(result.energies, "meV", "energy", scale=True),
        "seed": StoredArray(result.seeds, "1", "disorder seed of each sample", scale=True),
        "transmission": StoredArray(result.transmission, "1",
                                    "transmission of each sample" + (" per spin" if result.spin_degeneracy == 2
                                                                     else " (both spins)"), dims=samples),
        "conductance_2e2h": StoredArray(result.conductance_g0, "2e^2/h", "conductance of each sample", dims=samples),
        "conductance": StoredArray(result.conductance_S, "S", "conductance of each sample", dims=samples),
        "mean_conductance_2e2h": StoredArray(result.mean_g0, "2e^2/h", "ensemble mean conductance",
                                             dims=("energy",)),
        "mean_conductance_error_2e2h": StoredArray(result.mean_error_g0, "2e^2/h",
                                                   "standard error of the mean conductance", dims=("energy",)),
        "conductance_variance_2e2h": StoredArray(result.variance_g0, "(2e^2/h)^2",
                                                 "ensemble variance of the conductance", dims=("energy",)),
        "conductance_variance_error_2e2h": StoredArray(result.variance_error_g0, "(2e^2/h)^2",
                                                       "standard error of the conductance variance",
                                                       dims=("energy",)),
        "open_channels": StoredArray(result.n_open, "1", "open channels of each lead", dims=("energy", "")),
        "regime": StoredArray(np.asarray(result.regime, dtype=str), "", "transport regime at each energy",
                              dims=("energy",)),
    }
    attrs = {"format": _FORMAT, "disorder_width_meV": float(result.width_meV), "solver": result.solver,
             "spin_degeneracy": int(result.spin_degeneracy), "lead_names": " ".join(result.lead_names),
             "validity": "coherent single-particle transport (Landauer); no charging energy",
             "conductance_quantum_S": CONDUCTANCE_QUANTUM_S}
    write_group(path, group, items, attrs=attrs, overwrite=overwrite)


def read_ensemble(path, group: str = GROUP) -> EnsembleResult:
    """An :class:`EnsembleResult` back from a file written by :func:`write_ensemble` (one-line StoreError if not)."""
    path = Path(path)
    if not path.is_file():
        raise StoreError(f"{path}: no such file; give the file `rgftrans ensemble` wrote")
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise StoreError(f"{path}: cannot be read as HDF5 ({' '.join(str(exc).split())}); the file is damaged or "
                         "not HDF5 -- rerun `rgftrans ensemble` with --overwrite") from None
    with f:
        g = f.get(group)
        if not isinstance(g, h5py.Group) or _plain(g.attrs.get("format", "")) != _FORMAT:
            raise StoreError(f"{path}: no disorder ensemble in /{group}; run `rgftrans ensemble CONFIG --samples N` "
                             "first")
        try:
            a = {key: _plain(value) for key, value in g.attrs.items()}
            return EnsembleResult(
                energies=g["energy"][()], seeds=g["seed"][()], width_meV=float(a["disorder_width_meV"]),
                transmission=g["transmission"][()], n_open=g["open_channels"][()],
                spin_degeneracy=int(a["spin_degeneracy"]), solver=str(a["solver"]),
                lead_names=tuple(str(a["lead_names"]).split()))
        except (KeyError, OSError, ValueError) as exc:
            raise StoreError(f"{path}: the group /{group} is incomplete or damaged ({' '.join(str(exc).split())}); "
                             "rerun `rgftrans ensemble` with --overwrite") from None
