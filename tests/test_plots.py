"""Figures: every axis has a physical name and a unit, sweep axes are named from physics and scaled, maps and
errors behave as the command line promises.  Everything is rendered with Agg on tiny invented devices."""

from __future__ import annotations

import re

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from rgftrans.plots.style import axis_display, parameter_name, signed_colour_scale  # noqa: E402
from rgftrans.cli import EXIT_BAD_INPUT, EXIT_OK, main  # noqa: E402
from rgftrans.io.config import parse_config  # noqa: E402
from rgftrans.errors import EnergyError, GeometryError  # noqa: E402
from rgftrans.analysis.light import waveguide_field, waveguide_spectrum  # noqa: E402
from rgftrans.electrostatics.gates import Gate, GateLayout  # noqa: E402
from rgftrans.system.geometry import rectangle  # noqa: E402
from rgftrans.plots.figures import (  # noqa: E402
    plot_currents,
    plot_device,
    plot_gate_potential,
    plot_map,
    plot_result,
    plot_transmission,
)
from rgftrans.errors import StoreError  # noqa: E402
from rgftrans.io.sweeps import run_sweep  # noqa: E402

#: A label carries its unit in parentheses at the end: "upper gate voltage (mV)".
UNIT_IN_PARENTHESES = re.compile(r"\([^()]+\)$")
#: Pieces of config keys that must never reach a figure.
RAW_KEYS = ("voltage_V", "gates.", "gates__", "_meV", "tesla", "__")

# Invented device: a 60 nm x 40 nm GaAs dot under two gates, two leads.  Gate voltages in V as in the notebook.
CONFIG = """
[lattice]
kind = "square"
spacing_nm = 5.0

[geometry]
rectangle_nm = [0.0, 0.0, 60.0, 40.0]

[gates]
depth_nm = 30.0

[[gates.gate]]
name = "upper"
rectangle_nm = [10.0, 25.0, 30.0, 40.0]
voltage_V = 0.0

[[gates.gate]]
name = "lower"
rectangle_nm = [35.0, 0.0, 55.0, 15.0]
voltage_V = 0.0

[[leads]]
name = "source"
side = "left"
span_nm = [10.0, 35.0]

[[leads]]
name = "drain"
side = "right"
span_nm = [5.0, 30.0]

[temperature]
kelvin = [0.0, 1.0]

[energy]
start_meV = 5.0
stop_meV = 8.0
points = 13
{sweep}
[output]
path = "{out}"
"""

TWO_GATES = """
[[sweep.axis]]
parameter = "gates.upper.voltage_V"
start = -0.010
stop = 0.010
points = 3

[[sweep.axis]]
parameter = "gates.lower.voltage_V"
start = -0.004
stop = 0.004
points = 2
"""

ONE_GATE = """
[[sweep.axis]]
parameter = "gates.upper.voltage_V"
start = -0.010
stop = 0.010
points = 3
"""


def _sweep_file(folder, name: str, sweep: str) -> str:
    path = folder / f"{name}.h5"
    cfg = parse_config(CONFIG.format(sweep=sweep, out=path))
    run_sweep(cfg, quiet=True, workers=1)
    return str(path)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sweeps")
    return {"two": _sweep_file(folder, "two_gates", TWO_GATES), "one": _sweep_file(folder, "one_gate", ONE_GATE),
            "none": _sweep_file(folder, "energy_only", "")}


@pytest.fixture(scope="module")
def model_and_device():
    cfg = parse_config(CONFIG.format(sweep="", out="unused.h5"))
    device = cfg.build_device()
    return device.discretise(), device


@pytest.fixture(scope="module")
def figure_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("figures")


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _labels(fig):
    """Every non-empty axis label and colour-bar label of a figure."""
    out = []
    for ax in fig.axes:
        for a in (ax, *ax.child_axes):  # secondary axes and insets live under their parent
            out += [t for t in (a.get_xlabel(), a.get_ylabel()) if t]
    return out


