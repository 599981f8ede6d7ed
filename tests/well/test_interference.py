"""Tests of blendq.well.interference: well-to-well drawdown by Theis or Thiem superposition.

Sources:
- Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, 2nd
  ed., ILRI Publication 47: the annex table of the Theis well function, W(0.01) = 4.038 and
  W(1) = 0.2194 (four figures).
- Abramowitz, M. and Stegun, I.A. (1964) Handbook of Mathematical Functions, 5.1.11: the series
  E1(u) = -gamma - ln u - sum_(n >= 1) (-u)^n / (n n!), summed here term by term.
- ttim (PyPI; Bakker's transient analytic-element multi-aquifer model): one confined aquifer
  with pumping wells; its head at a well's location is the Theis drawdown of the others.
- timml (PyPI; Bakker's steady analytic-element multi-aquifer model): one confined aquifer,
  a well at the centre of a ring of head-specified line sinks of radius R; inside the ring the
  drawdown is Thiem's Q ln(R / r) / (2 pi T).
- Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4): for small u, W(u) = ln(2.25 T t /
  (r^2 S)) (error below u), so Theis equals Thiem with R = sqrt(2.25 T t / S).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st_

from blendq.errors import InputError
from blendq.well.interference import (
    interference_drawdown,
    interference_matrix,
    theis_well_function,
)

T = 500.0  # [m^2/d]
THICK = 20.0  # [m]
S = 2e-4  # [-]
RW = 0.15  # [m]
X = np.array([0.0, 150.0, 60.0])
Y = np.array([0.0, 40.0, -220.0])
Q = np.array([1200.0, 800.0, 1500.0])  # [m^3/d]
TIMES = (0.5, 3.0, 30.0)  # [d]


def _series_e1(u: float) -> float:
    # Abramowitz and Stegun (1964) 5.1.11
    terms, term = [], 1.0
    for n in range(1, 60):
        term *= -u / n
        terms.append(term / n)
    return -np.euler_gamma - math.log(u) - math.fsum(terms)


def test_well_function_matches_the_published_table():
    # Kruseman and de Ridder (1990), annex table of W(u), four significant figures
    np.testing.assert_allclose(theis_well_function(0.01), 4.038, rtol=0, atol=5e-4)
    np.testing.assert_allclose(theis_well_function(1.0), 0.2194, rtol=0, atol=5e-5)


@pytest.mark.parametrize("u", [1e-6, 1e-4, 3e-3, 0.05, 0.4, 1.0, 2.5])
def test_well_function_matches_the_series(u):
    # Abramowitz and Stegun (1964) 5.1.11, summed independently of scipy
    np.testing.assert_allclose(theis_well_function(u), _series_e1(u), rtol=1e-10)


def _ttim_model(x, y, rates):
    ttim = pytest.importorskip("ttim")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ml = ttim.ModelMaq(kaq=[T / THICK], z=[0.0, -THICK], Saq=[S / THICK],
                           topboundary="conf", tmin=1e-3, tmax=100.0)
        wells = [ttim.Well(ml, x[k], y[k], rw=RW, tsandQ=[(0.0, rates[k])])
                 for k in range(len(x))]
        ml.solve(silent=True)
    return ml, wells


@pytest.mark.parametrize("time", TIMES)
def test_theis_column_matches_ttim(time):
    # ttim: one confined aquifer, one well pumping 1000 m3/d at well 1's place; its head at the
    # other wells' places (no element there) is their interference drawdown per 1000 m3/d
    ml, _ = _ttim_model(X[:1], Y[:1], [1000.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        head = np.array([np.ravel(ml.head(X[k], Y[k], time))[0] for k in (1, 2)])
    a = interference_matrix(X, Y, T, storativity=S, time=time, well_radius=RW)
    # tolerance: ttim's numerical Laplace inversion agrees with Theis to about 1e-7 here
    np.testing.assert_allclose(1000.0 * a[1:, 0], -head, rtol=1e-6)


@pytest.mark.parametrize("time", TIMES)
def test_theis_superposition_matches_ttim_wellfield(time):
    # ttim: three wells pumping at once; the level inside each well is its own Theis drawdown
    # at r_w (Theis 1935, W(r_w^2 S / (4 T t))) plus the interference of the others
    _, wells = _ttim_model(X, Y, Q)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        inside = np.array([np.ravel(w.headinside(time))[0] for w in wells])
    own = Q / (4 * np.pi * T) * theis_well_function(RW**2 * S / (4 * T * time))
    a = interference_matrix(X, Y, T, storativity=S, time=time, well_radius=RW)
    # tolerance: ttim takes the level at the well screen, r_w (0.15 m) off the centre, so the
    # distances to the others differ by up to r_w / r (1e-3)
    np.testing.assert_allclose(interference_drawdown(a, Q), -inside - own, rtol=1e-3)


def test_thiem_column_matches_timml_ring():
    # timml: a well of 1000 m3/d at the centre of a ring of 120 head-specified line sinks
    # (head 0) of radius R; its head at the other wells (inside the ring) is Thiem's drawdown
    timml = pytest.importorskip("timml")
    radius, n_ring = 800.0, 120
    angle = np.linspace(0.0, 2.0 * np.pi, n_ring + 1)
    vertex = radius / np.cos(np.pi / n_ring)  # each segment's control point lies on R
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ml = timml.ModelMaq(kaq=[T / THICK], z=[0.0, -THICK], topboundary="conf")
        timml.HeadLineSinkString(ml, xy=list(zip(vertex * np.cos(angle),
                                                 vertex * np.sin(angle), strict=True)), hls=0.0)
        timml.Well(ml, 0.0, 0.0, Qw=1000.0, rw=RW)
        ml.solve(silent=True)
        head = np.array([ml.head(X[k], Y[k])[0] for k in (1, 2)])
    a = interference_matrix(X, Y, T, radius_of_influence=radius, well_radius=RW)
    # tolerance: the ring is 120 straight segments (60 segments give 4e-4, 120 give 1e-4)
    np.testing.assert_allclose(1000.0 * a[1:, 0], -head, rtol=3e-4)


def test_thiem_is_zero_beyond_the_radius_of_influence():
    # Thiem (1906), Kruseman and de Ridder (1990): no drawdown at or beyond R
    a = interference_matrix([0.0, 799.0, 800.0, 0.0], [0.0, 0.0, 0.0, 1500.0], T,
                            radius_of_influence=800.0)
    assert a[2, 0] == 0.0 and a[3, 0] == 0.0 and a[3, 1] == 0.0
    np.testing.assert_allclose(a[1, 0], math.log(800.0 / 799.0) / (2 * np.pi * T), rtol=1e-12)
    assert a[1, 2] > 0.0  # 1 m apart


@pytest.mark.parametrize("time", [5.0, 50.0])
def test_theis_tends_to_thiem_with_the_cooper_jacob_radius(time):
    # Cooper and Jacob (1946): for small u, W(u) = ln(2.25 T t / (r^2 S)) with an error below
    # u, so Theis equals Thiem with R = sqrt(2.25 T t / S); 2.25 is 4 exp(-gamma) = 2.2458
    # rounded (Abramowitz and Stegun 1964, 5.1.11), kept exact here
    x, y = np.array([0.0, 30.0, -20.0]), np.array([0.0, 10.0, 25.0])
    theis = interference_matrix(x, y, T, storativity=S, time=time)
    radius = math.sqrt(4 * math.exp(-np.euler_gamma) * T * time / S)
    thiem = interference_matrix(x, y, T, radius_of_influence=radius)
    u_max = (50.0**2 + 15.0**2) * S / (4 * T * time)  # the farthest pair
    assert u_max < 1e-4
    np.testing.assert_allclose(theis, thiem, rtol=0, atol=u_max / (4 * np.pi * T))
    # with the rounded 2.25 the two differ by ln(2.25 / 2.2458) / (4 pi T), within the same u
    rounded = interference_matrix(x, y, T, radius_of_influence=math.sqrt(2.25 * T * time / S))
    shift = math.log(2.25 * math.exp(np.euler_gamma) / 4) / (4 * np.pi * T)
    np.testing.assert_allclose(rounded[0, 1] - theis[0, 1], shift, rtol=0,
                               atol=u_max / (4 * np.pi * T))


def test_matrix_shape_symmetry_and_diagonal():
    a = interference_matrix(X, Y, T, storativity=S, time=3.0)
    assert a.shape == (3, 3)
    np.testing.assert_array_equal(np.diag(a), 0.0)
    np.testing.assert_allclose(a, a.T, rtol=1e-14)
    assert (a[~np.eye(3, dtype=bool)] > 0).all()
    # one well: nothing to interfere with
    np.testing.assert_array_equal(interference_matrix([5.0], [5.0], T, S, 3.0), [[0.0]])


coord = st_.floats(-2000.0, 2000.0, allow_nan=False)
rate = st_.floats(0.0, 5000.0, allow_nan=False)


def _spread(xs, ys):
    r = np.hypot(np.subtract.outer(xs, xs), np.subtract.outer(ys, ys))
    return (r + np.eye(len(xs)) * 1e9).min() > 1.0


@settings(max_examples=60, deadline=None)
@given(st_.lists(st_.tuples(coord, coord, rate, rate), min_size=2, max_size=6),
       st_.sampled_from(["theis", "thiem"]))
def test_superposition_and_monotony(wells, method):
    xs, ys, q1, q2 = (np.array(c) for c in zip(*wells, strict=True))
    if not _spread(xs, ys):
        return
    kw = ({"storativity": S, "time": 10.0} if method == "theis"
          else {"radius_of_influence": 1500.0})
    a = interference_matrix(xs, ys, T, **kw)
    s1, s2 = interference_drawdown(a, q1), interference_drawdown(a, q2)
    # superposition: linear in the rates (batched rates give the same rows)
    np.testing.assert_allclose(interference_drawdown(a, q1 + q2), s1 + s2, rtol=1e-12,
                               atol=1e-12)
    np.testing.assert_allclose(interference_drawdown(a, np.stack([q1, q2])), [s1, s2],
                               rtol=1e-12, atol=1e-15)
    # more pumping, more drawdown (never less)
    assert (interference_drawdown(a, q1 + q2) >= s1 - 1e-12).all()
    # moving well 2 twice as far from well 1 never raises its drawdown from well 1
    far_x = xs.copy()
    far_y = ys.copy()
    far_x[1] = xs[0] + 2 * (xs[1] - xs[0])
    far_y[1] = ys[0] + 2 * (ys[1] - ys[0])
    if _spread(far_x, far_y):
        b = interference_matrix(far_x, far_y, T, **kw)
        assert b[1, 0] <= a[1, 0]
        assert b[1, 0] < a[1, 0] or a[1, 0] == 0.0


@settings(max_examples=40, deadline=None)
@given(st_.floats(1.0, 3000.0), st_.floats(0.01, 300.0), st_.floats(1.001, 5.0))
def test_theis_drawdown_grows_with_time_and_falls_with_distance(r, t, factor):
    # factor from 1.001: at 1 + 2e-16 the rounding of r^2 S / (4 T t) decides the order
    a = interference_matrix([0.0, r], [0.0, 0.0], T, storativity=S, time=t)
    later = interference_matrix([0.0, r], [0.0, 0.0], T, storativity=S, time=t * factor)
    farther = interference_matrix([0.0, r * factor], [0.0, 0.0], T, storativity=S, time=t)
    assert later[1, 0] >= a[1, 0] >= farther[1, 0]


@pytest.mark.parametrize(("kwargs", "field", "words"), [
    ({"x": [0.0, 0.0], "y": [1.0, 1.0]}, "x, y", "well 1 and well 2 coincide"),
    ({"x": [0.0, 0.2], "well_radius": 0.15}, "x, y", "overlap"),
    ({"transmissivity": 0.0}, "transmissivity", "not a positive"),
    ({"transmissivity": -5.0}, "transmissivity", "not a positive"),
    ({"transmissivity": float("nan")}, "transmissivity", "not a positive"),
    ({"storativity": 2.0}, "storativity", "above 1"),
    ({"time": 0.0}, "time", "not a positive"),
    ({"time": None}, "time", "missing"),
    ({"storativity": None, "time": None}, "radius_of_influence", "give storativity and time"),
    ({"radius_of_influence": 500.0}, "radius_of_influence", "not both"),
    ({"storativity": None, "time": None, "radius_of_influence": 0.1, "well_radius": 0.15},
     "radius_of_influence", "not larger than the well radius"),
    ({"x": [0.0, 1.0, 2.0]}, "x, y", "same length"),
    ({"x": [0.0, float("inf")]}, "x, y", "not finite"),
    ({"names": ["north"]}, "names", "1 well names for 2 wells"),
    ({"well_radius": -1.0}, "well_radius", "not a finite value >= 0"),
    ({"well_radius": [0.1, 0.1, 0.1]}, "well_radius", "well radii of shape (3,) for 2 wells"),
])
def test_bad_input_is_named(kwargs, field, words):
    args = {"x": [0.0, 100.0], "y": [0.0, 0.0], "transmissivity": T, "storativity": S,
            "time": 1.0}
    args.update(kwargs)
    with pytest.raises(InputError) as err:
        interference_matrix(**args)
    assert err.value.field == field
    assert words in str(err.value)


def test_messages_use_the_well_names():
    with pytest.raises(InputError, match="north and east coincide: 0 m apart"):
        interference_matrix([0.0, 0.0], [3.0, 3.0], T, S, 1.0, names=["north", "east"])


def test_drawdown_rejects_mismatched_shapes():
    a = np.zeros((3, 3))
    with pytest.raises(InputError, match="one rate per well for 3 wells"):
        interference_drawdown(a, [1.0, 2.0])
    with pytest.raises(InputError, match="not square"):
        interference_drawdown(np.zeros((2, 3)), [1.0, 2.0, 3.0])
