"""Line tables for a paper: measured lines with units and provenance, written safely.

`line_table_for_paper` turns locked identifications or line fits into a `~astropy.table.QTable`
whose meta records the redshift solution, the medium and the source file (with its SHA-256).
`write_table` writes it atomically (temporary file in the target directory, then
``os.replace``) as ECSV, FITS, CSV, LaTeX or AASTeX.  The LaTeX writers round every value to the
precision set by its uncertainty (`format_value_error`) and escape LaTeX special characters
(`latex_escape`), which astropy does not do.

Rounding rule (`format_value_error`): the error keeps 2 significant digits when its leading
digit is 1 or 2, else 1; the value is rounded to the same decimal place.  Examples:
``6564.6132 +- 0.0123 -> 6564.613 +- 0.012``; ``1234.5 +- 67 -> 1230 +- 70``;
``1.23456 +- 0.0096 -> 1.235 +- 0.010`` (an error that rounds up to a leading 1 keeps 2 digits).
"""

import datetime
import hashlib
import math
import os
import re

import astropy.units as u
import numpy as np
from astropy.table import QTable, Table

from zline.physics.constants import CODATA_RELEASE
from zline.physics.fitting import LineFit
from zline.physics.identify import Lock

__all__ = ["TABLE_FORMATS", "line_table_for_paper", "write_table", "read_table", "format_value_error",
           "latex_escape", "file_sha256"]

#: Format name -> what is written.
TABLE_FORMATS = {
    "ecsv": "astropy ECSV (units, meta kept)",
    "fits": "FITS binary table (units kept, meta in the header)",
    "csv": "plain comma separated values (no units, no meta)",
    "latex": "LaTeX tabular, values rounded by their errors, text escaped",
    "aastex": "AASTeX deluxetable, values rounded by their errors, text escaped",
}
_ASTROPY_FORMAT = {"ecsv": "ascii.ecsv", "fits": "fits", "csv": "ascii.csv",
                   "latex": "ascii.latex", "aastex": "ascii.aastex"}
_KMS = u.km / u.s


