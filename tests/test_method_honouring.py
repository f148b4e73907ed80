"""The README's account of how data are honoured with a nugget, checked against the engines."""
from __future__ import annotations

from pathlib import Path

import numpy as np

import geosim

README = Path(__file__).resolve().parent.parent / "README.md"


def nugget_model():
    return geosim.Model([geosim.Nugget(0.3), geosim.Spherical(0.7, geosim.Anisotropy((40.0, 40.0, 40.0)))])


def test_the_readme_says_how_data_are_honoured_next_to_the_cautions():
    text = README.read_text()
    cautions = text.index("## Cautions")
    section = text.index("### How the data are honoured")
    assert cautions < section < text.index("## Usage")
    body = text[section:text.index("## Usage")]
    for phrase in ("point support", "nugget", "takes the sample's value", "does not", "block support"):
        assert phrase in body


def test_a_node_on_a_datum_takes_it_and_a_node_beside_it_does_not():
    model = nugget_model()
    data = np.array([[10.0, 10.0], [30.0, 20.0], [55.0, 50.0]])
    z = np.array([2.0, -1.0, 0.5])
    # simple kriging (mean 0): on the datum the estimate is the datum (exact interpolation);
    # 1 cm away the datum's weight drops by the nugget's share of the sill (Journel and
    # Huijbregts 1978, Mining Geostatistics, ch. V: kriging is exact at data points only)
    on = geosim.krige(data, z, data[:1], model, neighbourhood="global")
    off = geosim.krige(data, z, data[:1] + [0.01, 0.0], model, neighbourhood="global")
    assert abs(on.estimate[0] - 2.0) < 1e-9 and on.variance[0] < 1e-9
    assert abs(off.estimate[0] - 2.0) > 0.5
    assert off.variance[0] > 0.3 - 1e-6  # at least the nugget
    # simulation: the node (10, 10) lies on the first datum, the node (30, 20) is 1 m from the second
    grid = geosim.Grid(5.0, 5.0, (10.0, 10.0), (6, 6))  # node centres at 10, 20, ..., 60
    data2 = np.array([[10.0, 10.0], [31.0, 20.0]])       # the second is 1 m from the node (30, 20)
    scores = np.array([2.0, 2.0])
    fields = geosim.simulate(data2, scores, model, grid, n_realizations=200, seed=4, engine="exact",
                             workers=1)
    stack = np.array(fields)
    row_of = {10.0: 5, 20.0: 4}  # row 0 is the north edge (y = 60)
    at_datum = stack[:, row_of[10.0], 0]
    beside = stack[:, row_of[20.0], 2]
    np.testing.assert_allclose(at_datum, 2.0, atol=1e-6)
    # beside the datum the node scatters with at least the nugget's variance: over 200 draws the
    # sample variance has relative standard error sqrt(2 / 199) = 0.1, so 0.3 x (1 - 3 x 0.1) bounds it
    assert beside.var(ddof=1) > 0.3 * (1.0 - 3.0 * np.sqrt(2.0 / 199))
