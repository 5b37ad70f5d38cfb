"""Velocity frames of rest: what a FITS header says, and how to move a redshift between frames.

A measured redshift refers to the frame the spectrum's spectral axis was written in (FITS keyword
``SPECSYS``; FITS WCS Paper III, Greisen et al. 2006, Table 12). This module maps those values to
the frames zline handles, reads the observing time, the observatory and the pointing from a header,
and computes the velocity correction between frames with astropy, entirely offline (bundled IERS
table, builtin solar-system ephemeris).

The correction ``v_corr`` from frame A to frame B is in the optical sense::

    (1 + z_B) = (1 + z_A) * (1 + v_corr / c)

so a velocity in another convention (radio, relativistic) is converted through ``z`` first.
"""

import contextlib
import dataclasses
import functools
import warnings

import astropy.units as u
import numpy as np
from astropy import constants as const
from astropy.coordinates import (
    ICRS,
    LSRK,
    Angle,
    CartesianDifferential,
    CartesianRepresentation,
    EarthLocation,
    SkyCoord,
)
from astropy.time import Time
from astropy.utils import iers

from zline.physics.kinematics import CONVENTIONS, redshift_to_velocity, velocity_to_redshift

__all__ = [
    "FRAMES",
    "FRAME_DESCRIPTIONS",
    "SPECSYS_FRAMES",
    "FrameError",
    "FrameAccuracyWarning",
    "HeaderFrame",
    "offline_earth_orientation",
    "frame_from_header",
    "observation_from_header",
    "velocity_correction",
    "convert_velocity",
    "convert_redshift",
    "header_velocity_correction",
]

FRAME_DESCRIPTIONS = {
    "topocentric": "observer at the telescope, moving with the rotating Earth (as observed)",
    "barycentric": "solar-system barycentre (ICRS origin)",
    "heliocentric": "centre of the Sun",
    "lsrk": "kinematic local standard of rest: Sun moving 20 km/s toward RA 18h, Dec +30 (B1900)",
}
FRAMES = tuple(FRAME_DESCRIPTIONS)

# FITS WCS Paper III (Greisen et al. 2006) Table 12, SPECSYS values -> zline frame (None: not handled)
SPECSYS_FRAMES = {
    "TOPOCENT": "topocentric",
    "GEOCENTR": None,
    "BARYCENT": "barycentric",
    "HELIOCEN": "heliocentric",
    "LSRK": "lsrk",
    "LSRD": None,
    "GALACTOC": None,
    "LOCALGRP": None,
    "CMBDIPOL": None,
    "SOURCE": None,
}
# older AIPS convention (VELREF modulo 256): 1 LSR, 2 heliocentric, 3 observer
_VELREF_FRAMES = {1: "lsrk", 2: "heliocentric", 3: "topocentric"}

_C_KMS = const.c.to_value(u.km / u.s)
_KMS = u.km / u.s

_POLE = EarthLocation.from_geodetic(lon=0.0 * u.deg, lat=90.0 * u.deg, height=0.0 * u.m)
_LOCATION_KEYS = "OBSGEO-X/Y/Z, OBSGEO-B/L/H, SITELAT/SITELONG or LATITUDE/LONGITUD"
_TIME_KEYS = "DATE-OBS, DATE-AVG, MJD-OBS or MJD-AVG"
_TARGET_KEYS = "RA/DEC, OBJRA/OBJDEC or CRVAL of RA---/DEC-- axes"


class FrameError(ValueError):
    """A frame conversion is impossible with what was given (frame name, time, site, target)."""


class FrameAccuracyWarning(UserWarning):
    """astropy could compute a correction only with reduced accuracy (e.g. beyond the IERS table)."""


@dataclasses.dataclass(frozen=True)
class HeaderFrame:
    """Frame of rest read from a header.

    Attributes
    ----------
    frame : str or None
        One of `FRAMES`, or None when the header value is absent or not handled.
    value : str or None
        The header value as written (e.g. ``"GEOCENTR"``), kept even when not handled.
    keyword : str or None
        Keyword it came from (``"SPECSYS"``, ``"VELREF"``) or None.
    """

    frame: str | None
    value: str | None
    keyword: str | None


@contextlib.contextmanager
def offline_earth_orientation():
    """Use the bundled IERS table without downloads or age limit; restore settings afterwards."""
    saved = (iers.conf.auto_download, iers.conf.auto_max_age)
    try:
        iers.conf.auto_download = False
        iers.conf.auto_max_age = None
        yield
    finally:
        iers.conf.auto_download, iers.conf.auto_max_age = saved