def _assert_physical_labels(fig):
    labels = _labels(fig)
    assert labels
    for label in labels:
        assert UNIT_IN_PARENTHESES.search(label), f"no unit in {label!r}"
        for key in RAW_KEYS:
            assert key not in label, f"raw config key in {label!r}"


# --- the axis helper ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["gates.upper.voltage_V", "gates__upper__voltage_V"])
def test_gate_axis_named_from_physics_in_mV_below_one_volt(name):
    label, values = axis_display(name, "V", np.array([-0.01, 0.0, 0.01]))
    assert label == "upper gate voltage (mV)"
    assert np.allclose(values, [-10.0, 0.0, 10.0])


def test_gate_axis_stays_in_volt_from_one_volt():
    label, values = axis_display("gates.upper.voltage_V", "V", np.array([-1.5, 0.0, 1.5]))
    assert label == "upper gate voltage (V)" and np.allclose(values, [-1.5, 0.0, 1.5])


@pytest.mark.parametrize("name, unit, expected", [
    ("field.tesla", "T", "magnetic field B (T)"),
    ("leads__drain__offset_nm", "nm", "position of lead drain (nm)"),
    ("dielectric.puck.shift_x", "mm", "x shift of puck (mm)"),
    ("dielectric.puck.permittivity", "1", "relative permittivity of puck"),
])
def test_other_parameters_named_from_physics(name, unit, expected):
    assert axis_display(name, unit, [0.5, 2.0])[0] == expected


def test_unknown_parameter_uses_the_stored_long_name():
    assert parameter_name("something__odd_V", "voltage on the back gate") == "voltage on the back gate"
    assert parameter_name("something__odd_V") == "odd"


# --- device and gate maps -------------------------------------------------------------------------------------
def test_device_figure_draws_region_gates_and_labelled_lead_bands(model_and_device, figure_dir):
    model, device = model_and_device
    fig, ax = plot_device(model, device=device)
    fig.savefig(figure_dir / "device.png", dpi=120, bbox_inches="tight")
    _assert_physical_labels(fig)
    assert ax.get_xlabel() == "x position (nm)"
    texts = [t.get_text() for t in ax.texts]
    # Leads: a band each, labelled with name and width (5 nm sites from 10 to 35 nm: 6 sites, 30 nm across).
    assert "lead source\n(30 nm)" in texts and "lead drain\n(30 nm)" in texts
    # Gates: each outline named, with its voltage.
    assert any(t.startswith("upper\n") for t in ax.texts for t in [t.get_text()])
    assert any(t.get_text().startswith("lower\n") for t in ax.texts)
    # Small device: sites dotted (one scatter), no lead cells drawn as dots beside them.
    assert len(ax.collections) == 1 and len(ax.collections[0].get_offsets()) == model.n_sites
    # Arrows point away from the device: the source's to the left of x = 0, the drain's right of x = 60 nm.
    arrows = [a for a in ax.texts if getattr(a, "arrow_patch", None) is not None]
    tips = sorted(a.xy[0] for a in arrows)
    assert len(arrows) == 2 and tips[0] < 0.0 and tips[1] > 60.0


def test_large_device_shows_sites_only_in_an_inset(model_and_device):
    model, device = model_and_device
    fig, ax = plot_device(model, device=device, max_sites=10)
    assert not ax.collections  # no site dots on the main axes
    insets = ax.child_axes
    assert len(insets) == 1 and insets[0].collections  # the zoom shows the sites


def _layout(voltages):
    gates = (Gate("upper", rectangle(10.0, 25.0, 30.0, 40.0), voltages[0]),
             Gate("lower", rectangle(35.0, 0.0, 55.0, 15.0), voltages[1]))
    return GateLayout(gates, 30.0)


@pytest.mark.parametrize("voltages, diverging", [((-0.05, -0.02), False), ((0.05, 0.02), False),
                                                  ((-0.05, 0.05), True)])
