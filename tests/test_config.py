"""Tests of rgftrans.io.config: the demo configs load, malformed configs fail with one-line
messages that name the key and the value, and the builders give the right devices."""

from __future__ import annotations

import pickle
import os
import re
from pathlib import Path

import gdstk
import numpy as np
import pytest
import tomllib
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rgftrans.io.config import RunConfig, load_config, parse_config, validate_config
from rgftrans.errors import ConfigError
from rgftrans.system.device import Device
from rgftrans.electrostatics.gates import GateLayout

CONFIGS = Path(__file__).resolve().parent.parent / "configs"

#: E_F = pi hbar^2 n / m* of a spin-degenerate GaAs 2DEG at n = 2e11 cm^-2 (J. H. Davies, The Physics of
#: Low-Dimensional Semiconductors, CUP 1998, from memory), with m* = 0.067 m_e (I. Vurgaftman, J. R. Meyer,
#: L. R. Ram-Mohan, J. Appl. Phys. 89, 5815 (2001), from memory) and CODATA constants from scipy.constants:
#: 7.145917 meV is our own evaluation (same value as in tests/test_materials.py).
E_F_GAAS_2E11_MEV = 7.145917
#: The value is quoted to 7 significant digits (rounding <= 7e-8 relative); 1e-6 relative is that plus margin.
E_F_RTOL = 1e-6

#: configs/gated_dot.toml in the schema's sweep form: its old [sweep] table (gate, start_V, stop_V,
#: points, temperatures_K) becomes a [temperature] table, an [energy] window around E_F and one
#: [[sweep.axis]].  Spacing 4 meV / 1200 = 3.3 ueV = kT/2.6 at 0.1 K; the window covers E_F +- 23 kT at 1 K.
def demo_text(path: Path) -> str:
    """The demo's TOML text."""
    return path.read_text()


# A small valid config, section by section; tests replace or drop sections.
BASE = {
    "lattice": '[lattice]\nkind = "square"\nspacing_nm = 4.0\n',
    "geometry": "[geometry]\nrectangle_nm = [0.0, 0.0, 40.0, 20.0]\n",
    "leads": '[[leads]]\nname = "source"\nside = "left"\nspan_nm = [0.0, 20.0]\n\n'
             '[[leads]]\nname = "drain"\nside = "right"\nspan_nm = [0.0, 20.0]\n',
    "energy": "[energy]\nstart_meV = 1.0\nstop_meV = 5.0\npoints = 5\n",
}

GATES = """
[gates]
depth_nm = 50.0

[[gates.gate]]
name = "plunger"
rectangle_nm = [15.0, 25.0, 25.0, 60.0]
voltage_V = -0.05
"""


def toml(**sections: str | None) -> str:
    """BASE with some sections replaced (None drops one) and others added."""
    merged = {**BASE, **sections}
    return "\n".join(text for text in merged.values() if text)


def axis(parameter: str, rest: str = "values = [0.0, 1.0]") -> str:
    return f'[[sweep.axis]]\nparameter = "{parameter}"\n{rest}\n'


# --- the demo configs ----------------------------------------------------------------------------


@pytest.mark.parametrize("path", sorted(p for p in CONFIGS.glob("*.toml") if "[waveguide]" not in p.read_text()),
                         ids=lambda p: p.name)
def test_demo_config_loads_and_discretises(path):
    config = parse_config(demo_text(path), source=str(path), base_dir=path.parent)
    assert isinstance(config, RunConfig)
    assert config.output.path == f"out/{path.stem}.h5"
    energies = config.energies()
    assert energies.ndim == 1 and energies.size >= 1 and np.all(np.diff(energies) > 0)
    model = config.build_device().discretise()
    assert model.n_sites > 0
    assert [lead.name for lead in model.leads] == [lead.name for lead in config.leads]


@pytest.mark.parametrize("path", sorted(p for p in CONFIGS.glob("*.toml") if "[waveguide]" in p.read_text()),
                         ids=lambda p: p.name)
def test_demo_waveguide_config_loads_and_discretises(path):
    from rgftrans.io.waveguide_config import load_waveguide

    config, _ = load_waveguide(path)
    assert config.output.path == f"out/{path.stem}.h5"
    pm = config.build().discretise()
    assert pm.model.n_sites > 0 and len(pm.model.leads) == len(config.waveguide.port)


