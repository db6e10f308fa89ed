"""Parameter sweeps: a grid of independent points, computed anywhere, written in one place.

A sweep is the Cartesian product of the config's sweep axes (outermost first);
each grid point is one task that builds the device for that point and
computes all energies in one batched call.  Tasks run on local processes
(:class:`concurrent.futures.ProcessPoolExecutor`, spawned, one BLAS thread
each) or on a Dask cluster (``dask.distributed``; a scheduler address, or a
local cluster on the loopback interface).  Workers only compute; the driving
process is the only writer of the result file.

Nothing finished is ever lost: each point's arrays are first written
atomically to a journal folder beside the result file (``<file>.journal/``),
then into the HDF5 file, which is flushed and its ``completed`` mask set.  A
rerun of the same config computes only the missing points; if the HDF5 file
was damaged by a crash in the middle of a write, it is rebuilt from the
journal.  The journal is removed when the sweep completes.
"""

from __future__ import annotations

import itertools
import multiprocessing
import os
import shutil
import time
import warnings
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rgftrans._processes import ONE_THREAD as _ONE_THREAD, OneBlasThread as _OneBlasThread
from rgftrans.io.config import RunConfig
from rgftrans.errors import RgftransError, RgftransWarning, SweepFailed
from rgftrans.io.store import Axis, OutputLock, QuantitySpec, ResultFile, dataset_name
from rgftrans.errors import StoreError

__all__ = ["SweepReport", "run_sweep", "compute_point", "grid_points", "axis_dataset_name", "sweep_temperatures",
           "stored_conductance"]


@dataclass(frozen=True)
class SweepReport:
    """What a sweep did.

    Attributes
    ----------
    path : Path
        The HDF5 result file.
    n_points, n_computed, n_resumed : int
        Grid points in all, computed by this run, found done from before.
    seconds : float
        Wall time of this run.
    """

    path: Path
    n_points: int
    n_computed: int
    n_resumed: int
    seconds: float


def grid_points(cfg: RunConfig) -> Iterator[tuple[tuple[int, ...], dict[str, float]]]:
    """All grid points as (index tuple, {parameter: value}), outermost axis first."""
    axes = cfg.axes()
    for index in itertools.product(*(range(len(ax.values)) for ax in axes)):
        yield index, {ax.parameter: float(ax.values[i]) for ax, i in zip(axes, index)}


def axis_dataset_name(parameter: str) -> str:
    """HDF5 name of a sweep axis (see :func:`rgftrans.io.store.dataset_name`)."""
    return dataset_name(parameter)


#: Name of the trailing dimension of the stored conductances.
TEMPERATURE_DIM = "temperature"
_CONDUCTANCE_TEXT = ("at chemical potential mu = energy and the listed temperature, from lead_in into lead_out "
                     "(diagonal: total conductance out of the lead, N - R); NaN where the energy grid does not "
                     "hold the thermal window")


def _quantities(n_leads: int, n_temperatures: int) -> dict[str, QuantitySpec]:
    pair = (("lead_out", n_leads), ("lead_in", n_leads))
    with_t = ((TEMPERATURE_DIM, n_temperatures), *pair)
    return {
        "transmission": QuantitySpec(shape_tail=pair, units="1",
                                     long_name="transmission from lead_in into lead_out (diagonal: reflection)"),
        "n_open": QuantitySpec(shape_tail=(("lead", n_leads),), dtype=np.int64, units="1",
                               long_name="open channels of each lead"),
        "conductance": QuantitySpec(shape_tail=with_t, units="2e^2/h",
                                    long_name=f"conductance in units of 2e^2/h {_CONDUCTANCE_TEXT}"),
        "conductance_S": QuantitySpec(shape_tail=with_t, units="S",
                                      long_name=f"conductance in siemens {_CONDUCTANCE_TEXT}"),
    }


def sweep_temperatures(cfg: RunConfig) -> np.ndarray:
    """Temperatures (K) of the stored conductances: the config's [temperature] list, else 0 K alone."""
    temps = cfg.temperatures()
    return temps if temps.size else np.zeros(1)


