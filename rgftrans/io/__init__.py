"""Files: run configs, result files, sweeps over configs, measured traces and their fits.

The TOML configs (:func:`load_config`, the waveguide schema), the HDF5 result
layout (:mod:`rgftrans.io.store`: every write goes through it), sweeps of a
config into a result file on local processes or Dask (:func:`run_sweep`),
searches of stored sweeps for dark states, CSV export, and comparison of a
stored sweep with a measured trace.  Builds on ``analysis``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "PARAMETER_UNITS": "compare",
    "MAX_REDUCED_CHI_SQUARE": "compare",
    "MAX_RESIDUAL_SPREAD": "compare",
    "FitProblem": "compare",
    "MeasuredTrace": "compare",
    "TraceFit": "compare",
    "argument_names": "compare",
    "add_series_resistance": "compare",
    "fit_trace": "compare",
    "model_conductance": "compare",
    "read_fit": "compare",
    "read_trace": "compare",
    "remove_series_resistance": "compare",
    "Axis": "store",
    "Parameter": "config",
    "RunConfig": "config",
    "load_config": "config",
    "parse_config": "config",
    "validate_config": "config",
    "SweepSearch": "searches",
    "search_sweep": "searches",
    "write_search": "searches",
    "stored_energy_window": "searches",
    "stored_plane_builder": "searches",
    "single_channel_energies": "searches",
    "search_sweep_plane": "searches",
    "write_grid_search": "searches",
    "FORMAT_NAME": "store",
    "SCHEMA_VERSION": "store",
    "QuantitySpec": "store",
    "ResultData": "store",
    "ResultFile": "store",
    "OutputLock": "store",
    "dataset_name": "store",
    "is_own_file": "store",
    "lock_owner": "store",
    "printable": "store",
    "read_result": "store",
    "summary": "store",
    "validate": "store",
    "SweepReport": "sweeps",
    "run_sweep": "sweeps",
    "compute_point": "sweeps",
    "grid_points": "sweeps",
    "axis_dataset_name": "sweeps",
    "sweep_temperatures": "sweeps",
    "stored_conductance": "sweeps",
    "Table": "tables",
    "quantity_table": "tables",
    "MIN_TRACE_POINTS": "traces",
    "WaveguideConfig": "waveguide_config",
    "WaveguideRun": "waveguide_config",
    "load_waveguide": "waveguide_config",
    "parse_waveguide": "waveguide_config",
    "is_waveguide_config": "waveguide_config",
    "run_waveguide": "waveguide_config",
    "write_waveguide": "waveguide_config",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