def _check_frame(frame, argument):
    if not isinstance(frame, str) or frame.lower() not in FRAME_DESCRIPTIONS:
        options = ", ".join(f"{k!r} ({v})" for k, v in FRAME_DESCRIPTIONS.items())
        raise FrameError(f"{argument}={frame!r} is not a known frame; expected one of: {options}")
    return frame.lower()


def frame_from_header(header):
    """Frame of rest of the spectral axis from ``SPECSYS`` (or the older ``VELREF``).

    Parameters
    ----------
    header : `~astropy.io.fits.Header` or mapping

    Returns
    -------
    HeaderFrame
        ``frame`` is None when the value is absent or names a frame zline does not handle
        (GEOCENTR, LSRD, GALACTOC, LOCALGRP, CMBDIPOL, SOURCE); ``value`` keeps what was written.
    """
    if "SPECSYS" in header:
        raw = header["SPECSYS"]
        value = str(raw).strip()
        return HeaderFrame(SPECSYS_FRAMES.get(value.upper()), value, "SPECSYS")
    if "VELREF" in header:
        raw = header["VELREF"]
        try:
            code = int(raw) % 256
        except (TypeError, ValueError):
            return HeaderFrame(None, str(raw), "VELREF")
        return HeaderFrame(_VELREF_FRAMES.get(code), str(raw), "VELREF")
    return HeaderFrame(None, None, None)


def _number(header, key):
    value = header[key]
    if isinstance(value, (bool, np.bool_)):
        raise FrameError(f"header keyword {key}={value!r}: expected a number")
    if isinstance(value, (int, float, np.integer, np.floating)):
        return float(value)
    try:
        return float(str(value).strip())
    except ValueError:
        raise FrameError(f"header keyword {key}={value!r}: expected a number") from None


def _angle(header, key, hours=False):
    value = header[key]
    if isinstance(value, str):
        text = value.strip()
        try:
            return Angle(float(text), u.deg)
        except ValueError:
            pass
        try:
            return Angle(text, u.hourangle if hours else u.deg)
        except (ValueError, u.UnitsError):
            kind = "hours (sexagesimal) or degrees" if hours else "degrees"
            raise FrameError(f"header keyword {key}={value!r}: expected an angle in {kind}") from None
    return Angle(_number(header, key), u.deg)


def _time_scale(header):
    scale = str(header.get("TIMESYS", "UTC")).strip().lower()
    if scale not in Time.SCALES:
        raise FrameError(
            f"header keyword TIMESYS={header['TIMESYS']!r} is not a time scale astropy knows; "
            f"expected one of {sorted(s.upper() for s in Time.SCALES)}"
        )
    return scale


def _header_time(header, notes):
    scale = _time_scale(header)
    for key in ("DATE-AVG", "MJD-AVG"):
        if key in header:
            if key.startswith("MJD"):
                return Time(_number(header, key), format="mjd", scale=scale), key
            return Time(str(header[key]).strip(), scale=scale), key
    start = None
    if "DATE-OBS" in header:
        text = str(header["DATE-OBS"]).strip()
        if "T" not in text:
            clock = next((header[k] for k in ("TIME-OBS", "UT", "UTC-OBS") if k in header), None)
            if clock is not None:
                text = f"{text}T{str(clock).strip()}"
            else:
                notes.append("DATE-OBS has no time of day; 00:00 assumed")
        try:
            start, source = Time(text, scale=scale), "DATE-OBS"
        except ValueError:
            raise FrameError(f"header keyword DATE-OBS={header['DATE-OBS']!r}: not an ISO date") from None
    elif "MJD-OBS" in header:
        start, source = Time(_number(header, "MJD-OBS"), format="mjd", scale=scale), "MJD-OBS"
    if start is None:
        return None, None
    for key in ("EXPTIME", "EXPOSURE", "TELAPSE"):
        if key in header:
            start = start + 0.5 * _number(header, key) * u.s
            return start, f"{source} + {key}/2"
    return start, source