def test_demo_files_load_from_disk():
    for path in sorted(CONFIGS.glob("*.toml")):
        if "[waveguide]" in path.read_text():
            with pytest.raises(ConfigError, match="unknown key 'waveguide'"):  # the CLI points to `waveguide`
                load_config(path)
        else:
            assert load_config(path).source == str(path)


def test_gated_demo_new_form_sweeps_the_plunger_around_the_fermi_energy():
    path = CONFIGS / "gated_dot.toml"
    config = parse_config(demo_text(path), source=str(path))
    (plunger,) = config.axes()
    assert plunger.parameter == "gates.plunger.voltage_V" and plunger.name == "gates__plunger__voltage_V"
    assert plunger.units == "V" and "plunger" in plunger.long_name
    np.testing.assert_allclose(plunger.values, np.linspace(-0.75, -0.45, 41))
    np.testing.assert_allclose(config.temperatures(), [0.1, 1.0])
    e_f = config.fermi_energy_meV
    energies = config.energies()
    np.testing.assert_allclose(energies[[0, -1]], [e_f - 1.81, e_f + 1.81], rtol=1e-12)
    # Composite grid: fine around E_F (kT/2 at 0.1 K is 4.3 ueV, k_B from scipy.constants), coarse outside.
    fine = np.abs(energies - e_f) < 0.18
    assert np.diff(energies[fine]).max() < 0.5 * 8.617333e-3
    assert np.diff(energies).max() < 0.5 * 8.617333e-2


def test_energy_ranges_merge_and_exclude_other_grids():
    config = parse_config(toml(energy="[energy]\n[[energy.range]]\nstart_meV = 1.0\nstop_meV = 3.0\npoints = 3\n"
                                      "[[energy.range]]\nstart_meV = 1.5\nstop_meV = 2.0\npoints = 2\n"))
    np.testing.assert_allclose(config.energies(), [1.0, 1.5, 2.0, 3.0])
    with pytest.raises(ConfigError, match="two energy grids") as err:
        parse_config(toml(energy="[energy]\nstart_meV = 1.0\n[[energy.range]]\nstart_meV = 1.0\nstop_meV = 3.0\n"
                                 "points = 3\n"))
    assert "\n" not in str(err.value)


# --- malformed configs ---------------------------------------------------------------------------