def _pair_conductances(transmission: np.ndarray, n_open: np.ndarray) -> np.ndarray:
    """T_pq off the diagonal and N_p - R_pp on it (n_E, n_leads, n_leads): conductances in units of g_s e^2/h."""
    pair = np.array(transmission, dtype=float)
    idx = np.arange(pair.shape[1])
    pair[:, idx, idx] = n_open - pair[:, idx, idx]
    return pair


def stored_conductance(cfg: RunConfig, transmission: np.ndarray, n_open: np.ndarray, spin_degeneracy: int,
                       *, refined=None) -> dict[str, np.ndarray]:
    """The conductance quantities of one point from its transmission matrix (n_E, n_leads, n_leads).

    Off the diagonal G_pq = (g_s e^2/h) <T_pq>_T, on it (g_s e^2/h) <N_p - R_pp>_T, thermally averaged
    at each grid energy as the chemical potential (:func:`rgftrans.analysis.thermal.conductance_on_grid`), from the
    grid's samples or from a refined sampling ``(energies, pair conductances)`` when given.
    """
    from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
    from rgftrans.analysis.thermal import conductance_on_grid

    energies = cfg.energies()
    e, pair = refined if refined is not None else (energies, _pair_conductances(transmission, n_open))
    g = conductance_on_grid(e, pair, sweep_temperatures(cfg), spin_degeneracy=spin_degeneracy, mu=energies)
    return {"conductance": g, "conductance_S": g * CONDUCTANCE_QUANTUM_S}


def _refined_pairs(cfg: RunConfig, model, route: dict, pair: np.ndarray, point: dict):
    """Adaptive refinement of the pair conductances (T_pq, N_p - R_pp) to [energy] refine_tolerance."""
    import warnings as _warnings

    from rgftrans.errors import ResolutionWarning
    from rgftrans.analysis.resolution import refine
    from rgftrans.transport.rgf import transmission_matrix

    energies = cfg.energies()
    cap = cfg.energy.refine_max_points or 20 * energies.size

    def evaluate(x):
        res = transmission_matrix(model, x, **route)
        return _pair_conductances(res.matrix, res.n_open)

    sampling = refine(evaluate, energies, tolerance=cfg.energy.refine_tolerance, max_points=cap, values=pair)
    if not sampling.converged:
        _warnings.warn(f"at {_describe(point)}: adaptive refinement stopped at {sampling.energies.size} energies "
                       f"(refine_max_points = {cap}) with errors up to {sampling.max_error:.3g} > refine_tolerance "
                       f"{cfg.energy.refine_tolerance:g}; raise refine_max_points", ResolutionWarning)
    return sampling


def _describe(point: dict) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in point.items()) or "the only point"


# --------------------------------------------------------------------------
# Worker side
# --------------------------------------------------------------------------

_WORKER_ROUTE: dict = {}