def test_gate_map_is_sequential_for_one_signed_potentials(voltages, diverging, figure_dir):
    fig, ax = plot_gate_potential(_layout(voltages), extent_nm=(-20.0, -20.0, 80.0, 60.0), resolution=30)
    fig.savefig(figure_dir / f"gates_{voltages[0]:+g}_{voltages[1]:+g}.png", dpi=100, bbox_inches="tight")
    mesh = ax.collections[0]
    u = mesh.get_array()
    assert (u.min() < 0 < u.max()) == diverging  # the case covers what it claims
    assert (mesh.get_cmap().name == "RdBu_r") == diverging
    assert signed_colour_scale(u)[1] == diverging
    colourbar = [a for a in fig.axes if a is not ax][0]
    assert colourbar.get_ylabel() == "potential energy (meV)"
    _assert_physical_labels(fig)
    names = [t.get_text().split("\n")[0] for t in ax.texts]
    assert sorted(names) == ["lower", "upper"]
    assert "mV" in ax.texts[0].get_text()  # tens of mV shown as mV


def test_gate_map_refuses_a_reversed_window():
    with pytest.raises(GeometryError, match="xmin < xmax") as error:
        plot_gate_potential(_layout((-0.05, -0.02)), extent_nm=(100.0, 0.0, -100.0, 50.0))
    assert "\n" not in str(error.value)


def test_maps_and_currents_label_positions_and_give_an_arrow_key(model_and_device, figure_dir):
    from rgftrans.transport.local import bond_currents, local_quantities, scattering_states

    model, _ = model_and_device
    local = local_quantities(model, 6.5)
    states = scattering_states(model, 6.5, "source")
    fig, ax = plot_currents(model, bond_currents(model, states.wavefunctions), background=local.ldos,
                            background_label="LDOS (1/meV per site)")
    fig.savefig(figure_dir / "currents.png", dpi=120, bbox_inches="tight")
    _assert_physical_labels(fig)
    keys = [c for c in ax.get_children() if type(c).__name__ == "QuiverKey"]
    assert len(keys) == 1 and keys[0].text.get_text().endswith("incident flux/nm")
    fig, ax = plot_map(model, local.ldos)
    _assert_physical_labels(fig)


def test_transmission_figure_labels(model_and_device):
    from rgftrans.transport.rgf import transmission

    model, _ = model_and_device
    fig, ax = plot_transmission(transmission(model, np.linspace(5.0, 8.0, 7)))
    _assert_physical_labels(fig)
    assert "conductance (2e²/h)" in ax.get_ylabel()
    assert [a.get_ylabel() for a in ax.child_axes] == ["conductance (µS)"]


# --- result files -----------------------------------------------------------------------------------------------
def test_two_gate_sweep_draws_the_map_first_gate_on_x(files, figure_dir):
    fig, ax = plot_result(files["two"], energy=6.5, temperature_K=1.0)
    fig.savefig(figure_dir / "two_gate_map.png", dpi=120, bbox_inches="tight")
    _assert_physical_labels(fig)
    assert ax.get_xlabel() == "upper gate voltage (mV)" and ax.get_ylabel() == "lower gate voltage (mV)"
    mesh = ax.collections[0]
    assert mesh.get_array().shape == (2, 3)  # rows: lower gate (2 values), columns: upper gate (3 values)
    assert np.allclose(ax.get_xlim(), [-15.0, 15.0])  # -10 ... 10 mV with half-step margins
    colourbar = [a for a in fig.axes if a is not ax][0]
    assert colourbar.get_ylabel() == "conductance (2e²/h)"
    assert "T = 1 K" in ax.get_title() and "μ = 6.5 meV" in ax.get_title()