def _header_location(header):
    if all(f"OBSGEO-{c}" in header for c in "XYZ"):
        x, y, z = (_number(header, f"OBSGEO-{c}") for c in "XYZ")
        return EarthLocation.from_geocentric(x, y, z, unit=u.m), "OBSGEO-X/Y/Z"
    if all(f"OBSGEO-{c}" in header for c in "BLH"):
        return (
            EarthLocation.from_geodetic(
                lon=_angle(header, "OBSGEO-L"),
                lat=_angle(header, "OBSGEO-B"),
                height=_number(header, "OBSGEO-H") * u.m,
            ),
            "OBSGEO-B/L/H",
        )
    for lat, lon, height in (("SITELAT", "SITELONG", "SITEELEV"), ("LATITUDE", "LONGITUD", "ALTITUDE")):
        if lat in header and lon in header:
            h = _number(header, height) if height in header else 0.0
            location = EarthLocation.from_geodetic(
                lon=_angle(header, lon), lat=_angle(header, lat), height=h * u.m
            )
            return location, f"{lat}/{lon}" + (f"/{height}" if height in header else "")
    return None, None


def _header_target(header, notes):
    frame = str(header.get("RADESYS", header.get("RADECSYS", "ICRS"))).strip().lower()
    if frame not in ("icrs", "fk5", "fk4"):
        notes.append(f"RADESYS={frame.upper()!r} not handled; coordinates taken as ICRS")
        frame = "icrs"
    extra = {}
    if frame in ("fk5", "fk4") and "EQUINOX" in header:
        prefix = "J" if frame == "fk5" else "B"
        extra["equinox"] = f"{prefix}{_number(header, 'EQUINOX')}"
    for ra_key, dec_key in (("RA", "DEC"), ("OBJRA", "OBJDEC"), ("RA_OBJ", "DEC_OBJ")):
        if ra_key in header and dec_key in header:
            coord = SkyCoord(
                _angle(header, ra_key, hours=True), _angle(header, dec_key), frame=frame, **extra
            )
            return coord.icrs, f"{ra_key}/{dec_key}"
    ra_axis = dec_axis = None
    for i in range(1, int(header.get("NAXIS", 0) or 0) + 1):
        ctype = str(header.get(f"CTYPE{i}", "")).upper()
        if ctype.startswith("RA--") and f"CRVAL{i}" in header:
            ra_axis = i
        elif ctype.startswith("DEC-") and f"CRVAL{i}" in header:
            dec_axis = i
    if ra_axis and dec_axis:
        coord = SkyCoord(
            _number(header, f"CRVAL{ra_axis}") * u.deg,
            _number(header, f"CRVAL{dec_axis}") * u.deg,
            frame=frame,
            **extra,
        )
        return coord.icrs, f"CRVAL{ra_axis}/CRVAL{dec_axis}"
    return None, None


def observation_from_header(header):
    """Observing time, observatory and target read from a FITS header.

    Parameters
    ----------
    header : `~astropy.io.fits.Header` or mapping

    Returns
    -------
    dict
        ``time`` (`~astropy.time.Time`, mid-exposure: ``DATE-AVG``/``MJD-AVG``, else
        ``DATE-OBS``/``MJD-OBS`` plus half of ``EXPTIME``), ``location``
        (`~astropy.coordinates.EarthLocation` from ``OBSGEO-X/Y/Z`` [m], ``OBSGEO-B/L/H``,
        ``SITELAT/SITELONG/SITEELEV`` or ``LATITUDE/LONGITUD/ALTITUDE``; longitudes east-positive,
        heights in m), ``target`` (ICRS `~astropy.coordinates.SkyCoord` from ``RA/DEC`` in
        degrees or sexagesimal strings (RA in hours), ``OBJRA/OBJDEC`` or the ``CRVAL`` of
        celestial axes), each None when absent; ``missing`` (list of "time", "location",
        "target" not found), ``sources`` (keyword each came from), ``notes`` (assumptions made),
        and ``frame`` (`HeaderFrame`).
    """
    notes = []
    time, time_src = _header_time(header, notes)
    location, loc_src = _header_location(header)
    target, target_src = _header_target(header, notes)
    found = {"time": time, "location": location, "target": target}
    return {
        **found,
        "missing": [k for k, v in found.items() if v is None],
        "sources": {"time": time_src, "location": loc_src, "target": target_src},
        "notes": notes,
        "frame": frame_from_header(header),
    }


@functools.lru_cache(maxsize=1)
def _sun_velocity_lsrk():
    """Velocity (km/s, ICRS axes) of the barycentre relative to the LSRK, from astropy's frame."""
    origin = ICRS(
        CartesianRepresentation(
            [0, 0, 0] * u.au, differentials=CartesianDifferential([0, 0, 0] * _KMS)
        )
    )
    vel = origin.transform_to(LSRK()).data.differentials["s"]
    return vel.d_xyz.to_value(_KMS)


