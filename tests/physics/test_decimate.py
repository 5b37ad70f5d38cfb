"""Tests of the min/max display pyramid (mechanics only: invented curves)."""

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from zline.physics.decimate import DecimationPyramid

RNG = np.random.default_rng(20261201)
N = 200_003  # not a power of the level factor, so the last bins are partial
X = np.cumsum(RNG.uniform(0.5, 1.5, N))
Y = RNG.normal(size=N)
Y_NAN = Y.copy()
Y_NAN[50_000:50_500] = np.nan
Y_NAN[RNG.integers(0, N, 300)] = np.nan
PYR = DecimationPyramid(X, Y)
PYR_NAN = DecimationPyramid(X, Y_NAN)

windows = st.tuples(
    st.floats(X[0] - 1000, X[-1] + 1000), st.floats(X[0] - 1000, X[-1] + 1000),
    st.integers(1, 3000),
)


def _inside(xmin, xmax, y=Y):
    lo, hi = min(xmin, xmax), max(xmin, xmax)
    sel = (X >= lo) & (X <= hi)
    return X[sel], y[sel]


@settings(max_examples=80, deadline=None)
@given(windows)
def test_budget_peaks_and_order(win):
    xmin, xmax, npix = win
    xs, ys = PYR.window(xmin, xmax, npix)
    xin, yin = _inside(xmin, xmax)
    assert len(xs) <= max(2 * npix, 0)
    assert np.all(np.diff(xs) >= 0)
    if xin.size:
        assert len(xs) > 0
        # the extreme samples of the window are always drawn, at their own x
        assert yin.max() in ys and yin.min() in ys
        assert xin[np.argmax(yin)] in xs and xin[np.argmin(yin)] in xs
        # every drawn point is a real sample inside the window
        assert xs.min() >= xin[0] and xs.max() <= xin[-1]
        assert np.all(np.isin(xs, xin))
    else:
        assert len(xs) == 0


@settings(max_examples=60, deadline=None)
@given(windows)
def test_nan_gaps_kept(win):
    xmin, xmax, npix = win
    xs, ys = PYR_NAN.window(xmin, xmax, npix)
    xin, yin = _inside(xmin, xmax, Y_NAN)
    # one NaN separator at most per group on top of min and max
    assert len(xs) <= 3 * npix
    assert np.all(np.diff(xs) >= 0)
    if np.isnan(yin).any():
        assert np.isnan(ys).any()
    else:
        assert not np.isnan(ys).any()
    if np.isfinite(yin).any():
        assert np.nanmax(yin) == np.nanmax(ys) and np.nanmin(yin) == np.nanmin(ys)


def test_full_resolution_when_few_points():
    xs, ys = PYR.window(X[1000], X[1099], 50)  # 100 samples <= 2 * 50
    np.testing.assert_array_equal(xs, X[1000:1100])
    np.testing.assert_array_equal(ys, Y[1000:1100])
    xs[:] = 0  # a copy, not a view of the pyramid's data
    assert PYR.window(X[1000], X[1099], 50)[0][0] == X[1000]


def test_decimated_when_many_points():
    xs, ys = PYR.window(X[0], X[-1], 500)
    assert 500 <= len(xs) <= 1000
    assert ys.max() == Y.max() and ys.min() == Y.min()


def test_windows_outside_data_are_empty():
    for lo, hi in [(X[0] - 100, X[0] - 1), (X[-1] + 1, X[-1] + 100)]:
        xs, ys = PYR.window(lo, hi, 100)
        assert xs.size == 0 and ys.size == 0
    xs, _ = PYR.window(X[-1] + 1e9, X[0] - 1e9, 100)  # reversed limits covering everything
    assert 100 <= xs.size <= 200


def test_decreasing_x_and_all_nan():
    pyr = DecimationPyramid(X[::-1], Y[::-1])
    xs, ys = pyr.window(X[0], X[-1], 300)
    assert np.all(np.diff(xs) >= 0) and ys.max() == Y.max()
    pyr = DecimationPyramid(X[:5000], np.full(5000, np.nan))
    xs, ys = pyr.window(X[0], X[4999], 10)
    assert 1 <= xs.size <= 10 and np.isnan(ys).all()


def test_single_spike_on_flat_curve():
    y = np.zeros(N)
    y[123_457] = 5.0
    y[77_777] = -3.0
    xs, ys = DecimationPyramid(X, y).window(X[0], X[-1], 7)
    assert X[123_457] in xs and 5.0 in ys and X[77_777] in xs and -3.0 in ys


def test_quantities_in_and_out():
    pyr = DecimationPyramid(X * u.AA, Y * u.Jy)
    xs, ys = pyr.window(X[0] * u.AA, (X[-1] / 10) * u.nm, 100)
    assert xs.unit == u.AA and ys.unit == u.Jy and len(xs) <= 200
    with pytest.raises(u.UnitTypeError, match="'xmin' must be a Quantity"):
        pyr.window(1.0, 2.0 * u.AA, 10)
    with pytest.raises(u.UnitsError, match="plain numbers"):
        PYR.window(1.0 * u.AA, 2.0, 10)


def test_errors_name_the_argument():
    with pytest.raises(ValueError, match="same length"):
        DecimationPyramid([1, 2, 3], [1, 2])
    with pytest.raises(ValueError, match="monotonic"):
        DecimationPyramid([1, 3, 2], [1, 2, 3])
    with pytest.raises(ValueError, match="finite"):
        DecimationPyramid([1, np.nan, 2], [1, 2, 3])
    with pytest.raises(ValueError, match="'n_pixels'"):
        PYR.window(0, 1, 0)
