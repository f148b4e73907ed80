"""Covariance structures, nesting and anisotropy against published formulas and reference libraries."""
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import geosim
from geosim.linalg import cholesky
from geosim.variogram import (Anisotropy, Cubic, Exponential, Gaussian, Matern, Model, Nugget,
                              Spherical)
from geosim.variogram.anisotropy import axes

# --- structure values at chosen lags ------------------------------------------------------------

# Spherical: gamma(h) = C [3/2 (h/a) - 1/2 (h/a)^3] for h <= a, C beyond.
# Journel and Huijbregts 1978, Mining Geostatistics, chapter III.B (section and numbering from memory).
# Exponential and Gaussian in their practical-range forms gamma = C [1 - exp(-3h/a)] and
# C [1 - exp(-3 h^2 / a^2)]: Journel and Huijbregts 1978, section III.B (they write exp(-h/a') with
# practical range a = 3a', and exp(-h^2/a'^2) with a = sqrt(3) a'; from memory).
# Cubic: gamma = C [7r^2 - 35/4 r^3 + 7/2 r^5 - 3/4 r^7], r = h/a <= 1: Chiles and Delfiner 2012,
# Geostatistics: Modeling Spatial Uncertainty, 2nd ed., chapter 2 (cubic model; section from memory).
# Each expected number below is that formula worked by hand at h/a = 0.5 (C = 2, a = 100).
HAND = [
    (Spherical, 2.0 * (0.75 - 0.0625)),                                  # 1.375
    (Exponential, 2.0 * (1.0 - math.exp(-1.5))),                          # 1.5537396...
    (Gaussian, 2.0 * (1.0 - math.exp(-0.75))),                            # 1.0552669...
    (Cubic, 2.0 * (1.75 - 1.09375 + 0.109375 - 0.005859375)),            # 1.51953125
]


@pytest.mark.parametrize("cls,expected", HAND)
def test_structures_against_published_formulas(cls, expected):
    m = Model([cls(2.0, Anisotropy.isotropic(100.0))])
    assert m.semivariance(np.array([[50.0, 0.0]]))[0] == pytest.approx(expected, rel=1e-12)
    # the range convention: spherical and cubic reach the sill at the range, the
    # practical-range forms reach 95 % of it
    at_range = m.semivariance(np.array([[0.0, 100.0]]))[0]
    if cls in (Spherical, Cubic):
        assert at_range == pytest.approx(2.0, abs=1e-12)
        assert m.semivariance(np.array([[0.0, 250.0]]))[0] == pytest.approx(2.0, abs=1e-12)
    else:
        assert at_range == pytest.approx(2.0 * (1 - math.exp(-3.0)), rel=1e-12)


@pytest.mark.parametrize("nu,closed", [
    # Matern closed forms for half-integer smoothness: Rasmussen and Williams 2006, Gaussian
    # Processes for Machine Learning, section 4.2.1, eq. (4.17) (equation number from memory),
    # with r = h / scale.
    (0.5, lambda r: np.exp(-r)),
    (1.5, lambda r: (1 + math.sqrt(3) * r) * np.exp(-math.sqrt(3) * r)),
    (2.5, lambda r: (1 + math.sqrt(5) * r + 5 * r**2 / 3) * np.exp(-math.sqrt(5) * r)),
])
def test_matern_half_integer_closed_forms(nu, closed):
    r = np.array([0.0, 0.1, 0.5, 1.0, 2.0, 4.0])
    np.testing.assert_allclose(Matern(1.0, 1.0, param=nu).correlation(r), closed(r), rtol=1e-10, atol=1e-14)


def test_exponential_gaussian_matern_against_scikit_learn():
    kernels = pytest.importorskip("sklearn.gaussian_process.kernels")
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 300, (40, 2))
    a = 120.0
    # practical range a -> scale a / 3 for exp(-h / scale) (scikit-learn Matern nu=0.5)
    np.testing.assert_allclose(Model([Exponential(1.0, a)]).cov_matrix(x),
                               kernels.Matern(length_scale=a / 3, nu=0.5)(x), rtol=1e-10, atol=1e-14)
    # exp(-3 h^2 / a^2) = exp(-h^2 / (2 l^2)) with l = a / sqrt(6) (scikit-learn RBF)
    np.testing.assert_allclose(Model([Gaussian(1.0, a)]).cov_matrix(x),
                               kernels.RBF(length_scale=a / math.sqrt(6))(x), rtol=1e-10, atol=1e-14)
    # geosim's Matern scale is scikit-learn's length_scale (both use sqrt(2 nu) h / scale)
    for nu in (0.5, 1.5, 2.5, 0.8):
        np.testing.assert_allclose(Model([Matern(1.0, a, param=nu)]).cov_matrix(x),
                                   kernels.Matern(length_scale=a, nu=nu)(x), rtol=1e-8, atol=1e-12)


