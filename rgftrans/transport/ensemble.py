"""Disorder ensembles: many Anderson-disorder samples of one device, reusing everything but the onsite values.

A sample of the ensemble is the device with ``Disorder(width_meV, seed)``
for one seed: its transmission equals that of
``dataclasses.replace(device, disorder=Disorder(width_meV, seed)).discretise()``
to round-off, so any sample can be rebuilt and looked at alone
(:meth:`DisorderSampler.model`).  Between samples only the diagonal of the
Hamiltonian changes, so the sampler prepares, once per device and energy set:

* the clean model, its solver choice, and the lead self-energies at every
  energy (the leads are clean);
* for RGF, the dense layer blocks and the positions of every orbital's
  diagonal entry in them; for nested dissection, the tree with its assembly
  values and the positions of the diagonal entries among them;
* the cells of the sites, from which the disorder's documented Philox stream
  is evaluated for all sites at once (:func:`rgftrans.system.fields.uniform_draws`).

A sample then costs one draw, one scatter of the diagonal (O(N)) and the
solve itself; ``scripts/bench`` (part "ensemble") prints the per-sample
overhead as a fraction of the solve.

Statistics (:class:`EnsembleResult`): the mean conductance and its standard
error ``s / sqrt(n)``; the variance ``s^2`` with the standard error of the
sample variance, ``sqrt((m4 - s^4 (n - 3) / (n - 1)) / n)`` with ``m4`` the
fourth central moment (a textbook result, e.g. Kendall & Stuart, The
Advanced Theory of Statistics, vol. 1, from memory; for Gaussian data it is
``s^2 sqrt(2 / (n - 1))``); and ``<ln T>`` with its standard error.
:func:`localisation_length` fits ``<ln T> = c - 2 L / xi`` over ensembles of
several lengths (Anderson localisation: T falls as ``exp(-2 L / xi)`` with
the amplitude localisation length ``xi``; e.g. Beenakker, Rev. Mod. Phys. 69,
731 (1997), from memory).
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from rgftrans.errors import FitFailed, LeadError, PotentialError, ValidityWarning
from rgftrans.leads.embedding import lead_self_energies, warn_thresholds
from rgftrans.system.device import Device, TightBindingModel, check_resolution
from rgftrans.system.fields import Disorder, philox_counters, uniform_draws
from rgftrans.system.inputs import check_energies, check_eta
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S

__all__ = ["DisorderSampler", "EnsembleResult", "disorder_ensemble", "LocalisationFit", "localisation_length",
           "variance_error"]

#: Fewer samples than this earn a warning: the standard error of a variance from fewer samples is itself
#: uncertain by more than about 20 % (its relative error is about sqrt(2 / n) for Gaussian data).
FEW_SAMPLES = 50


class DisorderSampler:
    """The fixed part of a disordered device: everything but the onsite disorder, prepared once.

    Parameters
    ----------
    device : Device
        A two-terminal device whose ``disorder`` gives the width W (meV) of the box distribution; its seed is
        ignored here (each sample names its own).
    energies : float or (n_E,) array_like, meV
    eta : float, meV
        Imaginary part added to the device energies (default 0).
    solver : {"auto", "rgf", "dissection"}
        As for :func:`rgftrans.transport.rgf.transmission`; chosen once for the device.

    Attributes
    ----------
    model : TightBindingModel
        The clean device (no disorder).
    solver : str
        The route every sample takes.
    n_open : (n_E, 2) int ndarray
        Open channels of the two leads at each energy (the leads are clean).
    """

    def __init__(self, device: Device, energies, *, eta: float = 0.0, solver: str = "auto"):
        from rgftrans.system.device import _sites
        from rgftrans.transport.rgf import _choose

        if not isinstance(device, Device):
            raise TypeError(f"a disorder ensemble needs a Device (its lattice cells key the disorder), got "
                            f"{type(device).__name__}")
        if device.disorder is None:
            raise PotentialError("the device has no disorder: give it disorder=Disorder(width_meV=..., seed=...); "
                                 "the width is the ensemble's and the seed its first sample")
        if len(device.leads) != 2:
            raise LeadError(f"a disorder ensemble computes two-terminal transmission; the device has "
                            f"{len(device.leads)} leads (sweep disorder.seed for a multi-terminal device)")
        self.width_meV = float(device.disorder.width_meV)
        self.model = dataclasses.replace(device, disorder=None).discretise()
        self.cells = _sites(device)[0]
        self._counters = philox_counters(self.cells)
        self.energies = check_energies(energies, self.model)
        self.eta = check_eta(eta)
        check_resolution(self.model, self.energies)
        self.solver = _choose(self.model, solver, None).solver
        norbs = self.model.norbs
        self._orbitals = norbs
        if self.solver == "dissection":
            self._prepare_tree()
        else:
            self._prepare_layers()

    # -- preparation ---------------------------------------------------------------------------------------

    def _prepare_layers(self):
        from rgftrans.transport.rgf import ENERGY_CHUNK, _end_terms, layer_blocks

        blocks = layer_blocks(self.model)
        buffers = blocks.buffers
        n = self.model.n_orbitals
        layer_of = blocks.slicing.layer_of_sites(n)
        pos_in = np.empty(n, dtype=np.int64)
        for layer in blocks.slicing.layers:
            pos_in[layer] = np.arange(len(layer))
        self._diag_pos = buffers.h_off[layer_of] + pos_in * (buffers.sizes[layer_of] + 1)
        self._blocks = blocks
        self._clean_diag = buffers.h_flat[self._diag_pos].copy()
        self._work = buffers._replace(h_flat=buffers.h_flat.copy())
        e = self.energies
        self._chunks = [(slice(s, min(s + ENERGY_CHUNK, len(e))),
                         _end_terms(self.model, blocks, e[s:s + ENERGY_CHUNK], self.eta))
                        for s in range(0, len(e), ENERGY_CHUNK)]
        self.n_open = np.concatenate([terms[2] for _, terms in self._chunks])
        self.at_threshold = np.concatenate([terms[3] for _, terms in self._chunks])

    def _prepare_tree(self):
        from rgftrans.transport.dissection import dissection_plan

        plan = dissection_plan(self.model)
        tree = plan.tree
        n = self.model.n_orbitals
        keys = np.arange(n, dtype=np.int64) * (tree.n_orbitals + 1)  # the diagonal entries (i, i)
        sorted_keys = tree.entry_key[tree._key_order]
        at = np.minimum(np.searchsorted(sorted_keys, keys), len(sorted_keys) - 1)
        if not np.array_equal(sorted_keys[at], keys):  # pragma: no cover - every site's own block is assembled
            raise RuntimeError("the dissection tree lacks a diagonal entry; use solver='rgf'")
        self._diag_pos = tree._key_order[at]
        self._plan = plan
        self._clean_diag = plan.entry_val[self._diag_pos].copy()
        self._work = dataclasses.replace(plan, entry_val=plan.entry_val.copy())
        self._lead_terms = [lead_self_energies(self.model, e, warn=False) for e in self.energies]
        self.n_open = np.array([[m.n_open for m in modes] for _, modes in self._lead_terms], dtype=np.int64)
        self.at_threshold = np.array([any(m.at_threshold for m in modes) for _, modes in self._lead_terms])

    # -- samples -------------------------------------------------------------------------------------------

    def onsite(self, seed: int, width_meV: float | None = None) -> np.ndarray:
        """The disorder (meV) of every site of sample ``seed``: ``Disorder(W, seed).values`` at the device's cells."""
        width = self.width_meV if width_meV is None else float(width_meV)
        Disorder(width, seed)  # validates the seed and the width with their one-line messages
        return width * (uniform_draws(seed, self._counters) - 0.5)

    def model_of(self, seed: int, width_meV: float | None = None) -> TightBindingModel:
        """Sample ``seed`` as a model of its own (for maps, LDOS or a check); built on demand, not cached."""
        return self._model_with(np.repeat(self.onsite(seed, width_meV), self._orbitals))

    def _model_with(self, values: np.ndarray) -> TightBindingModel:
        """The clean model plus the onsite energies ``values`` (meV, one per orbital)."""
        return dataclasses.replace(self.model, hamiltonian=self.model.hamiltonian + sp.diags(values, format="csr"))

    def transmission(self, seed: int, width_meV: float | None = None) -> np.ndarray:
        """T(E) of sample ``seed`` at the sampler's energies (per spin for a spinless device), (n_E,)."""
        return self.transmission_of(self.onsite(seed, width_meV))

    def transmission_of(self, onsite_meV: np.ndarray) -> np.ndarray:
        """T(E) of the device with the given extra onsite energy per site (meV, (n_sites,)), (n_E,).

        The solve alone: what :meth:`transmission` does after drawing the disorder.
        """
        onsite_meV = np.asarray(onsite_meV, dtype=float)
        if onsite_meV.shape != (self.model.n_sites,) or not np.all(np.isfinite(onsite_meV)):
            raise PotentialError(f"give one finite onsite energy (meV) per site, {self.model.n_sites} of them; got "
                                 f"shape {onsite_meV.shape}")
        values = np.repeat(onsite_meV, self._orbitals)
        lazy = {}

        def fallback(energy):  # the rare energy where the recursion or the tree broke down: the sample alone
            from rgftrans.transport.rgf import _direct_fallback

            if "model" not in lazy:
                lazy["model"] = self._model_with(values)
            return _direct_fallback(lazy["model"], energy, self.eta)

        if self.solver == "dissection":
            return self._tree_transmission(values, fallback)
        from rgftrans.transport.rgf import _two_terminal_chunk

        self._work.h_flat[self._diag_pos] = self._clean_diag + values
        out = np.empty(len(self.energies))
        for chunk, terms in self._chunks:
            out[chunk] = _two_terminal_chunk(self.model, self._blocks, self.energies[chunk], self.eta, terms=terms,
                                             layers=self._work, fallback=fallback)[0]
        return out

    def _tree_transmission(self, values, fallback):
        from rgftrans.transport.dissection import dissection_solve

        self._work.entry_val[self._diag_pos] = self._clean_diag - values  # the plan holds -H
        res = dissection_solve(self.model, self.energies, self.eta, plan=self._work, lead_terms=self._lead_terms)
        out = res.matrix[:, 1, 0].copy()
        for k in np.flatnonzero(~res.trusted):
            out[k] = fallback(self.energies[k])
        return out