BAD = [
    # (id, TOML, expected substring of the message after "bad.toml: ")
    ("negative spacing", toml(lattice='[lattice]\nkind = "square"\nspacing_nm = -4.0\n'),
     "lattice.spacing_nm: must be > 0, got -4.0"),
    ("spacing as string", toml(lattice='[lattice]\nkind = "square"\nspacing_nm = "4.0"\n'),
     "lattice.spacing_nm: must be a number, got '4.0'"),
    ("unknown lattice kind", toml(lattice='[lattice]\nkind = "hexagonal"\nspacing_nm = 4.0\n'),
     "lattice.kind: must be one of 'square', 'honeycomb' or 'triangular', got 'hexagonal'"),
    ("honeycomb without hopping", toml(lattice='[lattice]\nkind = "honeycomb"\nspacing_nm = 0.142\n'),
     "lattice.hopping_meV: the honeycomb lattice has no effective-mass hopping, got none"),
    ("section not a table", toml(lattice="lattice = 4.0\n"),
     "lattice: must be a table, got 4.0"),
    ("zero energy points", toml(energy="[energy]\nstart_meV = 1.0\nstop_meV = 5.0\npoints = 0\n"),
     "energy.points: must be >= 1, got 0"),
    ("float energy points", toml(energy="[energy]\nstart_meV = 1.0\nstop_meV = 5.0\npoints = 5.0\n"),
     "energy.points: must be an integer, got 5.0"),
    ("nan energy", toml(energy="[energy]\nstart_meV = nan\nstop_meV = 5.0\npoints = 5\n"),
     "energy.start_meV: must be finite, got nan"),
    ("infinite energy", toml(energy="[energy]\nstart_meV = 1.0\nstop_meV = inf\npoints = 5\n"),
     "energy.stop_meV: must be finite, got inf"),
    ("two energy grids", toml(energy="[energy]\nvalues_meV = [1.0]\nstart_meV = 1.0\n"),
     "energy: two energy grids, got values_meV and start_meV"),
    ("incomplete energy grid", toml(energy="[energy]\nstart_meV = 1.0\nstop_meV = 5.0\n"),
     "energy.points: incomplete energy grid, got start_meV, stop_meV; add points"),
    ("unsorted energies", toml(energy="[energy]\nvalues_meV = [1.0, 3.0, 2.0]\n"),
     "energy.values_meV[2]: energies must increase strictly, got 3.0 then 2.0"),
    ("missing geometry", toml(geometry=None), "geometry: missing required section [geometry], got nothing"),
    ("missing leads", toml(leads=None), "leads: missing required section [leads], got nothing"),
    ("missing energy", toml(energy=None), "energy: missing required section [energy], got nothing"),
    ("two base shapes", toml(geometry="[geometry]\nrectangle_nm = [0.0, 0.0, 40.0, 20.0]\ndisk_nm = [0.0, 0.0, 5.0]\n"),
     "geometry: more than one shape, got rectangle_nm and disk_nm; give exactly one base shape"),
    ("rectangle of three numbers", toml(geometry="[geometry]\nrectangle_nm = [0.0, 0.0, 40.0]\n"),
     "geometry.rectangle_nm: needs exactly 4 item(s), got [0.0, 0.0, 40.0]"),
    ("flat rectangle", toml(geometry="[geometry]\nrectangle_nm = [0.0, 0.0, 0.0, 20.0]\n"),
     "geometry.rectangle_nm: rectangle has zero width: x0 = x1 = 0 nm, got [0.0, 0.0, 0.0, 20.0]; "
     "give two different x coordinates"),
    ("self-crossing polygon",
     toml(geometry="[geometry]\npolygon_nm = [[0.0, 0.0], [40.0, 20.0], [40.0, 0.0], [0.0, 20.0]]\n"),
     "geometry.polygon_nm: polygon outline crosses itself"),
    ("negative disk radius", toml(geometry="[geometry]\nrectangle_nm = [0.0, 0.0, 40.0, 20.0]\n"
                                  "[[geometry.remove]]\ndisk_nm = [20.0, 10.0, -5.0]\n"),
     "geometry.remove[0].disk_nm: disk radius must be positive, got -5 nm"),
    ("hole removes everything", toml(geometry="[geometry]\nrectangle_nm = [0.0, 0.0, 40.0, 20.0]\n"
                                     "[[geometry.remove]]\nrectangle_nm = [-1.0, -1.0, 41.0, 21.0]\n"),
     "geometry.remove[0]: the shape removes the whole device"),
    ("bad lead side", toml(leads='[[leads]]\nname = "source"\nside = "up"\nspan_nm = [0.0, 20.0]\n'),
     "leads[0].side: must be one of 'left', 'right', 'bottom' or 'top', got 'up'"),
    ("duplicate lead names", toml(leads='[[leads]]\nname = "source"\nside = "left"\nspan_nm = [0.0, 20.0]\n'
                                  '[[leads]]\nname = "source"\nside = "right"\nspan_nm = [0.0, 20.0]\n'),
     "leads[1].name: duplicate lead name, got 'source'"),
    ("reversed lead span", toml(leads='[[leads]]\nname = "source"\nside = "left"\nspan_nm = [20.0, 0.0]\n'),
     "leads[0].span_nm: span must be [lo, hi] with lo < hi, got [20.0, 0.0]"),
    ("lead misses device", toml(leads='[[leads]]\nname = "source"\nside = "left"\nspan_nm = [30.0, 50.0]\n'),
     "leads[0].span_nm: the lead misses the device, got [30.0, 50.0]; the device covers y = [0, 20] nm, so move the span into that range"),
    ("lead name with a space", toml(leads='[[leads]]\nname = "the source"\nside = "left"\nspan_nm = [0.0, 20.0]\n'),
     "leads[0].name: must start with a letter and hold only letters, digits, '_' and '-', got 'the source'"),
    ("leads as a single table", toml(leads='[leads]\nname = "source"\nside = "left"\nspan_nm = [0.0, 20.0]\n'),
     "leads: must be an array, got {name = 'source'"),
    ("lead span of one number", toml(leads='[[leads]]\nname = "source"\nside = "left"\nspan_nm = [0.0]\n'),
     "leads[0].span_nm: needs exactly 2 item(s), got [0.0]"),
    ("negative temperature", toml(temperature="[temperature]\nkelvin = [0.1, -1.0]\n"),
     "temperature.kelvin[1]: must be >= 0, got -1.0"),
    ("duplicate gate names", toml(gates=GATES + '[[gates.gate]]\nname = "plunger"\n'
                                  'rectangle_nm = [0.0, 25.0, 5.0, 60.0]\nvoltage_V = -0.05\n'),
     "gates.gate[1].name: duplicate gate name, got 'plunger'"),
    ("gate without voltage", toml(gates='[gates]\ndepth_nm = 50.0\n[[gates.gate]]\nname = "g"\n'
                                  'rectangle_nm = [0.0, 25.0, 5.0, 60.0]\n'),
     "gates.gate[0].voltage_V: missing required key 'voltage_V', got nothing"),
    ("negative gate depth", toml(gates=GATES.replace("depth_nm = 50.0", "depth_nm = -50.0")),
     "gates.depth_nm: must be > 0, got -50.0"),
    ("sweep of unknown gate", toml(gates=GATES, sweep=axis("gates.plungr.voltage_V")),
     "sweep.axis[0].parameter: unknown sweep parameter, got 'gates.plungr.voltage_V'; "
     "did you mean 'gates.plunger.voltage_V'?"),
    ("sweep of unknown parameter", toml(gates=GATES, sweep=axis("temperature")),
     "sweep.axis[0].parameter: unknown sweep parameter, got 'temperature'; allowed here: field.tesla, field.flux_per_cell, "
     "potential.constant_meV, spin.rashba_meV_nm, disorder.width_meV, disorder.seed, gates.plunger.voltage_V, "
     "leads.source.potential_meV, leads.source.offset_nm, leads.drain.potential_meV, leads.drain.offset_nm"),
    ("sweep axis with two forms", toml(sweep=axis("field.tesla", "values = [0.0]\nstart = 0.0\n")),
     "sweep.axis[0]: two ways to give the values, got values and start"),
    ("sweep axis with zero points", toml(sweep=axis("field.tesla", "start = 0.0\nstop = 1.0\npoints = 0\n")),
     "sweep.axis[0].points: must be >= 1, got 0"),
    ("parameter swept twice", toml(sweep=axis("field.tesla") + axis("field.tesla", "values = [2.0]")),
     "sweep.axis[1].parameter: parameter swept twice, got 'field.tesla'"),
    ("fractional seeds", toml(sweep=axis("disorder.seed", "values = [1.0, 1.5]")),
     "sweep.axis[0].values: disorder.seed must be a whole number >= 0, got 1.5"),
    ("rashba sweep without spin", toml(sweep=axis("spin.rashba_meV_nm", "values = [0.0, 10.0]")),
     "sweep.axis[0].values: Rashba coupling needs spin, got spin.rashba_meV_nm = 10.0"),
    ("old sweep form", toml(gates=GATES, sweep='[sweep]\ngate = "plunger"\nstart_V = -0.1\nstop_V = 0.0\n'
                                                'points = 3\n'),
     "sweep.gate: unknown key 'gate'; a sweep is a list of [[sweep.axis]] tables"),
    ("rashba without spin", toml(spin="[spin]\nrashba_meV_nm = 5.0\n"),
     "spin.rashba_meV_nm: Rashba coupling needs spin, got 5.0 with enabled = false; set enabled = true"),
    ("fermi offsets without density",
     toml(energy="[energy]\nrelative_to_fermi = true\nvalues_meV = [0.0]\n"),
     "energy.relative_to_fermi: energies relative to the Fermi energy need a density, got no material.density_cm2"),
    ("misspelled material", toml(material='[material]\nname = "GaAz"\n'),
     "material.name: unknown material, got 'GaAz'; did you mean 'GaAs'?"),
    ("incomplete custom material", toml(material='[material]\nname = "AlGaAs"\nm_eff = 0.08\n'),
     "material.g_factor: a custom material needs m_eff, g_factor and eps_r, got only m_eff; add g_factor, eps_r"),
    ("preset with explicit values", toml(material='[material]\nname = "gaas"\nm_eff = 0.063\n'),
     "material.name: 'GaAs' is a preset, got it with explicit m_eff"),
    ("negative density", toml(material='[material]\nname = "GaAs"\ndensity_cm2 = -2e11\n'),
     "material.density_cm2: must be > 0, got -2e+11"),
    ("field with units in the value", toml(field='[field]\ntesla = "1 T"\n'),
     "field.tesla: must be a number, got '1 T'"),
    ("integer instead of boolean", toml(field="[field]\norbital = 1\n"),
     "field.orbital: must be true or false, got 1"),
    ("negative disorder", toml(disorder="[disorder]\nwidth_meV = -1.0\n"),
     "disorder.width_meV: must be >= 0, got -1.0"),
    ("unknown executor", toml(cluster='[cluster]\nexecutor = "slurm"\n'),
     "cluster.executor: must be one of 'local' or 'dask', got 'slurm'"),
    ("zero workers", toml(cluster="[cluster]\nworkers = 0\n"), "cluster.workers: must be >= 1, got 0"),
    ("address for local executor", toml(cluster='[cluster]\naddress = "tcp://127.0.0.1:8786"\n'),
     "cluster.address: an address needs executor = \"dask\", got 'tcp://127.0.0.1:8786'"),
    ("malformed address", toml(cluster='[cluster]\nexecutor = "dask"\naddress = "127.0.0.1"\n'),
     "cluster.address: not a scheduler address, got '127.0.0.1'"),
    ("output not hdf5", toml(output='[output]\npath = "out/run.txt"\n'),
     "output.path: the result file is HDF5, got 'out/run.txt'; end the name in .h5"),
    ("gds voltage missing", toml(gates='[gates]\ndepth_nm = 50.0\n[gates.gds]\npath = "g.gds"\n'
                                 'layers = {"1" = "plunger", "2" = "barrier"}\nvoltages = {plunger = -0.1}\n'),
     "gates.gds.voltages: no voltage for gate 'barrier'"),
    ("gds layer not a number", toml(gates='[gates]\ndepth_nm = 50.0\n[gates.gds]\npath = "g.gds"\n'
                                    'layers = {one = "plunger"}\nvoltages = {plunger = -0.1}\n'),
     "gates.gds.layers.one: a GDS layer number must be an integer 0..65535, got 'one'"),
    ("gate voltage implausible", toml(gates=GATES.replace("voltage_V = -0.05", "voltage_V = -50.0")),
     "gates.gate[0].voltage_V: gate 'plunger' at -50 V is outside +-10 V, implausible for a surface gate"),
    ("swept gate voltage implausible", toml(gates=GATES, sweep='[[sweep.axis]]\nparameter = "gates.plunger.voltage_V"'
                                            '\nvalues = [-0.1, -20.0]\n'),
     "sweep.axis[0].values: gate 'plunger' at -20 V is outside +-10 V"),
    ("zeeman without spin", toml(field="[field]\ntesla = 1.0\nzeeman = true\n"),
     "field.zeeman: a Zeeman term needs spin orbitals, got field.zeeman = true with spin.enabled = false"),
    ("unknown top-level key", toml(spn="[spn]\nenabled = true\n"), "spn: unknown key 'spn'; did you mean 'spin'?"),
    ("unknown nested key", toml(lattice='[lattice]\nkind = "square"\nspacing = 4.0\n'),
     "lattice.spacing: unknown key 'spacing'; did you mean 'spacing_nm'?"),
    ("toml syntax error", toml(lattice='[lattice\nkind = "square"\n'),
     "line 1, column 9: invalid TOML (Expected ']' at the end of a table declaration), got '[lattice'"),
    ("unquoted string", toml(lattice="[lattice]\nkind = square\nspacing_nm = 4.0\n"),
     "line 2, column 8: invalid TOML (Invalid value), got 'kind = square'"),
]


