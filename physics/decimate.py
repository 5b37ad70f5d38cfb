"""Min/max display pyramid: keep each view of a long spectrum to about two points per pixel.

`DecimationPyramid` precomputes, once, the index of the minimum and of the maximum of ``y`` in
bins of 4, 16, 64, ... samples.  A view request `DecimationPyramid.window` then costs
O(points shown): two binary searches on ``x``, a choice of the coarsest level that still has at
least ``n_pixels`` bins inside the window, a vectorised reduction of those bins into at most
``n_pixels`` groups, and an exact treatment of the two partial bins at the window edges.

Each group contributes its minimum and its maximum sample (original ``x`` and ``y``, in ``x``
order), so every peak and every trough inside the window survives.  NaN samples mark gaps: a
group holding a NaN contributes one NaN point at the position of its first NaN, so a plotted
line breaks there.
"""

import astropy.units as u
import numpy as np

__all__ = ["DecimationPyramid", "LEVEL_FACTOR"]

#: Bin-size ratio between successive pyramid levels.
LEVEL_FACTOR = 4


def _as_float_array(value, name):
    if isinstance(value, u.Quantity):
        unit = value.unit
        arr = np.asarray(value.value, dtype=np.float64)
    else:
        unit = None
        arr = np.asarray(value, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"Argument {name!r} must be one-dimensional; got shape {arr.shape}.")
    return arr, unit


