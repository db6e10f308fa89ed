"""Screened gates from a run config: [gates] screening = "thomas-fermi", the device potential, `check`'s report."""

from __future__ import annotations

import numpy as np
import pytest

from rgftrans.cli import EXIT_BAD_INPUT, EXIT_OK, main
from rgftrans.electrostatics.screening import ScreenedPotential
from rgftrans.io.config import parse_config

BASE = """
[material]
name = "GaAs"
density_cm2 = 2.0e11

[lattice]
kind = "square"
spacing_nm = 10.0

[geometry]
rectangle_nm = [0.0, 0.0, 300.0, 200.0]

[gates]
depth_nm = 60.0
screening = "thomas-fermi"
screening_grid_nm = 15.0
screening_margin_nm = 180.0

[[gates.gate]]
name = "top"
rectangle_nm = [120.0, 130.0, 180.0, 400.0]
voltage_V = -0.3

[[gates.gate]]
name = "bottom"
rectangle_nm = [120.0, -200.0, 180.0, 70.0]
voltage_V = -0.3

[[leads]]
name = "source"
side = "left"
span_nm = [0.0, 200.0]

[[leads]]
name = "drain"
side = "right"
span_nm = [0.0, 200.0]

[energy]
start_meV = 3.0
stop_meV = 9.0
points = 5

[output]
path = "{out}"
"""


def _cfg(tmp_path, text=BASE):
    return parse_config(text.format(out=tmp_path / "s.h5"), source="screened.toml")


def test_device_potential_is_the_screened_solution(tmp_path):
    cfg = _cfg(tmp_path)
    device = cfg.build_device()
    assert isinstance(device.potential, ScreenedPotential)
    sol = device.potential
    bare = cfg.gate_layout()
    # Under a gate the screened barrier is lower than the bare one, and still positive (a repulsive gate).
    x, y = 150.0, 100.0  # the constriction between the gates
    assert 0 < sol(x, y) < bare(x, y)
    # The same voltages give the same cached solution; a sweep point with other voltages a new one.
    assert cfg.build_device().potential is sol
    other = cfg.build_device({"gates.top.voltage_V": -0.35}).potential
    assert other is not sol and other(150.0, 160.0) > sol(150.0, 160.0)


def test_no_gate_voltage_no_potential(tmp_path):
    cfg = _cfg(tmp_path, BASE.replace("voltage_V = -0.3", "voltage_V = 0.0"))
    sol = cfg.build_device().potential
    # Gates at the pinned surface's potential leave the ungated 2DEG: U = 0, n = n0 (to the solver's 1e-6 of E_F).
    assert np.abs(sol.potential_meV).max() < 1e-5 * sol.fermi_energy_meV
    assert np.allclose(sol.density_cm2, 2.0e11, rtol=1e-5)


def test_screening_changes_the_config_hash(tmp_path):
    on = _cfg(tmp_path)
    off = _cfg(tmp_path, BASE.replace('screening = "thomas-fermi"', 'screening = "none"'))
    assert on.config_hash() != off.config_hash()
    assert not isinstance(off.build_device().potential, ScreenedPotential)