@pytest.mark.parametrize("text, expected", [pytest.param(t, e, id=i) for i, t, e in BAD])
def test_malformed_config_gives_one_line_error(text, expected):
    with pytest.raises(ConfigError, match=re.escape(expected)) as info:
        parse_config(text, source="bad.toml")
    message = str(info.value)
    assert "\n" not in message and "\r" not in message
    assert message.startswith("bad.toml: ")
    assert all("\n" not in problem for problem in info.value.problems)


def test_every_problem_is_reported_on_one_line():
    text = toml(lattice='[lattice]\nkind = "square"\nspacing_nm = -1.0\n', energy=None)
    with pytest.raises(ConfigError, match=r"\(\+1 more\)$") as info:
        parse_config(text, source="bad.toml")
    assert len(info.value.problems) == 2
    assert info.value.problems[1].startswith("bad.toml: energy: missing required section")


# TOML values: scalars of every type, arrays and small tables.
_TOML_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-10, 10) | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=6),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=8,
)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(section=st.sampled_from(["lattice", "geometry", "leads", "energy", "gates", "sweep", "material",
                                "spin", "disorder", "cluster", "output", "temperature", "field"]),
       key=st.sampled_from(["kind", "spacing_nm", "rectangle_nm", "polygon_nm", "name", "side", "span_nm",
                            "points", "values_meV", "axis", "depth_nm", "gate", "gds", "path", "other"]),
       value=_TOML_VALUES)
