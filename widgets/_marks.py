"""Plot helpers for the line identifier: palette, NaN-separated markers, label placement, shading,
display smoothing, robust flux limits and the click catcher.

Nothing here knows any physics; it turns float arrays into what bqplot marks want.  Display
smoothing only changes what is drawn: every measurement reads the spectrum itself.
"""

import bisect
import struct
import zlib

import numpy as np

__all__ = [
    "PALETTE",
    "TELLURIC_AA",
    "display_smooth",
    "marker_arrays",
    "place_labels",
    "robust_limits",
    "run_edges",
    "shade_arrays",
    "stagger_labels",
    "thin_labels",
    "transparent_png",
]

#: Okabe-Ito colours (safe for the common forms of colour blindness), by role in the plot.
PALETTE = {
    "spectrum": "#000000",
    "band": "#56B4E9",
    "masked": "#E69F00",
    "computed": "#0072B2",
    "tabulated": "#D55E00",
    "locked": "#009E73",
    "other": "#CC79A7",
    "telluric": "#999999",
}

#: Observed-frame telluric absorption bands, vacuum-ish Angstrom (common practice: the O2 B and A
#: bands and the strongest H2O bands of ground-based optical spectra; edges rounded, from memory).
TELLURIC_AA = ((6864.0, 6920.0), (7590.0, 7700.0), (8130.0, 8350.0), (8950.0, 9800.0))


def marker_arrays(positions, y0, y1):
    """Vertices of many vertical markers drawn as one NaN-separated polyline.

    Parameters
    ----------
    positions : array-like of float
        Abscissae of the markers.
    y0, y1 : float
        Bottom and top of every marker.

    Returns
    -------
    x, y : ndarray
        ``3 * len(positions)`` vertices: ``(p, y0), (p, y1), (nan, nan)`` per marker.
    """
    positions = np.asarray(positions, dtype=float)
    x = np.repeat(positions, 3)
    x[2::3] = np.nan
    y = np.tile(np.array([y0, y1, np.nan], dtype=float), positions.size)
    return x, y


def thin_labels(pixels, strength, min_separation):
    """Choose which labels to show so that no two shown labels are closer than ``min_separation`` px.

    The strongest label wins wherever two would collide.

    Parameters
    ----------
    pixels : ndarray of float
        Screen position of each label (NaN = not on screen).
    strength : ndarray of float
        Expected strength; larger is kept first.
    min_separation : float
        Smallest allowed distance between two shown labels, in pixels.

    Returns
    -------
    ndarray of bool
        True where the label is shown.
    """
    return stagger_labels(pixels, strength, min_separation, rows=1) >= 0


def stagger_labels(pixels, strength, min_separation, rows=3, occupied=None):
    """Spread labels over a few rows so that close neighbours stay readable.

    Labels are placed strongest first, each in the first row (0 = top) where no label already
    placed in that row is closer than ``min_separation`` pixels; a label that fits in no row is
    hidden. With ``rows=1`` this is `thin_labels`.

    Parameters
    ----------
    pixels : ndarray of float
        Screen position of each label (NaN = not on screen).
    strength : ndarray of float
        Expected strength; larger is placed first.
    min_separation : float
        Smallest allowed distance between two labels of one row, in pixels.
    rows : int
        Number of rows available (>= 1).
    occupied : sequence of array-like, optional
        Pixels already taken in each row (row 0 first), e.g. by labels drawn in another mark.

    Returns
    -------
    ndarray of int
        Row of each label, -1 where it is hidden.
    """
    if isinstance(rows, bool) or not isinstance(rows, (int, np.integer)) or rows < 1:
        raise ValueError(f"stagger_labels: 'rows' must be an integer >= 1; got {rows!r}")
    pixels = np.asarray(pixels, dtype=float)
    row_of = np.full(pixels.shape, -1, dtype=int)
    order = np.lexsort((np.arange(pixels.size), -np.asarray(strength, dtype=float)))
    taken = [[] for _ in range(int(rows))]
    for r, used in enumerate(occupied or ()):
        if r < len(taken):
            used = np.asarray(used, dtype=float)
            taken[r] = sorted(used[np.isfinite(used)].tolist())
    for i in order:
        p = pixels[i]
        if not np.isfinite(p):
            continue
        for r, row in enumerate(taken):
            k = bisect.bisect_left(row, p)
            if k < len(row) and row[k] - p < min_separation:
                continue
            if k > 0 and p - row[k - 1] < min_separation:
                continue
            row.insert(k, p)
            row_of[i] = r
            break
    return row_of


def transparent_png(width=1, height=1):
    """Bytes of a fully transparent RGBA PNG image (used as an invisible click target)."""
    raw = b"".join(b"\x00" + b"\x00\x00\x00\x00" * width for _ in range(height))

    def chunk(tag, data):
        crc = zlib.crc32(tag + data) & 0xFFFFFFFF
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", crc)

    header = struct.pack(">IIBBBBB", width, height, 8, 6, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(raw))
            + chunk(b"IEND", b""))


def run_edges(flags):
    """Start and stop index (exclusive) of every run of True in a boolean array."""
    flags = np.asarray(flags, dtype=bool)
    if flags.size == 0:
        return np.zeros((0, 2), dtype=int)
    d = np.diff(np.concatenate([[0], flags.astype(np.int8), [0]]))
    return np.column_stack([np.flatnonzero(d == 1), np.flatnonzero(d == -1)])


