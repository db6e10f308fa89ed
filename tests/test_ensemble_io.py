"""`rgftrans ensemble`: config to HDF5 group and figure, round trip, and one-line refusals."""

import h5py
import numpy as np
import pytest
import scipy.constants as sc

from rgftrans.cli import EXIT_BAD_INPUT, EXIT_OK, main
from rgftrans.errors import StoreError
from rgftrans.io.ensemble import read_ensemble, write_ensemble
from rgftrans.plots.ensemble import plot_fluctuations, plot_localisation
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.ensemble import disorder_ensemble, localisation_length

CONFIG = """
[material]
name = "GaAs"
[lattice]
kind = "square"
spacing_nm = 5.0
[geometry]
rectangle_nm = [0.0, 0.0, 150.0, 60.0]
[[leads]]
name = "source"
side = "left"
span_nm = [0.0, 60.0]
[[leads]]
name = "drain"
side = "right"
span_nm = [0.0, 60.0]
{disorder}
[energy]
values_meV = [4.013, 6.013]
[output]
path = "{out}"
"""


@pytest.fixture
def wire(tmp_path):
    path = tmp_path / "wire.toml"
    path.write_text(CONFIG.format(disorder="[disorder]\nwidth_meV = 10.0\nseed = 7", out=tmp_path / "wire.h5"))
    return path


@pytest.mark.filterwarnings("ignore:3 disorder samples")
def test_cli_writes_the_group_and_the_figure(wire, tmp_path, capsys):
    assert main(["ensemble", str(wire), "--samples", "60", "--quiet"]) == EXIT_OK
    out = capsys.readouterr().out
    assert "60 samples of W = 10 meV" in out and "2e^2/h" in out and "Landauer" in out
    assert (tmp_path / "wire_fluctuations.png").stat().st_size > 10_000
    res = read_ensemble(tmp_path / "wire.h5")
    assert list(res.seeds) == list(range(7, 67))
    # the stored samples are the ensemble recomputed in Python (same seeds, same device)
    device = Device(rectangle(0, 0, 150, 60), [Lead("source", "left", (0, 60)), Lead("drain", "right", (0, 60))],
                    lattice=square(5.0), material="GaAs", disorder=Disorder(10.0, 7))
    again = disorder_ensemble(device, [4.013, 6.013], seeds=[7, 30, 66])
    assert np.allclose(res.transmission[[0, 23, 59]], again.transmission, rtol=1e-10)
    with h5py.File(tmp_path / "wire.h5", "r") as f:
        g = f["ensemble"]
        assert g["conductance"].attrs["units"] in ("S", b"S")
        # siemens against CODATA's e and h
        assert np.allclose(g["conductance"][()], g["conductance_2e2h"][()] * 2 * sc.e**2 / sc.h, rtol=1e-12)
        assert np.allclose(g["conductance_variance_2e2h"][()], res.variance_g0)
        assert g["regime"].shape == (2,)
    # a second run without --overwrite is refused before any work, in one line
    assert main(["ensemble", str(wire), "--samples", "60", "--quiet"]) == EXIT_BAD_INPUT
    assert "exists" in capsys.readouterr().err


def test_cli_refuses_a_config_without_disorder_and_bad_counts(tmp_path, capsys):
    path = tmp_path / "clean.toml"
    path.write_text(CONFIG.format(disorder="", out=tmp_path / "clean.h5"))
    assert main(["ensemble", str(path), "--samples", "20", "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "no [disorder] table" in err and len(err.strip().splitlines()) == 1
    with pytest.raises(SystemExit):
        main(["ensemble", str(path), "--samples", "1"])
    assert "not a whole number >= 2" in capsys.readouterr().err


def test_negative_width_is_one_line(wire, capsys):
    assert main(["ensemble", str(wire), "--samples", "5", "--width-meV", "-1", "--quiet"]) == EXIT_BAD_INPUT
    assert "non-negative" in capsys.readouterr().err


def test_corrupt_and_foreign_files_are_refused(tmp_path):
    bad = tmp_path / "bad.h5"
    bad.write_bytes(b"not an HDF5 file at all")
    with pytest.raises(StoreError, match="cannot be read as HDF5"):
        read_ensemble(bad)
    with pytest.raises(StoreError, match="no such file"):
        read_ensemble(tmp_path / "missing.h5")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f.create_group("ensemble")
    with pytest.raises(StoreError, match="no disorder ensemble"):
        read_ensemble(other)


@pytest.mark.filterwarnings("ignore:10 disorder samples")
def test_round_trip_and_figures_have_labelled_axes(tmp_path):
    chains = []
    for n in (40, 80, 120):
        chain = Device(rectangle(0, -0.4, n - 1, 0.4), [Lead("l", "left", (-0.4, 0.4)), Lead("r", "right", (-0.4, 0.4))],
                       lattice=square(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(2.0))
        chains.append(disorder_ensemble(chain, [0.3], samples=10))
    write_ensemble(chains[0], tmp_path / "c.h5")
    back = read_ensemble(tmp_path / "c.h5")
    assert np.array_equal(back.transmission, chains[0].transmission) and back.solver == chains[0].solver
    fig, axes = plot_fluctuations(chains[:2], ["40 sites", "80 sites"])
    for ax in axes:
        assert "(" in ax.get_xlabel() and "(" in ax.get_ylabel()  # a name and a unit on every axis
    fit = localisation_length([40, 80, 120], chains)
    fig, ax = plot_localisation(fit, reference_nm=[24 * (4 - 0.09) / 4], reference_label="Thouless")
    assert "(nm)" in ax.get_xlabel() and "ln T" in ax.get_ylabel()