def _unit_vector(target):
    icrs = target.icrs
    ra, dec = icrs.ra.to_value(u.rad), icrs.dec.to_value(u.rad)
    return np.array([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def _check_inputs(time, location, target, need, what, from_header=False):
    def say(name, argument, keys):
        if from_header:
            return f"the header has no {name} ({keys})"
        return f"no {name} ({argument}=None; in a FITS header: {keys})"

    missing = []
    if "time" in need and time is None:
        missing.append(say("observing time", "time", _TIME_KEYS))
    if "location" in need and location is None:
        missing.append(say("observatory location", "location", _LOCATION_KEYS))
    if "target" in need and target is None:
        missing.append(say("target direction", "target", _TARGET_KEYS))
    if missing:
        raise FrameError(f"cannot convert {what}: " + "; ".join(missing))
    if time is not None and not isinstance(time, Time):
        raise FrameError(f"time must be an astropy Time, got {type(time).__name__}")
    if location is not None and not isinstance(location, EarthLocation):
        raise FrameError(f"location must be an astropy EarthLocation, got {type(location).__name__}")
    if target is not None and not isinstance(target, SkyCoord):
        raise FrameError(f"target must be an astropy SkyCoord, got {type(target).__name__}")


def _rvc(kind, time, location, target):
    """astropy's topocentric -> barycentric/heliocentric correction in km/s (float), offline."""
    direction = SkyCoord(target.icrs.ra, target.icrs.dec, frame="icrs")
    with offline_earth_orientation(), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        value = direction.radial_velocity_correction(kind=kind, obstime=time, location=location)
        when = f"{time.isot} {time.scale.upper()}"
    messages = list(dict.fromkeys(str(w.message).strip() for w in caught))
    if messages:
        warnings.warn(
            f"{kind} velocity correction at {when} computed with reduced accuracy "
            f"(time outside the bundled Earth-orientation/leap-second tables?): " + "; ".join(messages),
            FrameAccuracyWarning,
            stacklevel=4,
        )
    return float(value.to_value(_KMS))


def _factor_from_topocentric(frame, time, location, target):
    """(1 + z_frame) / (1 + z_topocentric)."""
    if frame == "topocentric":
        return 1.0
    if frame == "heliocentric":
        return 1.0 + _rvc("heliocentric", time, location, target) / _C_KMS
    bary = 1.0 + _rvc("barycentric", time, location, target) / _C_KMS
    if frame == "barycentric":
        return bary
    return bary * _bary_to_lsrk(target)


def _bary_to_lsrk(target):
    """(1 + z_lsrk) / (1 + z_bary) along ``target`` (first order in v/c; error ~ 1 mm/s)."""
    return 1.0 + float(_sun_velocity_lsrk() @ _unit_vector(target)) / _C_KMS


def _factor(from_frame, to_frame, time, location, target, from_header=False):
    frames = {from_frame, to_frame}
    what = f"{from_frame} -> {to_frame}"
    if from_frame == to_frame:
        return 1.0
    if frames == {"barycentric", "lsrk"}:
        _check_inputs(time, location, target, ("target",), what, from_header)
        f = _bary_to_lsrk(target)
        return f if to_frame == "lsrk" else 1.0 / f
    if "topocentric" in frames:
        _check_inputs(time, location, target, ("time", "location", "target"), what, from_header)
    else:
        # motion of the Sun about the barycentre needs the time; the site cancels (to ~1e-4 m/s),
        # so a site without rotational velocity (the north pole) stands in for it
        _check_inputs(time, location, target, ("time", "target"), what, from_header)
        location = _POLE
    return _factor_from_topocentric(to_frame, time, location, target) / _factor_from_topocentric(
        from_frame, time, location, target
    )


def velocity_correction(to_frame, time, location, target, from_frame="topocentric"):
    """Velocity correction from ``from_frame`` to ``to_frame`` (optical sense).

    Parameters
    ----------
    to_frame, from_frame : str
        Each one of `FRAMES`.
    time : `~astropy.time.Time` or None
        Mid-exposure time (needed unless only barycentric <-> lsrk).
    location : `~astropy.coordinates.EarthLocation` or None
        Observatory (needed when one frame is topocentric).
    target : `~astropy.coordinates.SkyCoord` or None
        Direction observed (always needed unless the frames are equal).

    Returns
    -------
    `~astropy.units.Quantity` ['speed'] in km / s
        ``v_corr`` with ``(1 + z_to) = (1 + z_from) * (1 + v_corr / c)``; for topocentric ->
        barycentric it equals astropy's ``SkyCoord.radial_velocity_correction``.

    Raises
    ------
    FrameError
        Unknown frame, or a time/location/target needed for this pair is None.
    """
    to_frame = _check_frame(to_frame, "to_frame")
    from_frame = _check_frame(from_frame, "from_frame")
    factor = _factor(from_frame, to_frame, time, location, target)
    return ((factor - 1.0) * _C_KMS) * _KMS


def convert_redshift(z, from_frame, to_frame, time=None, location=None, target=None):
    """Redshift measured in ``from_frame`` expressed in ``to_frame``.

    Parameters
    ----------
    z : float or array_like
        Redshift(s) (> -1) in ``from_frame``.
    from_frame, to_frame : str
        Each one of `FRAMES`.
    time, location, target
        As for `velocity_correction`.

    Returns
    -------
    float or `numpy.ndarray`
        ``(1 + z) * (1 + v_corr / c) - 1``.
    """
    if isinstance(z, u.Quantity):
        if z.unit.physical_type != "dimensionless":
            raise FrameError(f"z must be a dimensionless redshift, got a Quantity in {z.unit}")
        z = z.to_value(u.dimensionless_unscaled)
    zz = np.asarray(z, dtype=float)
    if np.any(zz <= -1):
        raise FrameError(f"z must be > -1, got min {zz.min()!r}")
    to_frame = _check_frame(to_frame, "to_frame")
    from_frame = _check_frame(from_frame, "from_frame")
    factor = _factor(from_frame, to_frame, time, location, target)
    out = (1.0 + zz) * factor - 1.0
    return float(out) if out.ndim == 0 else out


def convert_velocity(
    v, from_frame, to_frame, time=None, location=None, target=None, convention="optical"
):
    """Velocity measured in ``from_frame`` expressed in ``to_frame``, in the same convention.

    The velocity is turned into a redshift with ``convention`` (one of
    `zline.physics.kinematics.CONVENTIONS`), moved with ``(1 + z_new) = (1 + z)(1 + v_corr/c)``,
    and turned back, so radio and relativistic velocities are corrected exactly.

    Parameters
    ----------
    v : `~astropy.units.Quantity` ['speed']
    from_frame, to_frame : str
        Each one of `FRAMES`.
    time, location, target
        As for `velocity_correction`.
    convention : str
        ``"optical"``, ``"radio"`` or ``"relativistic"``.

    Returns
    -------
    `~astropy.units.Quantity` ['speed'] in km / s
    """
    if not isinstance(v, u.Quantity) or v.unit.physical_type != "speed":
        raise FrameError(f"v must be a velocity Quantity (e.g. 1200 * u.km / u.s), got {v!r}")
    if convention not in CONVENTIONS:
        raise FrameError(f"convention={convention!r} is not known; expected one of {list(CONVENTIONS)}")
    z = velocity_to_redshift(v, convention=convention)
    z_new = convert_redshift(z, from_frame, to_frame, time, location, target)
    return redshift_to_velocity(z_new, convention=convention).to(_KMS)


def header_velocity_correction(header, to_frame, from_frame=None):
    """Velocity correction for a spectrum from its own header.

    Parameters
    ----------
    header : `~astropy.io.fits.Header` or mapping
    to_frame : str
        One of `FRAMES`.
    from_frame : str or None
        Frame of the spectral axis; None reads it from ``SPECSYS`` (or ``VELREF``).

    Returns
    -------
    `~astropy.units.Quantity` ['speed'] in km / s
        As for `velocity_correction`.

    Raises
    ------
    FrameError
        The header names no frame (or one zline does not handle), or lacks the time, site or
        target this conversion needs; the message names the keywords looked for.
    """
    to_frame = _check_frame(to_frame, "to_frame")
    if from_frame is None:
        found = frame_from_header(header)
        if found.frame is None:
            if found.value is None:
                raise FrameError(
                    "the header has no SPECSYS (or VELREF) keyword, so the frame of its spectral "
                    f"axis is unknown; pass from_frame= (one of {list(FRAMES)})"
                )
            raise FrameError(
                f"the header's {found.keyword}={found.value!r} names a frame zline does not convert; "
                f"handled: {', '.join(f'{k}={v!r}' for k, v in SPECSYS_FRAMES.items() if v)}"
            )
        from_frame = found.frame
    from_frame = _check_frame(from_frame, "from_frame")
    obs = observation_from_header(header)
    factor = _factor(from_frame, to_frame, obs["time"], obs["location"], obs["target"], True)
    return ((factor - 1.0) * _C_KMS) * _KMS