def compute_point(cfg: RunConfig, point: dict[str, float]) -> dict[str, np.ndarray]:
    """Compute one grid point (runs in a worker).

    Returns the arrays of the point: ``transmission`` (n_E, n_leads, n_leads),
    ``n_open`` (n_E, n_leads), ``conductance`` and ``conductance_S``
    (n_E, n_T, n_leads, n_leads), plus ``ldos`` (n_ldos, n_sites) when the
    config asks for LDOS maps.  The slicing of a geometry and the solver chosen for it (RGF or nested
    dissection, :func:`rgftrans.transport.choice.choose_solver`) are reused across points that change only
    potentials or the field (same sparsity pattern); so is the dissection tree (cached by geometry).
    """
    from rgftrans.transport.local import ldos
    from rgftrans.analysis.resolution import warn_sharp_features
    from rgftrans.transport.choice import choose_solver
    from rgftrans.transport.rgf import transmission, transmission_matrix
    from rgftrans.transport.slicing import default_slicing

    model = cfg.build_device(point).discretise()
    key = (cfg.config_hash(), cfg.geometry_key(point))
    route = _WORKER_ROUTE.get(key)
    if route is None:
        slicing = default_slicing(model)
        solver = choose_solver(model, slicing=slicing).solver
        route = {"solver": solver, "slicing": slicing if solver == "rgf" else None}
        _WORKER_ROUTE.clear()
        _WORKER_ROUTE[key] = route
    energies = cfg.energies()
    n_leads = len(model.leads)
    if n_leads == 2:
        res = transmission(model, energies, **route)
        t = np.zeros((len(energies), 2, 2))
        t[:, 1, 0] = t[:, 0, 1] = res.transmission  # two terminals: T_10 = T_01 by unitarity
        t[:, 0, 0] = res.n_open[:, 0] - res.transmission
        t[:, 1, 1] = res.n_open[:, 1] - res.transmission
        out = {"transmission": t, "n_open": res.n_open}
    else:
        res = transmission_matrix(model, energies, **route)
        out = {"transmission": res.matrix, "n_open": res.n_open}
    pair = _pair_conductances(out["transmission"], out["n_open"])
    refined = None
    if cfg.energy.refine_tolerance is not None:
        sampling = _refined_pairs(cfg, model, route, pair, point)
        refined = (sampling.energies, sampling.values)
        if not sampling.converged:
            warn_sharp_features(sampling.energies, sampling.values, where=f"at {_describe(point)}: ")
    else:
        warn_sharp_features(energies, pair, where=f"at {_describe(point)}: ")
    out.update(stored_conductance(cfg, out["transmission"], out["n_open"], model.spin_degeneracy,
                                  refined=refined))
    ldos_e = cfg.ldos_energies()
    if len(ldos_e):
        out["ldos"] = np.atleast_2d(ldos(model, ldos_e))
    return out


def _task(args):
    """One grid point in a worker: its arrays, and the warnings it raised (sent back to the driver)."""
    cfg, index, point = args
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        values = compute_point(cfg, point)
    return index, values, [(w.category, str(w.message)) for w in caught]


def _reissue(caught) -> None:
    """Warnings of a worker, raised again in the driving process (where the user sees them)."""
    for category, message in caught:
        warnings.warn(message, category if isinstance(category, type) and issubclass(category, Warning)
                      else UserWarning, stacklevel=2)


# --------------------------------------------------------------------------
# Journal: one atomic file per finished point
# --------------------------------------------------------------------------

class _Journal:
    """``<file>.journal/``: one atomic entry per finished point; ours by the marker file inside it."""

    #: Marker file of a journal folder this package created; it holds the sweep's config hash.
    MARKER = ".rgftrans-journal"

    def __init__(self, result_path: Path, config_hash: str):
        self.dir = result_path.with_name(result_path.name + ".journal")
        self.hash = config_hash

    def check_owned(self) -> None:
        """Refuse (one line) a path at the journal's place that rgftrans did not create: it is never deleted."""
        if self.dir.exists() and not (self.dir.is_dir() and (self.dir / self.MARKER).is_file()):
            kind = "folder" if self.dir.is_dir() else "file"
            raise StoreError(f"{self.dir}: a {kind} rgftrans did not create sits where the sweep keeps its "
                             "journal; move it away (rgftrans deletes only its own files), or choose another "
                             "output path")

    def open(self) -> None:
        self.check_owned()
        if self.dir.exists() and self._stored_hash() != self.hash:
            shutil.rmtree(self.dir)  # our journal of another sweep: the result file decides what survives
        self.dir.mkdir(parents=True, exist_ok=True)
        (self.dir / self.MARKER).write_text(self.hash)

    def _stored_hash(self) -> str | None:
        f = self.dir / self.MARKER
        return f.read_text().strip() if f.is_file() else None

    def matches(self) -> bool:
        return self.dir.is_dir() and self._stored_hash() == self.hash

    def _name(self, index) -> Path:
        return self.dir / ("p_" + "_".join(str(i) for i in index) + ".npz")

    def write(self, index, values: dict[str, np.ndarray]) -> None:
        # Write-then-rename: a killed process leaves either the whole entry or none.  (No fsync: that would
        # guard against a power cut, not a killed process, and costs tens of ms per point on some disks.)
        tmp = self.dir / f".tmp_{os.getpid()}.npz"
        with open(tmp, "wb") as fh:
            np.savez(fh, **values)
        os.replace(tmp, self._name(index))

    def entries(self) -> Iterable[tuple[tuple[int, ...], dict[str, np.ndarray]]]:
        import zipfile

        for f in sorted(self.dir.glob("p_*.npz")):
            try:
                index = tuple(int(i) for i in f.stem[2:].split("_") if i != "")
                with np.load(f, allow_pickle=False) as data:
                    values = {k: data[k] for k in data.files}
            except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:
                _drop_entry(f, exc)
                continue
            yield index, values

    def remove(self) -> None:
        if self.dir.is_dir() and (self.dir / self.MARKER).is_file():  # only a journal of ours
            shutil.rmtree(self.dir, ignore_errors=True)