def test_any_mutation_gives_a_one_line_config_error_or_a_config(section, key, value):
    data = tomllib.loads(toml(gates=GATES, sweep=axis("gates.plunger.voltage_V")))
    target = data.setdefault(section, {})
    if isinstance(target, list):
        target = target[0]
    if value is None:
        target.pop(key, None)
    else:
        target[key] = value
    try:
        validate_config(data, source="fuzz.toml")
    except ConfigError as error:
        assert "\n" not in str(error) and str(error).startswith("fuzz.toml: ")


def test_misspelled_key_suggests_the_right_one_before_reporting_it_missing():
    text = toml(lattice='[lattice]\nkind = "square"\nspacing_nmm = 4.0\n')
    with pytest.raises(ConfigError) as info:
        parse_config(text, source="x.toml")
    assert str(info.value).startswith(
        "x.toml: lattice.spacing_nmm: unknown key 'spacing_nmm'; did you mean 'spacing_nm'?")
    assert any("lattice.spacing_nm: missing required key" in p for p in info.value.problems)


def test_unknown_key_without_a_close_match_lists_the_allowed_keys():
    with pytest.raises(ConfigError, match=re.escape(
            "field.colour: unknown key 'colour'; allowed keys here: tesla, orbital, zeeman")):
        parse_config(toml(field="[field]\ncolour = 1\n"))


