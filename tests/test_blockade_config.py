"""`rgftrans blockade`: closed dots from a layout (configs/closed_dot.toml, configs/double_dot.toml; invented).

Sources of the expectations: the constant-interaction model (W. G. van der Wiel et al., Rev. Mod. Phys. 75, 1
(2002), from memory): Coulomb peaks of one spin-degenerate orbital are E_C / (e alpha) apart in plunger
voltage, a double dot's honeycomb repeats every e / C_g along each plunger.  Every printed and stored number
carries its unit (common practice).
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
from scipy import constants

from rgftrans.cli import EXIT_BAD_INPUT, EXIT_OK, main
from rgftrans.io.blockade import blockade_from_config
from rgftrans.io.config import parse_config

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


def _fast(name, tmp_path, **changes):
    text = (CONFIGS / name).read_text()
    for old, new in changes.items():
        text = text.replace(old, new)
    path = tmp_path / name
    path.write_text(text.replace('path = "out/', f'path = "{tmp_path}/'))
    return path


@pytest.fixture(scope="module")
def single(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("blockade")
    path = _fast("closed_dot.toml", tmp, **{"levels = 3": "levels = 2", "plunger_points = 1201": "plunger_points = 601",
                                            "bias_points = 121": "bias_points = 31"})
    return path, parse_config(path.read_text(), source=str(path))


def test_single_dot_from_the_layout(single, capsys):
    path, cfg = single
    assert main(["blockade", str(path), "--out-prefix", str(path.with_suffix(""))]) == EXIT_OK
    out = capsys.readouterr().out
    assert "E_C = " in out and "lever arm" in out and "s^-1" in out and "regime: sequential tunnelling" in out
    assert "x 2e^2/h" in out
    with h5py.File(cfg.output.path, "r") as f:
        g = f["blockade"]
        assert g["conductance"].attrs["units"] == "S" and g["conductance_2e2h"].attrs["units"] == "2e^2/h"
        assert g["plunger_voltage"].attrs["units"] == "V" and g["tunnel_rates"].attrs["units"] == "s^-1"
        g0 = 2 * constants.e**2 / constants.h  # 2e^2/h in S (CODATA, exact)
        assert np.allclose(g["conductance_2e2h"][()] * g0, g["conductance"][()], rtol=1e-12)
        e_c, alpha = g.attrs["charging_energy_meV"], g.attrs["lever_arm"]
        volts, g_cold = g["plunger_voltage"][()], g["conductance"][0]
    assert Path(f"{path.with_suffix('')}_peaks.png").stat().st_size > 0
    assert Path(f"{path.with_suffix('')}_diamonds.png").stat().st_size > 0
    # Peaks of one spin-degenerate orbital (the first two): their addition energies differ by E_C, and each
    # maximum sits (kT/2) ln 2 from its crossing, outward (test_charging.py): apart by (E_C + kT ln 2) / (e alpha).
    # Tolerance: two voltage steps plus the pull of the thermally excited next orbital (about 1.5 % here).
    inner = (g_cold[1:-1] > g_cold[:-2]) & (g_cold[1:-1] >= g_cold[2:]) & (g_cold[1:-1] > 0.05 * g_cold.max())
    peaks = volts[1:-1][inner]
    assert peaks.size == 4  # two orbitals, two spins each
    step = volts[1] - volts[0]
    kt = constants.k * 0.1 / constants.e * 1e3  # meV
    expected = (e_c + kt * np.log(2)) / (1000 * alpha)
    assert peaks[1] - peaks[0] == pytest.approx(expected, abs=2 * step + 0.015 * expected)


def test_double_dot_from_the_layout(tmp_path, capsys):
    path = _fast("double_dot.toml", tmp_path, **{"plunger_points = 161": "plunger_points = 81"})
    assert main(["blockade", str(path), "--out-prefix", str(tmp_path / "dd")]) == EXIT_OK
    assert "triple-point current" in capsys.readouterr().out
    with h5py.File(tmp_path / "double_dot.h5", "r") as f:
        g = f["blockade"]
        n1, v1 = g["charge1"][()], g["plunger1_voltage"][()]
        c_g = g["gate_capacitance"][()]
        assert g["current"].attrs["units"] == "A" and g["sensor"].attrs["units"] == "meV"
    # Along the first plunger the charge of dot 1 steps every e / C_g11 (cross-capacitance shifts the lines
    # but not the period along a row).
    row = n1[n1.shape[0] // 2]
    steps = v1[1:][np.diff(row) != 0]
    period = constants.e / (c_g[0, 0] * 1e-18)
    assert np.allclose(np.diff(steps), period, atol=2 * (v1[1] - v1[0]))


@pytest.mark.parametrize("change, fragment", [
    (('dots = ["dot"]', 'dots = ["island"]'), "no [[gates.region]] named 'island'"),
    (('plungers = ["plunger"]', 'plungers = ["gate9"]'), "no gate named 'gate9'"),
    (("kelvin = [0.1, 0.5]", "kelvin = [0.0]"), "above 0 K"),
])
def test_bad_blockade_tables_are_one_line(tmp_path, capsys, change, fragment):
    path = _fast("closed_dot.toml", tmp_path, **{change[0]: change[1]})
    assert main(["blockade", str(path)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and fragment in err[0], err


def test_compare_fits_coulomb_peaks_from_the_stored_lever_arm(single, tmp_path, capsys):
    """A synthetic trace (the stored model's own peaks, invented noise) fitted back: the lever arm within a few
    per cent of the layout's (the single-level line shape ignores thermally excited orbitals), exit 0; a flat
    trace fails loudly with exit 1."""
    path, cfg = single
    if not Path(cfg.output.path).exists():
        assert main(["blockade", str(path), "--out-prefix", str(path.with_suffix(""))]) == EXIT_OK
    with h5py.File(cfg.output.path, "r") as f:
        volts, g = f["blockade/plunger_voltage"][()], f["blockade/conductance"][0]
        alpha = f["blockade"].attrs["lever_arm"]
    noise = 0.01 * g.max()
    csv = tmp_path / "peaks.csv"
    measured = g + np.random.default_rng(5).normal(0.0, noise, g.size)
    np.savetxt(csv, np.column_stack([volts, measured * 1e9]), delimiter=",", header="Vg [V],G [nS]", comments="")
    args = ["compare", str(cfg.output.path), str(csv), "--coulomb-peaks", "--spin", "--temperature", "0.1",
            "--noise", f"{noise:.6g}", "--group", "peaks", "--out-prefix", str(tmp_path / "fit")]
    assert main(args) == EXIT_OK
    out = capsys.readouterr().out
    assert "fitted / predicted" in out
    with h5py.File(cfg.output.path, "r") as f:
        fitted = f["peaks"].attrs["lever_arm"]
        assert f["peaks/tunnel_rate"].attrs["units"] == "s^-1"
    assert fitted == pytest.approx(alpha, rel=0.05)
    flat = tmp_path / "flat.csv"
    np.savetxt(flat, np.column_stack([volts, np.full(volts.size, 1.0)]), delimiter=",", header="Vg [V],G [nS]",
               comments="")
    assert main(["compare", str(cfg.output.path), str(flat), "--coulomb-peaks", "--temperature", "0.1",
                 "--group", "flat", "--out-prefix", str(tmp_path / "flat")]) == 1


def test_interdot_coupling_is_half_the_bonding_antibonding_splitting():
    """Two 3 x 3 boxes (t = 1) joined corner to corner by one bond tau: degenerate perturbation theory splits
    their ground states by 2 tau psi(corner)^2, psi(corner) = (2/4) sin(pi/4)^2 = 1/4 (common practice), so
    t_c = tau / 16 to first order in tau."""
    import scipy.sparse as sp

    from rgftrans.io.blockade import interdot_coupling
    from rgftrans.system.device import TightBindingModel

    tau = 1e-3
    box = sp.diags([-np.ones(8), -np.ones(8), -np.ones(6), -np.ones(6)], [1, -1, 3, -3]).tolil()
    for i in (2, 5):  # no bonds across rows
        box[i, i + 1] = box[i + 1, i] = 0.0
    ham = sp.block_diag([box, box]).tolil()
    ham[8, 9] = ham[9, 8] = -tau  # corner (2, 2) of the first box to corner (0, 0) of the second
    xy = np.array([[i % 3, i // 3] for i in range(9)] + [[3 + i % 3, 3 + i // 3] for i in range(9)], float)
    model = TightBindingModel(sp.csr_matrix(ham, dtype=complex), xy, ())
    first = np.arange(18) < 9
    t_c = interdot_coupling(model, first, ~first, target=-2 * np.sqrt(2), count=2)
    assert t_c == pytest.approx(tau / 16, rel=1e-2)
    # Uncoupled boxes: no shared pair (each degenerate level is resolved on one box or mixed arbitrarily; either
    # way the splitting is zero to round-off).
    apart = interdot_coupling(TightBindingModel(sp.csr_matrix(sp.block_diag([box, box]), dtype=complex), xy, ()),
                              first, ~first, target=-2 * np.sqrt(2), count=2)
    assert apart is None or apart < 1e-12