def shade_arrays(spans, merge=0.0):
    """One polyline (x, [lower, upper]) that fills the given [a, b] spans from 0 to 1 and nothing else.

    Used with ``Lines(fill="between")`` on a 0..1 vertical scale, so the shading covers the plot
    height whatever the flux axis does.  Spans closer than ``merge`` are joined.
    """
    spans = sorted((float(min(a, b)), float(max(a, b))) for a, b in spans)
    joined = []
    for a, b in spans:
        if joined and a - joined[-1][1] <= merge:
            joined[-1][1] = max(joined[-1][1], b)
        else:
            joined.append([a, b])
    if not joined:
        return np.array([0.0, 1.0]), np.zeros((2, 2))
    x = np.repeat(np.asarray(joined, dtype=float).ravel(), 2)
    upper = np.tile([0.0, 1.0, 1.0, 0.0], len(joined))
    return x, np.vstack([np.zeros_like(upper), upper])


def display_smooth(y, kind, width):
    """Smoothed copy of ``y`` for display (``kind`` none / boxcar / gaussian, ``width`` in pixels).

    The boxcar is ``width`` pixels wide; the Gaussian has a FWHM of ``width`` pixels.  NaN pixels
    stay NaN and do not leak into their neighbours' values.
    """
    y = np.asarray(y, dtype=float)
    if kind == "none" or width <= 1.0 or y.size < 3:
        return y
    if kind == "boxcar":
        half = max(int(round(width)) // 2, 1)
        kernel = np.ones(2 * half + 1)
    elif kind == "gaussian":
        sigma = width / 2.3548200450309493     # FWHM = 2 sqrt(2 ln 2) sigma
        half = max(int(np.ceil(4 * sigma)), 1)
        kernel = np.exp(-0.5 * (np.arange(-half, half + 1) / sigma) ** 2)
    else:
        raise ValueError(f"display_smooth: 'kind' must be none, boxcar or gaussian; got {kind!r}")
    good = np.isfinite(y)
    num = np.convolve(np.where(good, y, 0.0), kernel, mode="same")
    den = np.convolve(good.astype(float), kernel, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~good] = np.nan
    return out


def _despike(y):
    """Copy of ``y`` with isolated one-pixel spikes and dips set to their higher (lower) neighbour.

    A pixel is a spike when it rises above both neighbours by more than three times what the
    higher neighbour rises above the median (or three noise sigmas, whichever is more): a
    resolved line climbs through its neighbours and is kept whole.
    """
    if y.size < 3:
        return y
    med = float(np.median(y))
    noise = 1.4826 * float(np.median(np.abs(np.diff(y)))) / np.sqrt(2.0)
    out = y.copy()
    hi_nb = np.maximum(y[:-2], y[2:])
    lo_nb = np.minimum(y[:-2], y[2:])
    mid = y[1:-1]
    spike = (mid - hi_nb) > 3.0 * np.maximum(hi_nb - med, noise)
    dip = (lo_nb - mid) > 3.0 * np.maximum(med - lo_nb, noise)
    out[1:-1] = np.where(spike, hi_nb, np.where(dip, lo_nb, mid))
    return out


def robust_limits(y, log=False):
    """Flux-axis limits that show every feature of ``y`` but ignore a single-pixel spike.

    Isolated one-pixel spikes and dips are set to their neighbours' level (a resolved line is
    kept whole); the rest sets the limits, padded by 6 % below and 10 % above.  On a log axis
    only positive values count and the padding is multiplicative.  Returns None when nothing
    is left.
    """
    y = np.asarray(y, dtype=float)
    y = _despike(y[np.isfinite(y)])
    if log:
        y = y[y > 0]
    if y.size == 0:
        return None
    lo, hi = float(y.min()), float(y.max())
    if log:
        span = np.log10(hi / lo) if hi > lo else 1.0
        return lo / 10 ** (0.06 * span), hi * 10 ** (0.10 * span)
    span = (hi - lo) or abs(hi) or 1.0
    return lo - 0.06 * span, hi + 0.10 * span


def place_labels(pixels, widths, strength, rows, gap=4.0, occupied=None):
    """Put horizontal labels of given widths in rows so that no two of one row overlap.

    Strongest first, each label goes into the first row (0 = top) where its extent
    ``[p - w/2 - gap/2, p + w/2 + gap/2]`` touches no label already placed there; a label that
    fits in no row is hidden (-1).  ``occupied`` gives (pixels, widths) already taken per row.

    Returns
    -------
    ndarray of int
        Row of each label, -1 where hidden.
    """
    pixels = np.asarray(pixels, dtype=float)
    widths = np.broadcast_to(np.asarray(widths, dtype=float), pixels.shape)
    row_of = np.full(pixels.shape, -1, dtype=int)
    order = np.lexsort((np.arange(pixels.size), -np.asarray(strength, dtype=float)))
    taken = [[] for _ in range(int(rows))]     # per row: sorted list of (left, right)
    for r, (px, wd) in enumerate(occupied or ()):
        if r < len(taken):
            for p, w in zip(np.atleast_1d(px), np.atleast_1d(wd)):
                if np.isfinite(p):
                    taken[r].append((p - w / 2 - gap / 2, p + w / 2 + gap / 2))
            taken[r].sort()
    for i in order:
        p = pixels[i]
        if not np.isfinite(p):
            continue
        left, right = p - widths[i] / 2 - gap / 2, p + widths[i] / 2 + gap / 2
        for r, row in enumerate(taken):
            k = bisect.bisect_left(row, (left, right))
            if k < len(row) and row[k][0] < right:
                continue
            if k > 0 and row[k - 1][1] > left:
                continue
            row.insert(k, (left, right))
            row_of[i] = r
            break
    return row_of