def test_load_config_reports_a_missing_file_and_syntax_errors_with_the_file_name(tmp_path):
    with pytest.raises(ConfigError, match="nowhere.toml: cannot read the config"):
        load_config(tmp_path / "nowhere.toml")
    broken = tmp_path / "broken.toml"
    broken.write_text(toml() + "\n[output]\nldos_at_meV = [1.0, 2.0\n")
    lines = len(broken.read_text().splitlines())
    with pytest.raises(ConfigError, match=rf"broken\.toml: line {lines} \(end of file\): invalid TOML \(Unclosed array\), got 'ldos_at_meV = \[1\.0, 2\.0'") as info:
        load_config(broken)
    assert "\n" not in str(info.value)


# --- builders ------------------------------------------------------------------------------------


def test_build_device_of_a_small_config_discretises():
    config = parse_config(toml(gates=GATES, field="[field]\ntesla = 0.5\n",
                               disorder="[disorder]\nwidth_meV = 0.5\nseed = 3\n"))
    device = config.build_device()
    assert isinstance(device, Device)
    assert device.magnetic_field.tesla == 0.5
    assert device.disorder.seed == 3 and device.disorder.width_meV == 0.5
    model = device.discretise()
    assert model.n_sites == 11 * 6  # 0..40 nm by 0..20 nm at a = 4 nm, edges included
    assert [lead.name for lead in model.leads] == ["source", "drain"]
    pickle.loads(pickle.dumps(device))  # sweeps send devices to worker processes


def test_sweep_point_overrides_gate_voltage_and_lead_offset():
    config = parse_config(toml(
        gates=GATES,
        potential="[potential]\nconstant_meV = 1.5\n",
        leads='[[leads]]\nname = "source"\nside = "left"\nspan_nm = [4.0, 12.0]\n\n'
              '[[leads]]\nname = "drain"\nside = "right"\nspan_nm = [0.0, 20.0]\n',
        sweep=axis("gates.plunger.voltage_V", "start = -0.1\nstop = 0.0\npoints = 3")
        + axis("leads.source.offset_nm", "values = [0.0, 4.0]"),
    ))
    base = config.build_device()
    moved = config.build_device({"gates.plunger.voltage_V": -0.2, "leads.source.offset_nm": 4.0})
    assert base.leads[0].span == (4.0, 12.0) and moved.leads[0].span == (8.0, 16.0)
    assert moved.leads[1].span == (0.0, 20.0)
    # The potential is the gate layout at the new voltage plus the constant, 1.5 meV.
    layout = config.gate_layout()
    assert isinstance(layout, GateLayout) and layout.voltages == {"plunger": -0.05}
    x, y = np.array([20.0, 0.0]), np.array([10.0, 0.0])
    expected = layout.with_voltages(plunger=-0.2)(x, y) + 1.5
    np.testing.assert_allclose(moved.potential(x, y), expected, rtol=1e-14)
    np.testing.assert_allclose(base.potential(x, y), layout(x, y) + 1.5, rtol=1e-14)
    assert moved.potential(20.0, 10.0) > base.potential(20.0, 10.0)  # more negative gate, higher barrier
    # Only the lead offset changes the geometry.
    assert config.geometry_key() == (0.0, 0.0)
    assert config.geometry_key({"gates.plunger.voltage_V": -0.2}) == (0.0, 0.0)
    assert config.geometry_key({"leads.source.offset_nm": 4.0}) == (4.0, 0.0)
    model = moved.discretise()
    lead_rows = model.positions[model.lead("source").interface][:, 1]
    assert lead_rows.min() == 8.0 and lead_rows.max() == 16.0