@pytest.mark.parametrize("change, fragment", [
    (("density_cm2 = 2.0e11\n", ""), "density_cm2"),
    (('screening = "thomas-fermi"', 'screening = "thomas"'), "screening"),
    (('screening = "thomas-fermi"', 'screening = "none"\nsurface = "frozen"'), "surface"),
    (('screening = "thomas-fermi"', 'screening = "thomas-fermi"\nsurface = "mirror"'), "surface"),
    (('screening = "thomas-fermi"', 'screening = "thomas-fermi"\nscreening_temperature_K = -4'),
     "screening_temperature_K"),
    (('screening_grid_nm = 15.0', 'screening_grid_nm = -1.0'), "screening_grid_nm"),
])
def test_bad_screening_settings_are_one_line(tmp_path, capsys, change, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(BASE.format(out=tmp_path / "s.h5").replace(*change))
    assert main(["check", str(path)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and fragment in err[0], err


def test_check_reports_the_screened_gates(tmp_path, capsys):
    path = tmp_path / "ok.toml"
    path.write_text(BASE.format(out=tmp_path / "s.h5"))
    assert main(["check", str(path)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "screened by the 2DEG" in out and "a wide gate would deplete the 2DEG at -0.175 V" in out
    assert out.count("x the wide-gate value") == 2


def test_run_stores_the_screened_maps_and_they_draw(tmp_path):
    import h5py
    import matplotlib

    matplotlib.use("Agg")
    from rgftrans.io.store import read_result
    from rgftrans.plots.figures import plot_density

    path = tmp_path / "run.toml"
    path.write_text(BASE.format(out=tmp_path / "s.h5").replace("points = 5", "points = 2"))
    assert main(["run", str(path), "--quiet", "--workers", "1"]) == EXIT_OK
    with h5py.File(tmp_path / "s.h5", "r") as f:
        g = f["electrostatics"]
        assert g["density"].attrs["units"] == "cm^-2" and g["potential"].attrs["units"] == "meV"
        assert g["density"].shape == (g["y"].size, g["x"].size)
        assert g.attrs["model"] == "Thomas-Fermi, pinned surface"
        assert np.min(g["density"][()]) >= 0
    assert read_result(tmp_path / "s.h5").completed.all()
    cfg = _cfg(tmp_path)
    sol = cfg.build_device().potential
    fig, ax = plot_density(sol, layout=cfg.gate_layout())
    assert ax.get_xlabel() == "x position (nm)" and "cm⁻²" in fig.axes[-1].get_ylabel()


def test_frozen_surface_at_finite_temperature_from_a_config(tmp_path, capsys):
    import h5py

    text = BASE.replace('screening = "thomas-fermi"',
                        'screening = "thomas-fermi"\nsurface = "frozen"\nscreening_temperature_K = 4.0')
    pinned = _cfg(tmp_path).build_device().potential
    frozen = _cfg(tmp_path, text).build_device().potential
    assert frozen.structure.surface == "frozen" and frozen.structure.temperature_K == 4.0
    assert frozen.gate_charge_cm2 is not None and pinned.gate_charge_cm2 is None
    # A frozen surface in the gap floats towards the gates' voltage instead of being held at 0, so the barrier
    # in the constriction is higher than with a pinned surface (Davies, Larkin & Sukhorukov 1995, from memory).
    assert frozen(150.0, 100.0) > pinned(150.0, 100.0)
    path = tmp_path / "frozen.toml"
    path.write_text(text.format(out=tmp_path / "f.h5").replace("points = 5", "points = 2"))
    assert main(["check", str(path)]) == EXIT_OK
    assert "Fermi-Dirac at 4 K, frozen surface" in capsys.readouterr().out
    assert main(["run", str(path), "--quiet", "--workers", "1"]) == EXIT_OK
    with h5py.File(tmp_path / "f.h5", "r") as f:
        g = f["electrostatics"]
        assert g.attrs["surface"] == "frozen" and g.attrs["temperature_K"] == 4.0
        assert g["gate_charge"].attrs["units"] == "cm^-2" and np.abs(g["gate_charge"][()]).max() > 0


def test_split_gate_pinches_off_beyond_the_depletion_voltage(tmp_path):
    """G(E_F) of the screened split gate against its voltage: the staircase closes as the gates get more negative,
    and the channel pinches off only well past the voltage that depletes the 2DEG under a wide gate (the gap
    must be closed from the sides; common practice, no source)."""
    from rgftrans.transport.rgf import transmission

    cfg = _cfg(tmp_path, BASE.replace("spacing_nm = 10.0", "spacing_nm = 5.0"))  # 11 sites per wavelength at E_F
    v_dep = cfg.heterostructure().depletion_voltage_V()  # -0.175 V
    voltages = [-0.05, -0.2, -0.4, -0.7, -1.0]
    g = []
    for v in voltages:
        model = cfg.build_device({"gates.top.voltage_V": v, "gates.bottom.voltage_V": v}).discretise()
        g.append(float(transmission(model, [cfg.fermi_energy_meV]).transmission[0]))
    assert all(b <= a + 0.05 for a, b in zip(g, g[1:])), g  # closes monotonically (0.05: a resonance's ripple)
    assert g[0] > 2.0 and g[-2] < 0.01, g  # open at small voltages, pinched off at -0.7 V (measured 6.8 and 1e-7)
    assert g[1] > 2.0, g  # at about the wide-gate depletion voltage the 60 nm gap still conducts (measured 4.8)
    assert abs(voltages[1] / v_dep - 1) < 0.2  # the second point is the wide-gate depletion voltage


def test_named_regions_get_capacitances_in_check_run_and_the_file(tmp_path, capsys):
    """[[gates.region]]: check prints the constant-interaction numbers, run stores them, compare reads them."""
    import h5py

    from rgftrans.io.compare import predicted_lever_arm

    text = BASE.replace("[[leads]]", '[[gates.region]]\nname = "gap"\nrectangle_nm = [130.0, 80.0, 170.0, 120.0]\n\n'
                        "[[leads]]", 1)
    path = tmp_path / "regions.toml"
    path.write_text(text.format(out=tmp_path / "r.h5").replace("points = 5", "points = 2"))
    assert main(["check", str(path)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "region 'gap' (OPEN to the reservoirs)" in out and "E_C = e^2/C_Sigma" in out
    assert "capacitance matrix C (aF)" in out and "note: region 'gap' is open" in out
    assert "region 'gap' from the layout's electrostatics" in out  # the regime estimate uses the layout's E_C
    assert main(["run", str(path), "--quiet", "--workers", "1"]) == EXIT_OK
    cfg = parse_config(text.format(out=tmp_path / "r.h5"), source="regions.toml")
    caps = cfg.capacitances()
    with h5py.File(tmp_path / "r.h5", "r") as f:
        g = f["electrostatics/capacitance"]
        assert g["lever_arm"].attrs["units"] == "1" and g["capacitance_matrix"].attrs["units"] == "aF"
        assert np.allclose(g["lever_arm"][()], caps.lever_arms, rtol=1e-6)
        assert g["charging_energy"][0] == pytest.approx(caps.charging_energy_meV[0], rel=1e-6)
    value, _ = predicted_lever_arm(tmp_path / "r.h5", region="gap", gate="top")
    assert value == pytest.approx(1000 * caps.lever_arm("gap", "top"), rel=1e-6) and value > 0


def test_regions_need_screening_and_their_own_names(tmp_path, capsys):
    region = '[[gates.region]]\nname = "{name}"\nrectangle_nm = [130.0, 80.0, 170.0, 120.0]\n\n[[leads]]'
    for text, fragment in (
            (BASE.replace('screening = "thomas-fermi"', 'screening = "none"').replace(
                "[[leads]]", region.format(name="dot"), 1), "charge regions need"),
            (BASE.replace("[[leads]]", region.format(name="top"), 1), "duplicate name")):
        path = tmp_path / "bad.toml"
        path.write_text(text.format(out=tmp_path / "s.h5"))
        assert main(["check", str(path)]) == EXIT_BAD_INPUT
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and fragment in err[0], err