def file_sha256(path):
    """SHA-256 hex digest of a file (read in 1 MiB blocks)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _zline_version():
    from zline import __version__
    return str(__version__)


# --------------------------------------------------------------------------------------------
# rows


def _row_from(item, index):
    """(label, species, rest, medium, LineFit|None, observed, observed_err, detected, limit)."""
    if isinstance(item, Lock):
        return (item.label, item.species, item.rest, item.medium, item.fit, item.observed,
                item.observed_err, True, None)
    if isinstance(item, LineFit):
        return (item.label or f"line {index}", "", None, None, item, item.center,
                item.center_err, item.detected, item.upper_limit)
    if isinstance(item, dict):
        fit = item.get("fit")
        if fit is not None and not isinstance(fit, LineFit):
            raise TypeError(f"line_table_for_paper: item {index} key 'fit' must be a LineFit, "
                            f"got {type(fit).__name__}")
        label = item.get("label") or (fit.label if fit is not None else "") or f"line {index}"
        observed = item.get("observed", fit.center if fit is not None else None)
        observed_err = item.get("observed_err", fit.center_err if fit is not None else None)
        detected = item.get("detected", fit.detected if fit is not None else True)
        limit = item.get("limit", fit.upper_limit if fit is not None else None)
        return (label, item.get("species", ""), item.get("rest"), item.get("medium"), fit,
                observed, observed_err, bool(detected), limit)
    raise TypeError(f"line_table_for_paper: item {index} must be a Lock, a LineFit or a dict "
                    f"with keys label, rest, fit; got {type(item).__name__}")


def _to(q, unit, equiv=None):
    if q is None or unit is None:
        return np.nan
    try:
        return float(u.Quantity(q).to_value(unit, equivalencies=equiv or []))
    except u.UnitConversionError:
        return np.nan


def _err_to(err, value, unit):
    """An error (spectral unit or km/s) at ``value`` (in ``unit``) expressed in ``unit``."""
    if err is None:
        return np.nan
    err = u.Quantity(err)
    if err.unit.physical_type == "speed":
        return abs(err.to_value(_KMS)) / 299792.458 * abs(value)
    return abs(_to(err, unit, u.spectral()))


def line_table_for_paper(locks_or_fits, solution=None, spectrum=None, settings=None):
    """Table of measured lines with units and provenance, ready for `write_table`.

    Parameters
    ----------
    locks_or_fits : iterable of `~zline.physics.identify.Lock`, `~zline.physics.fitting.LineFit` or dict
        One row per item.  A dict holds ``label``, ``rest`` (Quantity), ``fit`` (LineFit) and
        optionally ``species``, ``medium``, ``observed``, ``observed_err``, ``detected`` (bool)
        and ``limit`` (3-sigma flux upper limit of an undetected line).
    solution : `~zline.physics.identify.RedshiftSolution`, optional
        Gives ``z``, ``z_err``, the convention and the per-line velocity residuals.
    spectrum : `specutils.Spectrum`, optional
        Source of provenance: ``meta["zline"]`` file, HDU, medium; the file's SHA-256.
    settings : dict, optional
        Extra facts: ``frame`` (e.g. "LSRK"), ``medium``, ``air_formula``, ``convention``,
        ``ebv`` (E(B-V), adds a dereddened flux column, see `zline.physics.nebular.deredden`),
        ``r_v``, ``caption``.

    Returns
    -------
    `~astropy.table.QTable`
        Columns ``label, species, rest, observed, observed_err, flux, flux_err, ew, ew_err,
        fwhm_kms, fwhm_kms_err, snr, residual_kms, upper_limit, flux_limit`` (+ ``flux_dered``,
        ``flux_dered_err`` with ``ebv``); missing values are NaN.  ``upper_limit`` is True for
        undetected lines (``flux_limit`` then holds the 3-sigma limit).  A Lock counts as
        detected; a LineFit by its S/N.
    """
    settings = dict(settings or {})
    known = {"frame", "medium", "air_formula", "convention", "ebv", "ebv_err", "r_v", "caption"}
    unknown = set(settings) - known
    if unknown:
        raise ValueError(f"line_table_for_paper: unknown settings {sorted(unknown)}; options: "
                         f"{sorted(known)}")
    rows = [_row_from(item, i) for i, item in enumerate(locks_or_fits)]
    if not rows:
        raise ValueError("line_table_for_paper: 'locks_or_fits' is empty; give at least one line")

    def first_unit(getter):
        for r in rows:
            q = getter(r)
            if q is not None:
                return u.Quantity(q).unit
        return None

    s_unit = first_unit(lambda r: r[5]) or u.AA
    r_unit = first_unit(lambda r: r[2]) or s_unit
    f_unit = first_unit(lambda r: r[4].flux if r[4] is not None else None)
    ew_unit = first_unit(lambda r: r[4].ew if r[4] is not None else None)

    resid = {}
    if solution is not None:
        for lab, res in zip(solution.labels, solution.residuals):
            resid[lab] = res.to_value(_KMS)

    cols = {k: [] for k in ("label", "species", "rest", "observed", "observed_err", "flux",
                            "flux_err", "ew", "ew_err", "fwhm_kms", "fwhm_kms_err", "snr",
                            "residual_kms", "upper_limit", "flux_limit")}
    for label, species, rest, _medium, fit, obs, obs_err, detected, limit in rows:
        cols["label"].append(str(label))
        cols["species"].append(str(species or ""))
        cols["rest"].append(_to(rest, r_unit, u.spectral()))
        ov = _to(obs, s_unit, u.spectral())
        cols["observed"].append(ov)
        cols["observed_err"].append(_err_to(obs_err, ov, s_unit))
        if fit is not None:
            cols["flux"].append(_to(fit.flux, f_unit))
            cols["flux_err"].append(_to(fit.flux_err, f_unit))
            cols["ew"].append(_to(fit.ew, ew_unit))
            cols["ew_err"].append(_to(fit.ew_err, ew_unit))
            cols["fwhm_kms"].append(_to(fit.fwhm_kms, _KMS))
            cols["fwhm_kms_err"].append(_to(fit.fwhm_kms_err, _KMS))
            cols["snr"].append(float(fit.snr))
            if not detected and limit is None:
                limit = 3.0 * fit.flux_err
            cols["upper_limit"].append(not detected)
            cols["flux_limit"].append(_to(limit, f_unit) if not detected else np.nan)
        else:
            for key in ("flux", "flux_err", "ew", "ew_err", "fwhm_kms", "fwhm_kms_err", "snr",
                        "flux_limit"):
                cols[key].append(np.nan)
            cols["upper_limit"].append(False)
        cols["residual_kms"].append(resid.get(label, np.nan))

    t = QTable()
    t["label"] = cols["label"]
    t["species"] = cols["species"]
    t["rest"] = np.array(cols["rest"]) * r_unit
    t["observed"] = np.array(cols["observed"]) * s_unit
    t["observed_err"] = np.array(cols["observed_err"]) * s_unit
    fu = f_unit if f_unit is not None else u.dimensionless_unscaled
    t["flux"] = np.array(cols["flux"]) * fu
    t["flux_err"] = np.array(cols["flux_err"]) * fu
    eu = ew_unit if ew_unit is not None else s_unit
    t["ew"] = np.array(cols["ew"]) * eu
    t["ew_err"] = np.array(cols["ew_err"]) * eu
    t["fwhm_kms"] = np.array(cols["fwhm_kms"]) * _KMS
    t["fwhm_kms_err"] = np.array(cols["fwhm_kms_err"]) * _KMS
    t["snr"] = np.array(cols["snr"], dtype=float)
    t["residual_kms"] = np.array(cols["residual_kms"]) * _KMS
    t["upper_limit"] = np.array(cols["upper_limit"], dtype=bool)
    t["flux_limit"] = np.array(cols["flux_limit"]) * fu
    descriptions = {
        "rest": "rest position", "observed": "fitted observed centre",
        "observed_err": "1-sigma error of observed", "flux": "integrated line flux",
        "ew": "equivalent width (positive for emission)", "fwhm_kms": "FWHM as a velocity",
        "snr": "flux / flux_err", "residual_kms": "velocity residual from the solution",
        "upper_limit": "True: not detected (snr < 3)", "flux_limit": "3-sigma flux upper limit",
    }
    for name, text in descriptions.items():
        t[name].info.description = text

    # provenance
    meta = {}
    zmeta = dict(getattr(spectrum, "meta", {}).get("zline", {})) if spectrum is not None else {}
    media = {r[3] for r in rows if r[3]}
    medium = settings.get("medium") or zmeta.get("medium") or (media.pop() if len(media) == 1
                                                               else None)
    if solution is not None:
        meta["z"] = float(solution.z)
        meta["z_err"] = float(solution.z_err)
        meta["velocity"] = float(solution.velocity.to_value(_KMS))
        meta["velocity_err"] = float(solution.velocity_err.to_value(_KMS))
        meta["velocity_unit"] = "km / s"
        meta["chi2_dof"] = None if not np.isfinite(solution.chi2_dof) else float(solution.chi2_dof)
        meta["convention"] = solution.convention
    else:
        meta["z"] = None
        meta["z_err"] = None
        meta["convention"] = settings.get("convention")
    header = zmeta.get("header") or {}
    meta["frame"] = settings.get("frame") or header.get("SPECSYS") or "unknown"
    meta["medium"] = medium or "unknown"
    meta["air_formula"] = settings.get("air_formula", "morton2000") if medium == "air" else None
    meta["constants"] = CODATA_RELEASE
    path = zmeta.get("file")
    meta["source_file"] = str(path) if path else None
    meta["source_hdu"] = zmeta.get("hdu")
    meta["source_sha256"] = (file_sha256(path) if path and os.path.isfile(str(path)) else None)
    meta["zline_version"] = _zline_version()
    meta["date"] = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    if settings.get("caption"):
        meta["caption"] = str(settings["caption"])

    ebv = settings.get("ebv")
    if ebv is not None:
        from zline.physics.nebular import k_lambda

        r_v = float(settings.get("r_v", 3.1))
        curve = "ccm89"
        ebv_err = settings.get("ebv_err", 0.0)
        ebv = float(ebv.to_value(u.mag) if isinstance(ebv, u.Quantity) else ebv)
        ebv_err = float(ebv_err.to_value(u.mag) if isinstance(ebv_err, u.Quantity) else ebv_err)
        kk = k_lambda(u.Quantity(t["rest"]), r_v, curve)
        corr = 10.0 ** (0.4 * kk * float(ebv))
        corr_err = corr * 0.4 * math.log(10.0) * kk * ebv_err
        t["flux_dered"] = t["flux"] * corr
        rel = np.hypot(np.asarray(t["flux_err"].value) / np.asarray(t["flux"].value),
                       corr_err / corr)
        t["flux_dered_err"] = np.abs(t["flux_dered"]) * rel
        t["flux_dered"].info.description = "flux corrected for extinction (CCM89)"
        meta["ebv"] = float(ebv)
        meta["ebv_err"] = ebv_err
        meta["r_v"] = r_v
        meta["extinction_curve"] = curve
    t.meta.update(meta)
    return t


# --------------------------------------------------------------------------------------------
# formatting


def _decimals(err):
    """Decimal place (digits after the point, may be negative) of an error under the rule."""
    exp = math.floor(math.log10(err))
    lead = int(err / 10.0**exp + 1e-9)
    ndig = 2 if lead in (1, 2) else 1
    dec = ndig - 1 - exp
    rounded = round(err, dec)
    if rounded > 0 and math.floor(math.log10(rounded)) > exp:  # 9.6 -> 10: leading 1, 2 digits
        exp2 = math.floor(math.log10(rounded))
        dec = 2 - 1 - exp2
    return dec


def _fmt(x, dec):
    if dec > 0:
        return f"{round(x, dec):.{dec}f}"
    return f"{int(round(x, dec)):d}"


def format_value_error(value, error):
    """Round ``value +- error`` by the error (see the module docstring for the rule).

    Parameters
    ----------
    value, error : float
        Plain numbers in the same unit.

    Returns
    -------
    (str, str)
        Rounded value and error; a non-finite or non-positive error gives the value with 6
        significant digits and ``""``.
    """
    value = float(value)
    error = abs(float(error)) if error is not None else float("nan")
    if not np.isfinite(value):
        return "", ""
    if not (np.isfinite(error) and error > 0):
        return f"{value:.6g}", ""
    dec = _decimals(error)
    return _fmt(value, dec), _fmt(error, dec)


_SPECIAL = re.compile(r"(?<!\\)([&%_#$])")
_MATH = re.compile(r"(?<!\\)\$([^$]*)(?<!\\)\$")


def latex_escape(text):
    """Escape ``& % _ # $`` for LaTeX, keeping intended math.

    A ``$...$`` pair whose content holds a backslash, ``^`` or ``_`` (e.g. ``H$\\alpha$``) is
    kept verbatim; every other special character gets a backslash.  Characters already
    escaped are left alone.
    """
    text = str(text)
    out, pos = [], 0
    for m in _MATH.finditer(text):
        if not re.search(r"[\\^_]", m.group(1)):
            continue
        out.append(_SPECIAL.sub(r"\\\1", text[pos:m.start()]))
        out.append(m.group(0))
        pos = m.end()
    out.append(_SPECIAL.sub(r"\\\1", text[pos:]))
    return "".join(out)


def _latex_unit(unit):
    if unit is None or unit == u.dimensionless_unscaled:
        return ""
    return unit.to_string("latex_inline")


def _latex_table(table, units_in_names=False):
    """A Table of strings: value +- error rounded, text escaped, units per column.

    With ``units_in_names`` the unit goes into the column name (``rest (A)``) instead of a
    separate units row (the AASTeX reader of astropy cannot read a units row back).
    """
    out = Table()
    units = {}

    def add(name, text_values, unit=None):
        key = latex_escape(name)
        ustr = _latex_unit(unit) if unit is not None else ""
        if units_in_names and ustr:
            key = f"{key} ({ustr})"
        out[key] = text_values
        if unit is not None and not units_in_names:
            units[key] = ustr

    add("label", [latex_escape(v) for v in table["label"]])
    if any(str(s) for s in table["species"]):
        add("species", [latex_escape(v) for v in table["species"]])
    pairs = [("rest", None), ("observed", "observed_err"), ("flux", "flux_err"),
             ("ew", "ew_err"), ("fwhm_kms", "fwhm_kms_err")]
    limits = np.asarray(table["upper_limit"], dtype=bool) if "upper_limit" in table.colnames \
        else np.zeros(len(table), bool)
    for name, err_name in pairs:
        col = u.Quantity(table[name])
        if not np.any(np.isfinite(col.value)) and not (name == "flux" and limits.any()):
            continue
        errs = (u.Quantity(table[err_name]).to_value(col.unit) if err_name
                else np.full(len(table), np.nan))
        cells = []
        for i, (v, e) in enumerate(zip(col.value, errs)):
            if name == "flux" and limits[i] and "flux_limit" in table.colnames:
                lim = u.Quantity(table["flux_limit"][i]).to_value(col.unit)
                cells.append(f"$<{float(lim):.2g}$" if np.isfinite(lim) else "")
                continue
            if name == "rest":
                cells.append(f"{v:.3f}" if np.isfinite(v) else "")
                continue
            sv, se = format_value_error(v, e)
            cells.append(f"${sv} \\pm {se}$" if se else sv)
        add(name, cells, col.unit)
    if "snr" in table.colnames:
        add("snr", [f"{v:.1f}" if np.isfinite(v) else "" for v in np.asarray(table["snr"])])
    if "residual_kms" in table.colnames:
        col = u.Quantity(table["residual_kms"])
        if np.any(np.isfinite(col.value)):
            add("residual_kms", [f"{v:.1f}" if np.isfinite(v) else "" for v in col.value],
                col.unit)
    if "flux_dered" in table.colnames:
        col = u.Quantity(table["flux_dered"])
        errs = u.Quantity(table["flux_dered_err"]).to_value(col.unit)
        cells = []
        for v, e in zip(col.value, errs):
            sv, se = format_value_error(v, e)
            cells.append(f"${sv} \\pm {se}$" if se else sv)
        add("flux_dered", cells, col.unit)
    return out, units


_GREEK = dict(zip("αβγδεζηθικλμνξοπρστυφχψω",
                  ["alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota",
                   "kappa", "lambda", "mu", "nu", "xi", "omicron", "pi", "rho", "sigma", "tau",
                   "upsilon", "phi", "chi", "psi", "omega"]))


def _ascii(text):
    """FITS strings are ASCII: Greek letters spelled out, anything else as '?'."""
    text = "".join(_GREEK.get(ch, ch) for ch in str(text))
    return text.encode("ascii", "replace").decode("ascii")


def _flat_meta(meta):
    """FITS-safe meta: scalars only (None -> 'none'), nested values as strings."""
    out = {}
    for k, v in meta.items():
        if v is None:
            v = "none"
        elif not isinstance(v, (str, int, float, bool, np.integer, np.floating, np.bool_)):
            v = str(v)
        out[k] = v
    return out


def write_table(table, path, format="ecsv", overwrite=False):
    """Write a line table atomically.

    Parameters
    ----------
    table : `~astropy.table.Table` or `~astropy.table.QTable`
        Usually from `line_table_for_paper`.
    path : str or path-like
        Target file.  A temporary file is written in the same directory and moved into place
        with ``os.replace``, so a reader never sees a half-written file.
    format : str
        One of `TABLE_FORMATS`.
    overwrite : bool
        Replace an existing file.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is False.
    ValueError
        Unknown format.
    """
    if format not in TABLE_FORMATS:
        raise ValueError(f"write_table: unknown format {format!r}; options: "
                         + ", ".join(f"{k} ({v})" for k, v in sorted(TABLE_FORMATS.items())))
    path = os.fspath(path)
    if os.path.exists(path) and not overwrite:
        raise FileExistsError(f"write_table: {path!r} exists; pass overwrite=True to replace it")
    kwargs = {}
    if format in ("latex", "aastex"):
        out, units = _latex_table(table, units_in_names=(format == "aastex"))
        caption = table.meta.get("caption")
        latexdict = {"units": units}
        if caption:
            latexdict["caption"] = latex_escape(caption)
        kwargs["latexdict"] = latexdict
        to_write = out
    elif format == "fits":
        to_write = QTable(table, copy=True)
        for name in to_write.colnames:
            if to_write[name].dtype.kind == "U":
                to_write[name] = [_ascii(v) for v in to_write[name]]
        to_write.meta.clear()
        to_write.meta.update({k: _ascii(v) if isinstance(v, str) else v
                              for k, v in _flat_meta(table.meta).items()})
    else:
        to_write = table
    import warnings

    from astropy.io.fits.verify import VerifyWarning

    from zline.physics._atomic import atomic_path

    exists = f"write_table: {path!r} exists; pass overwrite=True to replace it"
    with atomic_path(path, overwrite=overwrite, exists_message=exists) as tmp, \
            warnings.catch_warnings():
        # long meta keys become HIERARCH cards; astropy warns about each one
        warnings.filterwarnings("ignore", category=VerifyWarning)
        to_write.write(tmp, format=_ASTROPY_FORMAT[format], overwrite=True, **kwargs)
    return path


def read_table(path, format="ecsv"):
    """Read a table written by `write_table` (ECSV or FITS) back as a `~astropy.table.QTable`.

    FITS header keys come back upper-case and ``None`` as ``"none"``; both are undone here so the
    meta matches the table that was written.
    """
    if format not in ("ecsv", "fits"):
        raise ValueError(f"read_table: format {format!r} keeps no units; options: ecsv, fits")
    t = QTable.read(os.fspath(path), format=_ASTROPY_FORMAT[format])
    if format == "fits":
        meta = {}
        for k, v in t.meta.items():
            if k in ("COMMENT", "HISTORY"):
                continue
            meta[k.lower()] = None if v == "none" else v
        t.meta.clear()
        t.meta.update(meta)
    return t