def _drop_entry(f: Path, exc: BaseException) -> None:
    """An unreadable journal entry counts as missing: the point is computed again, and the user is told."""
    warnings.warn(f"journal entry {f.name} is unreadable ({type(exc).__name__}); that point is computed again",
                  RgftransWarning, stacklevel=3)
    f.unlink(missing_ok=True)


# --------------------------------------------------------------------------
# Driver side
# --------------------------------------------------------------------------

def _open_result(cfg: RunConfig, path: Path, overwrite: bool, journal: _Journal, model) -> ResultFile:
    axes = cfg.axes()
    temps = sweep_temperatures(cfg)
    fermi = cfg.fermi_energy_meV
    create = dict(config_text=cfg.source_text or cfg.canonical_json(), config_hash=cfg.config_hash(), axes=axes,
                  energies_meV=cfg.energies(), lead_names=[lead.name for lead in cfg.leads],
                  quantities=_quantities(len(model.leads), temps.size),
                  coordinates={TEMPERATURE_DIM: Axis(TEMPERATURE_DIM, temps, "K", "electron temperature")},
                  attrs={"spin_degeneracy": model.spin_degeneracy,
                         "fermi_energy_meV": float("nan") if fermi is None else float(fermi)})
    if overwrite:
        journal.remove()
        return ResultFile.create(path, overwrite=True, **create)
    if not path.exists():
        return ResultFile.create(path, **create)
    try:
        return ResultFile.open_for_resume(path, config_hash=cfg.config_hash())
    except StoreError:
        if not journal.matches():
            raise
    # Our sweep's journal is there but the file is unreadable: a crash hit a write.  Rebuild from the journal.
    damaged = path.with_name(path.name + ".damaged")
    os.replace(path, damaged)
    rf = ResultFile.create(path, **create)
    damaged.unlink()
    return rf


def _replay(rf: ResultFile, journal: _Journal) -> int:
    done = rf.completed
    n = 0
    for index, values in journal.entries():
        try:
            if done[index]:
                continue
            _write(rf, index, values)
        except (IndexError, StoreError) as exc:  # an entry of the wrong shape or index: recompute that point
            _drop_entry(journal._name(index), exc)
            continue
        n += 1
    return n


def _write(rf: ResultFile, index, values: dict[str, np.ndarray]) -> None:
    if "ldos" in values:
        rf.write_extra("ldos", index, "ldos", values["ldos"], units="1/meV", long_name="local density of states",
                       dims=("ldos_energy", "site"))
    rf.write_point(index, {k: v for k, v in values.items() if k != "ldos"})


def _iterate_local(tasks, workers: int):
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    if workers == 1:
        for task in tasks:
            yield _task(task)
        return
    with _OneBlasThread(), ProcessPoolExecutor(max_workers=workers,
                                               mp_context=multiprocessing.get_context("spawn")) as pool:
        pending = set()
        queue = iter(tasks)
        for task in itertools.islice(queue, 2 * workers):
            pending.add(pool.submit(_task, task))
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                try:
                    result = fut.result()
                except BrokenProcessPool:
                    raise SweepFailed("a worker process died (out of memory, or killed); finished points are "
                                      "saved -- run the same command again to resume") from None
                yield result
                nxt = next(queue, None)
                if nxt is not None:
                    pending.add(pool.submit(_task, nxt))


