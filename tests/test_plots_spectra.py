"""Figures of spectra (rgftrans.plots.spectra): a closed level's |psi|^2 on the sites and a lead's bands.

Rendered with Agg on tiny invented devices (a = 1 nm, t = 1 meV).  The figures draw what they are handed: the
numbers checked here are the handed ones (no tolerance beyond exact equality of what was drawn)."""

from __future__ import annotations

import re

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from rgftrans.errors import EnergyError, RgftransError  # noqa: E402
from rgftrans.leads.bands import lead_bands  # noqa: E402
from rgftrans.plots.spectra import plot_lead_bands, plot_level_density  # noqa: E402
from rgftrans.spectra.closed import closed_levels  # noqa: E402
from rgftrans.system.device import Device, Lead  # noqa: E402
from rgftrans.system.geometry import rectangle  # noqa: E402
from rgftrans.system.lattices import square  # noqa: E402

UNIT_IN_PARENTHESES = re.compile(r"\([^()]+\)$")


@pytest.fixture(scope="module")
def model():
    return Device(rectangle(0, 0, 11, 5), [Lead("source", "left", (0, 5)), Lead("drain", "right", (1, 4))],
                  lattice=square(1.0), hopping=1.0).discretise()


def test_level_density_map_labels_positions_and_names_the_level(model):
    levels = closed_levels(model, count=3, weigh_in=rectangle(-0.5, -0.5, 5.5, 5.5))
    fig, ax = plot_level_density(levels, 1)
    assert ax.get_xlabel().endswith("(nm)") and ax.get_ylabel().endswith("(nm)")
    colourbar = fig.axes[-1]
    assert UNIT_IN_PARENTHESES.search(colourbar.get_ylabel())
    assert f"E = {levels.energies_meV[1]:.4g} meV" in ax.get_title() and "% in the region" in ax.get_title()
    drawn = ax.collections[0].get_array()
    assert np.array_equal(np.asarray(drawn), levels.density(1))
    plt.close(fig)
    with pytest.raises(RgftransError, match="level 7 is not one of the 3 levels found"):
        plot_level_density(levels, 7)


def test_lead_bands_figure_marks_thresholds_and_shades_the_window(model):
    bands = lead_bands(model, "drain", k_points=65)
    fig, ax = plot_lead_bands(bands, window=(1.0, 2.5))
    assert ax.get_xlabel() == "wave number k along the lead (1/nm)" and ax.get_ylabel() == "energy E (meV)"
    assert len([line for line in ax.get_lines() if line.get_color() == "tab:blue"]) == bands.n_bands
    marks = [line for line in ax.get_lines() if line.get_label().startswith("channel threshold")]
    assert len(marks) == 1 and sorted(marks[0].get_ydata()) == pytest.approx(sorted(bands.thresholds_meV))
    shaded = [p for p in ax.patches if p.get_label() == "energy window of the sweep"]
    assert len(shaded) == 1
    assert "drain" in ax.get_title() and "a = 1 nm" in ax.get_title()
    plt.close(fig)
    fig, ax = plot_lead_bands(bands, max_bands=2, energy_range=(0.0, 3.0))
    assert len([line for line in ax.get_lines() if line.get_color() == "tab:blue"]) == 2
    marks = [line for line in ax.get_lines() if line.get_label().startswith("channel threshold")][0].get_ydata()
    expected = [x.energy_meV for x in bands.extrema if not x.crossing and x.band < 2 and x.energy_meV <= 3.0]
    assert sorted(marks) == pytest.approx(sorted(expected)) and ax.get_ylim() == (0.0, 3.0)
    plt.close(fig)


@pytest.mark.parametrize("window, match", [((2.0, 1.0), "must be two finite energies with lo < hi"),
                                           ("low", "window must be two energies"),
                                           ((0.0, float("nan")), "must be two finite energies")])
def test_lead_bands_figure_refuses_a_bad_window(model, window, match):
    bands = lead_bands(model, "drain", k_points=17)
    with pytest.raises(EnergyError, match=match):
        plot_lead_bands(bands, window=window)
    plt.close("all")
