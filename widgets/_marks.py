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
    pixels = np.asarray(pixels, dtype=float)
    show = np.zeros(pixels.shape, dtype=bool)
    order = np.lexsort((np.arange(pixels.size), -np.asarray(strength, dtype=float)))
    taken = []
    for i in order:
        p = pixels[i]
        if not np.isfinite(p):
            continue
        k = bisect.bisect_left(taken, p)
        if k < len(taken) and taken[k] - p < min_separation:
            continue
        if k > 0 and p - taken[k - 1] < min_separation:
            continue
        taken.insert(k, p)
        show[i] = True
    return show


def transparent_png(width=1, height=1):
    """Bytes of a fully transparent RGBA PNG image (used as an invisible click target)."""
    raw = b"".join(b"\x00" + b"\x00\x00\x00\x00" * width for _ in range(height))

    def chunk(tag, data):
        crc = zlib.crc32(tag + data) & 0xFFFFFFFF
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", crc)

    header = struct.pack(">IIBBBBB", width, height, 8, 6, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(raw))
            + chunk(b"IEND", b""))