def _iterate_dask(tasks, workers: int, address: str | None):
    try:
        from dask.distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise RgftransError("the dask executor needs dask[distributed]; install it with pip install "
                            "'rgftrans[cluster]'") from None
    if address:
        try:
            client = Client(address, timeout="20s")
        except (OSError, TimeoutError, ValueError) as error:
            raise SweepFailed(f"could not reach the Dask scheduler at {address} ({type(error).__name__}: "
                              f"{str(error).splitlines()[0] if str(error) else 'no answer'}); start it with "
                              "`dask scheduler` and workers, or drop the address to run locally") from None
        cluster = None
    else:
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address=None, env=_ONE_THREAD)
        client = Client(cluster)
    try:
        tasks = list(tasks)
        futures = client.map(_task, tasks, pure=False)
        for fut in as_completed(futures):
            yield fut.result()
            fut.release()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def run_sweep(cfg: RunConfig, *, overwrite: bool | None = None, quiet: bool = False, workers: int | None = None,
              executor: str | None = None, address: str | None = None, path: str | Path | None = None) -> SweepReport:
    """Run (or resume) the sweep of a config into its HDF5 result file.

    Parameters
    ----------
    cfg : RunConfig
    overwrite : bool, optional
        Replace an existing file of another sweep (default: the config's
        ``output.overwrite``).  Without it a file of the same sweep is resumed
        and a file of another sweep is refused.
    quiet : bool
        No progress bar.
    workers, executor, address : optional
        Override the config's ``[cluster]`` section: ``executor`` is
        ``"local"`` or ``"dask"``; ``address`` a Dask scheduler
        (``tcp://host:port``).
    path : optional
        Override the config's ``output.path``.

    Returns
    -------
    SweepReport
    """
    t0 = time.perf_counter()
    path = Path(path if path is not None else cfg.output.path)
    path.parent.mkdir(parents=True, exist_ok=True)
    overwrite = cfg.output.overwrite if overwrite is None else overwrite
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, (int, np.integer))
                                or workers < 1):
        raise RgftransError(f"workers must be a whole number >= 1, got {workers!r}")
    workers = workers or cfg.cluster.workers
    executor = executor or (cfg.cluster.executor if address is None else "dask")
    address = address or cfg.cluster.address

    if path.suffix.lower() not in (".h5", ".hdf5"):
        raise StoreError(f"{path}: the result file is HDF5; end its name in .h5")

    # Validate the device up front: too big for the machine, a bad geometry at any sweep point -- all fail
    # here, before any file or process exists.
    cfg.estimate(workers).refuse_if_too_big(path)
    cfg.check_geometries()
    model = cfg.build_device(cfg.base_point()).discretise()
    journal = _Journal(path, cfg.config_hash())
    with OutputLock(path):  # one writer per output; a second run is refused with the first one's name
        journal.check_owned()
        _remove_stale_partials(path)
        rf = _open_result(cfg, path, overwrite, journal, model)
        try:
            journal.open()
            _replay(rf, journal)
            done = rf.completed
            points = list(grid_points(cfg))
            todo = [(cfg, idx, pt) for idx, pt in points if not done[idx]]
            n_resumed = len(points) - len(todo)
            from tqdm import tqdm

            bar = tqdm(total=len(points), initial=n_resumed, disable=True if quiet else None, unit="point", dynamic_ncols=True,
                       desc=path.name)
            iterator = (_iterate_dask(todo, workers, address) if executor == "dask"
                        else _iterate_local(todo, workers))
            for index, values, caught in iterator:
                _reissue(caught)
                journal.write(index, values)
                _write(rf, index, values)
                bar.update(1)
            bar.close()
        finally:
            rf.close()
        journal.remove()
    write_electrostatics(cfg, path)
    return SweepReport(path=path, n_points=len(points), n_computed=len(todo), n_resumed=n_resumed,
                       seconds=time.perf_counter() - t0)


