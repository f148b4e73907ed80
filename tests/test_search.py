"""Neighbourhood search: the k-d tree path against a brute-force selection written here."""
import numpy as np
import pytest

import geosim
import independent
from geosim.search import DataSearch, Neighbourhood, search_ellipsoid
from geosim.variogram import Anisotropy


def _brute(coords, target, nb, ell, holes=None, exclude=-1):
    """Plain-Python greedy selection (tests/independent.py: axes built by hand, not geosim's)."""
    return independent.select_samples(coords, target, max_samples=nb.max_samples, ranges=ell.ranges,
                                      azimuth=ell.azimuth, dip=ell.dip, rake=ell.rake, sectors=nb.sectors,
                                      sector_limit=nb.sector_limit, holes=holes, hole_limit=nb.hole_limit,
                                      exclude=exclude)


def _check_all(search, targets, nb, ell, holes=None, exclude=None, workers=1):
    idx, count = search.query(targets, exclude_index=exclude, workers=workers)
    for i, t in enumerate(targets):
        want = _brute(search.xyz[:, :targets.shape[1]], t, nb, ell, holes,
                      -1 if exclude is None else exclude[i])
        got = idx[i, :count[i]].tolist()
        assert sorted(got) == sorted(want), (i, got, want)
        assert np.all(idx[i, count[i]:] == -1)


def test_anisotropic_ellipse_matches_brute_force():
    rng = np.random.default_rng(11)
    pts = rng.uniform(0, 1000, size=(400, 2))
    nb = Neighbourhood(max_samples=12, ranges=(300.0, 80.0), azimuth=35.0)
    s = DataSearch(pts, nb)
    ell = Anisotropy((300.0, 80.0), azimuth=35.0)
    _check_all(s, rng.uniform(0, 1000, size=(60, 2)), nb, ell)


def test_selection_is_nearest_first_in_reduced_distance():
    # along the major axis (north, azimuth 0) a sample 90 m away is nearer than one 30 m east
    pts = np.array([[0.0, 90.0], [30.0, 0.0]])
    s = DataSearch(pts, Neighbourhood(max_samples=1, ranges=(100.0, 31.0)))
    idx, count = s.query([[0.0, 0.0]])
    assert count[0] == 1 and idx[0, 0] == 0


def test_ellipsoid_defaults_to_longest_structure():
    short = geosim.Spherical(0.3, Anisotropy((50.0, 20.0), azimuth=10.0))
    long = geosim.Spherical(0.6, Anisotropy((400.0, 100.0), azimuth=60.0))
    model = geosim.Nugget(0.1) + short + long
    ell = search_ellipsoid(Neighbourhood(), model)
    assert ell.ranges[:2] == (400.0, 100.0) and ell.azimuth == 60.0
    ell = search_ellipsoid(Neighbourhood(ranges=(90.0, 90.0), azimuth=5.0), model)
    assert ell.ranges[:2] == (90.0, 90.0) and ell.azimuth == 5.0
    with pytest.raises(ValueError, match="ranges"):
        search_ellipsoid(Neighbourhood(), geosim.Model([geosim.Nugget(1.0)]))


def test_quadrant_limit_matches_brute_force_and_is_respected():
    rng = np.random.default_rng(5)
    # a cluster east of the targets plus sparse samples all around
    pts = np.vstack([rng.uniform(60, 80, size=(80, 2)), rng.uniform(-100, 100, size=(40, 2))])
    nb = Neighbourhood(max_samples=8, ranges=(150.0, 150.0), sectors=4, max_per_sector=2)
    s = DataSearch(pts, nb)
    ell = Anisotropy((150.0, 150.0))
    targets = rng.uniform(-20, 20, size=(30, 2))
    _check_all(s, targets, nb, ell)
    idx, count = s.query(targets)
    for i, t in enumerate(targets):
        lag = (pts[idx[i, :count[i]]] - t) @ ell.matrix()[:, :2].T
        sectors = (lag[:, 0] < 0).astype(int) + 2 * (lag[:, 1] < 0)
        assert np.bincount(sectors, minlength=4).max() <= 2