class DecimationPyramid:
    """Multi-resolution min/max pyramid of a 1-D curve for fast display.

    Parameters
    ----------
    x : array-like or `~astropy.units.Quantity`
        Monotonic (increasing or decreasing) abscissa, finite, at least one sample.
    y : array-like or `~astropy.units.Quantity`
        Ordinate, same length as ``x``; NaN marks a gap and is kept as a gap.

    Notes
    -----
    Memory: two index arrays per level, about ``2 N / 3`` indices in all (int32 when ``N`` fits).
    Output ``x`` is always increasing (a decreasing input is reversed once at construction).
    If ``x`` (``y``) is a Quantity, `window` takes Quantity limits and returns Quantities in the
    same units; with plain arrays it takes and returns plain floats.
    """

    def __init__(self, x, y):
        x, self._xunit = _as_float_array(x, "x")
        y, self._yunit = _as_float_array(y, "y")
        if x.shape != y.shape:
            raise ValueError(
                f"Arguments 'x' and 'y' must have the same length; got {x.size} and {y.size}."
            )
        if x.size == 0:
            raise ValueError("Argument 'x' is empty; at least one sample is needed.")
        if not np.all(np.isfinite(x)):
            raise ValueError("Argument 'x' must be finite everywhere; it holds NaN or inf.")
        if x.size > 1 and x[0] > x[-1]:
            x, y = x[::-1], y[::-1]
        if x.size > 1 and bool((x[1:] < x[:-1]).any()):
            raise ValueError("Argument 'x' must be monotonic (increasing or decreasing).")
        self._x = np.ascontiguousarray(x)
        self._y = np.ascontiguousarray(y)
        self._has_nan = bool(np.isnan(self._y).any())
        self._build()

    # ------------------------------------------------------------------ construction
    def _build(self):
        f = LEVEL_FACTOR
        y = self._y
        n = y.size
        itype = np.int32 if n < 2**31 - 1 else np.int64
        self._itype = itype
        # level 0 is the data itself; levels 1.. hold argmin, argmax, first-NaN index (or -1);
        # the bin extrema are carried along as values so no level gathers from ``y``
        self._amin = [None]
        self._amax = [None]
        self._anan = [None]
        big = np.iinfo(itype).max
        vmin = vmax = y
        nan = anan = None
        if self._has_nan:
            nan = np.isnan(y)
            vmin, vmax = y.copy(), y.copy()
            vmin[nan], vmax[nan] = np.inf, -np.inf
        amin = amax = None  # level 0: the index is the position
        size = n
        while size > 1:
            pad = (-size) % f
            rows = (size + pad) // f
            if pad:
                vmin = np.concatenate([vmin, np.full(pad, np.inf)])
                vmax = np.concatenate([vmax, np.full(pad, -np.inf)])
            vmin2, vmax2 = vmin.reshape(rows, f), vmax.reshape(rows, f)
            jmin = np.argmin(vmin2, axis=1)
            jmax = np.argmax(vmax2, axis=1)
            flat_min = np.arange(0, rows * f, f) + jmin
            flat_max = np.arange(0, rows * f, f) + jmax
            vmin, vmax = vmin[flat_min], vmax[flat_max]
            if amin is None:
                # padded positions point past the end; clip them (their values are +-inf)
                amin = np.minimum(flat_min, n - 1).astype(itype)
                amax = np.minimum(flat_max, n - 1).astype(itype)
            else:
                if pad:
                    amin = np.concatenate([amin, np.full(pad, amin[-1], dtype=itype)])
                    amax = np.concatenate([amax, np.full(pad, amax[-1], dtype=itype)])
                amin, amax = amin[flat_min], amax[flat_max]
            if nan is not None and anan is None:  # level 1 from the boolean NaN mask
                nan2 = np.concatenate([nan, np.zeros(pad, bool)]).reshape(rows, f) if pad \
                    else nan.reshape(rows, f)
                first = np.arange(0, rows * f, f) + np.argmax(nan2, axis=1)
                anan = np.where(nan2.any(axis=1), first, big).astype(itype)
                self._anan.append(np.where(anan == big, -1, anan).astype(itype))
            elif anan is not None:
                if pad:
                    anan = np.concatenate([anan, np.full(pad, big, dtype=itype)])
                anan = anan.reshape(rows, f).min(axis=1)
                self._anan.append(np.where(anan == big, -1, anan).astype(itype))
            else:
                self._anan.append(None)
            self._amin.append(amin)
            self._amax.append(amax)
            size = rows
        self.levels = len(self._amin)

    # ------------------------------------------------------------------ helpers
    def __len__(self):
        return self._x.size

    def _bins(self, k, lo, hi):
        """(argmin, argmax, first-NaN) index arrays of level-k bins lo..hi-1."""
        if k == 0:
            idx = np.arange(lo, hi, dtype=self._itype)
            if self._has_nan:
                nan = np.where(np.isnan(self._y[lo:hi]), idx, -1)
            else:
                nan = None
            return idx, idx, nan
        nan = self._anan[k][lo:hi] if self._has_nan else None
        return self._amin[k][lo:hi], self._amax[k][lo:hi], nan

    def _range_candidates(self, a, b):
        """Exact (argmin, argmax, first-NaN) of samples a..b-1, in O(LEVEL_FACTOR * levels)."""
        f = LEVEL_FACTOR
        mins, maxs, nans = [], [], []
        k, lo, hi = 0, a, b
        while lo < hi:
            nlo, nhi = -(-lo // f), hi // f
            if k == self.levels - 1 or nlo >= nhi:
                parts = [(lo, hi)]
                lo = hi
            else:
                parts = [(lo, nlo * f), (nhi * f, hi)]
            for p0, p1 in parts:
                if p1 > p0:
                    i, j, q = self._bins(k, p0, p1)
                    mins.append(i)
                    maxs.append(j)
                    if q is not None:
                        nans.append(q)
            lo, hi, k = nlo, nhi, k + 1
        return self._reduce_one(mins, maxs, nans)

    def _reduce_one(self, mins, maxs, nans):
        y = self._y
        if not mins:
            return -1, -1, -1
        imin = np.concatenate(mins)
        imax = np.concatenate(maxs)
        vmin = np.where(np.isnan(y[imin]), np.inf, y[imin])
        vmax = np.where(np.isnan(y[imax]), -np.inf, y[imax])
        jmin, jmax = int(np.argmin(vmin)), int(np.argmax(vmax))
        gmin = int(imin[jmin]) if np.isfinite(vmin[jmin]) else -1
        gmax = int(imax[jmax]) if np.isfinite(vmax[jmax]) else -1
        gnan = -1
        if nans:
            q = np.concatenate(nans)
            q = q[q >= 0]
            gnan = int(q.min()) if q.size else -1
        return gmin, gmax, gnan

    def _limit(self, value, name):
        if self._xunit is None:
            if isinstance(value, u.Quantity):
                raise u.UnitsError(
                    f"Argument {name!r} is a Quantity ({value.unit}) but the pyramid was built "
                    "from plain numbers; pass a plain float."
                )
            return float(value)
        if not isinstance(value, u.Quantity):
            raise u.UnitTypeError(
                f"Argument {name!r} must be a Quantity convertible to {self._xunit}; "
                f"got {type(value).__name__} {value!r}."
            )
        return float(value.to_value(self._xunit, equivalencies=u.spectral()))

    def _wrap(self, xs, ys):
        if self._xunit is not None:
            xs = xs * self._xunit
        if self._yunit is not None:
            ys = ys * self._yunit
        return xs, ys

    # ------------------------------------------------------------------ public
    def window(self, xmin, xmax, n_pixels):
        """Points to draw for the view ``xmin <= x <= xmax`` on ``n_pixels`` screen pixels.

        Parameters
        ----------
        xmin, xmax : float or `~astropy.units.Quantity`
            View limits (Quantity if the pyramid was built from a Quantity ``x``); swapped if
            given in decreasing order.
        n_pixels : int
            Width of the plot in pixels (>= 1).

        Returns
        -------
        x, y : `~numpy.ndarray` (or `~astropy.units.Quantity`)
            Increasing ``x`` with the matching ``y``.  The full-resolution samples when the
            window holds at most ``2 * n_pixels`` of them; otherwise the minimum and maximum
            sample of each of at most ``n_pixels`` groups (at most ``2 * n_pixels`` points),
            plus one NaN point per group that holds a gap.  Empty arrays if the window holds
            no sample.
        """
        if isinstance(n_pixels, (bool, np.bool_)) or int(n_pixels) != n_pixels or n_pixels < 1:
            raise ValueError(f"Argument 'n_pixels' must be a positive integer; got {n_pixels!r}.")
        n_pixels = int(n_pixels)
        lo, hi = self._limit(xmin, "xmin"), self._limit(xmax, "xmax")
        if np.isnan(lo) or np.isnan(hi):
            raise ValueError(f"Window limits must not be NaN; got xmin={lo}, xmax={hi}.")
        if lo > hi:
            lo, hi = hi, lo
        x = self._x
        i0 = int(np.searchsorted(x, lo, side="left"))
        i1 = int(np.searchsorted(x, hi, side="right"))
        n = i1 - i0
        if n <= 2 * n_pixels:
            return self._wrap(x[i0:i1].copy(), self._y[i0:i1].copy())
        idx = self._decimated_indices(i0, i1, n_pixels)
        return self._wrap(x[idx], self._y[idx])

    def _decimated_indices(self, i0, i1, n_pixels):
        f = LEVEL_FACTOR
        n = i1 - i0
        k = 0
        while k + 1 < self.levels and f ** (k + 1) * n_pixels <= n:
            k += 1
        size = f**k
        c0, c1 = -(-i0 // size), i1 // size
        m = c1 - c0
        if m <= 0:
            g = self._range_candidates(i0, i1)
            rows = np.array([g], dtype=np.int64)
        else:
            rows = self._group_rows(k, c0, c1, n_pixels)
            # merge the partial bins at both edges into the first and last group
            for row, (a, b) in ((0, (i0, c0 * size)), (-1, (c1 * size, i1))):
                if b > a:
                    edge = self._range_candidates(a, b)
                    rows[row] = self._merge(rows[row], edge)
        flat = np.sort(rows, axis=1)
        # drop duplicates within a row (min and max at one sample) and the -1 sentinels
        keep = flat >= 0
        keep[:, 1:] &= flat[:, 1:] != flat[:, :-1]
        return flat[keep]

    def _group_rows(self, k, c0, c1, n_pixels):
        y = self._y
        m = c1 - c0
        g = -(-m // n_pixels)
        ngroups = -(-m // g)
        pad = ngroups * g - m
        imin, imax, inan = self._bins(k, c0, c1)
        vmin = y[imin]
        vmax = y[imax]
        vmin = np.where(np.isnan(vmin), np.inf, vmin)
        vmax = np.where(np.isnan(vmax), -np.inf, vmax)
        if pad:
            vmin = np.concatenate([vmin, np.full(pad, np.inf)])
            vmax = np.concatenate([vmax, np.full(pad, -np.inf)])
            imin = np.concatenate([imin, np.full(pad, imin[-1], dtype=imin.dtype)])
            imax = np.concatenate([imax, np.full(pad, imax[-1], dtype=imax.dtype)])
        r = np.arange(ngroups)
        vmin2, vmax2 = vmin.reshape(ngroups, g), vmax.reshape(ngroups, g)
        jmin, jmax = np.argmin(vmin2, axis=1), np.argmax(vmax2, axis=1)
        gmin = imin.reshape(ngroups, g)[r, jmin].astype(np.int64)
        gmax = imax.reshape(ngroups, g)[r, jmax].astype(np.int64)
        gmin[~np.isfinite(vmin2[r, jmin])] = -1
        gmax[~np.isfinite(vmax2[r, jmax])] = -1
        gnan = np.full(ngroups, -1, dtype=np.int64)
        if inan is not None:
            big = np.iinfo(np.int64).max
            inan = inan.astype(np.int64)
            q = np.where(inan < 0, big, inan)
            if pad:
                q = np.concatenate([q, np.full(pad, big, dtype=np.int64)])
            q = q.reshape(ngroups, g).min(axis=1)
            gnan = np.where(q == big, -1, q)
        return np.stack([gmin, gmax, gnan], axis=1)

    def _merge(self, row, edge):
        y = self._y
        gmin, gmax, gnan = (int(v) for v in row)
        emin, emax, enan = edge
        if emin >= 0 and (gmin < 0 or y[emin] < y[gmin]):
            gmin = emin
        if emax >= 0 and (gmax < 0 or y[emax] > y[gmax]):
            gmax = emax
        if enan >= 0 and (gnan < 0 or enan < gnan):
            gnan = enan
        return np.array([gmin, gmax, gnan], dtype=np.int64)