def write_electrostatics(cfg: RunConfig, path) -> bool:
    """Store the screened electrostatics of the config's own gate voltages as the group ``electrostatics``.

    Written (replacing an earlier one) when the config screens its gates: the grid, the screened and bare
    potential energy (meV) and the electron density (cm^-2) -- the maps a sweep's first point starts from.
    Returns whether anything was written.
    """
    if cfg.gates is None or cfg.gates.screening != "thomas-fermi":
        return False
    from rgftrans.io.store import StoredArray, write_group

    sol = cfg.screened(cfg.gate_layout().with_voltages(cfg.gates.voltages()))
    hs = sol.structure
    grid = ("y", "x")
    extra = {}
    caps = cfg.capacitances()
    if caps is not None:
        from rgftrans.io.store import StoredGroup

        regions = np.array(caps.region_names, dtype=object)
        gates = np.array(caps.gate_names, dtype=object)
        rg, rr = ("region", "gate"), ("region", "region_2")
        extra["capacitance"] = StoredGroup({
            "region": StoredArray(regions, "", "named 2DEG region ([[gates.region]])", scale=True),
            "region_2": StoredArray(regions, "", "named 2DEG region (columns)", scale=True),
            "gate": StoredArray(gates, "", "gate", scale=True),
            "capacitance_matrix": StoredArray(caps.capacitance_matrix_aF, "aF", "Maxwell capacitance matrix of the "
                                              "regions (C_Sigma on the diagonal, minus the mutual capacitances)",
                                              dims=rr),
            "gate_capacitance": StoredArray(caps.gate_matrix_aF, "aF", "gate capacitance C_g", dims=rg),
            "lever_arm": StoredArray(caps.lever_arms, "1", "lever arm alpha = C^-1 C_g", dims=rg),
            "total_capacitance": StoredArray(caps.total_aF, "aF", "total capacitance C_Sigma", dims=("region",)),
            "remainder": StoredArray(caps.remainder_aF, "aF", "capacitance to the grounded reservoir and surface",
                                     dims=("region",)),
            "quantum_capacitance": StoredArray(caps.quantum_aF, "aF", "quantum capacitance e^2 (dn/dmu) A",
                                               dims=("region",)),
            "charging_energy": StoredArray(caps.charging_energy_meV, "meV", "charging energy e^2 (C^-1)_ii",
                                           dims=("region",)),
            "interaction": StoredArray(caps.interaction_meV, "meV", "charging energies e^2 C^-1", dims=rr),
            "electron_number": StoredArray(caps.electron_number, "1", "electrons in the region", dims=("region",)),
            "closed": StoredArray(caps.closed, "1", "region is a closed island of 2DEG", dims=("region",)),
        }, {"gate_step_V": caps.gate_step_V, "region_step_meV": caps.region_step_meV,
            "model": "constant interaction from the Thomas-Fermi response (rgftrans.electrostatics.capacitance)"})
    if sol.gate_charge_cm2 is not None:
        extra["gate_charge"] = StoredArray(sol.gate_charge_cm2, "cm^-2", "extra electrons on the gates (frozen "
                                           "surface; 0 on the exposed surface)", dims=grid)
    write_group(path, "electrostatics", {
        "x": StoredArray(sol.x_nm, "nm", "x position", scale=True),
        "y": StoredArray(sol.y_nm, "nm", "y position", scale=True),
        "potential": StoredArray(sol.potential_meV, "meV", "screened electron potential energy U (ungated band "
                                                         "bottom = 0)", dims=grid),
        "bare_potential": StoredArray(sol.bare_potential_meV, "meV", "potential energy of the gates alone", dims=grid),
        "density": StoredArray(sol.density_cm2, "cm^-2", "electron density (0: depleted)", dims=grid),
        **extra,
    }, attrs={"model": f"Thomas-Fermi, {hs.surface} surface", "surface": hs.surface,
              "temperature_K": float(hs.temperature_K), "fermi_energy_meV": float(sol.fermi_energy_meV),
              "depth_nm": float(cfg.gates.depth_nm), "density_cm2": float(cfg.material.density_cm2),
              "iterations": int(sol.iterations)}, overwrite=True)
    return True


def _remove_stale_partials(path: Path) -> None:
    """Half-built files of a creation that was killed (``.NAME.PID.partial``): with the lock held, none is live."""
    for stale in path.parent.glob(f".{path.name}.*.partial"):
        stale.unlink(missing_ok=True)