def test_octants_in_3d_and_no_octants_in_2d():
    rng = np.random.default_rng(8)
    pts = rng.uniform(0, 100, size=(300, 3))
    nb = Neighbourhood(max_samples=16, ranges=(60.0, 40.0, 20.0), azimuth=20.0, dip=10.0, sectors=8)
    _check_all(DataSearch(pts, nb), rng.uniform(20, 80, size=(25, 3)), nb,
               Anisotropy((60.0, 40.0, 20.0), 20.0, 10.0))
    with pytest.raises(ValueError, match="3-D"):
        DataSearch(pts[:, :2], nb)


def test_threads_sharing_the_tree_query_select_the_same_samples():
    # the engine's one search over all nodes runs with every core (workers=-1): still brute force's choice
    rng = np.random.default_rng(21)
    pts = rng.uniform(0, 100, size=(300, 3))
    holes = rng.integers(0, 12, size=300).astype(str)
    nb = Neighbourhood(max_samples=16, ranges=(60.0, 40.0, 20.0), azimuth=20.0, dip=10.0, sectors=8,
                       max_per_hole=3)
    s = DataSearch(pts, nb, hole_ids=holes)
    targets = rng.uniform(20, 80, size=(40, 3))
    for workers in (2, -1):
        _check_all(s, targets, nb, Anisotropy((60.0, 40.0, 20.0), 20.0, 10.0), holes, workers=workers)


def test_per_hole_limit_fetches_more_candidates_when_needed():
    # hole A: 100 samples right at the target; hole B and C farther off.  With max 2 per hole
    # the first 3*K candidates are all from hole A, so the search must widen.
    z = np.linspace(0, 10, 100)
    a = np.column_stack([np.zeros(100), np.zeros(100), z])
    b = np.column_stack([np.full(50, 30.0), np.zeros(50), np.linspace(0, 10, 50)])
    c = np.column_stack([np.zeros(50), np.full(50, 40.0), np.linspace(0, 10, 50)])
    pts = np.vstack([a, b, c])
    holes = np.array(["A"] * 100 + ["B"] * 50 + ["C"] * 50)
    nb = Neighbourhood(max_samples=6, ranges=(100.0, 100.0, 100.0), max_per_hole=2)
    s = DataSearch(pts, nb, hole_ids=holes)
    idx, count = s.query([[1.0, 1.0, 5.0]])
    assert count[0] == 6
    assert sorted(holes[idx[0, :6]].tolist()) == ["A", "A", "B", "B", "C", "C"]
    _check_all(s, np.array([[1.0, 1.0, 5.0], [25.0, 5.0, 2.0]]), nb, Anisotropy(100.0), holes)
    with pytest.raises(ValueError, match="hole ids"):
        DataSearch(pts, nb)


def test_exclusion_and_empty_ellipsoid():
    pts = np.array([[0.0, 0.0], [5.0, 0.0], [500.0, 0.0]])
    nb = Neighbourhood(max_samples=4, ranges=(10.0, 10.0))
    s = DataSearch(pts, nb)
    idx, count = s.query(pts, exclude_index=[0, 1, 2])
    assert count.tolist() == [1, 1, 0]
    assert idx[0, 0] == 1 and idx[1, 0] == 0
    assert np.all(idx[2] == -1)


def test_neighbourhood_validation():
    with pytest.raises(ValueError):
        Neighbourhood(max_samples=4, min_samples=5)
    with pytest.raises(ValueError):
        Neighbourhood(sectors=3)
    with pytest.raises(ValueError):
        Neighbourhood(max_per_sector=0)
    assert Neighbourhood(max_samples=10, sectors=4).sector_limit == 3
    assert Neighbourhood().sector_limit == 0 and Neighbourhood().hole_limit == 0
