"""Light between metal plates (TM, E_z): cutoffs, flux conservation, Fabry-Perot slab, absorption."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.constants as const

from rgftrans.transport.direct import transmission_direct
from rgftrans.errors import LeadError, PotentialError, ResolutionWarning
from rgftrans.system.geometry import disk, rectangle
from rgftrans.analysis.light import waveguide_field, waveguide_resonances, waveguide_spectrum
from rgftrans.system.photonic import Dielectric, Port, Waveguide

H = 10.0  # mm, plate separation of the straight guides


def straight(spacing, *, eps_fill=1.0, dielectrics=()):
    return Waveguide(rectangle(0, 0, 20, H), [Port("in", "left", (0, H), eps_fill), Port("out", "right", (0, H), eps_fill)],
                     spacing=spacing, dielectrics=dielectrics, background=eps_fill).discretise()


def quiet(fn, *args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)
        return fn(*args)


def test_frequency_conversion_uses_codata_c():
    # k0a_squared = (k0 a)^2 with k0 = 2 pi f / c (definition; c exact in the SI); 1e-15 / 1e-14: rounding only.
    pm = straight(0.5)
    f = 12.5
    assert pm.k0a_squared(f) == pytest.approx((2 * np.pi * f * 1e9 * 0.5e-3 / const.c) ** 2, rel=1e-15)
    assert pm.frequency_GHz(pm.k0a_squared(f)) == pytest.approx(f, rel=1e-14)


@pytest.mark.parametrize("eps", [1.0, 2.25])
def test_cutoffs_converge_to_parallel_plate_formula_at_second_order(eps):
    """f_n = n c / (2 h sqrt(eps)) for the TM_n modes of a parallel-plate guide (D. M. Pozar, Microwave Engineering,
    Wiley, ch. 3, from memory).  The five-point Laplacian errs by (k_c a)^2 / 12, so halving the spacing must
    divide the error by 4: measured order 2 within 0.02."""
    exact = np.arange(1, 4) * const.c / (2 * H * 1e-3 * np.sqrt(eps)) / 1e9
    errors = [np.abs(straight(a, eps_fill=eps).cutoffs_GHz(0, 3) - exact) / exact for a in (1.0, 0.5, 0.25)]
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert np.all(np.abs(orders - 2.0) < 0.02)
    # (k_c a)^2 / 12 at a = 0.25 mm is at most ~2e-3 relative for n <= 3 here; 3e-3 bounds it.
    assert errors[-1].max() < 3e-3


def test_transmission_staircase_steps_at_the_grid_cutoffs():
    """An empty straight guide transmits every open mode fully: T = N, and N steps at the cutoffs of the grid."""
    pm = straight(0.5)
    fc = pm.cutoffs_GHz(0, 3)
    f = np.sort(np.concatenate([fc * (1 - 1e-6), fc * (1 + 1e-6), [5.0, 40.0]]))
    s = quiet(waveguide_spectrum, pm, f)
    expected = np.searchsorted(fc, f)
    assert np.array_equal(s.n_open[:, 0], expected)
    # Clean guide T = N (ballistic, common practice, no source); round-off of the port eigen-solve, 1e-9.
    assert np.allclose(s.matrix[:, 1, 0], expected, atol=1e-9)


def cavity(loss_tangent=0.0, spacing=0.5):
    """An invented cavity: offset inlet and outlet, a dielectric puck."""
    return Waveguide(rectangle(0, 0, 30, 16), [Port("in", "left", (9, 16)), Port("out", "right", (0, 7))],
                     spacing=spacing,
                     dielectrics=[Dielectric(disk((15, 8), 4), 6.0, loss_tangent=loss_tangent, name="puck")]
                     ).discretise()


def test_flux_conservation_without_losses():
    """T + R = N for every input port (current conservation; common practice, no source), to 1e-10."""
    s = quiet(waveguide_spectrum, cavity(), np.linspace(21.5, 50, 25))
    total = s.matrix.sum(axis=1)
    assert np.allclose(total, s.n_open, atol=1e-10) and np.abs(s.absorption).max() < 1e-10
    assert s.n_open.max() >= 2  # the band reaches the two-mode range of the inlet


def test_rgf_matches_sparse_direct_solve_with_losses():
    pm = cavity(loss_tangent=0.02)
    for f in (22.0, 28.0):
        k0a_squared = pm.k0a_squared(f)
        s = quiet(waveguide_spectrum, pm, [f])
        direct = transmission_direct(pm.model_at(k0a_squared), [k0a_squared])[0, 1, 0]
        # Two independent solvers of the same lossy model: round-off, 1e-9 relative.
        assert s.matrix[0, 1, 0] == pytest.approx(direct, rel=1e-9)


def test_absorbed_power_equals_one_minus_t_minus_r():
    """With eps = eps' (1 + i tan d) the power lost in the dielectric, 2 k0a_squared sum tan(d) |phi|^2 for unit incident
    flux (Poynting's theorem on the grid, our derivation), equals 1 - T - R from the scattering matrix, to 1e-10."""
    pm = cavity(loss_tangent=0.02)
    freqs = np.array([22.0, 25.0, 28.0])
    s = quiet(waveguide_spectrum, pm, freqs)
    for k, f in enumerate(freqs):
        fm = quiet(waveguide_field, pm, f)
        assert s.n_open[k, 0] == 1
        assert fm.absorbed == pytest.approx(1 - s.matrix[k, 1, 0] - s.matrix[k, 0, 0], abs=1e-10)
        assert fm.absorbed > 1e-3


def test_single_mode_slab_converges_to_fabry_perot():
    """A slab of eps filling the guide over length L: the TM_1 mode sees a 1D slab with propagation constants
    b0 = sqrt(k0^2 - (pi/h)^2) outside and b1 = sqrt(eps k0^2 - (pi/h)^2) inside, so
    T = 1 / (1 + ((b1^2 - b0^2) / (2 b0 b1))^2 sin^2(b1 L)) (the Fabry-Perot / rectangular-barrier result, e.g.
    M. Born & E. Wolf, Principles of Optics, sec. 1.6, from memory; derived here by matching E and dE/dx at both
    faces).  The grid error falls at second order: measured order 2 within 0.1 between 0.25 and 0.125 mm."""
    length, eps = 5.0, 4.0
    f = np.array([17.0, 21.0, 26.0])
    k0 = 2 * np.pi * f * 1e9 / const.c * 1e-3
    b0, b1 = np.sqrt(k0**2 - (np.pi / H) ** 2), np.sqrt(eps * k0**2 - (np.pi / H) ** 2)
    exact = 1 / (1 + ((b1**2 - b0**2) / (2 * b0 * b1)) ** 2 * np.sin(b1 * length) ** 2)
    errs = []
    for a in (0.25, 0.125):
        slab = Dielectric(rectangle(7.5, -1, 7.5 + length, H + 1), eps, name="slab")
        s = quiet(waveguide_spectrum, straight(a, dielectrics=[slab]), f)
        assert np.all(s.n_open[:, 0] == 1)
        errs.append(np.abs(s.matrix[:, 1, 0] - exact))
    assert np.all(np.abs(np.log2(errs[0] / errs[1]) - 2) < 0.1)
    assert errs[1].max() < 3e-3


def test_coarse_grid_warns_in_words():
    pm = cavity(spacing=1.0)
    with pytest.warns(ResolutionWarning, match="points per wavelength"):
        waveguide_spectrum(pm, [30.0])


def test_field_map_is_normalised_to_the_incident_wave():
    """In an empty straight guide the scattering state is the incident mode itself: peak |E_z| = 1, no enhancement."""
    pm = straight(0.5)
    fm = quiet(waveguide_field, pm, 20.0)
    # Normalisation to the incident mode (definition); round-off of the solve, 1e-9.
    assert fm.enhancement == pytest.approx(1.0, rel=1e-9) and fm.absorbed == 0.0


def test_resonance_q_in_frequency_matches_the_fano_fit():
    """The pole gives f = f' - i f'' and Q = f' / (2 f''); an isolated line of T(f) fitted with a Fano profile
    (U. Fano, Phys. Rev. 124, 1866 (1961), from memory) gives Q = f0 / width independently: agreement to 3 %
    (measured 1.9 %; the fit assumes a flat background)."""
    from rgftrans.analysis.darkstates import fit_fano

    pm = cavity()
    (r,) = [r for r in waveguide_resonances(pm, 30.0, count=3) if 100 < r.q_factor < 1000]  # the isolated line near 29.95 GHz
    f = r.frequency_GHz + np.linspace(-1.5, 1.5, 241) * r.width_GHz  # wider windows take in the tails of the
    # neighbouring lines 6 widths away, which bend the background the profile assumes flat
    fit = fit_fano(f, quiet(waveguide_spectrum, pm, f).matrix[:, 1, 0], energy_guess=r.frequency_GHz,
                   width_guess=r.width_GHz)
    assert fit.energy_meV / fit.width_meV == pytest.approx(r.q_factor, rel=0.03)  # (fit_fano is unit-agnostic)


@pytest.mark.parametrize("make, error, fragment", [
    (lambda: Port("p", "left", (0, 1), permittivity=2 + 0.1j), LeadError, "lossless"),
    (lambda: Dielectric(rectangle(0, 0, 1, 1), float("nan")), PotentialError, "permittivity"),
    (lambda: Dielectric(rectangle(0, 0, 1, 1), 4.0, loss_tangent=-0.1), PotentialError, "gain"),
])
def test_bad_input_is_one_line(make, error, fragment):
    with pytest.raises(error, match=fragment) as err:
        make()
    assert "\n" not in str(err.value)


# --- the invented microwave cavity from the command line --------------------------------------------------------
def test_command_line_cavity_spectrum_field_and_bic(tmp_path, capsys):
    """configs/microwave_cavity.toml with the search narrowed around one of its BICs (to keep the test short):
    the command writes the spectrum, the field map and the HDF5 file, and every BIC it reports has, on the rebuilt
    waveguide, a pole of zero width to round-off while both guides carry a mode (independent check)."""
    from pathlib import Path

    import h5py

    from rgftrans.cli import main
    from rgftrans.spectra.poles import resonances
    from rgftrans.io.waveguide_config import parse_waveguide

    text = (Path(__file__).parent.parent / "configs" / "microwave_cavity.toml").read_text()
    text = text.replace("start = 5.0\nstop = 7.0\npoints = 7", "start = 5.7\nstop = 6.1\npoints = 3")
    text = text.replace("start = -3.0\nstop = 3.0\npoints = 7", "start = -0.5\nstop = 0.7\npoints = 3")
    text = text.replace("points = 801", "points = 201")
    text = text.replace('path = "out/microwave_cavity.h5"', f'path = "{tmp_path / "cavity.h5"}"')
    cfg_path = tmp_path / "cavity.toml"
    cfg_path.write_text(text)
    assert main(["waveguide", str(cfg_path), "--out-prefix", str(tmp_path / "cav")]) == 0
    out = capsys.readouterr().out
    assert "BIC 0 (accidental)" in out and "Q one grid step away" in out
    for name in ("spectrum", "field", "plane", "dark_mode"):
        assert (tmp_path / f"cav_{name}.png").stat().st_size > 0
    cfg = parse_waveguide(text)
    with h5py.File(tmp_path / "cavity.h5", "r") as f:
        assert f["waveguide/frequency"].attrs["units"] == "GHz"
        t = f["waveguide/transmission"][()]
        assert np.allclose(t.sum(axis=1), f["waveguide/n_open"][()], atol=1e-9)  # lossless: T + R = N
        bics = [f["waveguide/darkstates"][k] for k in f["waveguide/darkstates"] if k.startswith("bic_")]
        assert bics
        for b in bics:
            eps, shift = b["parameter"][()]
            model = cfg.build({"dielectric.puck.permittivity": eps, "dielectric.puck.shift_x": shift}).discretise()
            assert b["frequency"].attrs["units"] == "GHz" and b["k0a_squared"].attrs["units"] == "1"
            assert float(model.frequency_GHz(b["k0a_squared"][()])) == pytest.approx(float(b["frequency"][()]), rel=1e-12)
            pole = resonances(model.model, float(b["k0a_squared"][()]), count=1)[0]  # the engine works in (k0 a)^2
            assert abs(pole.width_meV) < 1e-12 * pole.energy_meV and pole.n_open == (1, 1)
        units = {k: f["waveguide/darkstates"][k].attrs["units"] for k in ("p1", "p2", "frequency", "seed_frequency")}
        assert units == {"p1": "1", "p2": "mm", "frequency": "GHz", "seed_frequency": "GHz"}


@pytest.mark.parametrize("edit, fragment", [
    (("spacing = 0.4", "spacing = -0.4"), "spacing"),
    (('parameter = "dielectric.puck.shift_x"', 'parameter = "dielectric.lens.shift_x"'), "names no dielectric"),
    (("permittivity = 6.0", "permittivity = 6.0\ncolour = 1"), "colour"),
    (('side = "left"', 'side = "up"'), "side"),
])
def test_bad_waveguide_configs_are_one_line(tmp_path, capsys, edit, fragment):
    from pathlib import Path

    from rgftrans.cli import main

    text = (Path(__file__).parent.parent / "configs" / "microwave_cavity.toml").read_text()
    assert edit[0] in text
    (tmp_path / "bad.toml").write_text(text.replace(edit[0], edit[1], 1))
    assert main(["waveguide", str(tmp_path / "bad.toml")]) == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1


def test_off_grid_port_walls_are_reported():
    with pytest.warns(ResolutionWarning, match="fall between grid lines"):
        Waveguide(rectangle(0, 0, 10, 7), [Port("a", "left", (0, 7)), Port("b", "right", (0, 7))],
                  spacing=0.4).discretise()


def test_band_given_in_wavelengths():
    """[frequency] start_um/stop_um are vacuum wavelengths: f = c / lambda (scipy.constants.c)."""
    from pathlib import Path

    from rgftrans.errors import ConfigError
    from rgftrans.io.waveguide_config import parse_waveguide

    text = (Path(__file__).parent.parent / "configs" / "microwave_cavity.toml").read_text()
    cfg = parse_waveguide(text.replace("start_GHz = 21.2\nstop_GHz = 25.6", "start_um = 12000.0\nstop_um = 14000.0"))
    f = cfg.frequencies_GHz()
    assert f[0] == pytest.approx(const.c / 14000e-6 / 1e9) and f[-1] == pytest.approx(const.c / 12000e-6 / 1e9)
    with pytest.raises(ConfigError, match="either as start_GHz"):
        parse_waveguide(text.replace("start_GHz = 21.2", "start_um = 12000.0"))