def test_nugget_only_at_zero_lag():
    m = Nugget(0.3) + Spherical(0.7, 10.0)
    assert m.covariance(np.array([[0.0, 0.0]]))[0] == pytest.approx(1.0)
    assert m.covariance(np.array([[1e-6, 0.0]]))[0] == pytest.approx(0.7 * (1 - 1.5e-7), rel=1e-9)
    assert m.nugget == 0.3 and m.sill == 1.0


# --- anisotropy: the rotation convention ---------------------------------------------------------

def _unit(az, dip):
    """Hand-written direction (east, north, up) for azimuth clockwise from north, dip downward."""
    a, d = math.radians(az), math.radians(dip)
    return np.array([math.sin(a) * math.cos(d), math.cos(a) * math.cos(d), -math.sin(d)])


def test_2d_major_and_minor_reach_sill_at_their_ranges():
    an = Anisotropy.from_ratios(200.0, 0.25, azimuth=30.0)
    m = Model([Spherical(1.0, an)])
    major = _unit(30.0, 0.0)[:2]
    minor = _unit(120.0, 0.0)[:2]  # 90 degrees clockwise from the major axis
    lags = np.array([200 * major, 199 * major, 50 * minor, 49.5 * minor, -200 * major])
    g = m.semivariance(lags)
    assert g[0] == pytest.approx(1.0, abs=1e-12) and g[1] < 1.0
    assert g[2] == pytest.approx(1.0, abs=1e-12) and g[3] < 1.0
    assert g[4] == pytest.approx(1.0, abs=1e-12)
    # the same anisotropy given as ranges
    assert an == Anisotropy((200.0, 50.0, 200.0), azimuth=30.0)
    assert an.ratio_minor == 0.25


def test_3d_dip_major_axis_plunges():
    an = Anisotropy((300.0, 100.0, 20.0), azimuth=90.0, dip=30.0)
    down_east = _unit(90.0, 30.0)   # east and down 30 degrees
    up_east = _unit(90.0, -30.0)    # east and up 30 degrees
    r = an.reduced_distance(np.array([300 * down_east, 300 * up_east]))
    assert r[0] == pytest.approx(1.0, rel=1e-12)
    assert r[1] > 5.0  # mostly across the thin third axis
    # the third axis is perpendicular to the major axis, in the vertical plane through it, upward
    third = np.array([math.sin(math.radians(30)), 0.0, math.cos(math.radians(30))])
    assert an.reduced_distance(20 * third) == pytest.approx(1.0, rel=1e-12)
    assert an.reduced_distance(np.array([0.0, 100.0, 0.0])) == pytest.approx(1.0, rel=1e-12)


def test_3d_rake_turns_minor_axis_counter_clockwise_looking_down_major():
    # major north; looking north from the origin, east is to the right; turning it 90 degrees
    # counter-clockwise points it up. So with rake 90 the minor range applies vertically.
    an = Anisotropy((100.0, 40.0, 10.0), azimuth=0.0, dip=0.0, rake=90.0)
    assert an.reduced_distance(np.array([0.0, 0.0, 40.0])) == pytest.approx(1.0, rel=1e-12)
    assert an.reduced_distance(np.array([10.0, 0.0, 0.0])) == pytest.approx(1.0, rel=1e-12)
    assert an.reduced_distance(np.array([0.0, 100.0, 0.0])) == pytest.approx(1.0, rel=1e-12)
    rows = axes(0.0, 0.0, 90.0)
    np.testing.assert_allclose(rows @ rows.T, np.eye(3), atol=1e-12)


@settings(max_examples=30, deadline=None, derandomize=True)
@given(az=st.floats(-360.0, 360.0), dip=st.floats(-90.0, 90.0), rake=st.floats(-180.0, 180.0))
def test_axes_match_scipy_rotations(az, dip, rake):
    # The convention as three rotations of the frame (minor, major, third) = (east, north, up),
    # built with scipy.spatial.transform.Rotation (reference library): turn clockwise seen from
    # above by the azimuth (-az about up), plunge the major axis down by the dip (-dip about the
    # new minor axis), turn counter-clockwise looking down the major axis by the rake (-rake about
    # the new major axis). Intrinsic "ZXY" Euler angles do exactly that.
    from scipy.spatial.transform import Rotation
    r = Rotation.from_euler("ZXY", [-az, -dip, -rake], degrees=True).as_matrix()
    expected = np.vstack([r[:, 1], r[:, 0], r[:, 2]])  # rows: major, minor, third
    np.testing.assert_allclose(axes(az, dip, rake), expected, atol=1e-12)