def test_map_shows_the_chosen_temperature(files):
    from rgftrans.io.store import read_result

    data = read_result(files["two"])
    k = int(np.argmin(np.abs(data.energies_meV - 6.5)))
    stored = data.quantities["conductance"][..., k, :, 1, 0]  # (upper, lower, temperature)
    for j, temp in enumerate((0.0, 1.0)):
        _, ax = plot_result(files["two"], energy=6.5, temperature_K=temp)
        assert np.allclose(ax.collections[0].get_array(), stored[..., j].T, equal_nan=True)
    assert not np.allclose(stored[..., 0], stored[..., 1])  # the two temperatures differ, so the check bites


def test_one_gate_sweep_draws_one_line_per_temperature(files, figure_dir):
    fig, ax = plot_result(files["one"], energy=6.5)
    fig.savefig(figure_dir / "one_gate_lines.png", dpi=120, bbox_inches="tight")
    _assert_physical_labels(fig)
    assert ax.get_xlabel() == "upper gate voltage (mV)"
    assert [line.get_label() for line in ax.lines] == ["0 K", "1 K"]
    assert np.allclose(ax.lines[0].get_xdata(), [-10.0, 0.0, 10.0])
    assert [a.get_ylabel() for a in ax.child_axes] == ["conductance (µS)"]


def test_over_energy(files):
    fig, ax = plot_result(files["one"], over_energy=True, temperature_K=0.0)
    _assert_physical_labels(fig)
    assert ax.get_xlabel() == "chemical potential μ (meV)" and ax.get_ylabel() == "upper gate voltage (mV)"
    fig, ax = plot_result(files["none"])
    assert ax.get_xlabel() == "chemical potential μ (meV)" and len(ax.lines) == 2


@pytest.mark.parametrize("energy", [float("inf"), float("nan"), 4.0, 9.0])
def test_energy_outside_the_stored_range_is_refused(files, energy):
    with pytest.raises(EnergyError) as error:
        plot_result(files["two"], energy=energy)
    message = str(error.value)
    assert "\n" not in message and "5 to 8 meV" in message


def test_unstored_temperature_is_refused(files):
    with pytest.raises(StoreError, match=r"holds 0, 1 K") as error:
        plot_result(files["two"], temperature_K=0.3)
    assert "\n" not in str(error.value)


# --- the command line -------------------------------------------------------------------------------------------
def test_command_line_plot(files, tmp_path, capsys):
    out = tmp_path / "g.png"
    assert main(["plot", files["two"], "--temperature", "1", "--energy", "6.5", "--out", str(out)]) == EXIT_OK
    assert out.stat().st_size > 0
    assert main(["plot", files["one"], "--over-energy", "--out", str(out)]) == EXIT_OK