def test_axes_carry_units_and_long_names():
    config = parse_config(toml(gates=GATES, sweep=axis("field.tesla", "start = 0.0\nstop = 2.0\npoints = 5")
                               + axis("leads.drain.offset_nm", "values = [-4.0, 0.0, 4.0]")
                               + axis("disorder.seed", "values = [1, 2]")))
    names = [(a.parameter, a.units) for a in config.axes()]
    assert names == [("field.tesla", "T"), ("leads.drain.offset_nm", "nm"), ("disorder.seed", "1")]
    tesla, offset, seed = config.axes()
    np.testing.assert_allclose(tesla.values, [0.0, 0.5, 1.0, 1.5, 2.0])
    assert "drain" in offset.long_name and "y" in offset.long_name
    assert config.parameters()["leads.drain.offset_nm"].changes_geometry
    assert not config.parameters()["field.tesla"].changes_geometry
    assert config.build_device({"disorder.seed": 2.0}).disorder is None  # zero width: no disorder


@pytest.mark.parametrize("point, expected", [
    ({"gates.plungr.voltage_V": 0.1}, "point: unknown parameter, got 'gates.plungr.voltage_V'; "
                                      "did you mean 'gates.plunger.voltage_V'?"),
    ({"field.tesla": "1"}, "point.field.tesla: must be a number, got '1'"),
    ({"field.tesla": float("nan")}, "point.field.tesla: field.tesla must be finite, got nan"),
    ({"disorder.seed": 0.5}, "point.disorder.seed: disorder.seed must be a whole number >= 0, got 0.5"),
], ids=["unknown", "string", "nan", "fractional seed"])
def test_bad_sweep_point_is_a_config_error(point, expected):
    config = parse_config(toml(gates=GATES), source="run.toml")
    with pytest.raises(ConfigError, match=re.escape(f"run.toml: {expected}")):
        config.build_device(point)


def test_gates_from_a_gds_file_relative_to_the_config(tmp_path):
    library = gdstk.Library(unit=1e-9, precision=1e-12)
    cell = library.new_cell("TOP")
    cell.add(gdstk.rectangle((15.0, 25.0), (25.0, 60.0), layer=5))
    library.write_gds(tmp_path / "gates.gds")
    gds = '[gates]\ndepth_nm = 50.0\n[gates.gds]\npath = "gates.gds"\nlayers = {"5" = "plunger"}\n' \
          "voltages = {plunger = -0.05}\n"
    path = tmp_path / "run.toml"
    path.write_text(toml(gates=gds, sweep=axis("gates.plunger.voltage_V")))
    config = load_config(path)
    from_gds = config.build_device({"gates.plunger.voltage_V": -0.2}).potential
    inline = parse_config(toml(gates=GATES)).build_device({"gates.plunger.voltage_V": -0.2}).potential
    x, y = np.linspace(0.0, 40.0, 5), np.full(5, 10.0)
    np.testing.assert_allclose(from_gds(x, y), inline(x, y), rtol=1e-12)
    missing = tmp_path / "elsewhere.toml"
    missing.write_text(toml(gates=gds.replace('path = "gates.gds"', 'path = "missing.gds"')))
    with pytest.raises(ConfigError, match=r"elsewhere\.toml: gates\.gds: GDSII file .* does not exist"):
        load_config(missing).build_device()


def test_config_hash_follows_the_content_of_the_gds_file(tmp_path):
    """Editing the layout makes another sweep (a resumed file never mixes two layouts); touching it does not."""
    def write(x1):
        library = gdstk.Library(unit=1e-9, precision=1e-12)
        library.new_cell("TOP").add(gdstk.rectangle((15.0, 25.0), (x1, 60.0), layer=5))
        library.write_gds(tmp_path / "gates.gds")

    gds = '[gates]\ndepth_nm = 50.0\n[gates.gds]\npath = "gates.gds"\nlayers = {"5" = "plunger"}\n' \
          "voltages = {plunger = -0.05}\n"
    path = tmp_path / "run.toml"
    path.write_text(toml(gates=gds))
    write(25.0)
    first = load_config(path).config_hash()
    write(25.0)  # rewritten, same content
    assert load_config(path).config_hash() == first
    write(26.0)  # the gate grew by 1 nm
    assert load_config(path).config_hash() != first