@dataclass(frozen=True, eq=False)
class EnsembleResult:
    """Transmission of a disorder ensemble, sample by sample, with its statistics.

    Attributes
    ----------
    energies : (n_E,) float ndarray, meV
    seeds : (n_S,) int ndarray
        The disorder seed of each sample (sample k is ``Disorder(width_meV, seeds[k])``).
    width_meV : float, meV
        Full width W of the box distribution.
    transmission : (n_S, n_E) float ndarray
        T per spin for a spinless device, both spins counted with explicit spin orbitals.
    n_open : (n_E, 2) int ndarray
        Open channels of the two (clean) leads.
    spin_degeneracy : {1, 2}
    solver : str
        "rgf" or "dissection", the route of every sample.
    lead_names : tuple of str
    """

    energies: np.ndarray
    seeds: np.ndarray
    width_meV: float
    transmission: np.ndarray
    n_open: np.ndarray
    spin_degeneracy: int
    solver: str
    lead_names: tuple

    @property
    def n_samples(self) -> int:
        return len(self.seeds)

    @property
    def conductance_g0(self) -> np.ndarray:
        """Conductance of each sample in units of 2e^2/h, (n_S, n_E): ``(g_s / 2) T`` (Landauer-Büttiker)."""
        return 0.5 * self.spin_degeneracy * self.transmission

    @property
    def conductance_S(self) -> np.ndarray:
        """Conductance of each sample in siemens, (n_S, n_E)."""
        return self.conductance_g0 * CONDUCTANCE_QUANTUM_S

    @property
    def mean_g0(self) -> np.ndarray:
        """Ensemble mean conductance <G> in units of 2e^2/h, (n_E,)."""
        return self.conductance_g0.mean(axis=0)

    @property
    def mean_error_g0(self) -> np.ndarray:
        """Standard error of the mean conductance, 2e^2/h: ``s / sqrt(n)``, (n_E,)."""
        return self.conductance_g0.std(axis=0, ddof=1) / np.sqrt(self.n_samples)

    @property
    def variance_g0(self) -> np.ndarray:
        """Ensemble variance var(G) in units of (2e^2/h)^2 (unbiased sample variance), (n_E,)."""
        return self.conductance_g0.var(axis=0, ddof=1)

    @property
    def variance_error_g0(self) -> np.ndarray:
        """Standard error of :attr:`variance_g0`, (2e^2/h)^2 (:func:`variance_error`), (n_E,)."""
        return variance_error(self.conductance_g0)

    @property
    def mean_log_transmission(self) -> np.ndarray:
        """<ln T> over the samples (T as in :attr:`transmission`), (n_E,); -inf where a sample has T = 0."""
        with np.errstate(divide="ignore"):
            return np.log(self.transmission).mean(axis=0)

    @property
    def mean_log_error(self) -> np.ndarray:
        """Standard error of <ln T>, (n_E,)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log(self.transmission).std(axis=0, ddof=1) / np.sqrt(self.n_samples)

    @property
    def regime(self) -> np.ndarray:
        """Transport regime at each energy from the mean transmission per spin <T> and the channels N, (n_E,) str.

        "localised" where exp<ln T> < 1/e (typical T below one channel's worth, set by the longest
        localisation length); "quasi-ballistic" where <T> > N/2 (most channels get through); "diffusive" in
        between -- where the universal conductance fluctuations apply (1 << <T> << N).  Thresholds are common
        practice, no source; the words are a guide, the numbers are in the result.
        """
        spins = 2.0 if self.spin_degeneracy == 1 else 1.0  # explicit spin orbitals count both spins
        per_spin = self.transmission / spins
        with np.errstate(divide="ignore"):
            typical = np.exp(np.log(per_spin).mean(axis=0))
        n = self.n_open.min(axis=1) / spins
        out = np.full(len(self.energies), "diffusive", dtype=object)
        out[per_spin.mean(axis=0) > 0.5 * n] = "quasi-ballistic"
        out[typical < np.exp(-1.0)] = "localised"
        return out

    def summary(self) -> str:
        """One line per energy: <G> and var(G) with their standard errors in 2e^2/h units, and the regime."""
        lines = [f"{self.n_samples} samples of W = {self.width_meV:.4g} meV box disorder ({self.solver}); "
                 "coherent single-particle transport (Landauer), no charging energy"]
        rows = zip(self.energies, self.mean_g0, self.mean_error_g0, self.variance_g0, self.variance_error_g0,
                   self.n_open[:, 0], self.regime)
        for e, mean, mean_err, var, var_err, n, regime in rows:
            lines.append(f"  E = {e:.6g} meV: <G> = {mean:.4f} +- {mean_err:.4f} 2e^2/h, "
                         f"var G = {var:.4f} +- {var_err:.4f} (2e^2/h)^2, {n} channel(s), {regime}")
        return "\n".join(lines)


def variance_error(samples: np.ndarray) -> np.ndarray:
    """Standard error of the unbiased sample variance along axis 0.

    ``sqrt((m4 - s^4 (n - 3) / (n - 1)) / n)`` with ``m4`` the fourth central moment and ``s^2`` the sample
    variance (Kendall & Stuart, from memory); for Gaussian samples it tends to ``s^2 sqrt(2 / (n - 1))``.
    """
    x = np.asarray(samples, dtype=float)
    n = x.shape[0]
    if n < 4:
        return np.full(x.shape[1:], np.nan)
    d = x - x.mean(axis=0)
    s2 = (d**2).sum(axis=0) / (n - 1)
    m4 = (d**4).mean(axis=0)
    return np.sqrt(np.maximum(m4 - s2**2 * (n - 3) / (n - 1), 0.0) / n)


def disorder_ensemble(device: Device, energies, *, samples: int | None = None, seeds=None, eta: float = 0.0,
                      solver: str = "auto", width_meV: float | None = None, progress: bool = False,
                      sampler: DisorderSampler | None = None, workers: int = 1) -> EnsembleResult:
    """Transmission of many disorder samples of one device, and their statistics.

    Parameters
    ----------
    device : Device
        Two leads and ``disorder=Disorder(width_meV, seed)``: the width of the ensemble and its first seed.
    energies : float or (n_E,) array_like, meV
    samples : int, optional
        Number of samples, seeds ``seed, seed + 1, ...`` from the device's disorder seed.
    seeds : sequence of int, optional
        The seeds themselves (instead of ``samples``).
    width_meV : float, optional
        Another width W (meV) than the device's, with the same draws scaled (a sweep of W reuses the sampler).
    solver : {"auto", "rgf", "dissection"}
    progress : bool
        Show a progress bar (tqdm) over the samples.
    sampler : DisorderSampler, optional
        A prepared sampler of this device and these energies (e.g. to sweep W without preparing again).
    workers : int
        Local processes (default 1): this one takes the first share of the seeds, ``workers - 1`` spawned
        processes (one BLAS thread each) prepare a sampler of their own and take the rest.  The samples are
        the same as with one process, bit for bit.  The device must be picklable (no lambda potentials).

    Returns
    -------
    EnsembleResult
    """
    if (samples is None) == (seeds is None):
        raise ValueError("give either samples=N (seeds from the device's disorder seed on) or seeds=[...]")
    if sampler is None:
        sampler = DisorderSampler(device, energies, eta=eta, solver=solver)
    if seeds is None:
        if isinstance(samples, (bool, np.bool_)) or not isinstance(samples, (int, np.integer)) or samples < 2:
            raise ValueError(f"samples must be a whole number >= 2, got {samples!r}; e.g. samples = 200")
        seeds = device.disorder.seed + np.arange(samples)
    seeds = np.asarray(seeds)
    if seeds.ndim != 1 or len(seeds) < 2 or not np.issubdtype(seeds.dtype, np.integer):
        raise ValueError(f"seeds must be two or more whole numbers, got {seeds!r}")
    if len(seeds) < FEW_SAMPLES:
        warnings.warn(f"{len(seeds)} disorder samples: the standard errors of the variance (and of <ln T>) are "
                      f"themselves uncertain by about sqrt(2/n) = {np.sqrt(2 / len(seeds)):.0%}; use "
                      f">= {FEW_SAMPLES} samples", ValidityWarning, stacklevel=2)
    if isinstance(workers, (bool, np.bool_)) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ValueError(f"workers must be a whole number >= 1, got {workers!r}")
    shares = np.array_split(seeds, min(int(workers), len(seeds)))
    loop = shares[0]
    if progress:
        from tqdm import tqdm

        loop = tqdm(loop, desc="disorder samples" + (" (this process's share)" if len(shares) > 1 else ""),
                    unit="sample")
    if len(shares) > 1:
        parts = _in_processes(device, sampler, width_meV, shares, loop)
    else:
        parts = [[sampler.transmission(int(s), width_meV) for s in loop]]
    trans = np.concatenate([np.reshape(p, (-1, len(sampler.energies))) for p in parts])
    warn_thresholds(sampler.energies, sampler.at_threshold)
    return EnsembleResult(energies=sampler.energies, seeds=seeds.astype(np.int64),
                          width_meV=sampler.width_meV if width_meV is None else float(width_meV),
                          transmission=trans, n_open=sampler.n_open, spin_degeneracy=sampler.model.spin_degeneracy,
                          solver=sampler.solver, lead_names=tuple(lead.name for lead in sampler.model.leads))


def _in_processes(device, sampler, width_meV, shares, first):
    """T of every share of seeds: the first here (iterating ``first``), the others in spawned processes."""
    import multiprocessing
    import pickle
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    from rgftrans._processes import OneBlasThread
    from rgftrans.errors import ComputationFailed

    try:
        pickle.dumps(device)
    except (pickle.PicklingError, AttributeError, TypeError) as err:
        raise ValueError(f"the device cannot be sent to worker processes ({err}); give its potential as a "
                         "module-level function or an array-backed potential, or use workers=1") from None
    task = dict(energies=sampler.energies, eta=sampler.eta, solver=sampler.solver, width_meV=width_meV)
    with OneBlasThread(), ProcessPoolExecutor(max_workers=len(shares) - 1,
                                              mp_context=multiprocessing.get_context("spawn")) as pool:
        futures = [pool.submit(_share, device, share, **task) for share in shares[1:]]
        here = [sampler.transmission(int(s), width_meV) for s in first]
        try:
            return [here] + [f.result() for f in futures]
        except BrokenProcessPool:
            raise ComputationFailed("a worker process of the ensemble died (out of memory, or killed); "
                                    "rerun with fewer workers") from None


def _share(device, seeds, *, energies, eta, solver, width_meV):
    """A worker's share of an ensemble: its own sampler (warnings already given by the parent's), then T."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sampler = DisorderSampler(device, energies, eta=eta, solver=solver)
    return [sampler.transmission(int(s), width_meV) for s in seeds]