def test_command_line_plot_energy_inf_is_one_line(files, capsys):
    assert main(["plot", files["two"], "--energy", "inf", "--out", "unused.png"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("rgftrans: error: ") and "5 to 8 meV" in err


def test_command_line_plot_of_a_file_without_points(tmp_path, capsys):
    from rgftrans.io.sweeps import _open_result, _Journal  # the sweep's own layout, with nothing computed

    path = tmp_path / "empty.h5"
    cfg = parse_config(CONFIG.format(sweep=ONE_GATE, out=path))
    model = cfg.build_device().discretise()
    _open_result(cfg, path, False, _Journal(path, cfg.config_hash()), model).close()
    assert main(["plot", str(path), "--out", str(tmp_path / "g.png")]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err == f"rgftrans: error: no completed sweep point in {path}; run `rgftrans run CONFIG` first\n"
    assert not (tmp_path / "g.png").exists()


# --- the waveguide: its own units ----------------------------------------------------------------------------
@pytest.fixture(scope="module")
def waveguide():
    from rgftrans.system.photonic import Dielectric, Port, Waveguide
    from rgftrans.system.geometry import disk

    # Invented 20 mm x 8 mm guide with a dielectric puck; cutoff of the first mode c / (2 * 8 mm) = 18.7 GHz.
    guide = Waveguide(rectangle(0, 0, 20, 8), [Port("inlet", "left", (0, 8)), Port("outlet", "right", (0, 8))],
                      spacing=0.5, unit="mm", dielectrics=[Dielectric(disk((10, 4), 2), 4.0, name="puck")])
    pm = guide.discretise()
    return pm, waveguide_spectrum(pm, np.linspace(19.0, 24.0, 11))


def test_waveguide_spectrum_and_field_say_GHz_and_mm(waveguide, figure_dir):
    from rgftrans.plots.figures import plot_spectrum, plot_waveguide_field

    pm, spectrum = waveguide
    fig, ax = plot_spectrum(spectrum, cutoffs_GHz=pm.cutoffs_GHz(0, 2))
    fig.savefig(figure_dir / "waveguide_spectrum.png", dpi=100, bbox_inches="tight")
    _assert_physical_labels(fig)
    assert ax.get_xlabel() == "frequency (GHz)"
    assert not any("meV" in label for label in _labels(fig))
    fm = waveguide_field(pm, 21.0, 0, 0)
    fig, ax = plot_waveguide_field(pm, np.abs(fm.field), label="|E_z| / incident peak (1)")
    _assert_physical_labels(fig)
    assert (ax.get_xlabel(), ax.get_ylabel()) == ("x position (mm)", "y position (mm)")
    assert not any("nm" in label or "meV" in label for label in _labels(fig))


def test_waveguide_result_types_carry_frequency_fields():
    import dataclasses

    from rgftrans.analysis.light import DarkMode, SpectralLine, Spectrum
    from rgftrans.io.waveguide_config import WaveguideRun

    for cls in (Spectrum, SpectralLine, DarkMode, WaveguideRun):
        names = [f.name for f in dataclasses.fields(cls)]
        assert not any("meV" in n for n in names), (cls.__name__, names)
    assert "frequency_GHz" in [f.name for f in dataclasses.fields(SpectralLine)]
    assert "frequency_GHz" in [f.name for f in dataclasses.fields(DarkMode)]


def test_fano_collapse_figure_draws_what_it_is_handed(monkeypatch):
    """The figure takes computed data (analysis.darkstates.fano_collapse) and computes nothing: with the solvers made
    to fail, it still draws every line, labels its axes with units and marks the BIC's row as having no line."""
    import rgftrans.spectra.poles as poles
    import rgftrans.transport.rgf as rgf
    from rgftrans.analysis.darkstates import FanoCollapse
    from rgftrans.plots.figures import plot_fano_collapse

    def refuse(*args, **kwargs):
        raise AssertionError("a figure called a solver")

    monkeypatch.setattr(rgf, "transmission", refuse)
    monkeypatch.setattr(poles, "follow_pole", refuse)
    offsets = np.linspace(-1e-3, 1e-3, 10)
    d = np.geomspace(1e-4, 1e-1, 4)
    collapse = FanoCollapse(bic_parameter=np.array([0.1, 0.2]), bic_energy_meV=1.0,
                            shifts=np.array([1e-3, 5e-4, 0.0]), centres_meV=np.array([1.01, 1.005, 1.0]),
                            line_widths_meV=np.array([4e-4, 1e-4, 0.0]), offsets_meV=offsets,
                            transmissions=np.full((3, 10), 0.5), distances=d, widths_meV=0.4 * d**2,
                            parameter_unit="V")
    fig, axes = plot_fano_collapse(collapse, name="gates.upper.voltage_V")
    labels = [line.get_label() for line in axes[0].get_lines()]
    assert len(labels) == 3 and labels[-1] == "p* (BIC): no line" and "Γ = 4.00e-04 meV" in labels[0]
    assert UNIT_IN_PARENTHESES.search(axes[1].get_xlabel()) and "(meV)" in axes[1].get_ylabel()
    assert "upper gate voltage" in axes[1].get_xlabel()
    assert axes[1].get_lines()[0].get_ydata() == pytest.approx(0.4 * d**2)