@pytest.mark.parametrize("make, fragment", [
    (lambda p: p.mkdir(), "is a directory"),
    (lambda p: os.mkfifo(p), "is not a regular file"),
    (lambda p: p.write_text("# " + "x" * (1 << 21)), "more than the 1048576"),
])
def test_config_path_that_is_not_a_small_regular_file(tmp_path, make, fragment):
    """A FIFO, a device or a huge file as the config is refused before it is opened (no hang, no memory run)."""
    path = tmp_path / "run.toml"
    make(path)
    with pytest.raises(ConfigError) as err:
        load_config(path)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_dev_zero_as_config_is_refused():
    with pytest.raises(ConfigError, match="is not a regular file"):
        load_config("/dev/zero")


# --- records -------------------------------------------------------------------------------------


def test_config_hash_ignores_comments_whitespace_and_key_order():
    plain = toml()
    noisy = "# a comment\n\n" + toml(
        lattice='[lattice]   # the grid\nspacing_nm   =   4   # an integer here\nkind = "square"\n\n',
    ).replace("points = 5", "points = 5  # five")
    a, b = parse_config(plain), parse_config(noisy)
    assert a.canonical_json() == b.canonical_json()
    assert a.config_hash() == b.config_hash()
    assert re.fullmatch(r"[0-9a-f]{64}", a.config_hash())


@pytest.mark.parametrize("change", [
    ("spacing_nm = 4.0", "spacing_nm = 5.0"),
    ("points = 5", "points = 6"),
    ('name = "drain"', 'name = "sink"'),
], ids=lambda c: c[1])
def test_config_hash_changes_with_a_value(change):
    changed = toml().replace(*change)
    assert changed != toml()
    assert parse_config(changed).config_hash() != parse_config(toml()).config_hash()


def test_config_hash_ignores_where_and_how_the_run_goes():
    base = parse_config(toml(), source="a.toml")
    elsewhere = parse_config(toml(cluster='[cluster]\nexecutor = "dask"\nworkers = 8\n'
                                          'address = "tcp://127.0.0.1:8786"\n'), source="b.toml")
    assert base.output.path == "out/a.h5" and elsewhere.output.path == "out/b.h5"
    assert base.canonical_json() != elsewhere.canonical_json()
    assert base.config_hash() == elsewhere.config_hash()


# --- energies ------------------------------------------------------------------------------------


def test_energies_relative_to_the_fermi_energy():
    config = parse_config(toml(
        material='[material]\nname = "GaAs"\ndensity_cm2 = 2.0e11\n',
        energy="[energy]\nrelative_to_fermi = true\nstart_meV = -1.0\nstop_meV = 1.0\npoints = 3\n",
        output='[output]\nldos_at_meV = [0.0]\n',
    ))
    e_f = config.fermi_energy_meV
    assert e_f == pytest.approx(E_F_GAAS_2E11_MEV, rel=E_F_RTOL)
    np.testing.assert_allclose(config.energies(), [e_f - 1.0, e_f, e_f + 1.0], rtol=1e-14)
    np.testing.assert_allclose(config.ldos_energies(), [e_f], rtol=1e-14)


def test_absolute_energies_and_no_fermi_energy_without_density():
    config = parse_config(toml(energy="[energy]\nvalues_meV = [0.5, 2.0, 3.25]\n"))
    assert config.fermi_energy_meV is None
    np.testing.assert_array_equal(config.energies(), [0.5, 2.0, 3.25])
    assert config.temperatures().size == 0 and config.axes() == []


def test_custom_material_sets_the_hopping():
    config = parse_config(toml(material='[material]\nname = "heavy"\nm_eff = 0.134\ng_factor = -0.44\n'
                                        'eps_r = 12.9\n'))
    gaas = parse_config(toml())
    # t = hbar^2/(2 m* a^2) (Datta 1995 ch. 3, from memory): doubling m* halves t; 1e-12 relative = rounding.
    assert config.build_device().t == pytest.approx(gaas.build_device().t / 2.0, rel=1e-12)