@dataclass(frozen=True)
class LocalisationFit:
    """``<ln T> = c - 2 L / xi`` fitted over device lengths, at each energy.

    Attributes
    ----------
    energies : (n_E,) float ndarray, meV
    lengths_nm : (n_L,) float ndarray, nm
    mean_log : (n_L, n_E) float ndarray
        <ln T> of each ensemble.
    mean_log_error : (n_L, n_E) float ndarray
    xi_nm, xi_error_nm : (n_E,) float ndarray, nm
        The localisation length and its standard error (from the fit's covariance, scaled by the reduced
        chi-square when that exceeds one).
    intercept : (n_E,) float ndarray
    reduced_chi2 : (n_E,) float ndarray
    """

    energies: np.ndarray
    lengths_nm: np.ndarray
    mean_log: np.ndarray
    mean_log_error: np.ndarray
    xi_nm: np.ndarray
    xi_error_nm: np.ndarray
    intercept: np.ndarray
    reduced_chi2: np.ndarray


def localisation_length(lengths_nm, results) -> LocalisationFit:
    """Fit the localisation length from ensembles of the same cross-section at several lengths.

    Parameters
    ----------
    lengths_nm : (n_L,) array_like, nm
        The length of each device along the transport direction.
    results : sequence of EnsembleResult
        One ensemble per length, all at the same energies.

    Raises
    ------
    FitFailed
        Fewer than three lengths, a sample with T = 0, a slope that does not show decay at two standard
        errors, or a fitted xi longer than the longest device (in both cases the devices are not localised:
        make them longer or the disorder stronger).
    """
    lengths = np.asarray(lengths_nm, dtype=float)
    if lengths.ndim != 1 or len(lengths) != len(results):
        raise ValueError(f"give one length per ensemble: {len(lengths)} lengths for {len(results)} ensembles")
    if len(lengths) < 3:
        raise FitFailed(f"a localisation length needs ensembles at three or more lengths, got {len(lengths)}")
    energies = results[0].energies
    if any(len(r.energies) != len(energies) or not np.allclose(r.energies, energies) for r in results):
        raise ValueError("the ensembles are at different energies; compute them at the same energies")
    mean = np.array([r.mean_log_transmission for r in results])
    err = np.array([r.mean_log_error for r in results])
    if not np.all(np.isfinite(mean)) or not np.all(np.isfinite(err)) or np.any(err <= 0):
        raise FitFailed("a sample has T = 0 or an ensemble has no spread in ln T; <ln T> cannot be fitted "
                        "(use more samples, or energies inside the leads' bands)")
    design = np.column_stack([np.ones_like(lengths), lengths])
    n_e = len(energies)
    slope, slope_err, intercept, chi2 = (np.empty(n_e) for _ in range(4))
    for k in range(n_e):
        w = 1.0 / err[:, k]
        coef, *_ = np.linalg.lstsq(design * w[:, None], mean[:, k] * w, rcond=None)
        cov = np.linalg.inv((design * w[:, None]).T @ (design * w[:, None]))
        resid = (mean[:, k] - design @ coef) * w
        dof = max(len(lengths) - 2, 1)
        chi2[k] = float(resid @ resid) / dof
        scale = max(chi2[k], 1.0)
        intercept[k], slope[k] = coef
        slope_err[k] = np.sqrt(cov[1, 1] * scale)
    decaying = slope < -2 * slope_err
    if not np.all(decaying):
        bad = energies[~decaying]
        raise FitFailed(f"<ln T> does not fall with length at E = {', '.join(f'{e:.6g}' for e in bad)} meV "
                        f"(slope {slope[~decaying][0]:.3g} +- {slope_err[~decaying][0]:.2g} per nm): the devices "
                        "are not localised; make them longer or the disorder stronger")
    xi = -2.0 / slope
    xi_err = 2.0 * slope_err / slope**2
    short = xi > lengths.max()
    if np.any(short):
        k = int(np.flatnonzero(short)[0])
        raise FitFailed(f"the fitted localisation length {xi[k]:.4g} nm at E = {energies[k]:.6g} meV exceeds the "
                        f"longest device ({lengths.max():.4g} nm): the devices are not localised and <ln T> is not "
                        "yet linear in L; make them longer than xi or the disorder stronger")
    return LocalisationFit(energies=energies, lengths_nm=lengths, mean_log=mean, mean_log_error=err, xi_nm=xi,
                           xi_error_nm=xi_err, intercept=intercept, reduced_chi2=chi2)
