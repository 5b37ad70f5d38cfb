"""Plot helpers for the line identifier: palette, NaN-separated markers, label thinning, click catcher.

Nothing here knows any physics; it turns float arrays into what bqplot marks want.
"""

import bisect
import struct
import zlib

import numpy as np

__all__ = [
    "PALETTE",
    "marker_arrays",
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
}


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