def test_from_ratios_rejects_bad_ratios():
    with pytest.raises(ValueError, match="ratio_minor"):
        Anisotropy.from_ratios(100.0, 0.0)
    with pytest.raises(ValueError, match="azimuth"):
        Anisotropy((1.0, 1.0, 1.0), azimuth=float("nan"))


# --- compiled form agrees with numpy -------------------------------------------------------------

def test_compiled_cov_lag_matches_numpy_for_every_structure():
    from geosim.variogram.compiled import cov_lag
    an = Anisotropy((150.0, 60.0, 25.0), azimuth=40.0, dip=20.0, rake=10.0)
    m = (Nugget(0.1) + Spherical(0.3, an) + Exponential(0.2, an) + Gaussian(0.1, an)
         + Cubic(0.1, an) + Matern(0.2, Anisotropy((50.0, 20.0, 10.0), 70.0), param=1.2))
    cm = m.compiled()
    lags = np.random.default_rng(1).normal(scale=80.0, size=(200, 3))
    lags[0] = 0.0
    got = np.array([cov_lag(cm, *h) for h in lags])
    # Matern is tabulated (4097 points, linear interpolation): error <= h^2/8 max|rho''|, ~1e-5 here
    np.testing.assert_allclose(got, m.covariance(lags), atol=2e-5)
    np.testing.assert_allclose(got[0], m.sill)


# --- positive definiteness on random point sets (hypothesis) ---------------------------------------

STRUCTS = [Spherical, Exponential, Gaussian, Cubic, Matern]


def _points(seed, n, d, spread):
    rng = np.random.default_rng(seed)
    return rng.uniform(0, spread, (n, d))


@settings(max_examples=25, deadline=None, derandomize=True)
@given(seed=st.integers(0, 2**31), kind=st.sampled_from(STRUCTS), d=st.sampled_from([2, 3]),
       rng_range=st.floats(5.0, 500.0), ratio=st.floats(0.1, 1.0), az=st.floats(0.0, 360.0),
       dip=st.floats(-90.0, 90.0), rake=st.floats(-90.0, 90.0), nu=st.floats(0.2, 3.0))
def test_covariance_matrices_positive_semidefinite(seed, kind, d, rng_range, ratio, az, dip, rake, nu):
    an = Anisotropy.from_ratios(rng_range, ratio, ratio * 0.5, az, dip, rake)
    s = kind(1.0, an, param=nu) if kind is Matern else kind(1.0, an)
    x = _points(seed, 40, d, 200.0)
    c = Model([s]).cov_matrix(x)
    np.testing.assert_allclose(c, c.T, atol=1e-14)
    # a valid covariance is positive semi-definite: eigenvalues >= 0 up to rounding (n eps |C|)
    assert np.linalg.eigvalsh(c).min() > -1e-10 * len(x)


@settings(max_examples=20, deadline=None, derandomize=True)
@given(seed=st.integers(0, 2**31), d=st.sampled_from([2, 3]), az1=st.floats(0.0, 180.0),
       az2=st.floats(0.0, 180.0), dip=st.floats(0.0, 60.0), nugget=st.floats(0.01, 0.5))
def test_nested_anisotropic_models_factor(seed, d, az1, az2, dip, nugget):
    # with a nugget the matrix is positive definite: Cholesky must succeed (geosim.linalg)
    m = (Nugget(nugget) + Spherical(1.0, Anisotropy((120.0, 40.0, 15.0), az1, dip))
         + Exponential(0.5, Anisotropy((400.0, 300.0, 50.0), az2)) + Gaussian(0.2, 80.0))
    x = _points(seed, 60, d, 300.0)
    lower = cholesky(m.cov_matrix(x))
    assert np.all(np.diag(lower) > 0)


def test_not_positive_definite_is_reported():
    # two coincident samples without nugget: the matrix is singular and geosim says so
    x = np.array([[0.0, 0.0], [0.0, 0.0], [10.0, 0.0]])
    with pytest.raises(geosim.NotPositiveDefiniteError):
        cholesky(Model([Spherical(1.0, 50.0)]).cov_matrix(x))
