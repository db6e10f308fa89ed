"""The scattering matrix's queries by lead name: keyword-only source and drain, labelled results, one-line errors.

The numbers themselves (unitarity, Fisher-Lee against Caroli, closed forms) are checked in
tests/reference/test_unitarity.py and tests/reference/test_chain_scattering.py; here only the interface.
"""

import numpy as np
import pytest

from rgftrans.errors import LeadError
from rgftrans.system.device import Device, Lead
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.direct import LeadAmplitudes, scattering_matrix


@pytest.fixture(scope="module")
def smat():
    device = Device(rectangle(0, 0, 5, 4), [Lead("source", "left", (0, 4)), Lead("drain", "right", (1, 3)),
                                            Lead("probe", "top", (1, 3))], lattice=square(1.0), hopping=1.0,
                    potential=lambda x, y: 0.3 * np.sin(x + 2 * y))
    return scattering_matrix(device.discretise(), 1.3)


def test_amplitudes_are_labelled_and_sized_by_open_channels(smat):
    part = smat.amplitudes(source="source", drain="probe")
    assert isinstance(part, LeadAmplitudes) and (part.source, part.drain) == ("source", "probe")
    n_open = np.bincount(smat.channel_lead, minlength=3)
    assert part.matrix.shape == (n_open[2], n_open[0])
    # T is the sum of |amplitude|^2 (Fisher & Lee 1981, from memory); same numbers, so exact.
    assert part.transmission == float(np.sum(np.abs(part.matrix) ** 2))
    assert smat.transmission(source="source", drain="probe") == part.transmission


def test_names_and_indices_select_the_same_block(smat):
    by_name = smat.amplitudes(source="drain", drain="source")
    by_index = smat.amplitudes(source=1, drain=0)
    assert (by_index.source, by_index.drain) == ("drain", "source")
    assert np.array_equal(by_name.matrix, by_index.matrix)
    # Reflection: source and drain the same lead.
    assert smat.amplitudes(source="probe", drain=2).drain == "probe"


def test_source_and_drain_are_keyword_only(smat):
    with pytest.raises(TypeError):
        smat.transmission(0, 1)
    with pytest.raises(TypeError):
        smat.amplitudes("source", "drain")


@pytest.mark.parametrize("query, message", [
    (dict(source="sorce", drain="drain"), "source='sorce': no lead named 'sorce'; did you mean 'source'? the "
                                          "scattering matrix has ['source', 'drain', 'probe'] (names or indices 0..2)"),
    (dict(source="source", drain=3), "drain=3: lead index 3 is out of range; the scattering matrix has "
                                     "['source', 'drain', 'probe'] (indices 0..2)"),
    (dict(source=True, drain="drain"), "source=True: a lead is given by name or index"),
])
def test_unknown_leads_are_one_line_errors(smat, query, message):
    with pytest.raises(LeadError) as err:
        smat.transmission(**query)
    assert message in str(err.value) and "\n" not in str(err.value)
